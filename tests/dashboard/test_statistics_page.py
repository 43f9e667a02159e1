"""The campaign's dataset statistics page: access like the other campaign pages, the empty state, and numbers that
agree with a recount from the Instance rows (plain loops and numpy.histogram here, not the module's binning).

COCO size limits (32², 96² px² on the mask area): COCO detection evaluation, cocodataset.org (from memory).
"""

from __future__ import annotations

import json
from decimal import Decimal
from pathlib import Path

import numpy as np
import plotly
import pytest
from django.urls import reverse

from campaigns.models import Frame, Instance
from datasets import page_statistics
from datasets.statistics import camera_distances

pytestmark = pytest.mark.django_db

FRACTION_EDGES = np.array([i / 10 for i in range(11)])
DISTANCE_EDGES_M = np.append(np.array([i * 0.5 for i in range(21)]), np.inf)


def _url(campaign) -> str:
    return reverse("campaigns:statistics", args=[campaign.pk])


def _rows(campaign, *, before_index=None):
    """The instances an accepted-only export holds, straight from the table."""
    rows = Instance.objects.filter(
        campaign=campaign, frame__state=Frame.State.DONE, accepted=True, mask_area_px__gt=0, bbox_xywh_px__isnull=False
    )
    if before_index is not None:
        rows = rows.filter(frame__index__lt=before_index)
    return list(rows.select_related("frame", "object_class"))


def _scene_distances(campaign, media_root: Path) -> dict[tuple[int, int], float]:
    out = {}
    for frame in Frame.objects.filter(campaign=campaign, state=Frame.State.DONE):
        scene = json.loads((media_root / frame.output_dir / "scene.json").read_text())
        camera = np.asarray(scene["camera"]["position_m"], dtype=float)
        for key, value in camera_distances(scene).items():
            out[(frame.index, key)] = value
        # Spot check against the spec's own numbers: every labelled object, none of the distractors.
        assert sorted(camera_distances(scene)) == sorted(o["instance_id"] for o in scene["objects"])
        assert all(np.linalg.norm(camera - np.asarray(o["position_m"])) < 25 for o in scene["objects"])
    return out


def test_member_sees_the_page_and_the_numbers_agree_with_a_recount(client, done_campaign, people, media_root):
    campaign = done_campaign
    # Two instances on the COCO limits, to see the size classes through the database path too.
    first, second = _rows(campaign)[:2]
    Instance.objects.filter(pk=first.pk).update(mask_area_px=32 * 32)
    Instance.objects.filter(pk=second.pk).update(mask_area_px=96 * 96 - 1)
    third = _rows(campaign)[2]
    Instance.objects.filter(pk=third.pk).update(mask_area_px=96 * 96)

    client.force_login(people["vera"])  # a viewer: the lowest role
    response = client.get(_url(campaign))
    assert response.status_code == 200
    page = response.content.decode()
    assert 'id="statistics-data"' in page and "statistics-empty" not in page
    assert reverse("campaigns:plotly", kwargs={"version": plotly.__version__}) in page
    assert "cdn.plot.ly" not in page and "cdn." not in page
    stats = response.context["stats"]
    s = stats["statistics"]
    assert json.loads(json.dumps(s)) == s

    rows = _rows(campaign)
    done = list(Frame.objects.filter(campaign=campaign, state=Frame.State.DONE).order_by("index"))
    assert stats["frames_done"] == stats["frames_read"] == s["images"] == len(done) == 3
    assert stats["instances_read"] == s["instances"] == len(rows) > 0
    assert not stats["capped"]
    assert s["image_sizes_px"] == [{"width_px": campaign.width_px, "height_px": campaign.height_px, "images": 3}]

    distances = _scene_distances(campaign, media_root)
    assert stats["distance_scenes_read"] == stats["distance_frames"] == 3 and stats["distance_step"] == 1
    for name in s["classes"]:
        mine = [r for r in rows if r.object_class.name == name]
        assert s["per_class"][name]["instances"] == len(mine)
        assert s["per_class"][name]["images"] == len({r.frame_id for r in mine})
        small = sum(1 for r in mine if r.mask_area_px < 1024)
        large = sum(1 for r in mine if r.mask_area_px >= 9216)
        assert s["size_classes"]["counts"][name] == [small, len(mine) - small - large, large]
        for key in ("visible_fraction", "truncation_fraction", "occlusion_fraction"):
            expected, _ = np.histogram([getattr(r, key) for r in mine], bins=FRACTION_EDGES)
            assert s[key]["counts"][name] == expected.tolist(), (name, key)
        expected_d, _ = np.histogram([distances[(r.frame.index, r.instance_id)] for r in mine], bins=DISTANCE_EDGES_M)
        assert s["camera_distance"]["counts"][name] == expected_d.tolist()
        assert s["camera_distance"]["unknown"][name] == 0
        cx = [(r.bbox_xywh_px[0] + r.bbox_xywh_px[2] / 2) / campaign.width_px for r in mine]
        cy = [(r.bbox_xywh_px[1] + r.bbox_xywh_px[3] / 2) / campaign.height_px for r in mine]
        grid, _, _ = np.histogram2d(cy, cx, bins=[[i / 12 for i in range(13)], [i / 16 for i in range(17)]])
        assert s["box_centres"]["counts"][name] == grid.astype(int).tolist()
    assert s["size_classes"]["total"] == [
        sum(1 for r in rows if r.mask_area_px < 1024),
        sum(1 for r in rows if 1024 <= r.mask_area_px < 9216),
        sum(1 for r in rows if r.mask_area_px >= 9216),
    ]
    assert s["size_classes"]["total"][1] >= 2 and s["size_classes"]["total"][2] >= 1

    per_frame = {f.pk: set() for f in done}
    counts = {f.pk: 0 for f in done}
    for r in rows:
        per_frame[r.frame_id].add(r.object_class.name)
        counts[r.frame_id] += 1
    assert s["instances_per_image"]["counts"] == np.bincount(list(counts.values())).tolist()
    for i, a in enumerate(s["classes"]):
        for j, b in enumerate(s["classes"]):
            assert s["co_occurrence"]["counts"][i][j] == sum(1 for held in per_frame.values() if {a, b} <= held)

    # The table shows the same counts.
    table = {r["class_name"]: r for r in stats["rows"]}
    for name in s["classes"]:
        assert table[name]["instances"] == s["per_class"][name]["instances"]
        assert f'data-class="{name}"' in page


def test_outsider_gets_404_and_anonymous_goes_to_login(client, done_campaign, people):
    assert client.get(_url(done_campaign)).status_code == 302
    client.force_login(people["otto"])
    assert client.get(_url(done_campaign)).status_code == 404
    assert client.get(reverse("campaigns:statistics", args=[999999])).status_code == 404


def test_campaign_without_done_frames_shows_the_empty_state(client, make_campaign, people):
    campaign = make_campaign("nothing yet")
    client.force_login(people["pia"])
    response = client.get(_url(campaign))
    assert response.status_code == 200
    page = response.content.decode()
    assert 'id="statistics-empty"' in page and "no done frames yet" in page
    assert 'id="statistics-data"' not in page
    assert response.context["stats"]["frames_done"] == 0
    assert response.context["stats"]["statistics"]["images"] == 0


def test_overview_links_to_the_page(client, done_campaign, people):
    client.force_login(people["vera"])
    page = client.get(reverse("campaigns:detail", args=[done_campaign.pk])).content.decode()
    assert f'href="{_url(done_campaign)}"' in page


def test_instance_cap_reads_whole_frames_and_distance_sample_is_deterministic(done_campaign, media_root):
    campaign = done_campaign
    rows = _rows(campaign)
    per_index: dict[int, int] = {}
    for r in rows:
        per_index[r.frame.index] = per_index.get(r.frame.index, 0) + 1
    first, second = sorted(per_index)[:2]
    cap = per_index[first]  # exactly the first frame's instances: the next frame with instances would pass the cap
    out = page_statistics.campaign_statistics(campaign=campaign, max_instances=cap)
    assert out["capped"] and out["frames_done"] == 3
    assert (
        out["frames_read"]
        == out["statistics"]["images"]
        == Frame.objects.filter(campaign=campaign, state=Frame.State.DONE, index__lt=second).count()
    )
    assert out["instances_read"] == cap

    # One scene file for three frames: the first frame only, every third frame read; the rest unknown.
    out = page_statistics.campaign_statistics(campaign=campaign, distance_frames=1)
    assert not out["capped"] and out["distance_step"] == 3 and out["distance_frames"] == 1
    s = out["statistics"]
    first_done = Frame.objects.filter(campaign=campaign, state=Frame.State.DONE).order_by("index").first().index
    first_frame_counts = {}
    for r in rows:
        if r.frame.index == first_done:
            first_frame_counts[r.object_class.name] = first_frame_counts.get(r.object_class.name, 0) + 1
    for name in s["classes"]:
        assert sum(s["camera_distance"]["counts"][name]) == first_frame_counts.get(name, 0)
        assert s["camera_distance"]["unknown"][name] == s["per_class"][name]["instances"] - first_frame_counts.get(
            name, 0
        )
    assert page_statistics.campaign_statistics(campaign=campaign, distance_frames=1) == out  # the same sample again


# --- names from the database in the page's scripts (see tests/security/test_dashboard_js.py) ------------------------

ODD_CLASS = "c\"]'\\</script><b>b</b>&amp;<img src=x onerror=__pwned=1>"  # ≤ 64 characters (ObjectClass.name)
ODD_CAMPAIGN = 'Stats </script><script>window.__pwned=2</script> <b>bold</b> & "q"'


@pytest.fixture
def odd_statistics_world(transactional_db, django_user_model, outbox):
    from django.db import transaction

    from assets import services as asset_services
    from assets.models import ObjectClass
    from campaigns import services
    from teams.models import Membership, Team

    team = Team.objects.create(name="Studio North")
    user = django_user_model.objects.create_user(username="vera", password="odd-stats-password-1")
    Membership.objects.create(team=team, user=user, role="planner")
    odd = ObjectClass.objects.create(name=ODD_CLASS, label=ODD_CLASS)
    asset_services.ensure_procedural_asset(object_class=odd, name="odd", creation_cost="1")
    asset_services.ensure_object_class(name="chair")
    campaign = services.create_campaign(
        owner=user,
        team=team,
        name=ODD_CAMPAIGN,
        quotas=[services.QuotaInput(ODD_CLASS, 5), services.QuotaInput("chair", 3)],
        budget={"render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3}},
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    services.start_campaign(campaign_id=campaign.pk)
    with transaction.atomic():
        frame = services.create_frame(
            campaign=campaign,
            index=100,
            coordinates=(100, 0, 0),
            composition={ODD_CLASS: 1, "chair": 1},
            expected_cpu_s=0.5,
            task_id_prefix="stats",
        )
    assert services.claim_frame(frame_id=frame.pk, dispatch_no=1, worker_host="w@test").ok
    label = {"visible_fraction": 0.8, "truncation_fraction": 0.0, "occlusion_fraction": 0.2, "contrast": 20.0}
    assert services.record_result(
        frame_id=frame.pk,
        dispatch_no=1,
        labels=[
            {**label, "instance_id": 1, "class_name": ODD_CLASS, "bbox": [4, 4, 20, 16], "mask_area_px": 250},
            {**label, "instance_id": 2, "class_name": "chair", "bbox": [30, 10, 12, 30], "mask_area_px": 300},
        ],
        cpu_s=0.1,
        wall_s=0.1,
    )
    return {"user": user, "campaign": campaign}


@pytest.mark.browser
def test_page_draws_its_charts_with_odd_names_as_text(live_server, odd_statistics_world, chromium_context):
    from django.conf import settings
    from django.test import Client

    client = Client()
    client.force_login(odd_statistics_world["user"])
    session = client.cookies[settings.SESSION_COOKIE_NAME].value
    chromium_context.add_cookies([{"name": settings.SESSION_COOKIE_NAME, "value": session, "url": live_server.url}])
    page = chromium_context.new_page()
    problems: list[str] = []
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("dialog", lambda dialog: (problems.append(f"dialog: {dialog.message}"), dialog.dismiss()))
    page.on(  # the favicon's 404 is no problem
        "console",
        lambda msg: (
            problems.append(msg.text) if msg.type == "error" and "Failed to load resource" not in msg.text else None
        ),
    )
    page.goto(live_server.url + _url(odd_statistics_world["campaign"]))
    page.wait_for_selector("#stat-size-classes .main-svg")
    page.wait_for_selector("#stat-cooccurrence .main-svg")
    ticks = page.locator("#stat-size-classes .xtick text").all_text_contents()
    assert sorted(ticks) == sorted([ODD_CLASS, "chair"]), ticks
    assert sorted(page.locator("#stat-cooccurrence .ytick text").all_text_contents()) == sorted([ODD_CLASS, "chair"])
    row = page.locator("#statistics-table tbody tr").first
    assert {row.get_attribute("data-class"), row.locator("td").first.text_content()} <= {ODD_CLASS, "chair"}
    assert ODD_CLASS in page.locator("#statistics-table").text_content()
    # The box-centre heatmap follows the class chosen, the odd one too.
    page.select_option("#centre-class", value=ODD_CLASS)
    total = page.evaluate("() => document.getElementById('stat-centres').data[0].z.flat().reduce((a, b) => a + b, 0)")
    assert total == 1
    assert page.evaluate("() => window.__pwned") is None, "a script from a name ran"
    assert problems == []
