"""The files that describe an export: ``campaign.json``, ``software.json``, ``class_statistics.json``,
``splits.json`` and ``README.md``. None holds an export timestamp, so an unchanged campaign re-exports to the
same bytes.
"""

from __future__ import annotations

import platform
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from importlib import metadata
from typing import Any

import numpy as np

from campaigns import selectors
from campaigns.models import ClassQuota
from datasets.options import ExportOptions
from datasets.queries import Category, InstanceRow
from datasets.splits import SPLITS

SOFTWARE_PACKAGES: tuple[str, ...] = (
    "mitsuba",
    "drjit",
    "Django",
    "celery",
    "kombu",
    "numpy",
    "scipy",
    "pycocotools",
    "opencv-python-headless",
    "pillow",
    "trimesh",
    "manifold3d",
    "shapely",
    "psycopg",
    "PyYAML",
)


def software_versions() -> dict[str, Any]:
    """Python, platform and the pip versions of the packages that render, label and export."""
    packages: dict[str, str | None] = {}
    for name in SOFTWARE_PACKAGES:
        try:
            packages[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            packages[name] = None
    return {"python": platform.python_version(), "platform": platform.platform(terse=True), "packages": packages}


@dataclass
class ClassStats:
    """One class's running sums over the exported instances (per split where counted)."""

    instances: Counter = field(default_factory=Counter)  # split → n (labelled objects)
    accepted: Counter = field(default_factory=Counter)
    ignore_regions: Counter = field(default_factory=Counter)  # split → n (visible, not accepted: COCO iscrowd 1)
    frames: Counter = field(default_factory=Counter)
    visible_fraction_sum: float = 0.0
    contrast_sum: float = 0.0
    contrast_n: int = 0  # instances with a contrast (frames rendered before the measure have none)
    occlusion_fraction_sum: float = 0.0
    truncation_fraction_sum: float = 0.0
    area_px_sum: int = 0

    def add(self, split: str, row: InstanceRow, *, ignore: bool = False) -> None:
        """Count one exported instance of this class (frames are counted by the caller, once per frame); an ignore
        region is only counted, its measures stay out of the means."""
        if ignore:
            self.ignore_regions[split] += 1
            return
        self.instances[split] += 1
        self.accepted[split] += int(bool(row.accepted))
        self.visible_fraction_sum += row.visible_fraction
        if row.contrast is not None:
            self.contrast_sum += row.contrast
            self.contrast_n += 1
        self.occlusion_fraction_sum += row.occlusion_fraction
        self.truncation_fraction_sum += row.truncation_fraction
        self.area_px_sum += int(row.mask_area_px)


def class_statistics(
    *,
    campaign: Any,
    options: ExportOptions,
    categories: Sequence[Category],
    stats: Mapping[int, ClassStats],
    images: Counter,
    annotations: Counter,
) -> dict:
    """``class_statistics.json``: per class and split, what was exported, with the quota's thresholds and counters."""
    quotas = {
        q["object_class_id"]: q
        for q in ClassQuota.objects.filter(campaign=campaign).values(
            "object_class_id",
            "target_accepted",
            "accepted_count",
            "rejected_count",
            "placed_count",
            "min_visible_fraction",
            "min_box_px",
            "min_contrast",
        )
    }
    classes = []
    for cat in categories:
        s = stats[cat.object_class_id]
        n = sum(s.instances.values())
        q: Mapping[str, Any] = quotas.get(cat.object_class_id, {})
        classes.append(
            {
                "name": cat.name,
                "category_id": cat.category_id,
                "yolo_index": cat.yolo_index,
                "quota": {
                    "target_accepted": q.get("target_accepted"),
                    "accepted": q.get("accepted_count"),
                    "rejected": q.get("rejected_count"),
                    "placed": q.get("placed_count"),
                    "min_visible_fraction": q.get("min_visible_fraction"),
                    "min_box_px": q.get("min_box_px"),
                    "min_contrast": q.get("min_contrast"),
                },
                "exported_instances": {**{sp: s.instances[sp] for sp in SPLITS}, "total": n},
                "exported_accepted": {**{sp: s.accepted[sp] for sp in SPLITS}, "total": sum(s.accepted.values())},
                "ignore_regions": {
                    **{sp: s.ignore_regions[sp] for sp in SPLITS},
                    "total": sum(s.ignore_regions.values()),
                },
                "background_below_px": options.background_below(cat.name),
                "share": {sp: (round(s.instances[sp] / n, 6) if n else None) for sp in SPLITS},
                "frames_with_class": {**{sp: s.frames[sp] for sp in SPLITS}, "total": sum(s.frames.values())},
                "mean_visible_fraction": round(s.visible_fraction_sum / n, 6) if n else None,
                # over the instances that have one; instances_with_contrast says how many that is
                "mean_contrast": round(s.contrast_sum / s.contrast_n, 6) if s.contrast_n else None,
                "instances_with_contrast": s.contrast_n,
                "mean_occlusion_fraction": round(s.occlusion_fraction_sum / n, 6) if n else None,
                "mean_truncation_fraction": round(s.truncation_fraction_sum / n, 6) if n else None,
                "mean_area_px": round(s.area_px_sum / n, 3) if n else None,
            }
        )
    return {
        "campaign_id": campaign.pk,
        "rejected": options.rejected,
        "images": {**{s: images[s] for s in SPLITS}, "total": sum(images.values())},
        "annotations": {**{s: annotations[s] for s in SPLITS}, "total": sum(annotations.values())},
        "classes": classes,
    }


def splits_json(
    *,
    campaign: Any,
    options: ExportOptions,
    categories: Sequence[Category],
    layouts: list[int],
    assignment: Mapping[int, str],
    shares: np.ndarray | None,
    layouts_per_split: Counter,
) -> dict:
    """``splits.json``: ratios, method, achieved shares and every layout's split (what a re-export pins)."""
    columns = [c.name for c in categories] + ["(frames)"]
    achieved = {}
    if shares is not None:
        for i, name in enumerate(columns):
            achieved[name] = {
                s: (None if not np.isfinite(shares[j, i]) else round(float(shares[j, i]), 6))
                for j, s in enumerate(SPLITS)
            }
    by_split: dict[str, list[int]] = {s: [] for s in SPLITS}
    for layout in layouts:
        by_split[assignment[layout]].append(int(layout))
    return {
        "ratios": dict(zip(SPLITS, options.ratios, strict=True)),
        "seed": campaign.seed,
        "unit": "layout (Frame.layout_index): frames that share a layout share its split",
        "method": "greedy largest-first balance of per-class instance counts (assign_splits); layouts "
        "assigned by a previous export with the same ratios keep their split",
        "balanced_on": "labelled instances" + ("" if options.labels_rejected else " (accepted only)"),
        "layouts": {s: layouts_per_split[s] for s in SPLITS},
        "achieved_shares": achieved,
        "assignment": by_split,
    }


def campaign_json(*, campaign: Any) -> dict:
    """``campaign.json``: settings, randomization budget, quotas, assets, costs and counters."""
    c = campaign
    quotas = [
        {
            "class_name": q["object_class__name"],
            "target_accepted": q["target_accepted"],
            "min_visible_fraction": q["min_visible_fraction"],
            "min_box_px": q["min_box_px"],
            "min_contrast": q["min_contrast"],
            "accepted": q["accepted_count"],
            "rejected": q["rejected_count"],
            "placed": q["placed_count"],
            "met_at": q["met_at"],
        }
        for q in c.quotas.order_by("object_class__name").values(
            "object_class__name",
            "target_accepted",
            "min_visible_fraction",
            "min_box_px",
            "min_contrast",
            "accepted_count",
            "rejected_count",
            "placed_count",
            "met_at",
        )
    ]
    assets = [
        {
            "class_name": a["object_class__name"],
            "name": a["name"],
            "kind": a["kind"],
            "generator": a["generator"],
            "mesh_file": a["mesh_file"],
            "creation_cost": a["creation_cost"],
        }
        for a in c.assets.order_by("object_class__name", "name").values(
            "object_class__name", "name", "kind", "generator", "mesh_file", "creation_cost"
        )
    ]
    return {
        "id": c.pk,
        "name": c.name,
        "description": c.description,
        "owner": c.owner.get_username(),
        "status": c.status,
        "seed": c.seed,
        "weight": c.weight,
        "max_attempts": c.max_attempts,
        "created_at": c.created_at,
        "started_at": c.started_at,
        "finished_at": c.finished_at,
        "budget": c.budget,
        "costs": {
            "cost_budget": c.cost_budget,
            "price_per_cpu_hour": c.price_per_cpu_hour,
            "setup_cost": c.setup_cost,
            "manual_labelling_rate_per_hour": c.manual_labelling_rate_per_hour,
            "fixed_cost": selectors.fixed_cost(campaign=c),
            "compute_cost_spent": c.compute_cost_spent,
            "total_spent": selectors.total_spent(campaign=c),
            "cpu_s_spent": c.cpu_s_spent,
            "wall_s_spent": c.wall_s_spent,
        },
        "counters": {
            "frames_done": c.frames_done,
            "frames_dead": c.frames_dead,
            "instances_accepted": c.instances_accepted,
            "instances_rejected": c.instances_rejected,
        },
        "quotas": quotas,
        "assets": assets,
    }


def readme(
    *,
    campaign: Any,
    options: ExportOptions,
    categories: Sequence[Category],
    active: Sequence[str],
    excluded_frames: int = 0,
) -> str:
    """``README.md``: what is where in this export."""
    c = campaign
    names = ", ".join(cat.name for cat in categories)
    yolo = "yolo" in options.formats
    coco = "coco" in options.formats
    lines = [
        f"# Evenframe dataset: campaign {c.pk} “{c.name}”",
        "",
        f"Classes: {names}. Splits: "
        + ", ".join(f"{s} {r:g}" for s, r in zip(SPLITS, options.ratios, strict=True))
        + " (by layout).",
        "Instances: " + _instances_sentence(options),
        "",
        "| path | content |",
        "|---|---|",
        "| `images/<stem>.png` | RGB frame, sRGB 8 bit |",
        "| `masks/<stem>.png` | 16-bit instance ids (0 = background); annotation `instance_id` |",
    ]
    if coco:
        lines.append(
            "| `annotations/<split>.json` | COCO instances: bbox, area, RLE segmentation, iscrowd (0: an object, 1: an "
            "ignore region, see below); "
            "extra per annotation: visible/occlusion/truncation fraction, contrast (ΔE*ab against the "
            "surroundings ÷ image noise; null for frames rendered before it was measured), amodal_bbox, "
            "accepted; "
            "extra per image: camera K, R, t (OpenCV), exposure, layout/lighting/view index, seed. "
            "`file_name` is relative to `images/` |"
        )
    if yolo:
        lines.append(
            "| `labels/<stem>.txt`, `data.yaml`, `classes.txt`, `<split>.txt` | YOLO: "
            "`class cx cy w h` normalised; split lists of image paths |"
        )
    lines += [
        "| `scenes.jsonl` | one line per frame: the full scene spec (`scene`) and render facts |",
        "| `campaign.json` | campaign settings, randomization budget, quotas, costs |",
        "| `software.json` | package versions of the exporting machine; renderer variants of the frames |",
        "| `class_statistics.json` | per class and split: instances, frames, mean visibility, contrast and area; "
        "quota thresholds and counters |",
        "| `dataset_statistics.json` | over the labelled objects: COCO size classes (area below 32², below 96², "
        "above), box-size, visible / occlusion / truncation and camera-distance histograms per class, instances "
        "per image, class co-occurrence, box-centre grid; bin edges and units inside |",
        "| `splits.json` | ratios, method, achieved shares, each layout's split |",
        "| `manifest.jsonl` | header, then every file with size and SHA-256; "
        "check with `manage.py verify_dataset DIR` |",
        "",
        f"Active splits: {', '.join(active)}."
        + (
            f" Frames left out by curation: {excluded_frames} (not in any file here; `manifest.jsonl`'s first line "
            "lists them with their reasons)."
            if excluded_frames
            else ""
        ),
        "",
        *_rejected_section(options),
        *_conventions_section(coco=coco, yolo=yolo),
    ]
    return "\n".join(lines)


def _instances_sentence(options: ExportOptions) -> str:
    below = f"{options.background_below_px} visible pixels"
    if options.background_below_px_by_class:
        below += " (" + ", ".join(f"{name} {px}" for name, px in options.background_below_px_by_class) + ")"
    if options.rejected == "label":
        return (
            "every visible instance is an object (`iscrowd` 0), including those the quota rules rejected; "
            "`accepted` says which were accepted."
        )
    if options.rejected == "drop":
        return (
            "the objects the quota rules accepted; visible instances they rejected are left out, so they are "
            "unlabelled background in the images (the export command printed how many)."
        )
    return (
        "the objects the quota rules accepted (`iscrowd` 0); visible instances they rejected are ignore regions "
        f"(`iscrowd` 1), unless fewer than {below} show, then they are background."
    )


def _rejected_section(options: ExportOptions) -> list[str]:
    """Why ignore regions, and the trade-off of the YOLO choice made for this export."""
    lines = [
        "## Objects the quota rules did not accept",
        "",
        "A visible object can be rejected (too occluded, too small, too little contrast for the campaign's quota "
        "rules). Labelled as an object, it teaches a detector to find what the rules call unfindable; deleted, it "
        "teaches that a visible object is background. COCO's answer is an ignore region: an annotation with "
        "`iscrowd: 1` and its mask, which COCO evaluation neither rewards nor punishes (a detection on it is not a "
        "false positive, a miss is not a false negative) and most trainers leave out of the loss.",
        "",
        f"This export: `{options.rejected}` (choices: `ignore`, `label`, `drop`).",
    ]
    if options.rejected == "ignore" and "yolo" in options.formats:
        lines += [
            "",
            "YOLO labels have no ignore regions. The choices, and this export's:",
            "",
            "- `fill` — the region's pixels (its mask grown by one pixel, never over a labelled object) are painted "
            "RGB (124, 116, 104), the ImageNet mean, which the usual input normalisation maps to zero; the object no "
            "longer shows, so no label is "
            "missing. Cost: the images differ from the render (COCO's `images/` are the same files, so COCO users "
            "see the fill too, inside regions they ignore anyway).",
            "- `skip` — frames with an ignore region are left out of the YOLO split lists. Cost: fewer frames, and "
            "fewer of the crowded ones.",
            "- `keep` — frames unchanged and listed; `yolo_unlabelled.txt` says how many unlabelled objects each "
            "image holds. Cost: those objects are trained as background.",
            "",
            f"This export: `{options.yolo_ignore}`.",
        ]
    return [*lines, ""]


def _conventions_section(*, coco: bool, yolo: bool) -> list[str]:
    """Which names and layouts a standard defines, and which are this tool's own."""
    lines = ["## Names and layouts", ""]
    if coco:
        lines.append(
            "- COCO (cocodataset.org, data format): `info`, `licenses`, `categories`, `images` (`id`, `file_name`, "
            "`width`, `height`) and `annotations` (`id`, `image_id`, `category_id`, `bbox` [x, y, w, h] px, `area`, "
            "`segmentation` as RLE, `iscrowd`) are the standard's; every other field of an image or annotation is "
            "our own addition, which COCO readers ignore. `annotations/<split>.json` is a common layout, not a "
            "standard one."
        )
    if yolo:
        lines.append(
            "- YOLO (the Ultralytics detection format, from memory): `labels/<stem>.txt` beside `images/<stem>.png`, "
            "`class cx cy w h` normalised, `data.yaml` with `names`, `nc` and split lists, `<split>.txt` image lists. "
            "`classes.txt` (one name per line) is the older Darknet convention. `yolo_unlabelled.txt` is our own."
        )
    lines += [
        "- Our own: `masks/<stem>.png` (16-bit instance ids), `scenes.jsonl`, `campaign.json`, `software.json`, "
        "`class_statistics.json`, `splits.json`, `manifest.jsonl` (SHA-256 per file).",
        "",
    ]
    return lines
