"""The HTTP API (/api/v1/): token authentication, team scoping of every operation, the create → start round trip,
JSON errors on bad input, the OpenAPI schema and the local docs page."""

from __future__ import annotations

import hashlib
import re
from datetime import timedelta

import pytest
from django.urls import reverse

from api.models import ApiToken
from api.services import create_token, revoke_token
from campaigns.models import Campaign, Frame

pytestmark = pytest.mark.django_db


def _body(response) -> dict:
    assert response["Content-Type"].startswith("application/json"), response.content[:200]
    return response.json()


# --- tokens -------------------------------------------------------------------------------------------------------


def test_missing_wrong_and_revoked_tokens_are_401_and_a_valid_one_works(client, people):
    token_row, plaintext = create_token(user=people["vera"], name="script")
    for headers in (
        {},
        {"Authorization": "Bearer"},
        {"Authorization": "Bearer ef_not-a-token"},
        {"Authorization": f"Bearer {plaintext}x"},
        {"Authorization": f"Basic {plaintext}"},
        {"Authorization": plaintext},
    ):
        response = client.get("/api/v1/campaigns", headers=headers)
        assert response.status_code == 401, headers
        assert _body(response)["detail"] and _body(response)["errors"] == {}
    ok = client.get("/api/v1/campaigns", headers={"Authorization": f"Bearer {plaintext}"})
    assert ok.status_code == 200 and ok.json() == []
    assert revoke_token(user=people["vera"], token_id=token_row.pk)
    again = client.get("/api/v1/campaigns", headers={"Authorization": f"Bearer {plaintext}"})
    assert again.status_code == 401


def test_a_session_is_not_enough_and_an_inactive_user_token_is_refused(client, people):
    client.force_login(people["pia"])
    assert client.get("/api/v1/campaigns").status_code == 401  # not a redirect to the sign-in page
    _, plaintext = create_token(user=people["pia"], name="x")
    people["pia"].is_active = False
    people["pia"].save()
    client.logout()
    assert client.get("/api/v1/campaigns", headers={"Authorization": f"Bearer {plaintext}"}).status_code == 401


def test_tokens_are_stored_hashed(people):
    row, plaintext = create_token(user=people["pia"], name="  nightly export  ")
    assert re.fullmatch(r"ef_[A-Za-z0-9_-]{43}", plaintext)
    stored = ApiToken.objects.filter(pk=row.pk).values().get()
    assert stored["key_hash"] == hashlib.sha256(plaintext.encode()).hexdigest()
    assert stored["prefix"] == plaintext[:8] and stored["name"] == "nightly export"
    assert all(plaintext not in str(value) for value in stored.values())
    assert plaintext[8:] not in str(stored)  # not even the secret part
    assert create_token(user=people["pia"], name="two")[1] != plaintext


def test_last_used_is_written_at_most_once_a_minute(client, people):
    row, plaintext = create_token(user=people["vera"], name="x")
    headers = {"Authorization": f"Bearer {plaintext}"}
    client.get("/api/v1/assets", headers=headers)
    row.refresh_from_db()
    first = row.last_used_at
    assert first is not None
    client.get("/api/v1/assets", headers=headers)
    row.refresh_from_db()
    assert row.last_used_at == first
    ApiToken.objects.filter(pk=row.pk).update(last_used_at=first - timedelta(minutes=2))
    client.get("/api/v1/assets", headers=headers)
    row.refresh_from_db()
    assert row.last_used_at > first - timedelta(seconds=1)


def test_token_names_are_checked(people):
    from api.services import ApiTokenError

    for bad in ("", "   ", "x" * 101, "a\x00b", None):
        with pytest.raises(ApiTokenError):
            create_token(user=people["pia"], name=bad)
    assert not ApiToken.objects.exists()


# --- the profile page ---------------------------------------------------------------------------------------------


def test_profile_page_creates_shows_once_lists_and_revokes(client, people):
    url = reverse("api-tokens")
    assert client.get(url).status_code == 302  # the site-wide sign-in applies
    client.force_login(people["pia"])
    page = client.get(url)
    assert page.status_code == 200 and "No tokens yet" in page.content.decode()
    assert 'href="/profile/tokens/"' in page.content.decode()  # the header links to it
    created = client.post(url, {"name": "laptop script"})
    html = created.content.decode()
    plaintext = re.search(r'<code id="new-token">(ef_[^<]+)</code>', html).group(1)
    assert "shown only this once" in html
    row = ApiToken.objects.get(user=people["pia"])
    assert row.prefix == plaintext[:8]
    listed = client.get(url).content.decode()
    assert "laptop script" in listed and row.prefix in listed and plaintext not in listed and "active" in listed
    assert client.post(url, {"name": ""}).status_code == 400
    # Someone else's token cannot be revoked through the page.
    other, _ = create_token(user=people["otto"], name="otto's")
    assert client.post(reverse("api-token-revoke", args=[other.pk])).status_code == 404
    other.refresh_from_db()
    assert other.revoked_at is None
    assert client.post(reverse("api-token-revoke", args=[row.pk])).status_code == 302
    row.refresh_from_db()
    assert row.revoked_at is not None
    assert "revoked" in client.get(url).content.decode()
    assert client.get("/api/v1/assets", headers={"Authorization": f"Bearer {plaintext}"}).status_code == 401
    assert client.post(reverse("api-token-revoke", args=[row.pk])).status_code == 404  # already revoked


# --- team scoping -------------------------------------------------------------------------------------------------


def test_every_campaign_operation_is_scoped_to_the_team(api, done_campaign):
    cid = done_campaign.pk
    reads = [f"/campaigns/{cid}", f"/campaigns/{cid}/frames", f"/campaigns/{cid}/frames/0"]
    otto, vera = api("otto"), api("vera")
    assert otto.get("/campaigns").json() == []
    for path in reads:
        response = otto.get(path)
        assert response.status_code == 404 and _body(response) == {"detail": "not found", "errors": {}}, path
        assert vera.get(path).status_code == 200, path
    assert [c["id"] for c in vera.get("/campaigns").json()] == [cid]
    for action in ("start", "pause", "resume", "cancel"):
        assert otto.post(f"/campaigns/{cid}/{action}").status_code == 404
        forbidden = vera.post(f"/campaigns/{cid}/{action}")
        assert forbidden.status_code == 403 and "planner" in _body(forbidden)["detail"]
    assert otto.post(f"/campaigns/{cid}/explode").status_code == 404
    assert api("pia").post(f"/campaigns/{cid}/explode").status_code == 404
    assert otto.get("/campaigns/999999").status_code == 404
    done_campaign.refresh_from_db()
    assert done_campaign.status == "running"


def test_planner_pauses_resumes_and_cancels(api, done_campaign, outbox):
    pia = api("pia")
    cid = done_campaign.pk
    assert pia.post(f"/campaigns/{cid}/pause").json()["status"] == "paused"
    assert pia.post(f"/campaigns/{cid}/resume").json()["status"] == "running"
    refused = pia.post(f"/campaigns/{cid}/start")
    assert refused.status_code == 400 and "cannot go to running" in _body(refused)["detail"]
    assert pia.post(f"/campaigns/{cid}/cancel").json()["status"] == "cancelled"


def test_campaign_detail_has_settings_progress_spend_and_eta(api, done_campaign):
    body = api("vera").get(f"/campaigns/{done_campaign.pk}").json()
    assert body["status"] == "running" and body["team_name"] == "Studio North" and body["owner"] == "pia"
    assert {q["class_name"]: q["target_accepted"] for q in body["settings"]["quotas"]} == {"chair": 20, "ottoman": 5}
    assert body["settings"]["budget"]["render"]["width_px"] == 64
    assert body["frames_done"] == 3 and body["frames"]["done"] == 3 and body["frames_dead"] == 2
    chair = next(q for q in body["quotas"] if q["class_name"] == "chair")
    assert chair["target"] == 20 and chair["accepted"] + chair["rejected"] == chair["placed"] > 0
    assert float(body["spend"]["spent"]) >= 0 and body["spend"]["cost_budget"] == "100.00"
    # Its two generators (2.00 each) appear only in this campaign's frames: it bears their whole creation cost.
    assert float(body["spend"]["library_share"]) == 4.0
    assert "eta_s" in body and "frames_remaining" in body


def test_frames_list_filters_and_pages_and_one_frame_has_labels_and_files(api, done_campaign):
    vera = api("vera")
    cid = done_campaign.pk
    page = vera.get(f"/campaigns/{cid}/frames", limit=2).json()
    assert page["count"] == 5 and [f["index"] for f in page["items"]] == [0, 1]
    assert [f["index"] for f in vera.get(f"/campaigns/{cid}/frames", limit=2, offset=2).json()["items"]] == [2, 10]
    assert vera.get(f"/campaigns/{cid}/frames", state="dead").json()["count"] == 2
    by_class = vera.get(f"/campaigns/{cid}/frames", **{"class": "ottoman", "state": "done"}).json()
    assert [f["index"] for f in by_class["items"]] == [0, 1]
    for params, field in (({"state": "sleeping"}, "state"), ({"class": "piano"}, "class"), ({"limit": 0}, "limit")):
        bad = vera.get(f"/campaigns/{cid}/frames", **params)
        assert bad.status_code == 400 and field in _body(bad)["errors"], params
    frame = vera.get(f"/campaigns/{cid}/frames/0").json()
    assert frame["state"] == "done" and frame["labels"]
    assert {"chair", "ottoman"} >= {label["class_name"] for label in frame["labels"]}
    rgb_url = frame["files"]["rgb.png"]
    assert rgb_url.endswith(reverse("campaigns:frame-file", args=[cid, 0, "rgb.png"]))
    dead = vera.get(f"/campaigns/{cid}/frames/10").json()
    assert dead["state"] == "dead" and dead["files"] == {} and dead["error"].startswith("LayoutError")
    assert vera.get(f"/campaigns/{cid}/frames/77").status_code == 404


def test_assets_are_the_shared_library_and_own_team_uploads(api, object_classes, people):
    from assets.models import Asset

    Asset.objects.create(
        object_class=object_classes["chair"], name="north chair", kind="mesh", team=people["team"], creation_cost=1
    )
    Asset.objects.create(
        object_class=object_classes["chair"], name="secret chair", kind="mesh", team=people["other_team"]
    )
    names = {a["name"]: a for a in api("vera").get("/assets").json()}
    assert "north chair" in names and "secret chair" not in names
    assert names["procedural chair"]["team"] is None and names["north chair"]["team_name"] == "Studio North"
    assert "north chair" not in {a["name"] for a in api("otto").get("/assets").json()}


def test_health_needs_a_token(client, api):
    assert client.get("/api/v1/health").status_code == 401
    response = api("vera").get("/api/v1/health".removeprefix("/api/v1"))
    assert response.status_code in (200, 503)
    assert {c["name"] for c in _body(response)["checks"]} == {"database", "broker", "workers", "renderer"}


# --- create and start -------------------------------------------------------------------------------------------


def _new_campaign(people, **changes) -> dict:
    body = {
        "name": "via the API",
        "team": people["team"].pk,
        "quotas": [{"class_name": "chair", "target_accepted": 10}, {"class_name": "ottoman", "target_accepted": 4}],
        "budget": {
            "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
            "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
        },
        "cost_budget": "50",
        "price_per_cpu_hour": 0.05,
        "seed": 7,
    }
    body.update(changes)
    return body


def test_create_start_and_poll_round_trip(api, people, object_classes, outbox, django_capture_on_commit_callbacks):
    pia = api("pia")
    created = pia.post("/campaigns", _new_campaign(people))
    assert created.status_code == 201, created.content
    body = created.json()
    assert body["status"] == "draft" and body["settings"]["cost_budget"] == "50.00" and body["settings"]["seed"] == 7
    assert body["settings"]["asset_ids"]  # the classes' procedural generators by default
    campaign = Campaign.objects.get(pk=body["id"])
    assert campaign.owner == people["pia"] and campaign.team == people["team"]
    with django_capture_on_commit_callbacks(execute=True):
        started = pia.post(f"/campaigns/{campaign.pk}/start")
    assert started.status_code == 200 and started.json()["status"] == "running"
    # No live worker: one frame waits so that a worker that starts finds work (as after the dashboard's start).
    assert Frame.objects.filter(campaign=campaign, state="queued").count() == len(outbox) == 1
    polled = api("vera").get(f"/campaigns/{campaign.pk}").json()
    assert polled["status"] == "running" and polled["frames"].get("queued") == 1
    assert [c["id"] for c in api("vera").get("/campaigns").json()] == [campaign.pk]


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"quotas": [{"class_name": "piano", "target_accepted": 3}]}, "quotas.piano.target_accepted"),
        ({"quotas": [{"class_name": "chair", "target_accepted": -1}]}, "quotas.chair.target_accepted"),
        ({"quotas": [{"class_name": "chair", "target_accepted": "many"}]}, "quotas.0.target_accepted"),
        ({"quotas": []}, "quotas"),
        ({"cost_budget": "-5"}, "cost_budget"),
        ({"cost_budget": "3", "setup_cost": "5"}, "cost_budget"),  # below the fixed cost (the setup cost)
        ({"name": None}, "name"),
        ({"name": "   "}, "name"),
        ({"team": 999999}, "team"),
        ({"budget": {"render": {"spp": -3}}}, "budget.render.spp"),
        ({"weight": 0}, "weight"),
    ],
)
def test_bad_input_is_400_with_field_errors_and_nothing_created(api, people, object_classes, changes, field):
    body = _new_campaign(people, **changes)
    body = {k: v for k, v in body.items() if v is not None}  # None: leave the field out
    response = api("pia").post("/campaigns", body)
    assert response.status_code == 400, response.content
    payload = _body(response)
    assert field in payload["errors"] and payload["errors"][field] and payload["detail"]
    assert not Campaign.objects.exists()


def test_viewers_and_outsiders_cannot_create_in_the_team(api, people, object_classes):
    for who in ("vera", "otto"):
        response = api(who).post("/campaigns", _new_campaign(people))
        assert response.status_code == 400 and "team" in _body(response)["errors"]
    assert not Campaign.objects.exists()


def test_a_body_that_is_not_json_is_400(client, token_for):
    response = client.post(
        "/api/v1/campaigns",
        "{not json",
        content_type="application/json",
        headers={"Authorization": f"Bearer {token_for('pia')}"},
    )
    assert response.status_code == 400 and _body(response)["detail"]


# --- schema and docs ------------------------------------------------------------------------------------------------


def test_openapi_schema_validates(client):
    from openapi_spec_validator import validate

    response = client.get("/api/v1/openapi.json")
    assert response.status_code == 200
    schema = response.json()
    validate(schema)
    assert {"/api/v1/campaigns", "/api/v1/campaigns/{campaign_id}/frames/{index}", "/api/v1/assets"} <= set(
        schema["paths"]
    )
    assert any(s.get("scheme") == "bearer" for s in schema["components"]["securitySchemes"].values())


def test_docs_page_is_served_locally(client):
    response = client.get("/api/v1/docs")
    assert response.status_code == 200
    html = response.content.decode()
    assert "swagger-ui" in html
    urls = re.findall(r"""(?:src|href)=["']([^"']+)""", html)
    assert urls and all(u.startswith("/") and not u.startswith("//") for u in urls), urls
    assert "http://" not in html and "https://" not in html
    assert '"validatorUrl": null' in html
    for url in urls:  # the static files are there (whitenoise serves them from the app folders)
        assert client.get(url).status_code == 200, url


def test_token_admin_is_for_superusers_and_never_shows_the_hash(client, people, django_user_model):
    from django.urls import reverse

    from api import services as api_services

    token, _plaintext = api_services.create_token(user=people["pia"], name="ci script")
    client.force_login(people["ada"])  # a team admin, not a superuser
    assert client.get(reverse("admin:api_apitoken_changelist")).status_code in (302, 403)
    root = django_user_model.objects.create_superuser(username="root", password="root-password-123")
    client.force_login(root)
    page = client.get(reverse("admin:api_apitoken_change", args=[token.pk]))
    assert page.status_code == 200 and token.key_hash not in page.content.decode()
    client.post(
        reverse("admin:api_apitoken_changelist"),
        {"action": "revoke", "_selected_action": [token.pk]},
    )
    token.refresh_from_db()
    assert token.revoked_at is not None
