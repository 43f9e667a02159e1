"""Changing a plan: copying a campaign into a new draft, and extending a started one with higher targets or new
classes (the planner then works on the new deficits; a completed campaign becomes runnable again)."""

from __future__ import annotations

from decimal import Decimal

import pytest
from django.core.management import CommandError, call_command

from campaigns import services
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent

pytestmark = pytest.mark.django_db(transaction=True)


def _targets(campaign: Campaign) -> dict[str, int]:
    return dict(ClassQuota.objects.filter(campaign=campaign).values_list("object_class__name", "target_accepted"))


def _run_until_idle(outbox, limit: int = 60) -> int:
    """Deliver task messages (each renders through the fake render core and dispatches the next) until none are
    left; the number delivered."""
    delivered = 0
    while outbox and delivered < limit:
        outbox.deliver(outbox.pop(0))
        delivered += 1
    assert not outbox, "the campaign kept sending frames"
    return delivered


# --- copy -----------------------------------------------------------------------------------------------------------


def test_copy_takes_every_setting_into_a_new_draft_and_leaves_the_source_alone(make_campaign, user, classes):
    source = make_campaign(
        quotas={"chair": 7, "wall_clock": 3}, cost_budget="55.5", setup_cost="4", weight=3, seed=99, start=True
    )
    ClassQuota.objects.filter(campaign=source, object_class__name="chair").update(min_contrast=3.5)
    Campaign.objects.filter(pk=source.pk).update(description="clocks for the hallway set")
    source.refresh_from_db()
    before = Campaign.objects.filter(pk=source.pk).values().get()

    copy = services.copy_campaign(campaign_id=source.pk, owner=user)

    assert copy.pk != source.pk and copy.status == "draft" and copy.name == f"{source.name} (copy)"
    for key in (
        "team_id",
        "budget",
        "cost_budget",
        "price_per_cpu_hour",
        "setup_cost",
        "manual_labelling_rate_per_hour",
        "weight",
        "seed",
        "max_attempts",
        "description",
    ):
        assert getattr(copy, key) == getattr(source, key), key
    rules = ("object_class__name", "target_accepted", "min_visible_fraction", "min_box_px", "min_contrast")
    assert list(ClassQuota.objects.filter(campaign=copy).order_by("object_class__name").values_list(*rules)) == list(
        ClassQuota.objects.filter(campaign=source).order_by("object_class__name").values_list(*rules)
    )
    assert set(copy.assets.values_list("pk", flat=True)) == set(source.assets.values_list("pk", flat=True))
    assert copy.frames_done == 0 and copy.compute_cost_spent == 0 and not Frame.objects.filter(campaign=copy).exists()
    assert FrameEvent.objects.filter(campaign=copy, detail__startswith=f"copy of campaign {source.pk}").exists()
    assert Campaign.objects.filter(pk=source.pk).values().get() == before  # the source is untouched

    second = services.copy_campaign(campaign_id=source.pk, owner=user, seed=5)
    assert second.name == f"{source.name} (copy 2)" and second.seed == 5


def test_a_bad_copy_writes_nothing(make_campaign, user, django_user_model):
    source = make_campaign(name="hall")
    count = Campaign.objects.count()
    with pytest.raises(services.CampaignError) as taken:
        services.copy_campaign(campaign_id=source.pk, owner=user, name="hall")
    assert taken.value.field == "name"
    with pytest.raises(services.CampaignError) as bad_seed:
        services.copy_campaign(campaign_id=source.pk, owner=user, seed=-1)
    assert bad_seed.value.field == "seed"
    with pytest.raises(services.CampaignError):
        services.copy_campaign(campaign_id=10**9, owner=user)
    stranger = django_user_model.objects.create_user(username="stranger", password="not-used-123")
    with pytest.raises(services.CampaignError) as not_planner:
        services.copy_campaign(campaign_id=source.pk, owner=stranger, team=source.team)
    assert not_planner.value.field == "team"
    assert Campaign.objects.count() == count


def test_copy_names_stay_within_the_name_length(make_campaign, user):
    source = make_campaign(name="x" * 200)
    copy = services.copy_campaign(campaign_id=source.pk, owner=user)
    assert len(copy.name) <= 200 and copy.name.endswith(" (copy)")


# --- extend ---------------------------------------------------------------------------------------------------------


def test_a_completed_campaign_extended_becomes_paused_then_renders_the_new_quotas(
    make_campaign, outbox, fake_render, media_root, live_worker_rows
):
    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 2, "ottoman": 1}, start=True)
    _run_until_idle(outbox)
    campaign.refresh_from_db()
    assert campaign.status == "completed" and campaign.finished_at is not None
    accepted_chairs = ClassQuota.objects.get(campaign=campaign, object_class__name="chair").accepted_count

    services.extend_campaign(campaign_id=campaign.pk, targets={"chair": accepted_chairs + 3, "wall_clock": 2})

    campaign.refresh_from_db()
    assert campaign.status == "paused" and campaign.finished_at is None
    assert campaign.pause_detail == services.EXTENDED_DETAIL
    quotas = {
        q.object_class.name: q for q in ClassQuota.objects.filter(campaign=campaign).select_related("object_class")
    }
    assert quotas["chair"].target_accepted == accepted_chairs + 3 and quotas["chair"].met_at is None
    assert quotas["ottoman"].met_at is not None  # untouched quotas stay met
    clock = quotas["wall_clock"]
    assert clock.target_accepted == 2 and clock.accepted_count == 0
    assert clock.min_visible_fraction == campaign.budget["thresholds"]["min_visible_fraction"]
    assert campaign.assets.filter(object_class__name="wall_clock").exists()  # its generator joins the campaign
    detail = FrameEvent.objects.filter(campaign=campaign, detail__startswith="extended: ").get().detail
    assert "wall_clock added with 2" in detail and f"chair {2} → {accepted_chairs + 3}" in detail
    assert outbox == []  # a paused campaign sends nothing

    services.resume_campaign(campaign_id=campaign.pk)
    _run_until_idle(outbox)
    campaign.refresh_from_db()
    assert campaign.status == "completed"
    wall_clock_frames = Frame.objects.filter(campaign=campaign, composition__has_key="wall_clock")
    assert wall_clock_frames.exists()  # the planner composed frames for the new class
    for q in ClassQuota.objects.filter(campaign=campaign):
        assert q.accepted_count >= q.target_accepted and q.met_at is not None


def test_extending_a_running_campaign_asks_for_a_dispatch_and_keeps_it_running(
    make_campaign, outbox, live_worker_rows, monkeypatch
):
    from campaigns import messaging

    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 2}, start=True)
    asked: list[int] = []
    monkeypatch.setattr(messaging, "request_dispatch_on_commit", lambda campaign_id: asked.append(campaign_id))
    services.extend_campaign(campaign_id=campaign.pk, targets={"chair": 9}, cost_budget="120")
    campaign.refresh_from_db()
    assert campaign.status == "running" and campaign.cost_budget == Decimal("120")
    assert _targets(campaign) == {"chair": 9}
    assert asked == [campaign.pk]


@pytest.mark.parametrize(
    "targets, field, words",
    [
        ({"chair": 1}, "quota", "only raises targets"),
        ({"chair": 3}, "quotas", "nothing to change"),
        ({}, "quotas", "nothing to change"),
        ({"chair": 4, "unicorn": 2}, "quota", "unknown object class"),
        ({"chair": "7"}, "quota", "whole number"),
        ({"chair": True}, "quota", "whole number"),
        ({"chair": -1}, "quota", "between 0 and"),
        ({"chair": services.MAX_TARGET_ACCEPTED + 1}, "quota", "between 0 and"),
        ({"bad\x00name": 1}, "quotas", "class name"),
        (["chair", 4], "quotas", "expected class names"),
    ],
)
def test_bad_extensions_change_nothing(make_campaign, outbox, live_worker_rows, targets, field, words):
    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 3, "ottoman": 2}, start=True)
    before = (_targets(campaign), Campaign.objects.filter(pk=campaign.pk).values().get(), FrameEvent.objects.count())
    with pytest.raises(services.CampaignError) as error:
        services.extend_campaign(campaign_id=campaign.pk, targets=targets)
    assert error.value.field == field and words in str(error.value)
    after = (_targets(campaign), Campaign.objects.filter(pk=campaign.pk).values().get(), FrameEvent.objects.count())
    assert after == before


def test_drafts_and_cancelled_campaigns_are_not_extended(make_campaign):
    draft = make_campaign()
    with pytest.raises(services.CampaignError, match="edit its plan"):
        services.extend_campaign(campaign_id=draft.pk, targets={"chair": 10})
    cancelled = make_campaign(start=True)
    services.cancel_campaign(campaign_id=cancelled.pk)
    with pytest.raises(services.CampaignError, match="copy it"):
        services.extend_campaign(campaign_id=cancelled.pk, targets={"chair": 10})
    assert _targets(draft)["chair"] == 3 and _targets(cancelled)["chair"] == 3


def test_a_bad_budget_in_an_extension_changes_no_target(make_campaign, outbox, live_worker_rows):
    live_worker_rows(1)
    campaign = make_campaign(quotas={"chair": 3}, start=True)
    with pytest.raises(services.CampaignError) as error:
        services.extend_campaign(campaign_id=campaign.pk, targets={"chair": 8}, cost_budget="-3")
    assert error.value.field == "cost_budget"
    assert _targets(campaign) == {"chair": 3}


# --- the command ----------------------------------------------------------------------------------------------------


def test_campaign_command_copies_and_extends(make_campaign, user, outbox, live_worker_rows, capsys):
    live_worker_rows(1)
    campaign = make_campaign(name="porch", quotas={"chair": 3}, start=True)
    call_command("campaign", "copy", str(campaign.pk), "--owner", user.username, "--seed", "77")
    copy = Campaign.objects.get(name="porch (copy)")
    assert copy.seed == 77 and copy.status == "draft" and _targets(copy) == {"chair": 3}
    call_command("campaign", "extend", "porch", "--quota", "chair=5", "--quota", "ottoman=2")
    assert _targets(campaign) == {"chair": 5, "ottoman": 2}
    out = capsys.readouterr().out
    assert "a copy of" in out and "targets chair 5, ottoman 2" in out
    with pytest.raises(CommandError, match="CLASS=NEW_TARGET"):
        call_command("campaign", "extend", "porch", "--quota", "chair")
    with pytest.raises(CommandError, match="only raises targets"):
        call_command("campaign", "extend", "porch", "--quota", "chair=1")
    with pytest.raises(CommandError, match="--quota CLASS=NEW_TARGET"):
        call_command("campaign", "extend", "porch")
    assert _targets(campaign) == {"chair": 5, "ottoman": 2}


def test_status_shows_amounts_with_the_currency(make_campaign, settings, capsys):
    settings.CURRENCY = "CHF"
    campaign = make_campaign(cost_budget="42.5")
    call_command("campaign", "status", str(campaign.pk))
    out = capsys.readouterr().out
    assert "of budget CHF 42.50" in out and "(setup CHF " in out
