"""Budget under concurrency: 2 workers × concurrency 2 against a cost budget that runs out mid-campaign.

The claim re-checks the budget under the campaign's row lock (spent + running frames' estimates + this one's
estimate ≤ budget), so the only overrun is the difference between estimate and actual CPU of the frames in
flight when the money ran out: at most one frame per worker slot.
"""

from __future__ import annotations

from decimal import Decimal

import pytest
from django.db.models import Max

from campaigns import selectors
from campaigns.models import Campaign, Frame, FrameEvent
from tests.reliability.conftest import assert_counters_exact, settled, wait_for

pytestmark = [pytest.mark.worker, pytest.mark.django_db(transaction=True)]

SLOTS = 2 * 2  # workers × concurrency


def _max_running_at_once(campaign) -> int:
    """Frames running at the same time, replayed from the append-only event log."""
    running, peak = 0, 0
    for from_state, to_state in (
        FrameEvent.objects.filter(campaign=campaign, frame__isnull=False)
        .order_by("created_at", "id")
        .values_list("from_state", "to_state")
    ):
        if to_state == "running" and from_state != "running":
            running += 1
        elif from_state == "running" and to_state != "running":
            running -= 1
        peak = max(peak, running)
    return peak


def test_spend_never_passes_the_budget_by_more_than_one_frame_per_slot(fault_worker, make_campaign, media_root):
    workers = [fault_worker(concurrency=2), fault_worker(concurrency=2)]
    # 3600 per CPU-hour: a frame costs its CPU seconds in money, about 0.3–2 each on a fast machine and up to about 4
    # on a slow one (a frame here took 3 CPU s or more); fixed cost: setup 2.00. 26 buys several frames on either.
    campaign = make_campaign(
        quotas={"chair": 5000, "ottoman": 5000}, price="3600", cost_budget="26", setup_cost="2", start=True
    )
    wait_for(
        lambda: Campaign.objects.get(pk=campaign.pk).status != "running",
        timeout_s=180,
        what="the budget to stop the campaign",
        workers=workers,
    )
    wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=workers)
    campaign.refresh_from_db()
    assert campaign.status == "paused" and campaign.pause_reason == "budget", campaign.pause_detail
    done = Frame.objects.filter(campaign=campaign, state="done")
    assert done.count() >= 4  # the budget bought several frames, rendered in parallel
    worst_frame = done.aggregate(m=Max("compute_cost"))["m"]
    spent = selectors.total_spent(campaign=campaign)
    assert spent <= campaign.cost_budget + SLOTS * worst_frame, (spent, worst_frame)
    # Not a vacuous cap: the campaign stopped because the next frame would not fit.
    assert spent + min(done.values_list("compute_cost", flat=True)) > campaign.cost_budget - SLOTS * worst_frame
    assert 2 <= _max_running_at_once(campaign) <= SLOTS
    assert_counters_exact(campaign, media_root=media_root)
    assert Decimal(campaign.compute_cost_spent) == sum(done.values_list("compute_cost", flat=True))
