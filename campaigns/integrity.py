"""Recount a campaign's counters from its frame and instance rows (reads only).

The counters on :class:`Campaign` and :class:`ClassQuota` are denormalised and changed only by ``F()``
increments; these functions recount them the slow way, so the fault tests and ``manage.py bench_soak`` can
prove that nothing was lost or counted twice. Aggregates run in the database, except ``placed_count``: the
frame composition is JSON, and summing JSON values is not portable SQL, so done frames' compositions are
streamed (fine for a check; the dashboard reads the counter).
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field
from decimal import Decimal
from pathlib import Path

from django.db.models import Count, Q, Sum

from campaigns.frame_files import frame_relative_dir
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance

State = Frame.State
# Files every done frame has in its folder (the render core's OUTPUT_FILES).
FRAME_FILES = ("rgb.png", "instances.png", "depth.npy", "labels.json", "scene.json", "timings.json")


@dataclass(frozen=True)
class Recount:
    """Stored counter values and the same values recounted from rows; ``mismatches`` lists the differences."""

    stored: dict[str, float | int | Decimal]
    counted: dict[str, float | int | Decimal]
    double_counted_frames: int = 0
    stray_instances: int = 0
    mismatches: dict[str, tuple[float | int | Decimal, float | int | Decimal]] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.mismatches and not self.double_counted_frames and not self.stray_instances


def recount(*, campaign: Campaign) -> Recount:
    campaign = Campaign.objects.get(pk=campaign.pk)
    frames = Frame.objects.filter(campaign=campaign)
    states = dict(frames.order_by().values_list("state").annotate(n=Count("pk")).values_list("state", "n"))
    spend = frames.aggregate(cpu_s=Sum("cpu_s"), wall_s=Sum("wall_s"), cost=Sum("compute_cost"))
    instances = Instance.objects.filter(campaign=campaign)
    per_class = {
        row["object_class_id"]: row
        for row in instances.order_by()
        .values("object_class_id")
        .annotate(n_accepted=Count("pk", filter=Q(accepted=True)), n_rejected=Count("pk", filter=Q(accepted=False)))
    }
    placed: Counter[str] = Counter()
    for composition in frames.filter(state=State.DONE).values_list("composition", flat=True).iterator(2000):
        placed.update({name: int(n) for name, n in (composition or {}).items()})

    stored: dict[str, float | int | Decimal] = {
        "frames_done": campaign.frames_done,
        "frames_dead": campaign.frames_dead,
        "instances_accepted": campaign.instances_accepted,
        "instances_rejected": campaign.instances_rejected,
        "cpu_s_spent": campaign.cpu_s_spent,
        "compute_cost_spent": Decimal(campaign.compute_cost_spent),
    }
    counted: dict[str, float | int | Decimal] = {
        "frames_done": states.get(State.DONE, 0),
        "frames_dead": states.get(State.DEAD, 0),
        "instances_accepted": instances.filter(accepted=True).count(),
        "instances_rejected": instances.filter(accepted=False).count(),
        "cpu_s_spent": float(spend["cpu_s"] or 0.0),
        "compute_cost_spent": Decimal(spend["cost"] or 0),
    }
    for quota in ClassQuota.objects.filter(campaign=campaign).select_related("object_class"):
        name = quota.object_class.name
        row = per_class.get(quota.object_class_id, {"n_accepted": 0, "n_rejected": 0})
        stored.update(
            {
                f"{name}.accepted": quota.accepted_count,
                f"{name}.rejected": quota.rejected_count,
                f"{name}.placed": quota.placed_count,
            }
        )
        counted.update(
            {
                f"{name}.accepted": row["n_accepted"],
                f"{name}.rejected": row["n_rejected"],
                f"{name}.placed": placed[name],
            }
        )
    mismatches = {}
    for key, value in stored.items():
        other = counted[key]
        # CPU seconds are float sums added in another order: equal to rounding, not bit for bit.
        same = (
            math.isclose(float(value), float(other), rel_tol=1e-9, abs_tol=1e-9)
            if key == "cpu_s_spent"
            else value == other
        )
        if not same:
            mismatches[key] = (value, other)
    # A frame recorded done twice, and instance rows on a frame that is not done, are both double counting.
    double = (
        FrameEvent.objects.filter(campaign=campaign, to_state=State.DONE)
        .order_by()
        .values("frame_id")
        .annotate(n=Count("pk"))
        .filter(n__gt=1)
        .count()
    )
    stray = instances.exclude(frame__state=State.DONE).count()
    return Recount(
        stored=stored, counted=counted, double_counted_frames=double, stray_instances=stray, mismatches=mismatches
    )


def missing_frame_files(*, campaign: Campaign, media_root: Path) -> list[int]:
    """Indices of done frames whose folder lacks one of :data:`FRAME_FILES` (output lost or half-written)."""
    missing = []
    for index, output_dir in (
        Frame.objects.filter(campaign=campaign, state=State.DONE).values_list("index", "output_dir").iterator(2000)
    ):
        folder = Path(media_root) / (output_dir or frame_relative_dir(campaign_id=campaign.pk, index=index))
        if not all((folder / name).is_file() and (folder / name).stat().st_size > 0 for name in FRAME_FILES):
            missing.append(index)
    return missing


def partial_folders(*, campaign: Campaign, media_root: Path) -> list[Path]:
    """Partial or moved-aside frame folders left behind (a crash between render and rename leaves one)."""
    frames_dir = Path(media_root) / f"campaigns/{campaign.pk}/frames"
    if not frames_dir.is_dir():
        return []
    return sorted(p for p in frames_dir.iterdir() if p.name.startswith("."))
