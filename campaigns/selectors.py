"""Everything the dashboard, the commands and the scheduler read. Aggregates happen in the database."""

from __future__ import annotations

import statistics
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass
from decimal import Decimal

from django.db.models import Count, QuerySet, Sum

from campaigns import costs, planner
from campaigns.models import Campaign, ClassQuota, Frame

State = Frame.State
RECENT_FRAMES_FOR_ESTIMATES = 50


def campaign_list() -> QuerySet[Campaign]:
    return Campaign.objects.select_related("owner").order_by("-created_at")


def observed_cpu_s(*, campaign: Campaign, limit: int = RECENT_FRAMES_FOR_ESTIMATES) -> list[float]:
    """CPU seconds of the most recent done frames (a bounded list: the median is not portable SQL)."""
    return list(Frame.objects.filter(campaign=campaign, state=State.DONE, cpu_s__isnull=False)
                .order_by("-finished_at").values_list("cpu_s", flat=True)[:limit])


def expected_frame_cpu_s(*, campaign: Campaign) -> float:
    return costs.expected_frame_cpu_s(observed_cpu_s=observed_cpu_s(campaign=campaign), width_px=campaign.width_px,
                                      height_px=campaign.height_px, spp=campaign.spp)


def committed_cost(*, campaign: Campaign, states: Sequence[str] = tuple(Frame.IN_FLIGHT_STATES)) -> Decimal:
    """Expected cost of the frames started or waiting to start (their estimate at dispatch)."""
    total_cpu_s = Frame.objects.filter(campaign=campaign, state__in=states).aggregate(
        s=Sum("expected_cpu_s"))["s"] or 0.0
    return costs.frame_compute_cost(cpu_s=total_cpu_s, price_per_cpu_hour=campaign.price_per_cpu_hour)


def fixed_cost(*, campaign: Campaign) -> Decimal:
    creation = campaign.assets.aggregate(s=Sum("creation_cost"))["s"] or Decimal(0)
    return costs.fixed_cost(asset_creation_costs=[creation], setup_cost=campaign.setup_cost)


def total_spent(*, campaign: Campaign) -> Decimal:
    return costs.money(fixed_cost(campaign=campaign) + campaign.compute_cost_spent)


def can_afford_next_frame(*, campaign: Campaign) -> bool:
    next_cost = costs.expected_frame_cost(expected_cpu_s=expected_frame_cpu_s(campaign=campaign),
                                          price_per_cpu_hour=campaign.price_per_cpu_hour)
    return costs.can_afford_frame(spent=total_spent(campaign=campaign), committed=committed_cost(campaign=campaign),
                                  next_frame_cost=next_cost, cost_budget=campaign.cost_budget)


def in_flight_placed(*, campaign: Campaign) -> Counter[str]:
    """Instances per class in frames dispatched but not finished (bounded by the in-flight limit)."""
    placed: Counter[str] = Counter()
    for composition in Frame.objects.filter(campaign=campaign, state__in=Frame.IN_FLIGHT_STATES).values_list(
            "composition", flat=True):
        placed.update({k: int(v) for k, v in (composition or {}).items()})
    return placed


def class_progress(*, campaign: Campaign, include_in_flight: bool = True) -> list[planner.ClassProgress]:
    flight = in_flight_placed(campaign=campaign) if include_in_flight else Counter()
    return [
        planner.ClassProgress(name=name, target_accepted=target, accepted=accepted, placed=placed,
                              in_flight_placed=flight.get(name, 0))
        for name, target, accepted, placed in ClassQuota.objects.filter(campaign=campaign)
        .order_by("object_class__name")
        .values_list("object_class__name", "target_accepted", "accepted_count", "placed_count")
    ]


def frame_state_counts(*, campaign: Campaign) -> dict[str, int]:
    rows = Frame.objects.filter(campaign=campaign).values("state").annotate(n=Count("pk"))
    counts = {state: 0 for state in State.values}
    counts.update({row["state"]: row["n"] for row in rows})
    return counts


@dataclass(frozen=True)
class QuotaRow:
    class_name: str
    target: int
    accepted: int
    rejected: int
    placed: int
    yield_estimate: float
    met: bool


@dataclass(frozen=True)
class CampaignSummary:
    campaign: Campaign
    quotas: list[QuotaRow]
    frames: dict[str, int]
    fixed: Decimal
    compute_spent: Decimal
    total_spent: Decimal
    cpu_s_spent: float
    median_cpu_s: float | None
    median_wall_s: float | None
    amortized: costs.Amortized
    projection: costs.Projection
    manual: costs.ManualComparison
    break_even_frames: int | None
    live_slots: int


def campaign_summary(*, campaign: Campaign) -> CampaignSummary:
    from workers.models import live_workers

    campaign.refresh_from_db()
    quota_rows = [
        QuotaRow(
            class_name=q["object_class__name"], target=q["target_accepted"], accepted=q["accepted_count"],
            rejected=q["rejected_count"], placed=q["placed_count"],
            yield_estimate=planner.posterior_yield(accepted=q["accepted_count"], placed=q["placed_count"]),
            met=q["met_at"] is not None,
        )
        for q in ClassQuota.objects.filter(campaign=campaign).order_by("object_class__name").values(
            "object_class__name", "target_accepted", "accepted_count", "rejected_count", "placed_count", "met_at")
    ]
    done = Frame.objects.filter(campaign=campaign, state=State.DONE)
    recent = list(done.order_by("-finished_at").values_list("cpu_s", "wall_s")[:RECENT_FRAMES_FOR_ESTIMATES])
    median_cpu_s = statistics.median(r[0] for r in recent) if recent else None
    median_wall_s = statistics.median(r[1] for r in recent) if recent else None
    fixed = fixed_cost(campaign=campaign)
    compute = costs.money(campaign.compute_cost_spent)
    amortized = costs.amortized_cost(fixed=fixed, compute_spent=compute, frames_done=campaign.frames_done,
                                     accepted_instances=campaign.instances_accepted)
    live_slots = live_workers().aggregate(s=Sum("concurrency"))["s"] or 0
    progress = class_progress(campaign=campaign, include_in_flight=False)
    needed = sum(planner.placements_needed(progress).values())
    placed_total = sum(q.placed for q in quota_rows)
    per_frame = placed_total / campaign.frames_done if campaign.frames_done else 0.0
    expected_cpu = expected_frame_cpu_s(campaign=campaign)
    cost_per_frame = costs.expected_frame_cost(expected_cpu_s=expected_cpu, price_per_cpu_hour=campaign.price_per_cpu_hour)
    projection = costs.project_remaining(placements_needed=needed, instances_per_frame=per_frame,
                                         cost_per_frame=cost_per_frame, wall_s_per_frame=median_wall_s,
                                         parallel_slots=live_slots)
    total_target = sum(q.target for q in quota_rows)
    manual = costs.manual_labelling_cost(instances=total_target, rate_per_hour=campaign.manual_labelling_rate_per_hour)
    accepted_per_frame = campaign.instances_accepted / campaign.frames_done if campaign.frames_done else 0.0
    break_even = costs.break_even_frames(fixed=fixed, compute_cost_per_frame=cost_per_frame,
                                         accepted_per_frame=accepted_per_frame,
                                         manual_cost_per_instance=manual.cost_per_instance)
    return CampaignSummary(
        campaign=campaign, quotas=quota_rows, frames=frame_state_counts(campaign=campaign), fixed=fixed,
        compute_spent=compute, total_spent=costs.money(fixed + compute), cpu_s_spent=campaign.cpu_s_spent,
        median_cpu_s=median_cpu_s, median_wall_s=median_wall_s, amortized=amortized, projection=projection,
        manual=manual, break_even_frames=break_even, live_slots=live_slots,
    )


def frames_to_redispatch(*, campaign: Campaign) -> QuerySet[Frame]:
    """Failed frames (sent again at once, with their backoff as the message's countdown) and revoked ones."""
    return Frame.objects.filter(campaign=campaign, state__in=(State.FAILED, State.REVOKED)).order_by("index")
