"""One definition of throughput for the campaign headline and the worker table, and a frame-time estimate on one
basis that grows with resolution × spp (a smaller render never gets a longer estimate)."""

from __future__ import annotations

from datetime import timedelta

import pytest
from django.utils import timezone

from campaigns import costs, selectors
from campaigns.models import Campaign, Frame

pytestmark = pytest.mark.django_db(transaction=True)


def test_frames_per_hour_counts_over_the_window_or_the_time_since_the_start():
    assert costs.frames_per_hour(frames=10, window_s=600, running_for_s=None) == 60.0
    assert costs.frames_per_hour(frames=10, window_s=600, running_for_s=3600) == 60.0
    assert costs.frames_per_hour(frames=10, window_s=600, running_for_s=300) == 120.0  # started 5 min ago
    assert costs.frames_per_hour(frames=1, window_s=600, running_for_s=1) == 60.0  # at least a minute
    assert costs.frames_per_hour(frames=0, window_s=600, running_for_s=300) == 0.0


def _done_frames(campaign: Campaign, *, count: int, minutes_ago: float, host: str, cpu_s: float = 2.0) -> None:
    now = timezone.now()
    first = Frame.objects.filter(campaign=campaign).count()
    for i in range(count):
        Frame.objects.create(
            campaign=campaign,
            index=first + i,
            seed=i,
            layout_index=first + i,
            lighting_index=0,
            view_index=0,
            composition={"chair": 1},
            state="done",
            cpu_s=cpu_s,
            wall_s=cpu_s,
            worker_host=host,
            finished_at=now - timedelta(minutes=minutes_ago * (i + 1) / count),
        )


def test_headline_and_worker_table_agree_for_a_campaign_alone_on_a_worker(make_campaign, outbox, live_worker_rows):
    (worker,) = live_worker_rows(2)
    campaign = make_campaign(start=True)
    started = timezone.now() - timedelta(minutes=4)
    Campaign.objects.filter(pk=campaign.pk).update(started_at=started)
    type(worker).objects.filter(pk=worker.pk).update(started_at=started)
    _done_frames(campaign, count=20, minutes_ago=3.9, host=worker.hostname)
    campaign.refresh_from_db()
    headline = selectors.throughput(campaign=campaign)["frames_per_hour_10min"]
    (row,) = selectors.fleet()
    # 20 frames in the 4 minutes since the start: 300 per hour by both; the old headline (count × 6) said 120.
    assert headline == row["frames_per_hour"] == pytest.approx(300.0, rel=0.01)


def test_old_frames_fall_out_of_the_window(make_campaign, outbox, live_worker_rows):
    (worker,) = live_worker_rows(1)
    campaign = make_campaign(start=True)
    Campaign.objects.filter(pk=campaign.pk).update(started_at=timezone.now() - timedelta(hours=2))
    type(worker).objects.filter(pk=worker.pk).update(started_at=timezone.now() - timedelta(hours=2))
    _done_frames(campaign, count=30, minutes_ago=60, host=worker.hostname)  # one every 2 min over the last hour
    campaign.refresh_from_db()
    in_window = Frame.objects.filter(finished_at__gte=timezone.now() - timedelta(minutes=10)).count()
    assert selectors.throughput(campaign=campaign)["frames_per_hour_10min"] == pytest.approx(in_window * 6, abs=0.1)
    assert selectors.fleet()[0]["frames_per_hour"] == pytest.approx(in_window * 6, abs=0.1)


def _estimate(width: int, height: int, spp: int) -> float:
    return selectors.frame_time_estimate(
        width_px=width, height_px=height, spp=spp, history=Campaign.objects.all()
    ).cpu_s


def test_estimate_without_history_is_the_measured_constant(make_campaign):
    est = selectors.frame_time_estimate(width_px=320, height_px=240, spp=16, history=Campaign.objects.none())
    assert est.source == "constant"
    assert est.cpu_s == costs.prior_frame_cpu_s(width_px=320, height_px=240, spp=16)


def test_estimate_grows_with_samples_on_one_basis(make_campaign):
    small = make_campaign(budget={"render": {"width_px": 64, "height_px": 48, "spp": 4}})
    large = make_campaign(budget={"render": {"width_px": 320, "height_px": 240, "spp": 16}})
    _done_frames(small, count=5, minutes_ago=30, host="w", cpu_s=1.2)
    _done_frames(large, count=5, minutes_ago=30, host="w", cpu_s=9.0)
    settings = [(w, h, spp) for w, h in ((64, 48), (160, 120), (320, 240), (640, 480)) for spp in (1, 4, 8, 16, 64)]
    estimates = sorted((w * h * spp, _estimate(w, h, spp)) for w, h, spp in settings)
    for (samples_a, cpu_a), (samples_b, cpu_b) in zip(estimates, estimates[1:], strict=False):
        if samples_b > samples_a:
            assert cpu_b > cpu_a, (samples_a, samples_b)  # never a longer estimate for a smaller render
    est = selectors.frame_time_estimate(width_px=320, height_px=240, spp=16, history=Campaign.objects.all())
    assert est.source == "history" and "10 frames of 2 campaigns" in est.detail
    # The line passes between the two measured campaigns: each is within 25 % of its own measurement.
    assert _estimate(64, 48, 4) == pytest.approx(1.2, rel=0.25) and _estimate(320, 240, 16) == pytest.approx(
        9.0, rel=0.25
    )
