"""Dispatch: keep a bounded number of render tasks in flight per running campaign.

The bound comes from the live workers (their heartbeat rows and concurrency):
``slots = Σ concurrency × QUEUE_DEPTH_PER_SLOT`` across the fleet, shared
between running campaigns in proportion to their weight (largest remainder,
at least one each). Dispatch runs when a campaign starts or resumes, after
every frame result (from the worker that recorded it) and on ``manage.py
campaign tick``; no beat process is needed.

Each message carries ``(frame_id, dispatch_no)``; together with the frame's
unique ``(campaign, index)`` this is the idempotency key: a worker only
claims a frame whose ``dispatch_count`` matches, so stale and duplicated
messages change nothing.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from decimal import Decimal

from django.conf import settings
from django.db import transaction
from django.db.models import Q
from django.utils import timezone

from campaigns import costs, messaging, planner, selectors, services
from campaigns.frame_files import frame_output_dir, remove_partial_folders
from campaigns.models import Campaign, Frame
from campaigns.sampling import max_objects_for_frame
from fleet.models import live_workers

log = logging.getLogger("evenframe.campaigns")

# Frames queued per worker slot: one rendering and one waiting, so a worker never idles between frames.
QUEUE_DEPTH_PER_SLOT = 2
# With no live worker, keep this many frames waiting per campaign so a worker that starts finds work.
SLOTS_WITHOUT_WORKERS = 1
# A frame queued this long while workers are live lost its message (broker restart, a consumer on another
# database, a killed worker's prefetched or countdown message): it is sent again under a new dispatch number,
# and the old message, should it arrive, is stale. EVENFRAME_STALE_QUEUED_S, default 900 s.
STALE_QUEUED_S = float(getattr(settings, "STALE_QUEUED_S", 900.0))
# When this many frames in a row end dead, something is systematically wrong (renderer, budget): pause.
DEAD_IN_A_ROW_PAUSE = 5

Status = Campaign.Status
State = Frame.State


# --- pure helpers ---------------------------------------------------------------------------------------


def fleet_slots(*, concurrencies: list[int]) -> int:
    """Frames the whole fleet should have in flight."""
    live = sum(max(0, c) for c in concurrencies)
    return live * QUEUE_DEPTH_PER_SLOT if live else 0


def share_slots(*, total_slots: int, weights: Mapping[int, int]) -> dict[int, int]:
    """Split ``total_slots`` between campaigns by weight (largest remainder); every campaign gets at least one."""
    if not weights:
        return {}
    if total_slots <= 0:
        return {key: SLOTS_WITHOUT_WORKERS for key in weights}
    weight_sum = sum(weights.values())
    exact = {key: total_slots * w / weight_sum for key, w in weights.items()}
    shares = {key: math.floor(v) for key, v in exact.items()}
    spare = total_slots - sum(shares.values())
    for key in sorted(exact, key=lambda k: (-(exact[k] - shares[k]), k))[:spare]:
        shares[key] += 1
    return {key: max(1, v) for key, v in shares.items()}


# --- sending ----------------------------------------------------------------------------------------------


def send_messages(*, messages: list[tuple[int, int, str, float]], campaign_uid: str) -> int:
    """Send after commit; a message the broker refuses is marked unsent and goes out with the next sweep.

    Redis may be down or restarting: the frame rows are committed already, so losing the message must not
    fail the caller (a worker that just recorded a result) — the frame just waits for the next sweep."""
    sent = 0
    for frame_id, dispatch_no, task_id, countdown in messages:
        try:
            messaging.send_frame_task(
                frame_id=frame_id,
                dispatch_no=dispatch_no,
                campaign_uid=campaign_uid,
                task_id=task_id,
                countdown_s=countdown,
            )
            sent += 1
        except Exception:  # noqa: BLE001 - any broker error: the sweep resends, so log and go on
            log.warning(
                "frame %s: message %s not sent; the next sweep sends it again", frame_id, task_id, exc_info=True
            )
            try:
                services.mark_message_unsent(frame_id=frame_id, dispatch_no=dispatch_no)
            except Exception:  # noqa: BLE001 - the stale-queued timeout still resends it
                log.warning("frame %s: could not mark its message unsent", frame_id, exc_info=True)
    return sent


# --- dispatch ---------------------------------------------------------------------------------------------


def campaign_slots_live() -> bool:
    return live_workers().exists()


def campaign_slots() -> dict[int, int]:
    weights = dict(Campaign.objects.filter(status=Status.RUNNING).values_list("pk", "weight"))
    total = fleet_slots(concurrencies=list(live_workers().values_list("concurrency", flat=True)))
    return share_slots(total_slots=total, weights=weights)


def plan_next(
    *, campaign: Campaign, progress: list[planner.ClassProgress], last: Frame | None
) -> tuple[tuple[int, int, int], dict[str, int]] | None:
    """Coordinates and composition of the next new frame, or None when nothing more is needed now."""
    variation = campaign.budget["variation"]
    needs = planner.placements_needed(progress)
    if sum(needs.values()) <= 0:
        return None
    # A dead frame's layout (e.g. the objects did not fit) is not tried again with another view.
    continue_layout = (
        last is not None and last.state != State.DEAD and planner.composition_still_useful(last.composition, needs)
    )
    previous = (last.layout_index, last.lighting_index, last.view_index) if last is not None else None
    coordinates = planner.next_coordinates(
        previous,
        lighting_per_layout=variation["lighting_per_layout"],
        views_per_lighting=variation["views_per_lighting"],
        layouts=variation["layouts"],
        continue_layout=continue_layout,
    )
    if last is not None and coordinates[0] == last.layout_index and continue_layout:
        return coordinates, dict(last.composition)  # same layout: same objects, another light or view
    index = (last.index + 1) if last is not None else 0
    seeds = planner.frame_seeds(
        campaign_seed=campaign.seed,
        index=index,
        layout_index=coordinates[0],
        lighting_index=coordinates[1],
        view_index=coordinates[2],
    )
    composition = planner.plan_composition(
        progress, max_objects=max_objects_for_frame(budget=campaign.budget, seeds=seeds)
    )
    return (coordinates, composition) if composition else None


def dispatch(*, campaign_id: int | None = None) -> int:
    """Top up every running campaign (or one) to its share of the fleet; returns messages sent."""
    ids = (
        [campaign_id]
        if campaign_id is not None
        else list(Campaign.objects.filter(status=Status.RUNNING).values_list("pk", flat=True))
    )
    sent = 0
    for cid in ids:
        sent += _dispatch_one(cid)
    return sent


@dataclass
class _Round:
    """One dispatch of one campaign, inside its transaction (campaign row locked)."""

    campaign: Campaign
    share: int
    expected_cpu_s: float
    frame_cost: Decimal
    spent: Decimal
    now: datetime
    messages: list[tuple[int, int, str, float]] = field(default_factory=list)
    in_flight: int = 0
    budget_blocked: bool = False

    def affordable(self) -> bool:
        return costs.can_afford_frame(
            spent=self.spent,
            committed=selectors.committed_cost(campaign=self.campaign),
            next_frame_cost=self.frame_cost,
            cost_budget=self.campaign.cost_budget,
        )

    def send(self, frame: Frame, countdown_s: float = 0.0) -> None:
        self.messages.append((frame.pk, frame.dispatch_count, frame.task_id, countdown_s))


def _dispatch_one(campaign_id: int) -> int:
    """Top up one campaign: pause it if its frames keep dying, resend what needs resending, then fill its share
    of the fleet with revoked frames and new ones, inside its budget. Messages go out after commit."""
    with transaction.atomic():
        try:
            campaign = services.lock_campaign(campaign_id)
        except services.CampaignError:
            return 0
        if campaign.status != Status.RUNNING or _pause_if_failing(campaign):
            return 0
        expected_cpu_s = selectors.expected_frame_cpu_s(campaign=campaign)
        step = _Round(
            campaign=campaign,
            share=campaign_slots().get(campaign.pk, SLOTS_WITHOUT_WORKERS),
            expected_cpu_s=expected_cpu_s,
            frame_cost=costs.expected_frame_cost(
                expected_cpu_s=expected_cpu_s, price_per_cpu_hour=campaign.price_per_cpu_hour
            ),
            spent=selectors.total_spent(campaign=campaign),
            now=timezone.now(),
        )
        _requeue_failed(step)
        _resend_unsent(step)
        if campaign_slots_live():
            _requeue_stale(step)
        step.in_flight = Frame.objects.filter(campaign=campaign, state__in=Frame.IN_FLIGHT_STATES).count()
        _requeue_revoked(step)
        _create_new_frames(step)
        if step.budget_blocked and step.in_flight == 0:
            services.set_status(
                campaign,
                Status.PAUSED,
                reason=Campaign.PauseReason.BUDGET,
                detail=f"spent {step.spent}; the next frame (≈ {step.frame_cost}) would exceed the budget "
                f"{campaign.cost_budget}",
                allowed_from=(Status.RUNNING,),
            )
        uid, messages = str(campaign.uid), step.messages
        transaction.on_commit(lambda: send_messages(messages=messages, campaign_uid=uid))
    return len(messages)


def _pause_if_failing(campaign: Campaign) -> bool:
    """Pause a campaign whose last DEAD_IN_A_ROW_PAUSE finished frames are all dead; True when it did."""
    recent = list(
        Frame.objects.filter(campaign=campaign, state__in=(State.DONE, State.DEAD))
        .order_by("-finished_at")
        .values_list("state", flat=True)[:DEAD_IN_A_ROW_PAUSE]
    )
    if len(recent) < DEAD_IN_A_ROW_PAUSE or any(s != State.DEAD for s in recent):
        return False
    services.set_status(
        campaign,
        Status.PAUSED,
        reason=Campaign.PauseReason.FAILURES,
        detail=f"the last {DEAD_IN_A_ROW_PAUSE} frames are dead; see their errors",
        allowed_from=(Status.RUNNING,),
    )
    messaging.revoke_on_commit(services.revoke_waiting_frames(campaign, detail="campaign paused (failures)"))
    return True


def _countdown_s(frame: Frame, now: datetime) -> float:
    return max(0.0, (frame.retry_at - now).total_seconds()) if frame.retry_at else 0.0


def _requeue_failed(step: _Round) -> None:
    """Failed frames go back on the queue at once; their backoff becomes the message countdown."""
    for frame in Frame.objects.filter(campaign=step.campaign, state=State.FAILED).order_by("index"):
        countdown = _countdown_s(frame, step.now)
        again = services.requeue_frame(frame=frame, composition=None, expected_cpu_s=frame.expected_cpu_s)
        if again:
            step.send(again, countdown)


def _resend_unsent(step: _Round) -> None:
    """A message the broker refused (send_messages cleared queued_at) never left: send it again as it is."""
    for frame in Frame.objects.filter(campaign=step.campaign, state=State.QUEUED, queued_at__isnull=True):
        if services.mark_message_resent(frame_id=frame.pk, dispatch_no=frame.dispatch_count):
            step.send(frame, _countdown_s(frame, step.now))


def _requeue_stale(step: _Round) -> None:
    """Waiting too long past its due time while workers are live: the message may be anywhere, so a new dispatch
    number."""
    stale_before = step.now - timedelta(seconds=STALE_QUEUED_S)
    stale = Q(queued_at__lt=stale_before) & (Q(retry_at__isnull=True) | Q(retry_at__lt=stale_before))
    for frame in Frame.objects.filter(stale, campaign=step.campaign, state=State.QUEUED).order_by("index"):
        again = services.requeue_frame(frame=frame, composition=None, expected_cpu_s=frame.expected_cpu_s)
        if again:
            step.send(again)


def _requeue_revoked(step: _Round) -> None:
    """Revoked frames (paused, then resumed) keep their index and seed; the planner picks a new composition."""
    campaign = step.campaign
    for frame in Frame.objects.filter(campaign=campaign, state=State.REVOKED).order_by("index"):
        if step.in_flight >= step.share:
            break
        if not step.affordable():
            step.budget_blocked = True
            break
        progress = selectors.class_progress(campaign=campaign)
        seeds = planner.frame_seeds(
            campaign_seed=campaign.seed,
            index=frame.index,
            layout_index=frame.layout_index,
            lighting_index=frame.lighting_index,
            view_index=frame.view_index,
        )
        composition = planner.plan_composition(
            progress, max_objects=max_objects_for_frame(budget=campaign.budget, seeds=seeds)
        )
        if not composition:
            break
        again = services.requeue_frame(frame=frame, composition=composition, expected_cpu_s=step.expected_cpu_s)
        if again:
            step.send(again)
            step.in_flight += 1


def _create_new_frames(step: _Round) -> None:
    """New frames from the planner until the campaign's share is in flight, nothing more is needed, or the budget
    stops it."""
    campaign = step.campaign
    while step.in_flight < step.share and not step.budget_blocked:
        last = Frame.objects.filter(campaign=campaign).order_by("-index").first()
        planned = plan_next(campaign=campaign, progress=selectors.class_progress(campaign=campaign), last=last)
        if planned is None:
            break
        if not step.affordable():
            step.budget_blocked = True
            break
        coordinates, composition = planned
        frame = services.create_frame(
            campaign=campaign,
            index=(last.index + 1) if last else 0,
            coordinates=coordinates,
            composition=composition,
            expected_cpu_s=step.expected_cpu_s,
        )
        step.send(frame)
        step.in_flight += 1


# --- recovery ---------------------------------------------------------------------------------------------


def sweep() -> dict[str, int]:
    """Recovery pass: take back frames running on dead workers, then top up (which resends lost messages).

    Run by every live worker's heartbeat thread every EVENFRAME_WORKER_SWEEP_S seconds and by ``manage.py
    campaign tick``; safe to run anywhere at once (campaign lock, conditional updates). This, not broker
    redelivery, is what recovers a frame after kill -9 on both transports (see services.release_lost_frames).
    """
    live = list(live_workers().values_list("hostname", flat=True))
    started_before = timezone.now() - timedelta(seconds=settings.WORKER_LIVE_WINDOW_S)
    campaign_ids = set(
        Frame.objects.filter(state=State.RUNNING, started_at__lt=started_before)
        .exclude(worker_host__in=live)
        .values_list("campaign_id", flat=True)
    )
    counts = {"requeued": 0, "dead": 0, "revoked": 0, "sent": 0}
    count_key: dict[str, str] = {State.QUEUED: "requeued", State.DEAD: "dead", State.REVOKED: "revoked"}
    for campaign_id in sorted(campaign_ids):
        with transaction.atomic():
            released = services.release_lost_frames(
                campaign_id=campaign_id, live_hosts=live, started_before=started_before
            )
            uid = str(Campaign.objects.values_list("uid", flat=True).get(pk=campaign_id))
            messages = [(r.frame_id, r.dispatch_no, r.task_id, 0.0) for r in released if r.to_state == State.QUEUED]
            transaction.on_commit(functools.partial(send_messages, messages=messages, campaign_uid=uid))
        for r in released:
            counts[count_key[r.to_state]] += 1
            if r.to_state != State.QUEUED:
                _remove_partial_folders(campaign_id=campaign_id, index=r.index)
        if released:
            log.warning(
                "sweep: campaign %s: %s",
                campaign_id,
                ", ".join(f"frame id {r.frame_id} → {r.to_state}" for r in released),
            )
    counts["sent"] = dispatch()
    counts["notifications"] = services.resend_due_notifications()
    return counts


def _remove_partial_folders(*, campaign_id: int, index: int) -> None:
    """A frame that settled without a result may have a killed attempt's partial folder; the sweep runs where
    the media is (in a worker), so it removes it. Best effort: files are not the frame's state."""
    try:
        remove_partial_folders(frame_output_dir(campaign_id=campaign_id, index=index)[0])
    except OSError:
        log.warning("could not remove partial folders of campaign %s frame %s", campaign_id, index, exc_info=True)
