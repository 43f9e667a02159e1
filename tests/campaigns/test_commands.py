"""manage.py campaign / seed_demo."""

from __future__ import annotations

from io import StringIO

import pytest
from django.core.management import CommandError, call_command

from assets.models import Asset, ObjectClass
from campaigns.models import Campaign, ClassQuota

pytestmark = pytest.mark.django_db(transaction=True)


def run(*args) -> str:
    out = StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def test_seed_demo_is_idempotent():
    run("seed_demo")
    counts = (ObjectClass.objects.count(), Asset.objects.count(), Campaign.objects.count(), ClassQuota.objects.count())
    assert counts[0] == 12 and counts[2] == 1
    assert "already exists" in run("seed_demo")
    assert (
        ObjectClass.objects.count(),
        Asset.objects.count(),
        Campaign.objects.count(),
        ClassQuota.objects.count(),
    ) == counts
    campaign = Campaign.objects.get()
    targets = dict(campaign.quotas.values_list("object_class__name", "target_accepted"))
    assert max(targets.values()) >= 10 * min(targets.values())  # skewed: one class 10× another


def test_campaign_command_create_validates_and_status_shows_progress(user, classes, outbox):
    with pytest.raises(CommandError, match="room.width_m: min 6.0 m is greater than max 4.0 m"):
        run(
            "campaign",
            "create",
            "bad",
            "--owner",
            user.username,
            "--quota",
            "chair=5",
            "--cost-budget",
            "10",
            "--price-per-cpu-hour",
            "0.05",
            "--budget-json",
            '{"room": {"width_m": [6, 4]}}',
        )
    with pytest.raises(CommandError, match="target must be between 0"):
        run(
            "campaign",
            "create",
            "bad",
            "--owner",
            user.username,
            "--quota",
            "chair=-5",
            "--cost-budget",
            "10",
            "--price-per-cpu-hour",
            "0.05",
        )
    assert not Campaign.objects.exists()
    out = run(
        "campaign",
        "create",
        "cli",
        "--owner",
        user.username,
        "--quota",
        "chair=5",
        "--quota",
        "ottoman=2:0.5:8:3.5",
        "--width",
        "64",
        "--height",
        "48",
        "--spp",
        "4",
        "--cost-budget",
        "50",
        "--price-per-cpu-hour",
        "0.05",
        "--manual-rate-per-hour",
        "12",
    )
    assert "created campaign" in out
    campaign = Campaign.objects.get(name="cli")
    ottoman = campaign.quotas.get(object_class__name="ottoman")
    assert (ottoman.target_accepted, ottoman.min_visible_fraction, ottoman.min_box_px, ottoman.min_contrast) == (
        2,
        0.5,
        8.0,
        3.5,
    )
    assert campaign.quotas.get(object_class__name="chair").min_contrast == 2.0  # the budget's default
    assert "running" in run("campaign", "start", "cli")
    ClassQuota.objects.filter(campaign=campaign, object_class__name="chair").update(accepted_count=3)
    status = run("campaign", "status", str(campaign.pk))
    assert "chair" in status and "[##################............]     3 / 5" in status
    assert "Spend:" in status and "ETA" in status and "Su, Deng & Fei-Fei 2012" in status
    assert "paused" in run("campaign", "pause", "cli")
    with pytest.raises(CommandError, match="is paused; cannot go to paused"):
        run("campaign", "pause", "cli")
    assert "running" in run("campaign", "resume", "cli")
    assert "cancelled" in run("campaign", "cancel", "cli")
    with pytest.raises(CommandError, match="no campaign"):
        run("campaign", "status", "nope")
