"""Creates that race for one unique name never answer HTTP 500.

Several requests that create a campaign (or upload an asset) under the same name at the same moment: exactly one
succeeds; every other one gets the form's name error, the same error a request gets when the name was already
taken before it started; exactly one row exists and no mesh file of a losing upload stays in the media folder.

Two kinds of test:

* real threads posting to pytest-django's live server at the same moment, so the database decides the race
  (it shows most often on PostgreSQL; on SQLite writers queue behind one lock);
* a deterministic one: a rival row with the same name is inserted right after the request checked the name and
  before it inserts its own, as a request that wins the race would (``rival_after_name_check``).
"""

from __future__ import annotations

import re
import threading
import urllib.error
import urllib.parse
import urllib.request
import uuid
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from decimal import Decimal
from pathlib import Path
from typing import Any

import pytest
from django.urls import reverse

THREADS = 8
CAMPAIGN_ROUNDS = 4
UPLOAD_ROUNDS = 3
TINY_BUDGET = {
    "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
    "room": {"width_m": [3.0, 3.5], "depth_m": [3.0, 3.5], "max_objects_per_m2": 0.5},
    "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
    "variation": {"layouts": 1000, "lighting_per_layout": 1, "views_per_lighting": 2},
}
# A 0.5 m box as OBJ text: a mesh the upload check accepts.
CUBE_OBJ = (
    "\n".join(
        ["# a 0.5 m box"]
        + [f"v {x} {y} {z}" for x in (0, 0.5) for y in (0, 0.5) for z in (0, 0.5)]
        + [
            "f 1 2 4",
            "f 1 4 3",
            "f 5 7 8",
            "f 5 8 6",
            "f 1 5 6",
            "f 1 6 2",
            "f 3 4 8",
            "f 3 8 7",
            "f 1 3 7",
            "f 1 7 5",
            "f 2 6 8",
            "f 2 8 4",
        ]
    )
    + "\n"
).encode()
CAMPAIGN_TAKEN = "already has a campaign called"
ASSET_TAKEN = "ottoman asset called"


# --- fixtures ------------------------------------------------------------------------------------------------------


@dataclass
class World:
    team: Any
    other_team: Any
    planner: Any
    outsider: Any


def _make_world(django_user_model) -> World:
    from assets import services as asset_services
    from teams.models import Membership, Team

    team = Team.objects.create(name="Studio North")
    other = Team.objects.create(name="Elsewhere Ltd")
    planner = django_user_model.objects.create_user(username="pia", password="race-password-123")
    outsider = django_user_model.objects.create_user(username="otto", password="race-password-123")
    Membership.objects.create(team=team, user=planner, role="planner")
    Membership.objects.create(team=other, user=outsider, role="planner")
    for name in ("chair", "ottoman"):
        oc = asset_services.ensure_object_class(name=name)
        asset_services.ensure_procedural_asset(object_class=oc, name=f"procedural {name}", creation_cost="2.00")
    return World(team, other, planner, outsider)


@pytest.fixture
def world(db, django_user_model) -> World:
    return _make_world(django_user_model)


@pytest.fixture
def live_world(transactional_db, django_user_model) -> World:
    """The same rows, committed, so the live server's request threads see them."""
    return _make_world(django_user_model)


@pytest.fixture
def no_preview(monkeypatch) -> None:
    """Uploads ask the fleet for a preview; no broker message from these tests."""
    monkeypatch.setattr("assets.files.request_preview", lambda **kw: None)


def _plan_data(team_pk: int, name: str) -> dict[str, Any]:
    from dashboard.forms import budget_form_data

    data: dict[str, Any] = {
        "name": name,
        "team": team_pk,
        "description": "",
        "seed": 5,
        "cost_budget": "50",
        "price_per_cpu_hour": "0.05",
        "setup_cost": "1",
        "manual_labelling_rate_per_hour": "12",
        "weight": 1,
        "max_attempts": 3,
        "q_chair_target": 6,
        "q_ottoman_target": 0,
        "save": "1",
    }
    data.update(budget_form_data(TINY_BUDGET))
    return data


def _upload_data(team_pk: int, name: str) -> dict[str, Any]:
    return {"name": name, "team": team_pk, "object_class": "ottoman", "unit": "m", "creation_cost": "3"}


def _mesh_files(media_root: Path) -> list[Path]:
    """Every file under the uploaded-mesh folder, hidden partial files included."""
    folder = media_root / "assets" / "meshes"
    return sorted(p for p in folder.rglob("*") if p.is_file()) if folder.exists() else []


# --- a rival request that takes the name between this request's check and its insert -------------------------------


@contextmanager
def rival_after_name_check(*, table: str, name: str, make_rival: Callable[[], None]) -> Iterator[list[str]]:
    """Run ``make_rival`` right after the first query that reads ``table`` rows with ``name`` (the name check).

    The rival row is written on the same connection, so the code under test meets it at its insert exactly as it
    would meet a row another request committed a moment after the check. Being on the same connection, the rival
    is also undone when the code under test rolls its own transaction back (a real rival, committed elsewhere,
    would stay): tests assert on what the losing request wrote, not on the rival. Yields the list of the queries
    that triggered it (one at most), so a test can assert that the rival was really made.
    """
    from django.db import connection

    fired: list[str] = []

    def wrapper(execute: Callable[..., Any], sql: str, params: Any, many: bool, context: dict[str, Any]) -> Any:
        result = execute(sql, params, many, context)
        if not fired and sql.lstrip().upper().startswith("SELECT") and f'"{table}"' in sql and name in (params or ()):
            fired.append(sql)
            make_rival()
        return result

    with connection.execute_wrapper(wrapper):
        yield fired


def _rival_campaign(world: World, name: str) -> Callable[[], None]:
    def make() -> None:
        from campaigns.models import Campaign

        Campaign.objects.bulk_create(
            [
                Campaign(
                    name=name,
                    team=world.team,
                    owner=world.planner,
                    budget={},
                    cost_budget=Decimal("1"),
                    price_per_cpu_hour=Decimal("0"),
                )
            ]
        )

    return make


def _rival_asset(world: World, name: str) -> Callable[[], None]:
    def make() -> None:
        from assets.models import Asset, ObjectClass

        Asset.objects.bulk_create(
            [
                Asset(
                    object_class=ObjectClass.objects.get(name="ottoman"),
                    name=name,
                    kind=Asset.Kind.MESH,
                    mesh_file="assets/meshes/rival.obj",
                    team=world.team,
                )
            ]
        )

    return make


def test_a_campaign_name_taken_after_the_check_gets_the_form_error(client, world):
    from campaigns.models import Campaign, ClassQuota, FrameEvent

    client.force_login(world.planner)
    url = reverse("campaigns:create")
    rival = _rival_campaign(world, "Taken late")
    with rival_after_name_check(table="campaigns_campaign", name="Taken late", make_rival=rival) as fired:
        response = client.post(url, _plan_data(world.team.pk, "Taken late"))
    assert fired, "the name check did not run"
    assert response.status_code == 400
    late_error = response.context["form"].errors["name"]
    assert CAMPAIGN_TAKEN in late_error[0]
    # Nothing of the losing request was written: no campaign of its own, no quotas, no events.
    assert not Campaign.objects.filter(name="Taken late", cost_budget=Decimal("50")).exists()
    assert not ClassQuota.objects.exists() and not FrameEvent.objects.exists()
    # The same error as a request that finds the name already taken at its check.
    rival()
    again = client.post(url, _plan_data(world.team.pk, "Taken late"))
    assert again.status_code == 400 and again.context["form"].errors["name"] == late_error


def test_a_rename_to_a_name_taken_after_the_check_gets_the_form_error(client, world):
    from campaigns import services

    draft = services.create_campaign(
        owner=world.planner,
        team=world.team,
        name="First name",
        quotas=[services.QuotaInput("chair", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("50"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    client.force_login(world.planner)
    with rival_after_name_check(
        table="campaigns_campaign", name="Wanted", make_rival=_rival_campaign(world, "Wanted")
    ) as fired:
        response = client.post(reverse("campaigns:edit", args=[draft.pk]), _plan_data(world.team.pk, "Wanted"))
    assert fired, "the name check did not run"
    assert response.status_code == 400
    assert CAMPAIGN_TAKEN in response.context["form"].errors["name"][0]
    draft.refresh_from_db()
    assert draft.name == "First name" and draft.cost_budget == Decimal("50")
    assert list(draft.quotas.values_list("object_class__name", "target_accepted")) == [("chair", 3)]


def test_an_asset_name_taken_after_the_check_gets_the_form_error_and_leaves_no_file(
    client, world, media_root, no_preview
):
    from django.core.files.uploadedfile import SimpleUploadedFile

    from assets.models import Asset

    client.force_login(world.planner)
    data = {**_upload_data(world.team.pk, "footstool"), "mesh": SimpleUploadedFile("box.obj", CUBE_OBJ)}
    with rival_after_name_check(
        table="campaigns_asset", name="footstool", make_rival=_rival_asset(world, "footstool")
    ) as fired:
        response = client.post(reverse("campaigns:assets"), data)
    assert fired, "the name check did not run"
    assert response.status_code == 400
    late_error = response.context["form"].errors["name"]
    assert ASSET_TAKEN in late_error[0]
    assert Asset.objects.filter(name="footstool").count() == 1
    assert _mesh_files(media_root) == []
    assert not any((media_root / "assets").glob("[0-9]*")), "no info folder for an asset that was not made"
    again = client.post(
        reverse("campaigns:assets"),
        {**_upload_data(world.team.pk, "footstool"), "mesh": SimpleUploadedFile("box.obj", CUBE_OBJ)},
    )
    assert again.status_code == 400 and again.context["form"].errors["name"] == late_error
    assert _mesh_files(media_root) == []


def test_a_cost_budget_the_service_refuses_is_a_form_error_not_a_500(client, world):
    """The started campaign's cost-budget form accepts 14 digits; the service caps money lower."""
    from campaigns import services
    from campaigns.models import Campaign

    campaign = services.create_campaign(
        owner=world.planner,
        team=world.team,
        name="Started",
        quotas=[services.QuotaInput("chair", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("50"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    Campaign.objects.filter(pk=campaign.pk).update(status=Campaign.Status.PAUSED)
    client.force_login(world.planner)
    response = client.post(reverse("campaigns:edit", args=[campaign.pk]), {"cost_budget": "999999999999.99"})
    assert response.status_code == 400
    assert response.context["form"].errors["cost_budget"][0].startswith("must be at most")
    campaign.refresh_from_db()
    assert campaign.cost_budget == Decimal("50")


def test_nul_characters_in_names_and_filters_are_refused_not_a_server_error(client, world):
    """PostgreSQL text cannot hold NUL and refuses it even in a lookup; such input matches nothing instead."""
    from campaigns import services
    from campaigns.models import Campaign

    campaign = services.create_campaign(
        owner=world.planner,
        team=world.team,
        name="Filters",
        quotas=[services.QuotaInput("chair", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("50"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    client.force_login(world.planner)
    gallery = client.get(reverse("campaigns:gallery", args=[campaign.pk]), {"class": "ch\x00air"})
    assert gallery.status_code == 200 and gallery.context["flt"]["class_name"] == ""
    failed = client.get(reverse("campaigns:failed", args=[campaign.pk]), {"kind": "Layout\x00Error"})
    assert failed.status_code == 200 and not failed.context["rows"]
    for action in ("retry", "ignore"):
        response = client.post(
            reverse("campaigns:failed-action", args=[campaign.pk, action]), {"kind": "Layout\x00Error"}
        )
        assert response.status_code == 302
    with pytest.raises(services.CampaignError) as refused:
        services.create_campaign(
            owner=world.planner,
            team=world.team,
            name="NUL class",
            quotas=[services.QuotaInput("ch\x00air", 3)],
            budget=TINY_BUDGET,
            cost_budget=Decimal("50"),
            price_per_cpu_hour=Decimal("0.05"),
        )
    assert refused.value.field == "quota" and "unknown object class" in refused.value.message
    assert not Campaign.objects.filter(name="NUL class").exists()


# --- real threads against the live server --------------------------------------------------------------------------


@dataclass(frozen=True)
class Reply:
    status: int
    body: str
    location: str


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args: Any, **kwargs: Any) -> None:
        return None


def _send(url: str, *, cookie: str, body: bytes | None = None, content_type: str = "") -> Reply:
    headers = {"Cookie": cookie}
    if content_type:
        headers["Content-Type"] = content_type
    request = urllib.request.Request(url, data=body, headers=headers, method="POST" if body is not None else "GET")
    opener = urllib.request.build_opener(_NoRedirect)
    try:
        with opener.open(request, timeout=180) as response:
            return Reply(
                response.status, response.read().decode("utf-8", "replace"), response.headers.get("Location", "")
            )
    except urllib.error.HTTPError as exc:
        return Reply(exc.code, exc.read().decode("utf-8", "replace"), exc.headers.get("Location", ""))


class Visitor:
    """A signed-in browser without a browser: session cookie, CSRF cookie and token, form posts."""

    def __init__(self, base_url: str, user: Any) -> None:
        from django.conf import settings
        from django.test import Client

        client = Client()
        client.force_login(user)
        self.base_url = base_url
        self.cookie = f"{settings.SESSION_COOKIE_NAME}={client.cookies[settings.SESSION_COOKIE_NAME].value}"
        self.token = ""

    def open_form(self, path: str) -> None:
        from django.conf import settings

        request = urllib.request.Request(self.base_url + path, headers={"Cookie": self.cookie})
        with urllib.request.urlopen(request, timeout=60) as response:
            page = response.read().decode()
            cookies = response.headers.get_all("Set-Cookie") or []
        csrf = next(c.split(";", 1)[0] for c in cookies if c.startswith(settings.CSRF_COOKIE_NAME + "="))
        self.cookie = f"{self.cookie}; {csrf}"
        self.token = re.search(r'name="csrfmiddlewaretoken" value="([^"]+)"', page)[1]

    def post_form(self, path: str, data: dict[str, Any]) -> Reply:
        body = urllib.parse.urlencode({**data, "csrfmiddlewaretoken": self.token}, doseq=True).encode()
        return _send(
            self.base_url + path, cookie=self.cookie, body=body, content_type="application/x-www-form-urlencoded"
        )

    def post_multipart(self, path: str, data: dict[str, Any], files: dict[str, tuple[str, bytes]]) -> Reply:
        boundary = uuid.uuid4().hex
        parts: list[bytes] = []
        for key, value in {**data, "csrfmiddlewaretoken": self.token}.items():
            parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{key}"\r\n\r\n{value}\r\n'.encode())
        for key, (filename, content) in files.items():
            parts.append(
                f'--{boundary}\r\nContent-Disposition: form-data; name="{key}"; filename="{filename}"\r\n'
                f"Content-Type: application/octet-stream\r\n\r\n".encode()
                + content
                + b"\r\n"
            )
        parts.append(f"--{boundary}--\r\n".encode())
        return _send(
            self.base_url + path,
            cookie=self.cookie,
            body=b"".join(parts),
            content_type=f"multipart/form-data; boundary={boundary}",
        )


def _all_at_once(count: int, send: Callable[[int], Reply]) -> list[Reply]:
    """``send(i)`` from ``count`` threads released together by a barrier."""
    barrier = threading.Barrier(count)

    def one(i: int) -> Reply:
        barrier.wait(timeout=60)
        return send(i)

    with ThreadPoolExecutor(max_workers=count) as pool:
        return list(pool.map(one, range(count)))


def _assert_one_winner(replies: list[Reply], *, taken: str, success_path: Callable[[str], bool]) -> None:
    statuses = sorted(r.status for r in replies)
    assert 500 not in statuses, [r.body[-2000:] for r in replies if r.status >= 500][0]
    winners = [r for r in replies if r.status in (201, 302)]
    assert len(winners) == 1, statuses
    assert success_path(urllib.parse.urlparse(winners[0].location).path), winners[0].location
    for loser in (r for r in replies if r not in winners):
        assert loser.status in (200, 400), loser.status
        assert taken in loser.body, loser.body[-3000:]


def test_simultaneous_creates_with_one_name_make_one_campaign(live_server, live_world):
    from campaigns.models import Campaign, ClassQuota

    visitor = Visitor(live_server.url, live_world.planner)
    path = reverse("campaigns:create")
    visitor.open_form(path)
    for round_no in range(CAMPAIGN_ROUNDS):
        name = f"Race {round_no}"
        replies = _all_at_once(
            THREADS, lambda i, name=name: visitor.post_form(path, _plan_data(live_world.team.pk, name))
        )
        made = Campaign.objects.filter(team=live_world.team, name=name)
        assert made.count() == 1
        detail = reverse("campaigns:detail", args=[made.get().pk])
        _assert_one_winner(replies, taken=CAMPAIGN_TAKEN, success_path=lambda p, detail=detail: p == detail)
    assert Campaign.objects.count() == CAMPAIGN_ROUNDS
    # A losing request wrote nothing: every campaign has exactly its one quota.
    assert ClassQuota.objects.count() == CAMPAIGN_ROUNDS


def test_simultaneous_uploads_with_one_name_make_one_asset_and_leave_no_file(
    live_server, live_world, media_root, no_preview
):
    from assets.models import Asset

    visitor = Visitor(live_server.url, live_world.planner)
    path = reverse("campaigns:assets")
    visitor.open_form(path)
    for round_no in range(UPLOAD_ROUNDS):
        name = f"pouf {round_no}"
        replies = _all_at_once(
            THREADS,
            lambda i, name=name: visitor.post_multipart(
                path, _upload_data(live_world.team.pk, name), {"mesh": (f"box{i}.obj", CUBE_OBJ)}
            ),
        )
        _assert_one_winner(replies, taken=ASSET_TAKEN, success_path=lambda p: p == path)
        assert Asset.objects.filter(name=name).count() == 1
    meshes = Asset.objects.filter(kind=Asset.Kind.MESH)
    assert meshes.count() == UPLOAD_ROUNDS
    # Exactly the winners' files: nothing of a losing upload, no partial file.
    assert _mesh_files(media_root) == sorted(media_root / a.mesh_file.name for a in meshes)
    info_folders = sorted(p.name for p in (media_root / "assets").iterdir() if p.name != "meshes")
    assert info_folders == sorted(str(a.pk) for a in meshes)
