"""COCO instances files (``annotations/<split>.json``): image and annotation entries, built from scratch parts.

Entries are written one by one to per-split scratch part files while frames stream by (:class:`CocoParts`);
:func:`write_coco` concatenates them into the final JSON, so no array is ever held in memory. Beyond COCO's
fields, an image carries its camera, exposure and scene coordinates and an annotation its visibility measures.

References
----------
COCO data format, "Object detection" and RLE segmentation (cocodataset.org/#format-data).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import IO, Any

import numpy as np

from datasets.errors import ExportError
from datasets.json_text import dumps
from datasets.queries import Category, FrameRow, InstanceRow
from datasets.sinks import Sink, copy_into

KINDS: tuple[str, ...] = ("images", "annotations")


class CocoParts:
    """Per split and kind (images, annotations), a scratch file of comma-separated JSON entries."""

    def __init__(self, scratch: Path, splits: Sequence[str]) -> None:
        self._handles: dict[tuple[str, str], IO[str]] = {}
        self._first: dict[tuple[str, str], bool] = {}
        for split in splits:
            for kind in KINDS:
                self._handles[split, kind] = open(scratch / part_name(split, kind), "w", encoding="utf-8")  # noqa: SIM115
                self._first[split, kind] = True

    def append(self, split: str, kind: str, text: str) -> None:
        handle = self._handles[split, kind]
        if not self._first[split, kind]:
            handle.write(",\n")
        self._first[split, kind] = False
        handle.write(text)

    def close(self) -> None:
        for handle in self._handles.values():
            handle.close()


def part_name(split: str, kind: str) -> str:
    return f"{split}-{kind}.part"


def image_entry(
    frame: FrameRow, *, split: str, stem: str, width_px: int, height_px: int, labels: dict[str, Any]
) -> dict[str, Any]:
    """A COCO image with the frame's camera (from its labels), exposure and scene coordinates."""
    index = frame.index
    return {
        "id": int(index),
        "file_name": f"{stem}.png",
        "width": width_px,
        "height": height_px,
        "mask_file_name": f"{stem}.png",
        "split": split,
        "frame_index": int(index),
        "layout_index": int(frame.layout_index),
        "lighting_index": int(frame.lighting_index),
        "view_index": int(frame.view_index),
        "seed": int(frame.seed),
        "camera": labels.get("camera"),
        "exposure": labels.get("exposure"),
        "renderer_variant": labels.get("variant"),
    }


def annotation_entry(row: InstanceRow, *, category: Category, rle: dict[str, Any], iscrowd: int = 0) -> dict[str, Any]:
    """A COCO annotation (the instance row's primary key is its id) with the visibility measures.

    ``iscrowd`` 1 marks an ignore region: a visible object the quota rules did not accept. COCO evaluation matches
    detections on such a region without counting them as false positives and never counts the region as missed
    (pycocotools ``COCOeval.evaluateImg``: crowd ground truth is ignored); most trainers skip it as a target.
    """
    return {
        "id": int(row.pk),
        "image_id": int(row.frame_index),
        "category_id": category.category_id,
        "bbox": [float(v) for v in row.bbox],
        "area": int(row.mask_area_px),
        "segmentation": rle,
        "iscrowd": int(iscrowd),
        "instance_id": int(row.instance_id),
        "asset_id": row.asset_id,
        "visible_fraction": row.visible_fraction,
        "contrast": row.contrast,
        "occlusion_fraction": row.occlusion_fraction,
        "truncation_fraction": row.truncation_fraction,
        "amodal_bbox": row.amodal_bbox,
        "accepted": bool(row.accepted),
        "reject_reasons": row.reject_reasons or [],
    }


def rle_from_mask(frame_dir: Path, instance_id: int, cache: dict[str, np.ndarray]) -> dict[str, Any]:
    """COCO RLE of one instance from the frame's 16-bit mask (the render core's own encoder).

    For rows recorded without a mask encoding; ``cache`` keeps the frame's mask image between its instances.
    """
    from render.labels import mask_to_rle  # deferred: keeps render.labels (pycocotools) out of the web process

    if "ids" not in cache:
        import cv2

        ids = cv2.imread(str(frame_dir / "instances.png"), cv2.IMREAD_UNCHANGED)
        if ids is None:
            raise ExportError(f"unreadable frame file {frame_dir / 'instances.png'}")
        cache["ids"] = ids
    return mask_to_rle(cache["ids"] == instance_id)


def write_coco(sink: Sink, *, split: str, campaign: Any, categories: Sequence[Category]) -> Iterator[None]:
    """``annotations/<split>.json`` from the split's part files; yields while it copies."""
    c = campaign
    info = {
        "description": f"Evenframe campaign {c.pk} {c.name!r}, {split} split",
        "version": f"campaign-{c.pk}",
        "year": c.created_at.year,
        "contributor": c.owner.get_username(),
        "date_created": c.created_at.isoformat(),
        "url": "",
    }
    coco_categories = [
        {"id": cat.category_id, "name": cat.name, "supercategory": "object", "label": cat.label} for cat in categories
    ]
    head = (
        '{"info":' + dumps(info) + ',"licenses":[],"categories":' + dumps(coco_categories) + ',"images":[\n'
    ).encode()
    scratch = sink.scratch
    yield from copy_into(
        sink,
        f"annotations/{split}.json",
        [
            head,
            scratch / part_name(split, "images"),
            b'\n],"annotations":[\n',
            scratch / part_name(split, "annotations"),
            b"\n]}\n",
        ],
    )
