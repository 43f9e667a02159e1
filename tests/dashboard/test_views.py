"""Django view tests for every dashboard page and every permission branch.

anonymous → login redirect; outsider (another team) → 404; viewer → reads, 403 on actions; planner → actions;
admin → delete. Invalid input is shown inline with nothing saved, never a 500.
"""

from __future__ import annotations

import io
import struct

import pytest
from django.urls import reverse

from assets.models import Asset
from campaigns.models import Campaign, Frame, FrameEvent
from tests.dashboard.conftest import CUBE_OBJ_TEXT, TINY_BUDGET

pytestmark = pytest.mark.django_db


def _get_pages(c, frame_index):
    return [
        reverse("campaigns:detail", args=[c.pk]),
        reverse("campaigns:live", args=[c.pk]),
        reverse("campaigns:failed", args=[c.pk]),
        reverse("campaigns:gallery", args=[c.pk]),
        reverse("campaigns:frame", args=[c.pk, frame_index]),
        reverse("campaigns:frame-file", args=[c.pk, frame_index, "rgb.png"]),
        reverse("campaigns:frame-file", args=[c.pk, frame_index, "thumb.jpg"]),
        reverse("campaigns:frame-file", args=[c.pk, frame_index, "mask.png"]),
        reverse("campaigns:frame-file", args=[c.pk, frame_index, "depth.png"]),
        reverse("campaigns:frame-file", args=[c.pk, frame_index, "labels.json"]),
    ]


def _body(response) -> bytes:
    return b"".join(response.streaming_content) if getattr(response, "streaming", False) else response.content


def test_anonymous_is_sent_to_login(client, done_campaign):
    pages = _get_pages(done_campaign, 0) + [
        reverse("campaigns:list"),
        reverse("campaigns:create"),
        reverse("campaigns:assets"),
        reverse("campaigns:estimate"),
    ]
    for url in pages:
        response = client.get(url)
        assert response.status_code == 302 and "/login/" in response["Location"], url
    response = client.post(reverse("campaigns:action", args=[done_campaign.pk, "pause"]))
    assert response.status_code == 302 and "/login/" in response["Location"]


def test_outsider_gets_404_everywhere(client, done_campaign, people):
    client.force_login(people["otto"])
    for url in _get_pages(done_campaign, 0) + [reverse("campaigns:edit", args=[done_campaign.pk])]:
        assert client.get(url).status_code == 404, url
    for url in (
        reverse("campaigns:action", args=[done_campaign.pk, "pause"]),
        reverse("campaigns:failed-action", args=[done_campaign.pk, "retry"]),
        reverse("campaigns:rerender", args=[done_campaign.pk, 0]),
        reverse("campaigns:delete", args=[done_campaign.pk]),
    ):
        assert client.post(url, {"frame_id": 1}).status_code == 404, url
    listing = client.get(reverse("campaigns:list"))
    assert listing.status_code == 200 and done_campaign.name not in listing.content.decode()
    assert str(done_campaign.pk) not in [
        str(c["id"]) for c in client.get(reverse("campaigns:list-live")).json()["campaigns"]
    ]


def test_viewer_reads_every_page_but_cannot_act(client, done_campaign, people):
    client.force_login(people["vera"])
    for url in _get_pages(done_campaign, 0):
        response = client.get(url)
        assert response.status_code == 200, url
        _body(response)
    page = client.get(reverse("campaigns:detail", args=[done_campaign.pk])).content.decode()
    assert "Pause" not in page and "Delete this campaign" not in page
    assert client.get(reverse("campaigns:list")).status_code == 200
    assert client.get(reverse("campaigns:edit", args=[done_campaign.pk])).status_code == 403
    for url in (
        reverse("campaigns:action", args=[done_campaign.pk, "pause"]),
        reverse("campaigns:failed-action", args=[done_campaign.pk, "retry"]),
        reverse("campaigns:rerender", args=[done_campaign.pk, 0]),
        reverse("campaigns:delete", args=[done_campaign.pk]),
    ):
        assert client.post(url, {"frame_id": 1}).status_code == 403, url
    # The viewer plans in no team: no planner page, no upload.
    assert client.get(reverse("campaigns:create")).status_code == 403
    assets = client.get(reverse("campaigns:assets"))
    assert assets.status_code == 200 and "Upload a mesh" not in assets.content.decode()
    assert client.post(reverse("campaigns:assets"), {}).status_code == 403
    done_campaign.refresh_from_db()
    assert done_campaign.status == Campaign.Status.RUNNING


def test_planner_pauses_resumes_and_cancels(client, done_campaign, people, outbox):
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:detail", args=[done_campaign.pk])).content.decode()
    assert "Pause" in page and "Delete this campaign" not in page
    for action, status in (("pause", "paused"), ("resume", "running"), ("cancel", "cancelled")):
        response = client.post(reverse("campaigns:action", args=[done_campaign.pk, action]), {"confirm": "yes"})
        assert response.status_code == 302
        done_campaign.refresh_from_db()
        assert done_campaign.status == status
    # An impossible transition is a message, not an error page.
    response = client.post(reverse("campaigns:action", args=[done_campaign.pk, "resume"]), follow=True)
    assert response.status_code == 200 and "cannot go to running" in response.content.decode()
    assert client.post(reverse("campaigns:delete", args=[done_campaign.pk]), {"confirm_name": "x"}).status_code == 403
    assert client.get(reverse("campaigns:action", args=[done_campaign.pk, "pause"])).status_code == 405


def test_admin_deletes_only_with_the_name_and_not_while_running(client, done_campaign, people, media_root):
    client.force_login(people["ada"])
    url = reverse("campaigns:delete", args=[done_campaign.pk])
    client.post(url, {"confirm_name": "wrong"})
    assert Campaign.objects.filter(pk=done_campaign.pk).exists()
    response = client.post(url, {"confirm_name": done_campaign.name}, follow=True)
    assert "is running" in response.content.decode()
    client.post(reverse("campaigns:action", args=[done_campaign.pk, "cancel"]), {"confirm": "yes"})
    response = client.post(url, {"confirm_name": done_campaign.name})
    assert response.status_code == 302 and response["Location"] == reverse("campaigns:list")
    assert not Campaign.objects.filter(pk=done_campaign.pk).exists()


def test_campaign_list_shows_progress_spend_and_new_button(client, done_campaign, people):
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:list")).content.decode()
    assert done_campaign.name in page and "New campaign" in page and "Running" in page
    live = client.get(reverse("campaigns:list-live")).json()["campaigns"]
    row = next(c for c in live if c["id"] == done_campaign.pk)
    assert row["frames_done"] == 3 and 0 < row["progress_pct"] <= 100


def test_live_json_has_counters_and_series(client, done_campaign, people):
    client.force_login(people["vera"])
    live = client.get(reverse("campaigns:live", args=[done_campaign.pk]) + "?coverage=1").json()
    assert live["frames_done"] == 3 and live["frames_dead"] == 2 and live["failed_open"] == 2
    assert {q["class_name"] for q in live["quotas"]} == {"chair", "ottoman"}
    assert live["series"]["frames"][-1] == 3
    cov = live["coverage"]
    assert cov["frames_read"] == 3 and len(cov["values"]["eye_height_m"]) == 3
    low, high = TINY_BUDGET["room"]["width_m"]
    assert cov["ranges"]["focal_length_mm"] == [18.0, 50.0]
    assert all(0 <= a < 360 for angles in cov["azimuth_deg"].values() for a in angles)
    assert low < high


# --- planner -------------------------------------------------------------------------------------------------------


def _plan_data(team_obj, **overrides):
    from dashboard.forms import budget_form_data

    data = {
        "name": "Lamps and clocks",
        "team": team_obj.pk,
        "description": "",
        "seed": 5,
        "cost_budget": "50",
        "price_per_cpu_hour": "0.05",
        "setup_cost": "1",
        "manual_labelling_rate_per_hour": "12",
        "weight": 1,
        "max_attempts": 3,
        "q_chair_target": 6,
        "q_wall_clock_target": 2,
        "q_ottoman_target": 0,
        "q_armchair_target": "",
    }
    data.update(budget_form_data(TINY_BUDGET))
    data.update(overrides)
    return data


def test_planner_form_has_every_budget_field_with_unit_and_help(client, people, object_classes):
    from render.budget import FIELDS

    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:create")).content.decode()
    for f in FIELDS:
        name = f"b_{f.section}_{f.name}" + ("_min" if f.kind in ("range", "int_range") else "")
        assert f'name="{name}"' in page, name
        assert f.help.replace("'", "&#x27;") in page, f.help
    assert 'name="q_wall_clock_target"' in page and "Studio North" in page and "Elsewhere" not in page


def test_create_campaign_with_quotas_and_ranges(client, people, object_classes):
    client.force_login(people["pia"])
    data = _plan_data(people["team"], b_camera_focal_length_mm_min=24, b_camera_focal_length_mm_max=35)
    response = client.post(reverse("campaigns:create"), data)
    assert response.status_code == 302
    campaign = Campaign.objects.get(name="Lamps and clocks")
    assert campaign.team == people["team"] and campaign.status == "draft"
    assert campaign.budget["camera"]["focal_length_mm"] == [24.0, 35.0]
    assert dict(campaign.quotas.values_list("object_class__name", "target_accepted")) == {"chair": 6, "wall_clock": 2}


def test_create_campaign_with_a_per_class_min_contrast(client, people, object_classes):
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:create")).content.decode()
    assert 'name="q_chair_contrast"' in page and "Min contrast" in page
    data = _plan_data(people["team"], q_chair_contrast="3.5", q_wall_clock_contrast="", b_thresholds_min_contrast=1.25)
    response = client.post(reverse("campaigns:create"), data)
    assert response.status_code == 302, response.context["form"].errors
    campaign = Campaign.objects.get(name="Lamps and clocks")
    # An empty per-class minimum takes the budget's acceptance default.
    assert dict(campaign.quotas.values_list("object_class__name", "min_contrast")) == {"chair": 3.5, "wall_clock": 1.25}
    assert campaign.budget["thresholds"]["min_contrast"] == 1.25
    edit = client.get(reverse("campaigns:edit", args=[campaign.pk]))
    assert edit.context["form"]["q_chair_contrast"].value() == 3.5


def test_a_service_error_on_a_quota_threshold_lands_on_its_column(client, people, object_classes):
    from campaigns.services import CampaignError
    from dashboard.forms import CampaignForm

    form = CampaignForm(_plan_data(people["team"]), user=people["pia"])
    assert form.is_valid(), form.errors
    form.add_service_error(
        CampaignError(
            "min contrast must be between 0 and 1000, got 2000",
            field="quota",
            class_name="chair",
            column="min_contrast",
        )
    )
    form.add_service_error(
        CampaignError(
            "min box size must be between 0 and 64 px, got 99",
            field="quota",
            class_name="wall_clock",
            column="min_box_px",
        )
    )
    # An error with no field is the whole form's, whatever its text looks like (no message parsing).
    form.add_service_error(CampaignError("quota 'chair': min box size must be between 0 and 64 px, got 99"))
    assert "q_chair_box" not in form.errors and form.non_field_errors()
    assert form.errors["q_chair_contrast"] == ["min contrast must be between 0 and 1000, got 2000"]
    assert "q_wall_clock_box" in form.errors and "q_chair_target" not in form.errors


def _checkbox(page: str, name: str) -> str:
    import re

    match = re.search(rf'<input[^>]*name="{name}"[^>]*>', page)
    assert match, name
    return match.group(0)


def test_budget_switches_are_checkboxes_and_unchecked_saves_false(client, people, object_classes):
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:create")).content.decode()
    for name in ("b_render_denoise", "b_camera_sensor_noise"):  # both default to on
        assert 'type="checkbox"' in _checkbox(page, name) and "checked" in _checkbox(page, name)
    # HTML semantics: an unchecked box is left out of the POST.
    data = _plan_data(people["team"], b_camera_sensor_noise="on")
    del data["b_render_denoise"]
    response = client.post(reverse("campaigns:create"), data)
    assert response.status_code == 302, response.context["form"].errors
    campaign = Campaign.objects.get(name="Lamps and clocks")
    assert campaign.budget["render"]["denoise"] is False and campaign.budget["camera"]["sensor_noise"] is True
    # The edit form shows what was saved ...
    page = client.get(reverse("campaigns:edit", args=[campaign.pk])).content.decode()
    assert "checked" not in _checkbox(page, "b_render_denoise") and "checked" in _checkbox(
        page, "b_camera_sensor_noise"
    )
    # ... and saving it the other way round stores that.
    data = _plan_data(people["team"], b_render_denoise="on")
    del data["team"], data["b_camera_sensor_noise"]
    assert client.post(reverse("campaigns:edit", args=[campaign.pk]), data).status_code == 302
    campaign.refresh_from_db()
    assert campaign.budget["render"]["denoise"] is True and campaign.budget["camera"]["sensor_noise"] is False
    # The live estimate reads the same fields (FormData leaves unchecked boxes out too).
    query = _plan_data(people["team"])
    del query["b_render_denoise"]
    assert client.get(reverse("campaigns:estimate"), query).json()["ok"]


def test_pages_of_a_campaign_saved_before_the_new_budget_fields(client, make_campaign, people):
    draft = make_campaign("from before")
    old = dict(draft.budget)
    old["render"] = {k: v for k, v in old["render"].items() if k != "denoise"}
    old["camera"] = {k: v for k, v in old["camera"].items() if k != "sensor_noise"}
    old["thresholds"] = {k: v for k, v in old["thresholds"].items() if k != "min_contrast"}
    Campaign.objects.filter(pk=draft.pk).update(budget=old)
    client.force_login(people["pia"])
    detail = client.get(reverse("campaigns:detail", args=[draft.pk]))
    assert detail.status_code == 200
    rows = {r["name"]: r["value"] for r in detail.context["budget_rows"]}
    assert rows["denoise"] == "on" and rows["min contrast"] == "2"  # the render core's defaults for missing fields
    edit = client.get(reverse("campaigns:edit", args=[draft.pk]))
    assert edit.status_code == 200 and "checked" in _checkbox(edit.content.decode(), "b_render_denoise")


def test_preview_button_estimates_without_saving(client, people, object_classes):
    client.force_login(people["pia"])
    response = client.post(reverse("campaigns:create"), {**_plan_data(people["team"]), "preview": "1"})
    assert response.status_code == 200 and not Campaign.objects.exists()
    page = response.content.decode()
    assert "Where this comes from" in page and "constant measured on this machine" in page


@pytest.mark.parametrize(
    "overrides, field, message",
    [
        (
            {"b_camera_focal_length_mm_min": 60, "b_camera_focal_length_mm_max": 30},
            "b_camera_focal_length_mm_min",
            "greater than max",
        ),
        ({"b_render_spp": 99999}, "b_render_spp", "less than or equal to 4096"),
        ({"b_render_width_px": 4000, "b_render_height_px": 3000}, "b_render_width_px", "campaign cap"),
        ({"q_chair_target": 0, "q_wall_clock_target": 0}, None, "at least one class"),
        ({"q_chair_target": -3}, "q_chair_target", "greater than or equal to 0"),
        ({"cost_budget": "0.5", "setup_cost": "10"}, "cost_budget", "less than the fixed costs"),
        ({"name": ""}, "name", "required"),
        ({"b_room_height_m_min": "abc"}, "b_room_height_m_min", "Enter a number"),
        (
            {
                "b_lighting_panel_count_min": 0,
                "b_lighting_panel_count_max": 0,
                "b_lighting_point_count_max": 0,
                "b_lighting_point_count_min": 0,
                "b_lighting_spot_count_max": 0,
                "b_lighting_dome_illuminance_lux_min": 0,
                "b_lighting_dome_illuminance_lux_max": 0,
                "b_lighting_sun_probability": 0,
            },
            None,
            "frames would be black",
        ),
        ({"team": 999999}, "team", "Select a valid choice"),
        ({"seed": "1e400"}, "seed", "whole number"),
        ({"q_chair_contrast": -1}, "q_chair_contrast", "greater than or equal to 0"),
        ({"q_chair_contrast": "lots"}, "q_chair_contrast", "Enter a number"),
        ({"q_chair_contrast": "nan"}, "q_chair_contrast", "Enter a number"),
        ({"q_wall_clock_contrast": "inf"}, "q_wall_clock_contrast", "Enter a number"),
        ({"q_chair_contrast": 5000}, "q_chair_contrast", "less than or equal to 1000"),
        ({"b_thresholds_min_contrast": -2}, "b_thresholds_min_contrast", "greater than or equal to 0"),
    ],
)
def test_invalid_plan_is_shown_inline_and_nothing_saved(client, people, object_classes, overrides, field, message):
    client.force_login(people["pia"])
    response = client.post(reverse("campaigns:create"), _plan_data(people["team"], **overrides))
    assert response.status_code == 400
    form = response.context["form"]
    errors = form.errors.get(field or "__all__", [])
    assert any(message in e for e in errors), form.errors
    assert not Campaign.objects.exists()


def test_planner_cannot_create_in_a_team_where_they_only_view(client, people, object_classes):
    from teams.models import Membership

    Membership.objects.create(team=people["other_team"], user=people["pia"], role="viewer")
    client.force_login(people["pia"])
    response = client.post(reverse("campaigns:create"), _plan_data(people["other_team"]))
    assert response.status_code == 400 and "team" in response.context["form"].errors
    assert not Campaign.objects.exists()


def test_estimate_json(client, people, object_classes):
    client.force_login(people["pia"])
    data = _plan_data(people["team"])
    response = client.get(reverse("campaigns:estimate"), data)
    body = response.json()
    assert response.status_code == 200 and body["ok"]
    est = body["estimate"]
    assert est["frames"] >= 1 and est["source"] == "constant" and float(est["total_cost"]) > 0
    assert float(est["manual_cost_per_instance"]) > 0
    bad = client.get(reverse("campaigns:estimate"), {**data, "b_render_spp": "lots"}).json()
    assert not bad["ok"] and "b_render_spp" in bad["errors"]


def test_estimate_uses_the_history_of_the_teams_campaigns(client, done_campaign, people):
    client.force_login(people["pia"])
    est = client.get(reverse("campaigns:estimate"), _plan_data(people["team"])).json()["estimate"]
    assert est["source"] == "history" and "measured on 3 frames of 1 campaign" in est["detail"]
    # 0.4 CPU s per frame at the same pixels × spp (the fixture's frames).
    assert est["frame_cpu_s"] == pytest.approx(0.4)


def test_edit_draft_and_cost_budget_of_started(client, make_campaign, people):
    draft = make_campaign("draft one")
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:edit", args=[draft.pk]))
    assert page.status_code == 200 and 'value="draft one"' in page.content.decode()
    data = _plan_data(people["team"], name="draft renamed", q_chair_target=9)
    data.pop("team")
    assert client.post(reverse("campaigns:edit", args=[draft.pk]), data).status_code == 302
    draft.refresh_from_db()
    assert draft.name == "draft renamed" and draft.quotas.get(object_class__name="chair").target_accepted == 9
    bad = client.post(reverse("campaigns:edit", args=[draft.pk]), {**data, "b_render_spp": 0})
    assert bad.status_code == 400
    draft.refresh_from_db()
    assert draft.spp == 4
    started = make_campaign("started", start=True)
    page = client.get(reverse("campaigns:edit", args=[started.pk])).content.decode()
    assert "only the cost budget can change" in page
    assert client.post(reverse("campaigns:edit", args=[started.pk]), {"cost_budget": "-1"}).status_code == 400
    assert client.post(reverse("campaigns:edit", args=[started.pk]), {"cost_budget": "77"}).status_code == 302
    started.refresh_from_db()
    assert str(started.cost_budget) == "77.00"


def test_start_a_draft(client, make_campaign, people, outbox):
    draft = make_campaign("to start")
    client.force_login(people["pia"])
    client.post(reverse("campaigns:action", args=[draft.pk, "start"]))
    draft.refresh_from_db()
    assert draft.status == "running"


# --- failed jobs -----------------------------------------------------------------------------------------------------


def test_failed_jobs_grouped_by_kind_with_traceback(client, done_campaign, people):
    client.force_login(people["vera"])
    page = client.get(reverse("campaigns:failed", args=[done_campaign.pk])).content.decode()
    assert "LayoutError: the objects do not fit in the room" in page and "more detail" not in page
    assert "RuntimeError: renderer ran out of memory" in page
    assert "<details><summary>Traceback</summary>" in page and "most recent call last" in page
    only = client.get(
        reverse("campaigns:failed", args=[done_campaign.pk]),
        {"kind": "LayoutError: the objects do not fit in the room"},
    )
    rows = [r["frame"].index for r in only.context["rows"]]
    assert rows == [10]


def test_retry_one_retry_kind_and_ignore(client, done_campaign, people, outbox):
    client.force_login(people["pia"])
    layout = Frame.objects.get(campaign=done_campaign, index=10)
    memory = Frame.objects.get(campaign=done_campaign, index=11)
    url = reverse("campaigns:failed-action", args=[done_campaign.pk, "retry"])
    client.post(url, {"frame_id": layout.pk})
    layout.refresh_from_db()
    assert layout.state == Frame.State.FAILED and layout.attempts == 0
    done_campaign.refresh_from_db()
    assert done_campaign.frames_dead == 1
    client.post(url, {"frame_id": layout.pk})  # twice: nothing more happens
    done_campaign.refresh_from_db()
    assert done_campaign.frames_dead == 1
    client.post(
        reverse("campaigns:failed-action", args=[done_campaign.pk, "ignore"]),
        {"kind": "RuntimeError: renderer ran out of memory"},
    )
    assert FrameEvent.objects.filter(frame=memory, to_state="ignored").exists()
    page = client.get(reverse("campaigns:failed", args=[done_campaign.pk]))
    assert [r["frame"].index for r in page.context["rows"]] == [10]  # retrying; the ignored one is hidden
    response = client.post(url, {"kind": "RuntimeError: renderer ran out of memory"}, follow=True)
    assert response.status_code == 200
    memory.refresh_from_db()
    assert memory.state == Frame.State.FAILED
    # Junk input: a message, no 500.
    assert client.post(url, {"frame_id": "abc"}).status_code == 302
    assert client.post(url, {}).status_code == 302


# --- frames ----------------------------------------------------------------------------------------------------------


def test_gallery_boxes_and_filters(client, done_campaign, people):
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]))
    page = response.content.decode()
    assert response.status_code == 200 and page.count('class="tile"') == 3
    assert 'viewBox="0 0 64 48"' in page and "<rect" in page and "<text" in page
    only = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"class": "ottoman"})
    with_ottoman = sorted(
        Frame.objects.filter(campaign=done_campaign, instances__object_class__name="ottoman")
        .distinct()
        .values_list("index", flat=True),
        reverse=True,
    )
    assert [t["frame"].index for t in only.context["tiles"]] == with_ottoman and with_ottoman
    assert all(
        b["matches"] == (b["object_class__name"] == "ottoman") for t in only.context["tiles"] for b in t["boxes"]
    )
    rejected = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"accepted": "rejected"})
    assert all(any(not b["accepted"] for b in t["boxes"]) for t in rejected.context["tiles"])
    for junk in (
        {"min_visible": "nan"},
        {"min_visible": "x"},
        {"page": "9999"},
        {"class": "<script>"},
        {"accepted": "maybe"},
    ):
        assert client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), junk).status_code == 200


def test_frame_page_images_labels_and_cached_views(client, done_campaign, people, media_root):
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:frame", args=[done_campaign.pk, 0]))
    page = response.content.decode()
    assert response.status_code == 200
    assert "Mask overlay" in page and "Depth" in page and "Scene parameters" in page and "Focal length" in page
    assert "Re-render" not in page  # viewer
    n_instances = Frame.objects.get(campaign=done_campaign, index=0).instances.count()
    assert page.count("<tr><td>") >= n_instances
    # Beside the visible fraction: each instance's contrast (the render core measured it), in the table and tooltip.
    measured = Frame.objects.get(campaign=done_campaign, index=0).instances.exclude(contrast=None)
    assert "<th" in page and ">Contrast</th>" in page and measured.exists()
    for instance in measured:
        assert f"<td>{instance.contrast:.2f}</td>" in page and f"contrast {instance.contrast:.2f}" in page
    folder = media_root / "campaigns" / str(done_campaign.pk) / "frames" / "0"
    for name in ("mask.png", "depth.png", "thumb.jpg"):
        body = _body(client.get(reverse("campaigns:frame-file", args=[done_campaign.pk, 0, name])))
        assert (
            body[:4] in (b"\x89PNG", b"\xff\xd8\xff\xe0", b"\xff\xd8\xff\xdb") and (folder / f"view-{name}").is_file()
        )
    assert client.get(reverse("campaigns:frame-file", args=[done_campaign.pk, 0, "depth.npy"])).status_code == 404
    assert client.get(reverse("campaigns:frame-file", args=[done_campaign.pk, 0, "..%2F..%2Fx"])).status_code == 404
    assert client.get(reverse("campaigns:frame", args=[done_campaign.pk, 999])).status_code == 404
    dead = client.get(reverse("campaigns:frame", args=[done_campaign.pk, 10]))
    assert dead.status_code == 200 and "No image yet" in dead.content.decode()


def test_rerender_queues_a_frame_with_the_same_coordinates(client, done_campaign, people, outbox):
    client.force_login(people["pia"])
    assert "Re-render" in client.get(reverse("campaigns:frame", args=[done_campaign.pk, 1])).content.decode()
    response = client.post(reverse("campaigns:rerender", args=[done_campaign.pk, 1]))
    assert response.status_code == 302
    source = Frame.objects.get(campaign=done_campaign, index=1)
    new = Frame.objects.filter(campaign=done_campaign).order_by("-index").first()
    assert new.index == 12 and new.state == Frame.State.QUEUED
    assert (new.layout_index, new.lighting_index, new.view_index) == (
        source.layout_index,
        source.lighting_index,
        source.view_index,
    )
    assert new.composition == source.composition
    # Paused: refused with a message.
    client.post(reverse("campaigns:action", args=[done_campaign.pk, "pause"]))
    response = client.post(reverse("campaigns:rerender", args=[done_campaign.pk, 1]), follow=True)
    assert "resume it to re-render" in response.content.decode()


# --- assets ----------------------------------------------------------------------------------------------------------

CUBE_OBJ = CUBE_OBJ_TEXT


def _upload(client, people, content: bytes, filename: str, **extra):
    from django.core.files.uploadedfile import SimpleUploadedFile

    data = {
        "name": extra.pop("name", "test box"),
        "team": people["team"].pk,
        "object_class": "ottoman",
        "unit": extra.pop("unit", "m"),
        "creation_cost": "5",
        "mesh": SimpleUploadedFile(filename, content),
    }
    data.update(extra)
    return client.post(reverse("campaigns:assets"), data)


def test_asset_library_lists_procedural_assets_with_appearances(client, done_campaign, people):
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:assets"))
    rows = {r["asset"].name: r for r in response.context["rows"]}
    assert rows["procedural chair"]["frames"] == 3 and rows["procedural wall_clock"]["frames"] >= 0
    assert "preview pending" in response.content.decode()


def test_upload_good_mesh(client, people, object_classes, media_root, monkeypatch):
    requested = []
    monkeypatch.setattr("assets.files.request_preview", lambda **kw: requested.append(kw))
    client.force_login(people["pia"])
    response = _upload(client, people, CUBE_OBJ.encode(), "box.obj")
    assert response.status_code == 302, response.context["form"].errors if response.context else ""
    asset = Asset.objects.get(name="test box")
    assert asset.kind == "mesh" and asset.team == people["team"] and requested == [{"asset_pk": asset.pk}]
    from assets.files import asset_info

    assert asset_info(asset.pk)["extents_m"] == [0.5, 0.5, 0.5]
    page = client.get(reverse("campaigns:assets")).content.decode()
    assert "0.50 × 0.50 × 0.50 m" in page and "12 faces" in page
    # Other teams do not see it.
    client.force_login(people["otto"])
    assert "test box" not in client.get(reverse("campaigns:assets")).content.decode()


@pytest.mark.parametrize(
    "content, filename, extra, message",
    [
        (b"\x89PNG\r\n\x1a\n" + b"\x00" * 200, "chair.obj", {}, "not a mesh file"),
        (b"", "empty.obj", {}, "empty"),
        (CUBE_OBJ.encode(), "box.obj", {"unit": "mm"}, "is outside 0.02–10"),
        (CUBE_OBJ.replace("v 0.5 0.5 0.5", "v nan 0.5 0.5").encode(), "box.obj", {}, "NaN"),
        (b"ply\nformat binary_little_endian 1.0\nelement vertex 99999\nend_header\n\x00\x01", "x.ply", {}, "nreadable"),
        (b"glTF" + struct.pack("<II", 2, 20) + b"\x00" * 8, "x.glb", {}, ""),
        (CUBE_OBJ.encode(), "box.obj", {"name": ""}, "required"),
        (CUBE_OBJ.encode(), "box.obj", {"unit": "furlong"}, "valid choice"),
    ],
)
def test_bad_uploads_are_refused_with_a_reason(
    client, people, object_classes, media_root, content, filename, extra, message
):
    client.force_login(people["pia"])
    response = _upload(client, people, content, filename, **extra)
    assert response.status_code == 400
    errors = " ".join(str(e) for v in response.context["form"].errors.values() for e in v)
    assert message in errors, errors
    assert not Asset.objects.filter(kind="mesh").exists()
    meshes = media_root / "assets" / "meshes"
    assert not meshes.exists() or not any(meshes.iterdir())


def test_upload_size_limit(client, people, object_classes, media_root, monkeypatch):
    monkeypatch.setattr("assets.files.MAX_UPLOAD_BYTES", 100)
    client.force_login(people["pia"])
    response = _upload(client, people, CUBE_OBJ.encode(), "box.obj")
    assert response.status_code == 400 and "the limit is" in str(response.context["form"].errors)


def test_asset_preview_file_and_sniffing():
    from assets.files import sniff_mesh_format

    assert sniff_mesh_format(CUBE_OBJ.encode(), size_bytes=len(CUBE_OBJ)) == "obj"
    assert sniff_mesh_format(b"ply\nformat ascii 1.0\n", size_bytes=20) == "ply"
    binary_stl = b"\x00" * 80 + struct.pack("<I", 1) + b"\x00" * 50
    assert sniff_mesh_format(binary_stl, size_bytes=len(binary_stl)) == "stl"
    assert sniff_mesh_format(b"solid x\n facet normal 0 0 1\n", size_bytes=30) == "stl"
    assert sniff_mesh_format(b"<html>hello</html>\n", size_bytes=19) is None
    assert sniff_mesh_format(io.BytesIO(b"\xff\xfe\x00").read(), size_bytes=3) is None


def test_asset_preview_permissions(client, people, object_classes, media_root):
    from assets.files import preview_path

    mine = Asset.objects.create(
        object_class=object_classes["chair"], name="private", kind="mesh", team=people["other_team"]
    )
    shared = Asset.objects.get(name="procedural chair")
    for asset in (mine, shared):
        preview_path(asset.pk).parent.mkdir(parents=True, exist_ok=True)
        preview_path(asset.pk).write_bytes(b"\x89PNG\r\n\x1a\nfake")
    client.force_login(people["vera"])
    assert client.get(reverse("campaigns:asset-preview", args=[shared.pk])).status_code == 200
    assert client.get(reverse("campaigns:asset-preview", args=[mine.pk])).status_code == 404
    client.force_login(people["otto"])
    assert client.get(reverse("campaigns:asset-preview", args=[mine.pk])).status_code == 200


def test_asset_preview_render(media_root, object_classes):
    """The worker-side preview: a 128×128 PNG of a procedural asset (rendered with the render core's Mitsuba)."""
    import cv2

    from assets.files import asset_info, render_preview_for

    asset = Asset.objects.get(name="procedural ottoman")
    path = render_preview_for(asset)
    image = cv2.imread(str(path))
    assert image.shape == (128, 128, 3) and image.std() > 5
    assert len(asset_info(asset.pk)["extents_m"]) == 3


def test_plotly_is_served_from_the_installed_package(client, people):
    import plotly

    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:plotly", args=[plotly.__version__]))
    assert response.status_code == 200 and b"plotly" in response.content[:2000].lower()
    assert "immutable" in response["Cache-Control"]
    assert client.get(reverse("campaigns:plotly", args=["0.0.1"])).status_code == 404


def test_every_form_posts_with_csrf(client, done_campaign, people):
    from django.test import Client

    strict = Client(enforce_csrf_checks=True)
    strict.force_login(people["pia"])
    assert strict.post(reverse("campaigns:action", args=[done_campaign.pk, "pause"])).status_code == 403
    client.force_login(people["ada"])
    for url in (
        reverse("campaigns:detail", args=[done_campaign.pk]),
        reverse("campaigns:failed", args=[done_campaign.pk]),
        reverse("campaigns:frame", args=[done_campaign.pk, 0]),
        reverse("campaigns:create"),
        reverse("campaigns:assets"),
    ):
        page = client.get(url).content.decode()
        assert page.count('method="post"') == page.count("csrfmiddlewaretoken"), url
