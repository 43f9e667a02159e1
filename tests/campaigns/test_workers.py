"""Real render worker processes (manage.py render_worker) against the test database and broker."""

from __future__ import annotations

import time

import pytest
from django.db.models import Sum

from campaigns import services
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance

pytestmark = [pytest.mark.worker, pytest.mark.django_db(transaction=True)]


def wait_for(predicate, *, timeout_s: float, what: str, workers=()):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.2)
    logs = "\n".join(f"--- {w.name}\n{w.log()}" for w in workers)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}\n{logs}")


def test_two_workers_render_one_campaign_with_exact_counters(render_worker_factory, make_campaign, media_root):
    workers = [render_worker_factory(concurrency=1, threads=1), render_worker_factory(concurrency=1, threads=1)]
    campaign = make_campaign(quotas={"chair": 10, "ottoman": 4, "wall_clock": 2}, start=True)
    wait_for(
        lambda: Campaign.objects.get(pk=campaign.pk).status == "completed",
        timeout_s=240,
        what="the campaign to complete",
        workers=workers,
    )
    # Frames still running when the last quota was met finish and are recorded too.
    wait_for(
        lambda: not Frame.objects.filter(campaign=campaign, state="running").exists(),
        timeout_s=60,
        what="running frames to finish",
        workers=workers,
    )
    campaign.refresh_from_db()
    done = Frame.objects.filter(campaign=campaign, state="done")
    assert campaign.frames_done == done.count() >= 2
    assert campaign.frames_dead == Frame.objects.filter(campaign=campaign, state="dead").count()
    hosts = set(done.values_list("worker_host", flat=True))
    assert hosts == {w.name for w in workers}, hosts  # both rendered
    instances = Instance.objects.filter(campaign=campaign)
    assert campaign.instances_accepted == instances.filter(accepted=True).count()
    assert campaign.instances_rejected == instances.filter(accepted=False).count()
    for quota in ClassQuota.objects.filter(campaign=campaign).select_related("object_class"):
        mine = instances.filter(object_class=quota.object_class)
        assert quota.accepted_count == mine.filter(accepted=True).count() >= quota.target_accepted
        assert quota.rejected_count == mine.filter(accepted=False).count()
        placed = sum(f.composition.get(quota.object_class.name, 0) for f in done)
        assert quota.placed_count == placed
        assert quota.met_at is not None
    # Exactly one result per frame, and spend equals the sum over frames.
    assert FrameEvent.objects.filter(campaign=campaign, to_state="done").count() == done.count()
    assert FrameEvent.objects.filter(campaign=campaign, to_state="quota_met").count() == 3
    assert campaign.cpu_s_spent == pytest.approx(
        Frame.objects.filter(campaign=campaign).aggregate(s=Sum("cpu_s"))["s"], rel=1e-9
    )
    assert campaign.compute_cost_spent == done.aggregate(s=Sum("compute_cost"))["s"]
    assert all(f.cpu_s > 0 for f in done)
    assert (media_root / f"campaigns/{campaign.pk}/frames/0/rgb.png").is_file()


def test_paused_campaign_stops_and_resumes_on_a_real_worker(render_worker_factory, make_campaign, media_root):
    worker = render_worker_factory(concurrency=1, threads=1)
    campaign = make_campaign(quotas={"chair": 30, "ottoman": 10}, start=True)
    wait_for(
        lambda: Frame.objects.filter(campaign=campaign, state="done").exists(),
        timeout_s=120,
        what="a first frame",
        workers=[worker],
    )
    services.pause_campaign(campaign_id=campaign.pk)
    wait_for(
        lambda: not Frame.objects.filter(campaign=campaign, state__in=("queued", "running")).exists(),
        timeout_s=60,
        what="work to stop",
        workers=[worker],
    )
    campaign.refresh_from_db()
    assert campaign.status == "paused", "quotas filled before the pause: make them larger"
    done_at_pause = Frame.objects.filter(campaign=campaign, state="done").count()
    time.sleep(3)
    assert Frame.objects.filter(campaign=campaign, state="done").count() == done_at_pause
    services.resume_campaign(campaign_id=campaign.pk)
    wait_for(
        lambda: Campaign.objects.get(pk=campaign.pk).status == "completed",
        timeout_s=240,
        what="the campaign to complete after resume",
        workers=[worker],
    )
    indices = sorted(Frame.objects.filter(campaign=campaign).values_list("index", flat=True))
    assert indices == list(range(len(indices)))
