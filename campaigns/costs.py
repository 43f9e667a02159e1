"""Cost arithmetic: pure functions on numbers, no Django.

Money is :class:`decimal.Decimal` in the campaign's currency; CPU time is in
seconds (``cpu_s``) and converted to CPU-hours only where it is priced.

References
----------
Per-instance manual annotation times (all "from memory", not re-checked
against the papers):

- H. Su, J. Deng, L. Fei-Fei, "Crowdsourcing Annotations for Visual Object
  Detection", AAAI Workshop on Human Computation, 2012: about 25.5 s to draw
  one bounding box; about 42 s per box including the quality-control
  (verification) steps.
- D. P. Papadopoulos, J. R. R. Uijlings, F. Keller, V. Ferrari, "Extreme
  clicking for efficient object annotation", ICCV 2017: about 7 s per box with
  extreme clicking; they cite 34.5 s per box for the conventional way.
- T.-Y. Lin et al., "Microsoft COCO: Common Objects in Context", ECCV 2014:
  about 79 s per instance for a polygon segmentation mask (plus category
  labelling and instance spotting on top).
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Sequence
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal

MONEY_PLACES = Decimal("0.000001")

# Prior CPU cost of a frame before any is observed: a fixed part (scene build, label pass, JIT) plus a part
# proportional to samples (pixels × spp). Measured here on the demo budget (llvm_ad_rgb, 2 cores); the
# scheduler switches to the observed median as soon as frames finish.
PRIOR_FRAME_OVERHEAD_CPU_S = 1.5
PRIOR_CPU_S_PER_SAMPLE = 3.0e-7


@dataclass(frozen=True)
class AnnotationReference:
    key: str
    citation: str
    what: str
    seconds_per_instance: float
    note: str = "from memory"


MANUAL_ANNOTATION_REFERENCES: tuple[AnnotationReference, ...] = (
    AnnotationReference(
        "su2012_box",
        "Su, Deng & Fei-Fei 2012, Crowdsourcing annotations for visual object detection",
        "one bounding box, drawing only",
        25.5,
    ),
    AnnotationReference(
        "su2012_box_qc",
        "Su, Deng & Fei-Fei 2012, Crowdsourcing annotations for visual object detection",
        "one bounding box with quality control",
        42.0,
    ),
    AnnotationReference(
        "papadopoulos2017_extreme",
        "Papadopoulos et al., ICCV 2017, Extreme clicking for efficient object annotation",
        "one box by extreme clicking",
        7.0,
    ),
    AnnotationReference(
        "papadopoulos2017_conventional",
        "Papadopoulos et al., ICCV 2017 (citing the conventional way)",
        "one box, conventional drawing",
        34.5,
    ),
    AnnotationReference(
        "lin2014_polygon",
        "Lin et al. 2014, Microsoft COCO: Common Objects in Context",
        "one instance polygon mask",
        79.0,
    ),
)
REFERENCES_BY_KEY = {r.key: r for r in MANUAL_ANNOTATION_REFERENCES}
# What Evenframe's labels replace: a box and a pixel-exact mask per instance, so the fair comparison is
# the box with quality control plus the polygon mask.
DEFAULT_MANUAL_KEYS = ("su2012_box_qc", "lin2014_polygon")


def money(value: Decimal | float | int) -> Decimal:
    return Decimal(str(value)).quantize(MONEY_PLACES, rounding=ROUND_HALF_UP)


#: Throughput, one definition for the campaign headline and the worker table: done frames per hour over the
#: last 10 minutes, counted over the time since the start when the campaign (or worker) started within them.
THROUGHPUT_WINDOW_S = 600.0
#: The shortest span a pace is computed over (one frame a second after the start is not 3,600 frames per hour).
THROUGHPUT_MIN_SPAN_S = 60.0


def frames_per_hour(*, frames: int, window_s: float, running_for_s: float | None) -> float:
    """Done frames per hour: ``frames`` finished in the last ``window_s`` seconds over the time they had, the window
    or, when the campaign or worker started within it, the time since the start (at least a minute)."""
    span = window_s if running_for_s is None else min(window_s, max(running_for_s, 0.0))
    return round(frames * 3600.0 / max(THROUGHPUT_MIN_SPAN_S, span), 1)


def frame_compute_cost(*, cpu_s: float, price_per_cpu_hour: Decimal) -> Decimal:
    """Cost of one frame: CPU-hours × price per CPU-hour."""
    if cpu_s < 0:
        raise ValueError(f"cpu_s must be non-negative, got {cpu_s}")
    return money(Decimal(str(cpu_s)) / Decimal(3600) * Decimal(price_per_cpu_hour))


def fixed_cost(*, asset_creation_costs: Sequence[Decimal], setup_cost: Decimal) -> Decimal:
    """Creation cost of the assets used plus the campaign's setup cost."""
    return money(sum((Decimal(c) for c in asset_creation_costs), Decimal(0)) + Decimal(setup_cost))


def library_share(*, creation_cost: Decimal, frames_here: int, frames_total: int) -> Decimal:
    """A campaign's share of an asset's creation cost: the cost is the asset library's, spread evenly over every
    frame, in every campaign, that used the asset, so a campaign bears ``creation × frames_here / frames_total``
    and the shares of all campaigns add up to the creation cost. No frame yet: no share."""
    if frames_here < 0 or frames_total < frames_here:
        raise ValueError(f"frames here ({frames_here}) must be between 0 and the total ({frames_total})")
    if frames_total == 0:
        return money(0)
    return money(Decimal(creation_cost) * frames_here / frames_total)


def projected_library_share(*, creation_cost: Decimal, frames_so_far: int, frames_planned: int) -> Decimal:
    """The share a plan would bear if it rendered ``frames_planned`` frames with the asset after the
    ``frames_so_far`` other frames that used it (later campaigns lower it further)."""
    return library_share(
        creation_cost=creation_cost, frames_here=frames_planned, frames_total=frames_so_far + frames_planned
    )


def prior_frame_cpu_s(*, width_px: int, height_px: int, spp: int) -> float:
    """CPU seconds expected for a frame before any frame of the campaign has finished."""
    return PRIOR_FRAME_OVERHEAD_CPU_S + PRIOR_CPU_S_PER_SAMPLE * width_px * height_px * spp


def expected_frame_cpu_s(*, observed_cpu_s: Sequence[float], width_px: int, height_px: int, spp: int) -> float:
    """The estimate the budget check uses: the observed median once there is one, else the prior.

    The median, not the mean, so one frame slowed by a busy machine does not stall dispatch.
    """
    if observed_cpu_s:
        return float(statistics.median(observed_cpu_s))
    return prior_frame_cpu_s(width_px=width_px, height_px=height_px, spp=spp)


def expected_frame_cost(*, expected_cpu_s: float, price_per_cpu_hour: Decimal) -> Decimal:
    return frame_compute_cost(cpu_s=expected_cpu_s, price_per_cpu_hour=price_per_cpu_hour)


def can_afford_frame(*, spent: Decimal, committed: Decimal, next_frame_cost: Decimal, cost_budget: Decimal) -> bool:
    """Whether spend so far, plus frames already in flight, plus this one stays within the budget."""
    return Decimal(spent) + Decimal(committed) + Decimal(next_frame_cost) <= Decimal(cost_budget)


@dataclass(frozen=True)
class Amortized:
    total_cost: Decimal
    per_frame: Decimal | None
    per_accepted_instance: Decimal | None


def amortized_cost(*, fixed: Decimal, compute_spent: Decimal, frames_done: int, accepted_instances: int) -> Amortized:
    """Fixed costs spread over the frames and accepted instances produced so far."""
    total = money(Decimal(fixed) + Decimal(compute_spent))
    return Amortized(
        total_cost=total,
        per_frame=money(total / frames_done) if frames_done else None,
        per_accepted_instance=money(total / accepted_instances) if accepted_instances else None,
    )


@dataclass(frozen=True)
class Projection:
    frames_remaining: int | None
    cost_remaining: Decimal | None
    seconds_remaining: float | None


def project_remaining(
    *,
    placements_needed: float,
    instances_per_frame: float,
    cost_per_frame: Decimal | None,
    wall_s_per_frame: float | None,
    parallel_slots: int,
) -> Projection:
    """Frames, cost and time to fill the remaining quotas from observed rates and the live fleet.

    ``placements_needed`` comes from the planner (deficits divided by the
    observed yields); ``instances_per_frame`` is the planner's mean placements
    per frame so far; time assumes ``parallel_slots`` frames render at once.
    """
    if placements_needed <= 0:
        return Projection(0, Decimal(0), 0.0)
    if instances_per_frame <= 0:
        return Projection(None, None, None)
    frames = math.ceil(placements_needed / instances_per_frame)
    cost = money(Decimal(cost_per_frame) * frames) if cost_per_frame is not None else None
    seconds = None
    if wall_s_per_frame is not None and parallel_slots > 0:
        seconds = wall_s_per_frame * math.ceil(frames / parallel_slots)
    return Projection(frames, cost, seconds)


@dataclass(frozen=True)
class ManualComparison:
    seconds_per_instance: float
    cost_per_instance: Decimal
    cost_for_instances: Decimal
    references: tuple[AnnotationReference, ...]


def manual_labelling_cost(
    *, instances: int, rate_per_hour: Decimal, reference_keys: Sequence[str] = DEFAULT_MANUAL_KEYS
) -> ManualComparison:
    """What labelling ``instances`` by hand would cost at ``rate_per_hour``: published seconds per instance summed
    over the chosen annotation steps (default: a box with quality control plus a polygon mask)."""
    refs = tuple(REFERENCES_BY_KEY[k] for k in reference_keys)
    seconds = sum(r.seconds_per_instance for r in refs)
    per_instance = money(Decimal(str(seconds)) / Decimal(3600) * Decimal(rate_per_hour))
    return ManualComparison(seconds, per_instance, money(per_instance * instances), refs)


def break_even_frames(
    *, fixed: Decimal, compute_cost_per_frame: Decimal, accepted_per_frame: float, manual_cost_per_instance: Decimal
) -> int | None:
    """Frames after which rendering (fixed + n × per-frame cost) is cheaper than labelling the same instances.

    Solves ``fixed + n·c = n·a·m`` for n; ``None`` when a frame's labels are
    worth no more than its compute (rendering never breaks even).
    """
    margin = Decimal(str(accepted_per_frame)) * Decimal(manual_cost_per_instance) - Decimal(compute_cost_per_frame)
    if margin <= 0:
        return None
    return max(0, math.ceil(Decimal(fixed) / margin))
