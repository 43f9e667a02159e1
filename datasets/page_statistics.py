"""The numbers of a campaign's statistics page: its done frames streamed into :class:`DatasetStatistics`.

The instances are the ones an accepted-only export holds (accepted, with a mask and a box, on a done frame), read
in frame order through ``campaigns.selectors.statistics_frames`` and capped at whole frames after
:data:`MAX_INSTANCES` instances so a huge campaign still answers in seconds. No database column holds the camera
distance, so it comes from the scene files of a deterministic sample of at most :data:`DISTANCE_SAMPLE_FRAMES`
frames (every k-th frame read, in index order, the first included).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from django.conf import settings
from django.utils import timezone

from campaigns import selectors
from campaigns.frame_files import frame_relative_dir
from datasets.statistics import FRACTION_EDGES, DatasetStatistics, StatInstance, camera_distances

MAX_INSTANCES = 200_000
DISTANCE_SAMPLE_FRAMES = 300
VISIBLE_LOW = 0.5  # "mostly hidden": visible fraction below this (a bin edge of FRACTION_EDGES)
TRUNCATED_HIGH = 0.1  # "truncated": truncation fraction at or above this (a bin edge)


def _read_scene(*, root: Path, campaign_id: int, frame: selectors.StatisticsFrame) -> dict[str, Any] | None:
    """A frame's scene.json (found as the export finds it), or None when missing, unreadable or outside MEDIA_ROOT."""
    relative = frame.output_dir or frame_relative_dir(campaign_id=campaign_id, index=frame.index)
    path = (root / relative / "scene.json").resolve()
    if not path.is_relative_to(root):
        return None
    try:
        scene = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return scene if isinstance(scene, dict) else None


def campaign_statistics(
    *, campaign: Any, max_instances: int = MAX_INSTANCES, distance_frames: int = DISTANCE_SAMPLE_FRAMES
) -> dict[str, Any]:
    """Dataset statistics of a campaign's done frames, and what was read to get them.

    Returns
    -------
    dict
        ``statistics`` (:meth:`DatasetStatistics.as_json`: every frame read is an image of the campaign's size),
        ``frames_done`` (done frames at the start), ``frames_read``, ``instances_read``, ``capped`` (frames were
        left out to stay within ``max_instances``), ``max_instances``, ``distance_step`` (every k-th frame read
        had its scene file read), ``distance_frames`` (frames sampled), ``distance_scenes_read`` (of those, scene
        files found and read), ``distance_limit``, ``mean_instances_per_image``, ``size_class_pct`` (small, medium,
        large, % of all instances), ``classes_present`` (classes with an instance), ``rows`` (:func:`summary_rows`).
    """
    finished_before = timezone.now()
    frames_done = selectors.statistics_frame_count(campaign=campaign, finished_before=finished_before)
    stop_index = selectors.statistics_frame_limit(
        campaign=campaign, finished_before=finished_before, max_instances=max_instances
    )
    frames_read = (
        frames_done
        if stop_index is None
        else selectors.statistics_frame_count(
            campaign=campaign, finished_before=finished_before, before_index=stop_index
        )
    )
    step = max(1, math.ceil(frames_read / max(1, distance_frames)))
    stats = DatasetStatistics(class_names=selectors.statistics_class_names(campaign=campaign))
    root = Path(settings.MEDIA_ROOT).resolve()
    sampled = scenes_read = 0
    width_px, height_px = campaign.width_px, campaign.height_px
    for position, frame in enumerate(
        selectors.statistics_frames(campaign=campaign, finished_before=finished_before, before_index=stop_index)
    ):
        distances: dict[int, float] = {}
        if position % step == 0 and sampled < distance_frames:
            sampled += 1
            scene = _read_scene(root=root, campaign_id=campaign.pk, frame=frame)
            if scene is not None:
                scenes_read += 1
                distances = camera_distances(scene)
        stats.add_image(
            width_px=width_px,
            height_px=height_px,
            instances=[
                StatInstance(
                    category=row["class_name"],
                    bbox=row["bbox_xywh_px"],
                    area_px=row["mask_area_px"],
                    visible_fraction=row["visible_fraction"],
                    truncation_fraction=row["truncation_fraction"],
                    occlusion_fraction=row["occlusion_fraction"],
                    distance_m=distances.get(row["instance_id"]),
                )
                for row in frame.instances
            ],
        )
    statistics = stats.as_json()
    return {
        "statistics": statistics,
        "frames_done": frames_done,
        "frames_read": stats.images,
        "instances_read": stats.instances,
        "capped": stop_index is not None,
        "max_instances": max_instances,
        "distance_step": step,
        "distance_frames": sampled,
        "distance_scenes_read": scenes_read,
        "distance_limit": distance_frames,
        "mean_instances_per_image": round(stats.instances / stats.images, 2) if stats.images else None,
        "size_class_pct": [_pct(n, stats.instances) for n in statistics["size_classes"]["total"]],
        "classes_present": sum(1 for v in statistics["per_class"].values() if v["instances"]),
        "rows": summary_rows(statistics),
    }


def _pct(part: int, whole: int) -> float | None:
    return round(100.0 * part / whole, 1) if whole else None


def summary_rows(statistics: dict[str, Any]) -> list[dict[str, Any]]:
    """One row per class for the page's table: counts and shares (%) read off the histograms.

    ``mostly_hidden_pct``: visible fraction below :data:`VISIBLE_LOW`; ``truncated_pct``: truncation fraction
    at or above :data:`TRUNCATED_HIGH` (both bin edges, so exact); ``distance_known``: instances in the frames
    whose scene files were read.
    """
    low_bin = FRACTION_EDGES.index(VISIBLE_LOW)
    high_bin = FRACTION_EDGES.index(TRUNCATED_HIGH)
    rows = []
    for name in statistics["classes"]:
        n = statistics["per_class"][name]["instances"]
        small, medium, large = statistics["size_classes"]["counts"][name]
        rows.append(
            {
                "class_name": name,
                "instances": n,
                "images": statistics["per_class"][name]["images"],
                "small": small,
                "medium": medium,
                "large": large,
                "small_pct": _pct(small, n),
                "medium_pct": _pct(medium, n),
                "large_pct": _pct(large, n),
                "mostly_hidden_pct": _pct(sum(statistics["visible_fraction"]["counts"][name][:low_bin]), n),
                "truncated_pct": _pct(sum(statistics["truncation_fraction"]["counts"][name][high_bin:]), n),
                "distance_known": sum(statistics["camera_distance"]["counts"][name]),
            }
        )
    return rows
