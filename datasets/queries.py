"""Database reads of an export: aggregated in the database, streamed where per row.

Every read takes the frames done before the export started (``finished_at ≤ finished_before``), so frames
finishing meanwhile cannot make the reads disagree.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, NamedTuple

import numpy as np
from django.db.models import Q

from campaigns.models import Campaign, ClassQuota, Frame, Instance
from datasets.errors import ExportError

FRAME_CHUNK = 2000
INSTANCE_CHUNK = 10000


def find_campaign(*, key: str | int) -> Any:
    """A campaign by id or exact name; :class:`ExportError` if there is none."""
    text = str(key).strip()
    found = Campaign.objects.filter(pk=int(text)).first() if text.isdigit() else None
    if found is None:
        named = list(Campaign.objects.filter(name=text)[:2])
        if len(named) > 1:
            raise ExportError(f"several campaigns are called {text!r}; give the campaign id")
        found = named[0] if named else None
    if found is None:
        raise ExportError(f"no campaign with id or name {text!r}")
    return found


@dataclass(frozen=True)
class Category:
    category_id: int  # COCO id, 1-based
    yolo_index: int  # 0-based
    object_class_id: int
    name: str
    label: str


def campaign_categories(*, campaign: Any) -> list[Category]:
    """The campaign's quota classes, sorted by name: COCO ids 1…K, YOLO indices 0…K−1."""
    rows = (
        ClassQuota.objects.filter(campaign=campaign)
        .order_by("object_class__name")
        .values_list("object_class_id", "object_class__name", "object_class__label")
    )
    return [
        Category(category_id=i + 1, yolo_index=i, object_class_id=oc_id, name=name, label=label or name)
        for i, (oc_id, name, label) in enumerate(rows)
    ]


def done_frames(campaign: Any, finished_before: datetime) -> Any:
    """The campaign's frames in the export: done before ``finished_before`` and not left out by a user by then (a
    frame left out while the export runs is in it, as it was at the snapshot)."""
    return Frame.objects.filter(campaign=campaign, state=Frame.State.DONE, finished_at__lte=finished_before).filter(
        Q(excluded_at__isnull=True) | Q(excluded_at__gt=finished_before)
    )


def excluded_frames(campaign: Any, finished_before: datetime) -> list[dict[str, Any]]:
    """The done frames a user left out of exports, with their reasons, in index order (for the manifest)."""
    rows = (
        Frame.objects.filter(
            campaign=campaign,
            state=Frame.State.DONE,
            finished_at__lte=finished_before,
            excluded_at__lte=finished_before,
        )
        .order_by("index")
        .values_list("index", "excluded_reason")
    )
    return [{"frame_index": int(index), "reason": reason} for index, reason in rows]


def exported_instances(campaign: Any, finished_before: datetime, accepted_only: bool) -> Any:
    """The instances in the export: visible (a mask and a box) on a done frame; accepted ones only if asked."""
    query = Instance.objects.filter(
        Q(frame__excluded_at__isnull=True) | Q(frame__excluded_at__gt=finished_before),
        campaign=campaign,
        frame__state=Frame.State.DONE,
        frame__finished_at__lte=finished_before,
        mask_area_px__gt=0,
        bbox_xywh_px__isnull=False,
    )
    return query.filter(accepted=True) if accepted_only else query


def layout_counts(
    *, campaign: Any, categories: Sequence[Category], accepted_only: bool, finished_before: datetime
) -> tuple[list[int], np.ndarray]:
    """Per layout: exported instances per category and the frame count (last column). Aggregated in SQL."""
    from django.db.models import Count

    column = {c.object_class_id: i for i, c in enumerate(categories)}
    frames_per_layout = dict(
        done_frames(campaign, finished_before)
        .values_list("layout_index")
        .annotate(n=Count("pk"))
        .order_by("layout_index")
    )
    layouts = sorted(frames_per_layout)
    row_of = {layout: i for i, layout in enumerate(layouts)}
    counts = np.zeros((len(layouts), len(categories) + 1), dtype=np.int64)
    for layout, row in row_of.items():
        counts[row, -1] = frames_per_layout[layout]
    rows = (
        exported_instances(campaign, finished_before, accepted_only)
        .values_list("frame__layout_index", "object_class_id")
        .annotate(n=Count("pk"))
        .order_by("frame__layout_index", "object_class_id")
    )
    for layout, class_id, n in rows:
        if layout in row_of and class_id in column:
            counts[row_of[layout], column[class_id]] += n
    return layouts, counts


class FrameRow(NamedTuple):
    """One exported frame as :func:`frame_rows` reads it."""

    index: int  # type: ignore[assignment]  # shadows tuple.index on purpose: rows are read by field name
    layout_index: int
    lighting_index: int
    view_index: int
    seed: int
    output_dir: str
    composition: Any
    cpu_s: float | None
    wall_s: float | None
    worker_host: str
    finished_at: datetime | None


class InstanceRow(NamedTuple):
    """One exported instance as :func:`instance_rows` reads it (``frame_index`` first: the merge key)."""

    frame_index: int
    pk: int
    instance_id: int
    object_class_id: int
    asset_id: str
    bbox: list[float]
    amodal_bbox: list[float] | None
    visible_fraction: float
    contrast: float | None
    occlusion_fraction: float
    truncation_fraction: float
    mask_area_px: int
    segmentation_rle: dict[str, Any] | None
    accepted: bool
    reject_reasons: list[str] | None


def frame_rows(campaign: Any, finished_before: datetime) -> Iterator[FrameRow]:
    """The exported frames in index order, streamed."""
    return map(
        FrameRow._make,
        done_frames(campaign, finished_before)
        .order_by("index")
        .values_list(
            "index",
            "layout_index",
            "lighting_index",
            "view_index",
            "seed",
            "output_dir",
            "composition",
            "cpu_s",
            "wall_s",
            "worker_host",
            "finished_at",
        )
        .iterator(chunk_size=FRAME_CHUNK),
    )


def instance_rows(campaign: Any, finished_before: datetime, accepted_only: bool) -> Iterator[InstanceRow]:
    """The exported instances in (frame index, instance id) order, streamed."""
    return map(
        InstanceRow._make,
        exported_instances(campaign, finished_before, accepted_only)
        .order_by("frame__index", "instance_id")
        .values_list(
            "frame__index",
            "pk",
            "instance_id",
            "object_class_id",
            "asset_id",
            "bbox_xywh_px",
            "amodal_bbox_xywh_px",
            "visible_fraction",
            "contrast",
            "occlusion_fraction",
            "truncation_fraction",
            "mask_area_px",
            "segmentation_rle",
            "accepted",
            "reject_reasons",
        )
        .iterator(chunk_size=INSTANCE_CHUNK),
    )


class InstancesByFrame:
    """Instance rows sorted by frame index, consumed frame by frame alongside the frame stream.

    The merge join of the two streams: :meth:`for_frame` yields the rows of one frame and skips rows of
    frames before it. The first row is read on construction (that runs the query).
    """

    def __init__(self, rows: Iterator[InstanceRow]) -> None:
        self._rows = rows
        self._pending = next(rows, None)

    def for_frame(self, index: int) -> Iterator[InstanceRow]:
        """The rows of frame ``index``; the frames passed in must come in increasing index order."""
        while self._pending is not None and self._pending.frame_index <= index:
            row, self._pending = self._pending, next(self._rows, None)
            if row.frame_index < index:
                continue
            yield row
