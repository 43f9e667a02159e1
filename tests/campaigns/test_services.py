"""Campaign lifecycle, scheduler and task semantics, in process (messages captured, render faked or tiny)."""

from __future__ import annotations

from decimal import Decimal

import pytest

from assets import services as asset_services
from campaigns import scheduler, selectors, services
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance
from tests.campaigns.conftest import TINY_BUDGET

pytestmark = pytest.mark.django_db(transaction=True)


# --- validation ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"budget": {"room": {"width_m": [5.0, 3.0]}}}, "room.width_m: min 5.0 m is greater than max 3.0 m"),
        ({"budget": {"lighting": {"panel_flux_lm": [-10.0, 100.0]}}}, "outside the allowed 0–50000 lm"),
        ({"budget": {"camera": {"f_number": [0.5, 2.0]}}}, "camera.f_number: 0.5 is outside the allowed 0.95–64"),
        ({"budget": {"render": {"width_px": 4000, "height_px": 3000}}}, "exceeds the campaign cap"),
        ({"budget": {"render": {"spp": 2048}}}, "render.spp 2048 exceeds the campaign cap of 1024"),
        ({"budget": {"rendr": {}}}, "unknown section 'rendr'"),
        ({"quotas": [services.QuotaInput("chair", -1)]}, "target must be between 0 and"),
        ({"quotas": [services.QuotaInput("unicorn", 3)]}, "quota 'unicorn': unknown object class"),
        ({"quotas": [services.QuotaInput("chair", 3, min_visible_fraction=1.5)]}, "min visible fraction"),
        (
            {"quotas": [services.QuotaInput("chair", 3, min_contrast=-0.5)]},
            "quota 'chair': min contrast must be between 0 and 1000, got -0.5",
        ),
        ({"quotas": [services.QuotaInput("chair", 3, min_contrast=float("nan"))]}, "min contrast: must be finite"),
        ({"quotas": [services.QuotaInput("chair", 3, min_contrast="high")]}, "min contrast: expected a number"),
        ({"quotas": [services.QuotaInput("chair", 0)]}, "every target is 0"),
        ({"quotas": []}, "at least one class quota"),
        ({"cost_budget": "-5"}, "cost_budget: must be at least 0"),
        ({"price_per_cpu_hour": "abc"}, "price_per_cpu_hour: expected a number"),
        ({"weight": 0}, "weight: must be a whole number from 1 to 1000"),
        ({"weight": 10**20}, "weight: must be a whole number from 1 to 1000"),  # once a database overflow
        ({"setup_cost": "500"}, "less than the fixed costs"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message_and_changes_nothing(user, classes, changes, message):
    kwargs = dict(
        owner=user,
        name="bad",
        quotas=[services.QuotaInput("chair", 3)],
        budget=TINY_BUDGET,
        cost_budget="100",
        price_per_cpu_hour="0.05",
    )
    kwargs.update(changes)
    if "budget" in changes:
        kwargs["budget"] = {**TINY_BUDGET, **changes["budget"]}
    before = (Campaign.objects.count(), ClassQuota.objects.count(), FrameEvent.objects.count())
    with pytest.raises(services.CampaignError) as info:
        services.create_campaign(**kwargs)
    assert message in str(info.value)
    assert (Campaign.objects.count(), ClassQuota.objects.count(), FrameEvent.objects.count()) == before


def test_budget_is_stored_normalized(make_campaign):
    campaign = make_campaign()
    assert campaign.budget["render"] == {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3, "denoise": True}
    assert campaign.budget["lighting"]["cct_k"] == [2700.0, 6500.0]  # default filled in by normalize_budget
    assert (campaign.width_px, campaign.height_px, campaign.spp) == (64, 48, 4)


# --- dispatch ----------------------------------------------------------------------------------------------


def test_start_dispatches_a_bounded_number_of_frames_and_records_events(make_campaign, outbox, live_worker_rows):
    campaign = make_campaign(quotas={"chair": 30, "ottoman": 10})
    with pytest.raises(services.CampaignError, match="is draft; cannot go to paused"):
        services.pause_campaign(campaign_id=campaign.pk)
    services.start_campaign(campaign_id=campaign.pk)
    # No live worker: one frame waits so that a worker that starts finds work.
    assert len(outbox) == 1 and Frame.objects.filter(campaign=campaign).count() == 1
    live_worker_rows(2, 1)  # 3 slots × 2 queued per slot
    scheduler.dispatch(campaign_id=campaign.pk)
    assert len(outbox) == 6 and Frame.objects.filter(campaign=campaign, state="queued").count() == 6
    scheduler.dispatch(campaign_id=campaign.pk)
    assert len(outbox) == 6  # already at its bound
    frame = Frame.objects.filter(campaign=campaign).first()
    assert frame.composition and sum(frame.composition.values()) >= 1
    assert list(FrameEvent.objects.filter(frame=frame).values_list("to_state", flat=True)) == ["queued"]
    assert FrameEvent.objects.filter(campaign=campaign, frame=None, to_state="running").count() == 1
    ids = [m["task_id"] for m in outbox]
    assert len(set(ids)) == 6 and all(t.startswith(f"ef-c{campaign.pk}-f") for t in ids)


def test_running_campaigns_share_the_fleet_by_weight(make_campaign, outbox, live_worker_rows, fake_render, media_root):
    live_worker_rows(3)  # 6 slots
    heavy = make_campaign(quotas={"chair": 200}, weight=2, start=True)
    assert len(outbox) == 6  # alone on the fleet, it may use all of it
    light = make_campaign(quotas={"chair": 200}, weight=1, start=True)
    assert Frame.objects.filter(campaign=light).count() == 2
    for message in [m for m in outbox.take() if Frame.objects.get(pk=m["frame_id"]).campaign_id == heavy.pk]:
        outbox.deliver(message)  # heavy refills only up to its share: 6 × 2/3 = 4
    in_flight = Frame.objects.filter(state__in=Frame.IN_FLIGHT_STATES)
    assert in_flight.filter(campaign=heavy).count() == 4
    assert in_flight.filter(campaign=light).count() == 2


# --- task semantics -----------------------------------------------------------------------------------------


def test_result_counts_once_under_redelivery(make_campaign, outbox, fake_render, media_root):
    campaign = make_campaign(quotas={"chair": 30, "ottoman": 10}, start=True)
    message = outbox.take()[0]
    first = outbox.deliver(message)
    assert first["recorded"] is True
    again = outbox.deliver(message)  # the broker delivers the same message again (acks late)
    assert again["skipped"] == "frame is done"
    frame = Frame.objects.get(pk=message["frame_id"])
    assert (
        services.record_result(frame_id=frame.pk, dispatch_no=message["dispatch_no"], labels=[], cpu_s=1.0, wall_s=1.0)
        is False
    )
    campaign.refresh_from_db()
    placed = sum(frame.composition.values())
    assert campaign.frames_done == 1 and campaign.instances_accepted == placed == Instance.objects.count()
    assert sum(ClassQuota.objects.filter(campaign=campaign).values_list("accepted_count", flat=True)) == placed
    assert campaign.cpu_s_spent == pytest.approx(frame.cpu_s)
    assert FrameEvent.objects.filter(frame=frame, to_state="done").count() == 1
    assert fake_render.calls == 1


def test_redelivery_while_running_renders_again_but_counts_once(make_campaign, outbox, fake_render, media_root):
    campaign = make_campaign(quotas={"chair": 30}, start=True)
    message = outbox.take()[0]
    # The first delivery claimed the frame, then its worker died before recording a result.
    assert services.claim_frame(frame_id=message["frame_id"], dispatch_no=1, worker_host="lost@a").ok
    assert outbox.deliver(message)["recorded"] is True
    assert outbox.deliver(message)["skipped"] == "frame is done"
    frame = Frame.objects.get(pk=message["frame_id"])
    assert frame.attempts == 2 and frame.state == "done"
    campaign.refresh_from_db()
    assert campaign.frames_done == 1


def test_transient_failures_retry_with_backoff_then_dead(make_campaign, outbox, fake_render, media_root):
    campaign = make_campaign(quotas={"chair": 30}, max_attempts=3, start=True)
    fake_render.fail = 10
    message = outbox.take()[0]
    frame_id = message["frame_id"]
    countdowns = []
    for attempt in (1, 2, 3):
        result = outbox.deliver(message)
        frame = Frame.objects.get(pk=frame_id)
        assert frame.attempts == attempt
        if attempt < 3:
            assert result["state"] == "failed"
            retry = [m for m in outbox.take() if m["frame_id"] == frame_id]
            assert len(retry) == 1 and retry[0]["dispatch_no"] == attempt + 1
            countdowns.append(retry[0]["countdown_s"])
            assert outbox.deliver(message)["skipped"].startswith("stale message")  # the old message is dead
            message = retry[0]
        else:
            assert result["state"] == "dead"
    assert countdowns[0] == pytest.approx(2.0, abs=0.5) and countdowns[1] == pytest.approx(4.0, abs=0.5)
    frame = Frame.objects.get(pk=frame_id)
    assert frame.state == "dead" and "ran out of memory" in frame.error and "RuntimeError" in frame.traceback
    campaign.refresh_from_db()
    assert campaign.frames_dead == 1 and campaign.frames_done == 0
    states = list(FrameEvent.objects.filter(frame_id=frame_id).values_list("to_state", flat=True))
    assert states == ["queued", "running", "failed", "queued", "running", "failed", "queued", "running", "dead"]
    # Dispatch moved on: a new frame took the dead one's place.
    assert Frame.objects.filter(campaign=campaign, state="queued").exclude(pk=frame_id).count() == 1


def test_budget_cap_pauses_before_a_frame_would_exceed_it(make_campaign, outbox, media_root, monkeypatch):
    from campaigns import costs

    # Every frame is expected to cost, and costs, 3600 CPU s × 1.00/CPU-hour = 1.00; the fixed cost is the setup cost
    # (the assets' creation costs are the library's, reported as a share, never charged to the budget).
    monkeypatch.setattr(selectors, "expected_frame_cpu_s", lambda *, campaign: 3600.0)
    campaign = make_campaign(
        quotas={"chair": 40, "ottoman": 40}, price="1.00", cost_budget="4.50", setup_cost="2", start=True
    )
    assert costs.money(selectors.fixed_cost(campaign=campaign)) == Decimal("2")
    while outbox:
        for m in outbox.take():
            assert services.claim_frame(frame_id=m["frame_id"], dispatch_no=m["dispatch_no"], worker_host="w").ok
            services.record_result(
                frame_id=m["frame_id"], dispatch_no=m["dispatch_no"], labels=[], cpu_s=3600.0, wall_s=1.0
            )
            scheduler.dispatch(campaign_id=campaign.pk)
    campaign.refresh_from_db()
    # 2.00 fixed + 2 frames × 1.00 = 4.00 ≤ 4.50; a third frame would take spend to 5.00.
    assert Frame.objects.filter(campaign=campaign).count() == 2
    assert campaign.status == "paused" and campaign.pause_reason == "budget"
    assert "would exceed the budget" in campaign.pause_detail
    assert selectors.total_spent(campaign=campaign) == Decimal("4") <= campaign.cost_budget
    with pytest.raises(services.CampaignError, match="raise the budget first"):
        services.resume_campaign(campaign_id=campaign.pk)
    services.set_cost_budget(campaign_id=campaign.pk, cost_budget="5.50")
    services.resume_campaign(campaign_id=campaign.pk)
    assert len(outbox) == 1


def test_claim_refuses_to_start_a_frame_over_budget(make_campaign, outbox, fake_render, media_root, monkeypatch):
    campaign = make_campaign(quotas={"chair": 40}, price="1.00", cost_budget="10", setup_cost="1", start=True)
    message = outbox.take()[0]
    # The estimate grew after dispatch (e.g. spend from other frames): the worker must not start it.
    Frame.objects.filter(pk=message["frame_id"]).update(expected_cpu_s=36000.0)
    assert outbox.deliver(message)["skipped"] == "budget"
    campaign.refresh_from_db()
    assert campaign.status == "paused" and campaign.pause_reason == "budget"
    assert Frame.objects.get(pk=message["frame_id"]).state == "revoked" and fake_render.calls == 0


def test_pause_resume_cancel(make_campaign, outbox, fake_render, media_root, live_worker_rows):
    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 40, "ottoman": 10}, start=True)
    first = outbox.take()
    assert len(first) == 2
    outbox.deliver(first[0])
    outbox.take()  # the refill after that result
    services.pause_campaign(campaign_id=campaign.pk)
    frames = Frame.objects.filter(campaign=campaign)
    assert frames.filter(state="revoked").count() == 2 and frames.filter(state="queued").count() == 0
    # The broker still holds the old message (the file-system broker cannot revoke): the task releases it.
    assert outbox.deliver(first[1])["skipped"] == "frame is revoked"
    assert outbox == []  # a paused campaign dispatches nothing
    services.resume_campaign(campaign_id=campaign.pk)
    resent = outbox.take()
    revoked_ids = set(frames.filter(dispatch_count=2).values_list("pk", flat=True))
    assert {m["frame_id"] for m in resent} == revoked_ids and all(m["dispatch_no"] == 2 for m in resent)
    assert outbox.deliver(first[1])["skipped"].startswith("stale message")
    assert outbox.deliver(resent[0])["recorded"] is True
    indices = sorted(frames.values_list("index", flat=True))
    assert indices == list(range(len(indices)))  # resume continued: no index skipped or repeated
    services.cancel_campaign(campaign_id=campaign.pk)
    campaign.refresh_from_db()
    assert campaign.status == "cancelled" and campaign.finished_at is not None
    assert not frames.filter(state__in=("queued", "failed")).exists()
    for message in outbox.take() + resent[1:]:
        assert "skipped" in outbox.deliver(message)
    with pytest.raises(services.CampaignError, match="is cancelled"):
        services.resume_campaign(campaign_id=campaign.pk)
    to_states = list(FrameEvent.objects.filter(campaign=campaign, frame=None).values_list("to_state", flat=True))
    assert to_states == ["draft", "running", "paused", "running", "cancelled"]


def test_task_releases_a_frame_when_the_campaign_stopped_meanwhile(make_campaign, outbox, fake_render, media_root):
    campaign = make_campaign(quotas={"chair": 40}, start=True)
    message = outbox.take()[0]
    # A pause that raced with dispatch: the campaign row says paused while this frame is still queued.
    Campaign.objects.filter(pk=campaign.pk).update(status="paused")
    assert outbox.deliver(message)["skipped"] == "campaign is paused"
    assert Frame.objects.get(pk=message["frame_id"]).state == "revoked" and fake_render.calls == 0


def test_quota_met_exactly_once_and_campaign_completes_once(
    make_campaign, outbox, fake_render, media_root, live_worker_rows
):
    live_worker_rows(2)
    campaign = make_campaign(quotas={"chair": 6, "ottoman": 1}, start=True)
    messages = outbox.take()
    assert len(messages) >= 2
    for m in messages:  # several frames in flight: the later ones finish after the quotas are met
        services.claim_frame(frame_id=m["frame_id"], dispatch_no=m["dispatch_no"], worker_host="w@test")
    for m in messages:
        frame = Frame.objects.get(pk=m["frame_id"])
        labels = [
            {
                "instance_id": i + 1,
                "class_name": "chair",
                "bbox": [0, 0, 9, 9],
                "mask_area_px": 81,
                "visible_fraction": 1.0,
            }
            for i in range(3)
        ] + [
            {
                "instance_id": 4,
                "class_name": "ottoman",
                "bbox": [0, 0, 9, 9],
                "mask_area_px": 81,
                "visible_fraction": 1.0,
            }
        ]
        services.record_result(frame_id=frame.pk, dispatch_no=m["dispatch_no"], labels=labels, cpu_s=0.5, wall_s=0.5)
    campaign.refresh_from_db()
    assert campaign.status == "completed"
    met = FrameEvent.objects.filter(campaign=campaign, to_state="quota_met")
    assert sorted(met.values_list("detail", flat=True)) == ["quota for chair met", "quota for ottoman met"]
    assert FrameEvent.objects.filter(campaign=campaign, to_state="completed").count() == 1
    chair = ClassQuota.objects.get(campaign=campaign, object_class__name="chair")
    assert chair.accepted_count == 3 * len(messages)  # surplus is counted, the quota is met once
    assert outbox.take() == []


def test_quota_min_contrast_defaults_to_the_budget_and_is_stored(user, classes):
    campaign = services.create_campaign(
        owner=user,
        name="contrast",
        budget={**TINY_BUDGET, "thresholds": {**TINY_BUDGET["thresholds"], "min_contrast": 1.5}},
        quotas=[services.QuotaInput("chair", 3, min_contrast=4.0), services.QuotaInput("ottoman", 2)],
        cost_budget="100",
        price_per_cpu_hour="0.05",
    )
    assert dict(campaign.quotas.values_list("object_class__name", "min_contrast")) == {"chair": 4.0, "ottoman": 1.5}


def test_result_judges_contrast_by_the_quota_and_stores_it(user, classes, outbox, media_root):
    from render.reasons import contrast_reason

    campaign = services.create_campaign(
        owner=user,
        name="contrast",
        budget=TINY_BUDGET,
        cost_budget="100",
        price_per_cpu_hour="0.05",
        quotas=[services.QuotaInput("chair", 30, min_contrast=3.0), services.QuotaInput("ottoman", 20)],
    )
    services.start_campaign(campaign_id=campaign.pk)
    message = outbox.take()[0]
    assert services.claim_frame(
        frame_id=message["frame_id"], dispatch_no=message["dispatch_no"], worker_host="w@test"
    ).ok
    seen = {"bbox": [0, 0, 9, 9], "mask_area_px": 81, "visible_fraction": 1.0}
    labels = [
        {"instance_id": 1, "class_name": "chair", **seen, "contrast": 2.5},  # below the chair's 3
        {"instance_id": 2, "class_name": "chair", **seen, "contrast": 3.0},  # at it
        {"instance_id": 3, "class_name": "chair", **seen},  # a label from before the measure: judged as before
        {"instance_id": 4, "class_name": "ottoman", **seen, "contrast": 1.9},  # below the budget default 2
        {"instance_id": 5, "class_name": "ottoman", **seen, "contrast": 2.5},
    ]
    assert services.record_result(
        frame_id=message["frame_id"], dispatch_no=message["dispatch_no"], labels=labels, cpu_s=0.5, wall_s=0.5
    )
    rows = {i.instance_id: i for i in Instance.objects.filter(frame_id=message["frame_id"])}
    assert {k: (r.contrast, r.accepted) for k, r in rows.items()} == {
        1: (2.5, False),
        2: (3.0, True),
        3: (None, True),
        4: (1.9, False),
        5: (2.5, True),
    }
    assert rows[1].reject_reasons == [contrast_reason(labels[0], min_contrast=3.0)] == ["contrast 2.50 < 3"]
    assert rows[4].reject_reasons == [contrast_reason(labels[3], min_contrast=2.0)]
    quotas = {
        q.object_class.name: q for q in ClassQuota.objects.filter(campaign=campaign).select_related("object_class")
    }
    assert (quotas["chair"].accepted_count, quotas["chair"].rejected_count) == (2, 1)
    assert (quotas["ottoman"].accepted_count, quotas["ottoman"].rejected_count) == (1, 1)
    campaign.refresh_from_db()
    assert (campaign.instances_accepted, campaign.instances_rejected) == (3, 2)


def test_real_tiny_render_through_the_task(make_campaign, outbox, media_root):
    """The task with the real render core at 64×48, 4 spp: files under MEDIA_ROOT, CPU seconds measured."""
    campaign = make_campaign(quotas={"chair": 30, "ottoman": 10}, start=True)
    message = outbox.take()[0]
    result = outbox.deliver(message)
    assert result["recorded"] is True, result
    frame = Frame.objects.get(pk=message["frame_id"])
    assert frame.output_dir == f"campaigns/{campaign.pk}/frames/{frame.index}"
    assert (media_root / frame.output_dir / "rgb.png").is_file()
    assert frame.cpu_s > 0 and frame.wall_s > 0 and frame.worker_host
    assert Instance.objects.filter(frame=frame).count() == sum(frame.composition.values())
    # The render core measures every visible instance's contrast; the row keeps it.
    visible = Instance.objects.filter(frame=frame, mask_area_px__gt=0)
    assert all(i.contrast is not None and i.contrast >= 0 for i in visible)
    assert outbox.deliver(message)["skipped"] == "frame is done"
    campaign.refresh_from_db()
    assert campaign.frames_done == 1
    assert campaign.instances_accepted == Instance.objects.filter(frame=frame, accepted=True).count()


def test_message_from_another_database_is_refused(make_campaign, outbox, fake_render, media_root):
    make_campaign(quotas={"chair": 30}, start=True)
    message = outbox.take()[0]
    foreign = {**message, "campaign_uid": "00000000-0000-0000-0000-000000000000"}
    assert outbox.deliver(foreign)["skipped"] == "message is for another database's campaign"
    assert Frame.objects.get(pk=message["frame_id"]).state == "queued" and fake_render.calls == 0


def test_lost_message_is_sent_again_and_the_old_one_is_stale(
    make_campaign, outbox, fake_render, media_root, live_worker_rows
):
    from datetime import timedelta

    from django.utils import timezone

    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 30}, start=True)
    lost = outbox.take()[0]
    Frame.objects.filter(pk=lost["frame_id"]).update(
        queued_at=timezone.now() - timedelta(seconds=scheduler.STALE_QUEUED_S + 1)
    )
    scheduler.dispatch(campaign_id=campaign.pk)
    again = [m for m in outbox.take() if m["frame_id"] == lost["frame_id"]]
    assert len(again) == 1 and again[0]["dispatch_no"] == 2
    assert outbox.deliver(lost)["skipped"].startswith("stale message")
    assert outbox.deliver(again[0])["recorded"] is True


def test_permanent_error_is_dead_at_once_and_dead_frames_in_a_row_pause(make_campaign, outbox, fake_render, media_root):
    from render.layout import LayoutError

    campaign = make_campaign(quotas={"chair": 30}, start=True)
    fake_render.fail = 100
    fake_render.error = LayoutError("cannot place 9 objects in a 3.0 × 3.0 m room")
    for _ in range(scheduler.DEAD_IN_A_ROW_PAUSE):
        message = outbox.take()[0]
        assert outbox.deliver(message)["state"] == "dead"
        assert Frame.objects.get(pk=message["frame_id"]).attempts == 1  # not retried: same inputs, same error
    campaign.refresh_from_db()
    assert campaign.status == "paused" and campaign.pause_reason == "failures"
    assert campaign.frames_dead == scheduler.DEAD_IN_A_ROW_PAUSE and outbox == []
    assert "cannot place 9 objects" in Frame.objects.filter(campaign=campaign).first().error


# --- uploaded meshes ----------------------------------------------------------------------------------------


def _write_box(media_root, name):
    import trimesh

    relative = f"assets/meshes/{name}.obj"
    path = media_root / relative
    path.parent.mkdir(parents=True, exist_ok=True)
    trimesh.creation.box(extents=(0.5, 0.4, 0.35)).export(path)
    return relative, path


@pytest.fixture
def uploads(user, classes, media_root, django_user_model):
    from teams.models import Membership, Team
    from teams.permissions import personal_team

    ours_team = personal_team(user=user)
    other_team = Team.objects.create(name="Elsewhere")
    otto = django_user_model.objects.create_user(username="otto", password="not-used-123")
    Membership.objects.create(team=other_team, user=otto, role="admin")
    ours_rel, ours_path = _write_box(media_root, "footstool")
    theirs_rel, _ = _write_box(media_root, "pouf")
    ours = asset_services.upload_asset(
        user=user,
        team=ours_team,
        object_class_name="ottoman",
        name="footstool",
        mesh_path=ours_rel,
        original_name="footstool.obj",
        unit="m",
    )
    theirs = asset_services.upload_asset(
        user=otto,
        team=other_team,
        object_class_name="ottoman",
        name="pouf",
        mesh_path=theirs_rel,
        original_name="pouf.obj",
        unit="m",
    )
    return {"ours": ours, "ours_path": ours_path, "theirs": theirs, "team": ours_team}


def test_campaign_attaches_its_team_uploads_but_never_another_teams(make_campaign, uploads):
    # Uploads are opt-in per campaign (tests/campaigns/test_asset_choice.py): a default campaign has neither.
    default = make_campaign(quotas={"chair": 3, "ottoman": 2})
    assert not default.assets.filter(kind="mesh").exists()
    campaign = services.create_campaign(
        owner=default.owner,
        name="chooses",
        quotas=[services.QuotaInput("ottoman", 2)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
        asset_ids=[uploads["ours"].pk],
    )
    attached = set(campaign.assets.values_list("pk", flat=True))
    assert uploads["ours"].pk in attached and uploads["theirs"].pk not in attached
    assert selectors.campaign_user_mesh_entries(campaign=campaign) == {
        "ottoman": [
            {
                "asset_id": f"user/{uploads['ours'].pk}",
                "mesh_path": str(uploads["ours_path"].resolve()),
                "unit": "m",
                "up_axis": "+z",
                "placement": "floor",
                "front": "",
                "look": "randomize",
            }
        ]
    }
    uploads["ours_path"].unlink()  # a missing file is left out rather than failing every frame
    assert selectors.campaign_user_mesh_entries(campaign=campaign) == {}


def test_explicit_asset_ids_of_another_team_are_refused(user, uploads):
    with pytest.raises(services.CampaignError, match="another team"):
        services.create_campaign(
            owner=user,
            name="theirs",
            quotas=[services.QuotaInput("ottoman", 2)],
            budget=TINY_BUDGET,
            cost_budget=Decimal("100"),
            price_per_cpu_hour=Decimal("0.05"),
            seed=3,
            asset_ids=[uploads["theirs"].pk],
        )
    assert not Campaign.objects.filter(name="theirs").exists()


def test_task_places_uploads_and_the_library_counts_their_frames(make_campaign, outbox, uploads, monkeypatch):
    """The task hands the campaign's uploads to the spec; labels carry ``user/<pk>`` (render faked from the spec)."""
    import campaigns.tasks
    from render.spec import make_spec
    from tests.campaigns.conftest import FakeResult

    seen = []

    def fake(*, budget, composition, seeds, out_dir, user_assets=None):
        seen.append(user_assets)
        spec = make_spec(budget, composition, seeds.seed, layout_seed=seeds.layout_seed, user_assets=user_assets)
        result = FakeResult(composition)
        result.labels = {
            "instances": [
                dict(row, class_name=o["class_name"], asset_id=o["asset_id"])
                for row, o in zip(
                    FakeResult(composition).labels["instances"],
                    sorted(spec["objects"], key=lambda o: o["class_name"]),
                    strict=True,
                )
            ]
        }
        return result

    monkeypatch.setattr(campaigns.tasks, "render_frame_files", fake)
    campaign = make_campaign(quotas={"chair": 30, "ottoman": 30})
    campaign.assets.add(uploads["ours"])  # uploads are chosen per campaign
    services.start_campaign(campaign_id=campaign.pk)
    asset_id = f"user/{uploads['ours'].pk}"
    for _ in range(10):  # each finished frame dispatches the next; stop once the upload was placed
        for message in outbox.take():
            outbox.deliver(message)
        if Instance.objects.filter(frame__campaign=campaign, asset_id=asset_id).exists():
            break
    assert seen and all([e["asset_id"] for e in s["ottoman"]] == [asset_id] for s in seen)
    assert Instance.objects.filter(frame__campaign=campaign, asset_id=asset_id).exists()
    library = {row["asset"].pk: row["frames"] for row in selectors.asset_library(user=campaign.owner)}
    assert library[uploads["ours"].pk] > 0 and uploads["theirs"].pk not in library
