"""One export run, and its two entry points: a dataset folder (:func:`export_dataset`) or a streamed zip
(:func:`stream_dataset_zip`, the campaign page's download).

A directory export is built in a sibling staging folder ``.NAME.evenframe-partial-PID`` and swapped in by
renames at the very end; a lock file beside the folder lets one export at a time write into it.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import logging
import os
import resource
import shutil
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import IO, Any

import numpy as np

from campaigns.frame_files import frame_relative_dir
from datasets import coco, metadata, yolo
from datasets.errors import ExportError
from datasets.json_text import dumps, pretty
from datasets.manifest import EXPORT_FORMAT, EXPORT_FORMAT_VERSION, MANIFEST_NAME, read_manifest_header
from datasets.options import ExportOptions
from datasets.queries import (
    FRAME_CHUNK,
    FrameRow,
    InstanceRow,
    InstancesByFrame,
    campaign_categories,
    excluded_frames,
    find_campaign,
    frame_rows,
    instance_rows,
    layout_counts,
)
from datasets.sinks import SCRATCH_DIR, ChunkBuffer, DirectorySink, Sink, ZipSink, copy_into
from datasets.splits import SPLITS, assign_splits, split_shares
from datasets.statistics import DatasetStatistics, StatInstance, camera_distances
from render.images import encode_image

log = logging.getLogger("evenframe.export")

# The frame count takes part in the split balance with this weight next to each class (1.0): image counts
# follow the ratios too, but instance shares per class come first.
FRAME_BALANCE_WEIGHT = 0.5
_STAGING_MARK = ".evenframe-partial-"
_OLD_MARK = ".evenframe-old-"


def frame_stem(index: int) -> str:
    return f"{int(index):06d}"


def peak_rss_mb() -> float:
    """Peak resident set size of this process, MB (MiB).

    Linux: ``VmHWM`` from ``/proc/self/status``. ``getrusage``'s ``ru_maxrss`` is not used there because
    Linux carries the parent's peak over ``fork`` + ``exec`` (a command started by a big process would report
    its parent's peak). Elsewhere ``ru_maxrss`` (KiB on Linux, bytes on macOS).
    """
    try:
        with open("/proc/self/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except (OSError, ValueError, IndexError):
        pass
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / (1024 * 1024) if sys.platform == "darwin" else peak / 1024


# ---------------------------------------------------------------------------------------------------------------------
# One export run
# ---------------------------------------------------------------------------------------------------------------------


@dataclass
class ExportSummary:
    campaign_id: int
    out: str
    frames: int = 0
    layouts: int = 0
    images_per_split: dict[str, int] = field(default_factory=dict)
    annotations_per_split: dict[str, int] = field(default_factory=dict)
    max_share_deviation_pp: float | None = None
    excluded_frames: int = 0
    ignore_regions: int = 0
    background: int = 0
    dropped: int = 0
    yolo_filled_frames: int = 0
    yolo_skipped_frames: int = 0
    yolo_unlabelled: int = 0
    files: int = 0
    bytes_total: int = 0
    files_written: int = 0
    bytes_written: int = 0
    files_reused: int = 0
    seconds: float = 0.0
    peak_rss_mb: float = 0.0

    def _rejected_lines(self) -> list[str]:
        """What became of the visible instances the quota rules did not accept (none when there were none)."""
        if not (self.ignore_regions or self.background or self.dropped):
            return []
        parts = []
        if self.ignore_regions:
            parts.append(f"{self.ignore_regions} ignore regions (COCO iscrowd 1)")
        if self.dropped:
            parts.append(f"{self.dropped} left out as asked (unlabelled background in the images)")
        if self.background:
            parts.append(f"{self.background} below the background pixel limit (unlabelled)")
        line = "  visible but not accepted: " + ", ".join(parts)
        yolo = []
        if self.yolo_filled_frames:
            yolo.append(f"filled in {self.yolo_filled_frames} images")
        if self.yolo_skipped_frames:
            yolo.append(f"{self.yolo_skipped_frames} frames left out of the YOLO lists")
        if self.yolo_unlabelled:
            yolo.append(f"{self.yolo_unlabelled} unlabelled objects kept (yolo_unlabelled.txt)")
        return [line] + ([f"  YOLO ignore regions: {', '.join(yolo)}"] if yolo else [])

    def lines(self) -> list[str]:
        splits = ", ".join(
            f"{s} {self.images_per_split.get(s, 0)} images / {self.annotations_per_split.get(s, 0)} annotations"
            for s in SPLITS
        )
        deviation = (
            "n/a (no instances)"
            if self.max_share_deviation_pp is None
            else f"{self.max_share_deviation_pp:.2f} percentage points"
        )
        if self.max_share_deviation_pp is not None and self.max_share_deviation_pp > 2.0:
            deviation += f" (more than 2: {self.layouts} layouts are too few for these ratios)"

        rate = self.frames / self.seconds if self.seconds > 0 else 0.0
        return [
            f"exported campaign {self.campaign_id}: {self.frames} frames in {self.layouts} layouts → {self.out}",
            f"  splits: {splits}",
            f"  largest per-class share deviation from the ratios: {deviation}",
            *self._rejected_lines(),
            *(
                [
                    f"  left out by curation: {self.excluded_frames} frame{'s' if self.excluded_frames != 1 else ''} (listed with their reasons in the manifest)"
                ]
                if self.excluded_frames
                else []
            ),
            f"  files: {self.files} ({self.bytes_total / 1e6:.1f} MB); written {self.files_written} "
            f"({self.bytes_written / 1e6:.1f} MB), reused {self.files_reused} unchanged",
            f"  {self.seconds:.1f} s, {rate:.0f} frames/s, peak RSS {self.peak_rss_mb:.0f} MB",
        ]


@dataclass
class _SplitPlan:
    """The run's layouts, their counts (per category, frames last) and their splits."""

    layouts: list[int]
    counts: np.ndarray
    assignment: dict[int, str]
    active: list[str]  # the splits with a positive ratio

    @property
    def n_frames(self) -> int:
        return len(self.layouts) and int(self.counts[:, -1].sum())

    @property
    def layouts_per_split(self) -> Counter:
        return Counter(self.assignment.values())

    @cached_property
    def shares(self) -> np.ndarray | None:
        """Achieved share of each column per split (:func:`split_shares`); None without layouts."""
        if not self.layouts:
            return None
        return split_shares(group_ids=self.layouts, counts=self.counts, assignment=self.assignment)


@dataclass
class _Tally:
    """What the run counts while frames stream by: per class statistics, and per split images, annotations."""

    stats: dict[int, metadata.ClassStats]
    dataset: DatasetStatistics
    images: Counter = field(default_factory=Counter)
    annotations: Counter = field(default_factory=Counter)
    variants: Counter = field(default_factory=Counter)  # renderer variant → frames
    ignore_regions: Counter = field(default_factory=Counter)  # split → COCO iscrowd-1 regions
    background: int = 0  # not accepted, below the background pixel limit: unlabelled
    dropped: int = 0  # not accepted, left out as asked
    yolo_filled_frames: int = 0
    yolo_skipped_frames: int = 0
    yolo_unlabelled: int = 0
    frames: int = 0


@dataclass
class _FrameInstances:
    """What one frame's instances became: its YOLO lines and the mask ids of its labelled objects and ignore regions."""

    yolo_lines: list[str] = field(default_factory=list)
    labelled: list[tuple[InstanceRow, str]] = field(default_factory=list)  # row and class name
    labelled_ids: list[int] = field(default_factory=list)
    ignore_ids: list[int] = field(default_factory=list)


#: The colour ignore regions are filled with for YOLO: the ImageNet channel means (0.485, 0.456, 0.406) × 255, which
#: the usual input normalisation maps to zero, i.e. no signal (from memory: torchvision's normalisation constants).
IGNORE_FILL_RGB: tuple[int, int, int] = (124, 116, 104)


def fill_ignore_regions(frame_dir: Path, *, ignore_ids: list[int], labelled_ids: list[int]) -> bytes:
    """The frame's image (PNG bytes) with its ignore regions painted :data:`IGNORE_FILL_RGB`.

    A region is its instance's mask grown by one pixel (3 × 3), which covers the anti-aliased edge the RGB render
    spreads around the label pass's pixel-centre mask; grown pixels that belong to a labelled object stay as they
    are, so no labelled object loses a pixel.
    """
    import cv2

    rgb = cv2.imread(str(frame_dir / "rgb.png"), cv2.IMREAD_COLOR)
    ids = cv2.imread(str(frame_dir / "instances.png"), cv2.IMREAD_UNCHANGED)
    if rgb is None or ids is None or ids.shape[:2] != rgb.shape[:2]:
        raise ExportError(f"unreadable or mismatched frame files rgb.png / instances.png in {frame_dir}")
    region = np.isin(ids, ignore_ids).astype(np.uint8)
    region = cv2.dilate(region, np.ones((3, 3), np.uint8)).astype(bool)
    region &= ~np.isin(ids, labelled_ids)
    rgb = cv2.cvtColor(rgb, cv2.COLOR_BGR2RGB)
    rgb[region] = IGNORE_FILL_RGB
    return encode_image(rgb, suffix=".png")


class _ScratchFiles:
    """The scratch files a run appends to frame by frame: COCO parts, YOLO split lists, scene lines."""

    def __init__(self, scratch: Path, *, active: list[str], yolo_lists: bool) -> None:
        self.coco = coco.CocoParts(scratch, active)
        self.yolo_lists: dict[str, IO[str]] = yolo.open_split_lists(scratch, active) if yolo_lists else {}
        self.scenes = open(scratch / "scenes.part", "w", encoding="utf-8")  # noqa: SIM115
        self.yolo_unlabelled = open(scratch / "yolo-unlabelled.part", "w", encoding="utf-8")  # noqa: SIM115

    def close(self) -> None:
        self.coco.close()
        for handle in (*self.yolo_lists.values(), self.scenes, self.yolo_unlabelled):
            handle.close()


class _Exporter:
    """One export run; :meth:`run` is a generator that yields after every file so a zip can be streamed."""

    def __init__(
        self,
        *,
        campaign: Any,
        options: ExportOptions,
        media_root: Path,
        pinned: Mapping[int, str] | None = None,
        progress: Callable[[int, int], None] | None = None,
    ) -> None:
        from django.utils import timezone

        self.campaign = campaign
        self.options = options
        self.media_root = Path(media_root)
        self.pinned = pinned or {}
        self.progress = progress
        self.finished_before = timezone.now()
        self.categories = campaign_categories(campaign=campaign)
        self.category_of = {c.object_class_id: c for c in self.categories}
        self.summary = ExportSummary(campaign_id=campaign.pk, out="")
        # Frames a user left out (curation) by the snapshot time, with their reasons: for the README and manifest.
        self.excluded = excluded_frames(campaign, self.finished_before)

    def run(self, sink: Sink) -> Iterator[None]:
        """Splits, then every frame's files, then the aggregate files, then the manifest and the summary."""
        start = time.perf_counter()
        plan = self._plan_splits()
        files = _ScratchFiles(sink.scratch, active=plan.active, yolo_lists="yolo" in self.options.formats)
        tally = _Tally(
            stats={c.object_class_id: metadata.ClassStats() for c in self.categories},
            dataset=DatasetStatistics(class_names=[c.name for c in self.categories]),
        )
        try:
            yield from self._export_frames(sink, plan, files, tally)
        finally:
            files.close()
        yield from self._write_aggregates(sink, plan, tally, yolo_lists=bool(files.yolo_lists))
        yield
        self._finish(sink, plan, tally, start)
        yield

    # -- steps --------------------------------------------------------------------------------------------------------

    def _plan_splits(self) -> _SplitPlan:
        """Per-layout counts from the database and their split (previous splits pinned)."""
        options = self.options
        layouts, counts = layout_counts(
            campaign=self.campaign,
            categories=self.categories,
            accepted_only=not options.labels_rejected,
            finished_before=self.finished_before,
        )
        weights = [1.0] * len(self.categories) + [FRAME_BALANCE_WEIGHT]
        assignment = assign_splits(
            group_ids=layouts,
            counts=counts,
            ratios=options.ratios,
            seed=self.campaign.seed,
            pinned=self.pinned,
            weights=weights,
        )
        active = [s for s, r in zip(SPLITS, options.ratios, strict=True) if r > 0]
        return _SplitPlan(layouts=layouts, counts=counts, assignment=assignment, active=active)

    def _export_frames(self, sink: Sink, plan: _SplitPlan, files: _ScratchFiles, tally: _Tally) -> Iterator[None]:
        """The frame and instance streams, merged by frame index; yields after every frame."""
        frames = frame_rows(self.campaign, self.finished_before)
        instances = InstancesByFrame(instance_rows(self.campaign, self.finished_before, accepted_only=False))
        n_frames = plan.n_frames
        for frame in frames:
            self._export_frame(sink, frame, instances.for_frame(frame.index), plan, files, tally)
            tally.frames += 1
            if self.progress is not None and tally.frames % FRAME_CHUNK == 0:
                self.progress(tally.frames, n_frames)
            yield

    def _export_frame(
        self,
        sink: Sink,
        frame: FrameRow,
        instances: Iterator[InstanceRow],
        plan: _SplitPlan,
        files: _ScratchFiles,
        tally: _Tally,
    ) -> None:
        """One frame: image and mask, its COCO image and annotations, its YOLO labels, its ``scenes.jsonl`` line."""
        index = frame.index
        split = plan.assignment.get(frame.layout_index)
        if split is None:  # cannot happen within one snapshot; never guess a split
            raise ExportError(f"frame {index}: layout {frame.layout_index} has no split")
        sink.begin_frame(index)
        stem = frame_stem(index)
        frame_dir = self._frame_dir(frame.output_dir, index)
        _, labels = self._read_json(frame_dir / "labels.json")
        scene_text = self._read_text(frame_dir / "scene.json")
        image = labels.get("image") or {}
        width_px = int(image.get("width_px") or self.campaign.width_px)
        height_px = int(image.get("height_px") or self.campaign.height_px)
        tally.variants[labels.get("variant") or "unknown"] += 1
        image_entry = coco.image_entry(
            frame, split=split, stem=stem, width_px=width_px, height_px=height_px, labels=labels
        )
        files.coco.append(split, "images", dumps(image_entry))
        tally.images[split] += 1
        exported = self._export_instances(
            instances,
            split=split,
            frame_dir=frame_dir,
            width_px=width_px,
            height_px=height_px,
            files=files,
            tally=tally,
        )
        tally.dataset.add_image(
            width_px=width_px, height_px=height_px, instances=self._stat_instances(exported, scene_text)
        )
        if self.options.fills_images and exported.ignore_ids:
            filled = fill_ignore_regions(frame_dir, ignore_ids=exported.ignore_ids, labelled_ids=exported.labelled_ids)
            sink.put_bytes(path=f"images/{stem}.png", data=filled, frame=index)
            tally.yolo_filled_frames += 1
        else:
            sink.copy_file(path=f"images/{stem}.png", source=frame_dir / "rgb.png", frame=index)
        sink.copy_file(path=f"masks/{stem}.png", source=frame_dir / "instances.png", frame=index)
        if files.yolo_lists:
            self._export_yolo_frame(
                sink, stem=stem, index=index, split=split, exported=exported, files=files, tally=tally
            )
        files.scenes.write(self._scene_line(frame, split=split, scene_text=scene_text, frame_dir=frame_dir))

    @staticmethod
    def _stat_instances(exported: _FrameInstances, scene_text: str) -> list[StatInstance]:
        """The frame's labelled objects for ``dataset_statistics.json``, with their camera distances from the
        frame's scene spec (None where the spec cannot tell)."""
        if not exported.labelled:
            return []
        try:
            distances = camera_distances(json.loads(scene_text))
        except (ValueError, AttributeError):  # not a JSON object: no distances (the scene line fails loudly later)
            distances = {}
        return [
            StatInstance(
                category=name,
                bbox=row.bbox,
                area_px=int(row.mask_area_px),
                visible_fraction=float(row.visible_fraction),
                truncation_fraction=float(row.truncation_fraction),
                occlusion_fraction=float(row.occlusion_fraction),
                distance_m=distances.get(int(row.instance_id)),
            )
            for row, name in exported.labelled
        ]

    def _export_yolo_frame(
        self,
        sink: Sink,
        *,
        stem: str,
        index: int,
        split: str,
        exported: _FrameInstances,
        files: _ScratchFiles,
        tally: _Tally,
    ) -> None:
        """A frame's YOLO labels and its line in the split list, by the export's ignore-region choice."""
        n_ignore = len(exported.ignore_ids)
        if n_ignore and self.options.yolo_ignore == "skip":
            tally.yolo_skipped_frames += 1
            return
        sink.put_bytes(path=f"labels/{stem}.txt", data="".join(exported.yolo_lines).encode(), frame=index)
        files.yolo_lists[split].write(yolo.list_line(stem))
        if n_ignore and self.options.yolo_ignore == "keep":
            files.yolo_unlabelled.write(yolo.unlabelled_line(stem, n_ignore))
            tally.yolo_unlabelled += n_ignore

    def _export_instances(
        self,
        instances: Iterator[InstanceRow],
        *,
        split: str,
        frame_dir: Path,
        width_px: int,
        height_px: int,
        files: _ScratchFiles,
        tally: _Tally,
    ) -> _FrameInstances:
        """A frame's instances into its split's COCO annotations and the statistics, by the export's choice for
        visible instances that were not accepted (:data:`datasets.options.REJECTED_MODES`)."""
        options = self.options
        out = _FrameInstances()
        classes_in_frame: set[int] = set()
        mask_cache: dict[str, np.ndarray] = {}
        for row in instances:
            category = self.category_of.get(row.object_class_id)
            if category is None:
                continue
            labelled = bool(row.accepted) or options.labels_rejected
            if not labelled:
                if options.rejected == "drop":
                    tally.dropped += 1
                    continue
                if int(row.mask_area_px) < options.background_below(category.name):
                    tally.background += 1
                    continue
            rle = row.segmentation_rle
            if not rle:  # rows recorded without a mask encoding: encode the frame's mask image
                rle = coco.rle_from_mask(frame_dir, int(row.instance_id), mask_cache)
            entry = coco.annotation_entry(row, category=category, rle=rle, iscrowd=0 if labelled else 1)
            files.coco.append(split, "annotations", dumps(entry))
            tally.annotations[split] += 1
            tally.stats[row.object_class_id].add(split, row, ignore=not labelled)
            if not labelled:
                tally.ignore_regions[split] += 1
                out.ignore_ids.append(int(row.instance_id))
                continue
            out.labelled_ids.append(int(row.instance_id))
            out.labelled.append((row, category.name))
            classes_in_frame.add(row.object_class_id)
            if files.yolo_lists:
                out.yolo_lines.append(yolo.label_line(category, row.bbox, width_px, height_px))
        for class_id in classes_in_frame:
            tally.stats[class_id].frames[split] += 1
        return out

    @staticmethod
    def _scene_line(frame: FrameRow, *, split: str, scene_text: str, frame_dir: Path) -> str:
        """The frame's ``scenes.jsonl`` line: its coordinates and render facts, then the scene spec as rendered."""
        finished_at = frame.finished_at
        render_facts = {
            "cpu_s": frame.cpu_s,
            "wall_s": frame.wall_s,
            "worker_host": frame.worker_host,
            "finished_at": finished_at.isoformat() if finished_at else None,
        }
        head = dumps(
            {
                "frame_index": int(frame.index),
                "split": split,
                "layout_index": int(frame.layout_index),
                "lighting_index": int(frame.lighting_index),
                "view_index": int(frame.view_index),
                "seed": int(frame.seed),
                "composition": frame.composition,
                "render": render_facts,
            }
        )
        if "\n" in scene_text or not (scene_text.startswith("{") and scene_text.endswith("}")):
            # Not the render core's canonical one-line JSON: parse (fails loudly) and re-dump.
            try:
                scene_text = dumps(json.loads(scene_text))
            except ValueError as exc:
                raise ExportError(f"unreadable frame file {frame_dir / 'scene.json'}: {exc}") from exc
        return f'{head[:-1]},"scene":{scene_text}}}\n'

    def _write_aggregates(self, sink: Sink, plan: _SplitPlan, tally: _Tally, *, yolo_lists: bool) -> Iterator[None]:
        """The files over all frames: COCO per split, YOLO meta, scenes.jsonl and the describing files."""
        campaign, options, categories = self.campaign, self.options, self.categories
        if "coco" in options.formats:
            for split in plan.active:
                yield from coco.write_coco(sink, split=split, campaign=campaign, categories=categories)
        if yolo_lists:
            yield from yolo.write_yolo_meta(sink, campaign=campaign, categories=categories, active=plan.active)
            if options.rejected == "ignore" and options.yolo_ignore == "keep":
                yield from copy_into(sink, "yolo_unlabelled.txt", [sink.scratch / "yolo-unlabelled.part"])
        yield from copy_into(sink, "scenes.jsonl", [sink.scratch / "scenes.part"])
        class_stats = metadata.class_statistics(
            campaign=campaign,
            options=options,
            categories=categories,
            stats=tally.stats,
            images=tally.images,
            annotations=tally.annotations,
        )
        sink.put_bytes(path="class_statistics.json", data=pretty(class_stats))
        sink.put_bytes(path="dataset_statistics.json", data=pretty(tally.dataset.as_json()))
        sink.put_bytes(
            path="splits.json",
            data=pretty(
                metadata.splits_json(
                    campaign=campaign,
                    options=options,
                    categories=categories,
                    layouts=plan.layouts,
                    assignment=plan.assignment,
                    shares=plan.shares,
                    layouts_per_split=plan.layouts_per_split,
                )
            ),
        )
        sink.put_bytes(path="campaign.json", data=pretty(metadata.campaign_json(campaign=campaign)))
        sink.put_bytes(
            path="software.json",
            data=pretty({**metadata.software_versions(), "renderer_variants": dict(sorted(tally.variants.items()))}),
        )
        sink.put_bytes(
            path="README.md",
            data=metadata.readme(
                campaign=campaign,
                options=options,
                categories=categories,
                active=plan.active,
                excluded_frames=len(self.excluded),
            ).encode(),
        )

    def _finish(self, sink: Sink, plan: _SplitPlan, tally: _Tally, start: float) -> None:
        """The manifest (written last) and the summary."""
        summary = self.summary
        summary.frames = tally.frames
        summary.layouts = len(plan.layouts)
        summary.images_per_split = {s: tally.images[s] for s in SPLITS}
        summary.annotations_per_split = {s: tally.annotations[s] for s in SPLITS}
        summary.max_share_deviation_pp = self._max_share_deviation_pp(plan.shares)
        summary.ignore_regions = sum(tally.ignore_regions.values())
        summary.background, summary.dropped = tally.background, tally.dropped
        summary.yolo_filled_frames = tally.yolo_filled_frames
        summary.yolo_skipped_frames = tally.yolo_skipped_frames
        summary.yolo_unlabelled = tally.yolo_unlabelled
        summary.excluded_frames = len(self.excluded)
        sink.write_manifest(
            {
                "format": EXPORT_FORMAT,
                "format_version": EXPORT_FORMAT_VERSION,
                "campaign_id": self.campaign.pk,
                "campaign_name": self.campaign.name,
                "campaign_seed": self.campaign.seed,
                "exported_at": self.finished_before.isoformat(),
                "frames": tally.frames,
                "options": self.options.as_json(),
                # Frames a user left out (curation), with the reason given; they are in no file of the export.
                "excluded_frames": self.excluded,
            }
        )
        for key in ("files", "bytes_total", "files_written", "bytes_written", "files_reused"):
            setattr(summary, key, getattr(sink.counts, key))
        summary.seconds = time.perf_counter() - start
        summary.peak_rss_mb = peak_rss_mb()

    def _max_share_deviation_pp(self, shares: np.ndarray | None) -> float | None:
        """Largest |achieved − asked| share over classes and splits, percentage points; None without instances."""
        if shares is None or not len(self.categories):
            return None
        class_shares = shares[:, :-1]
        ratios = np.asarray(self.options.ratios)[:, None]
        if not np.isfinite(class_shares).any():
            return None
        return float(np.nanmax(np.abs(class_shares - ratios)) * 100)

    # -- reading a frame's files --------------------------------------------------------------------------------------

    def _frame_dir(self, output_dir: str, index: int) -> Path:
        relative = output_dir or frame_relative_dir(campaign_id=self.campaign.pk, index=index)
        return self.media_root / relative

    @staticmethod
    def _read_text(path: Path) -> str:
        try:
            return path.read_text(encoding="utf-8").strip()
        except FileNotFoundError as exc:
            raise ExportError(f"missing frame file {path}") from exc
        except (OSError, ValueError) as exc:
            raise ExportError(f"unreadable frame file {path}: {exc}") from exc

    @staticmethod
    def _read_json(path: Path) -> tuple[str, Any]:
        try:
            text = path.read_text(encoding="utf-8").strip()
            return text, json.loads(text)
        except FileNotFoundError as exc:
            raise ExportError(f"missing frame file {path}") from exc
        except (OSError, ValueError) as exc:
            raise ExportError(f"unreadable frame file {path}: {exc}") from exc


# ---------------------------------------------------------------------------------------------------------------------
# Entry points, and the folder: lock, recovery, swap
# ---------------------------------------------------------------------------------------------------------------------


def _previous_pinning(previous_root: Path | None, *, campaign: Any, options: ExportOptions) -> dict[int, str]:
    """Layout → split of the previous export, when it used the same ratios (else splits are assigned afresh)."""
    if previous_root is None:
        return {}
    try:
        data = json.loads((previous_root / "splits.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    if data.get("seed") != campaign.seed or data.get("ratios") != dict(zip(SPLITS, options.ratios, strict=True)):
        return {}
    return {
        int(layout): split
        for split, layout_list in (data.get("assignment") or {}).items()
        if split in SPLITS
        for layout in layout_list
    }


def _check_out_dir(out: Path, campaign: Any) -> Path | None:
    """The existing export to replace (None if ``out`` is new or empty); :class:`ExportError` if unusable."""
    if out.exists() and not out.is_dir():
        raise ExportError(f"--out {out}: exists and is not a directory")
    if not out.exists():
        return None
    manifest = out / MANIFEST_NAME
    if not manifest.is_file():
        if any(out.iterdir()):
            raise ExportError(
                f"--out {out}: not empty and not an Evenframe export (no {MANIFEST_NAME}); "
                "choose a new or empty directory"
            )
        return None
    header = read_manifest_header(manifest)
    if header.get("campaign_id") != campaign.pk:
        raise ExportError(
            f"--out {out}: holds an export of campaign {header.get('campaign_id')}, "
            f"not {campaign.pk}; choose another directory"
        )
    return out


def export_dataset(
    *,
    campaign_id: int | str,
    out_dir: str | Path,
    options: ExportOptions | None = None,
    media_root: str | Path | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> ExportSummary:
    """Export a campaign's done frames into ``out_dir`` (created or replaced as a whole, never half-written).

    A previous export of the same campaign in ``out_dir`` is reused: unchanged frame files are hard
    linked, not copied, and layouts keep their split when the ratios are the same.
    Raises :class:`ExportError` for an unknown campaign, bad options or an unwritable directory.
    """
    from django.conf import settings

    options = options or ExportOptions()
    campaign = find_campaign(key=campaign_id)
    out = Path(out_dir).expanduser().absolute()
    media = Path(media_root) if media_root is not None else Path(settings.MEDIA_ROOT)
    parent = out.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ExportError(f"--out {out}: cannot create {parent}: {exc.strerror or exc}") from exc
    if not os.access(parent, os.W_OK | os.X_OK):
        raise ExportError(f"--out {out}: {parent} is not writable")
    with _export_lock(out):
        _recover(out)
        previous_root = _check_out_dir(out, campaign)
        staging = parent / f".{out.name}{_STAGING_MARK}{os.getpid()}"
        try:
            staging.mkdir()
        except OSError as exc:
            raise ExportError(f"--out {out}: cannot write in {parent}: {exc.strerror or exc}") from exc
        sink: DirectorySink | None = None
        try:
            sink = DirectorySink(staging=staging, previous_root=previous_root)
            exporter = _Exporter(
                campaign=campaign,
                options=options,
                media_root=media,
                pinned=_previous_pinning(previous_root, campaign=campaign, options=options),
                progress=progress,
            )
            exporter.summary.out = str(out)
            for _ in exporter.run(sink):
                pass
            sink.close()
            shutil.rmtree(staging / SCRATCH_DIR)
            _swap_in(staging, out)
        except OSError as exc:
            raise ExportError(f"export to {out} failed, nothing changed: {exc}") from exc
        finally:
            if sink is not None:
                sink.close()
            if staging.exists():
                shutil.rmtree(staging, ignore_errors=True)
        return exporter.summary


# How often a starting export tries again after locking a lock file that a finishing export had just removed; each
# retry needs another export to finish in between, so running out of tries means the folder is very busy.
_LOCK_ATTEMPTS = 50


@contextlib.contextmanager
def _export_lock(out: Path) -> Iterator[None]:
    """Hold the lock that lets one export at a time write into ``out``; :class:`ExportError` if one already does.

    The lock is an ``flock`` on the hidden file ``.NAME.evenframe-lock`` beside ``out``, removed again on release
    so that no lock file is left behind. Removing a lock file opens a race: a starter that opened the file just
    before the holder removed it would lock the removed file while a third export creates and locks a new one,
    and both would write into ``out``. Hence the holder removes the file *before* unlocking it, only the holder
    ever removes it, and a starter that got its lock checks that the path still names the file it locked
    (same device and inode), opening the new file again if not.
    """
    parent = out.parent
    lock_path = parent / f".{out.name}.evenframe-lock"
    for _ in range(_LOCK_ATTEMPTS):
        try:
            lock = open(lock_path, "a")  # noqa: SIM115 - closed below or on release
        except OSError as exc:
            raise ExportError(f"--out {out}: cannot write in {parent}: {exc.strerror or exc}") from exc
        try:
            fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            lock.close()  # not ours: never remove a file another export holds
            raise ExportError(f"--out {out}: another export into it is running") from exc
        try:
            named = os.stat(lock_path)
        except FileNotFoundError:
            named = None
        held = os.fstat(lock.fileno())
        if named is not None and (named.st_dev, named.st_ino) == (held.st_dev, held.st_ino):
            break
        lock.close()  # we locked a file that its holder had already removed: try the one the path names now
    else:
        raise ExportError(f"--out {out}: another export into it is running")
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            lock_path.unlink()
        lock.close()


def _recover(out: Path) -> None:
    """Clean up after a run that died: stale staging folders go; an old export left mid-swap comes back."""
    for stale in out.parent.glob(f".{out.name}{_STAGING_MARK}*"):
        shutil.rmtree(stale, ignore_errors=True)
    olds = sorted(out.parent.glob(f".{out.name}{_OLD_MARK}*"))
    if olds and not out.exists():
        os.rename(olds.pop(), out)
    for old in olds:
        shutil.rmtree(old, ignore_errors=True)


def _swap_in(staging: Path, out: Path) -> None:
    if out.exists():
        old = out.parent / f".{out.name}{_OLD_MARK}{os.getpid()}"
        os.rename(out, old)
        try:
            os.rename(staging, out)
        except OSError:
            os.rename(old, out)
            raise
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.rename(staging, out)


def stream_dataset_zip(
    *, campaign: Any, options: ExportOptions | None = None, media_root: str | Path | None = None
) -> Iterator[bytes]:
    """The export as a zip, produced chunk by chunk (one frame's files at a time) for a streamed download.

    Entries sit under ``evenframe-campaign-<id>/``; unzipped, that folder verifies with ``verify_dataset``.
    """
    from django.conf import settings

    options = options or ExportOptions()
    media = Path(media_root) if media_root is not None else Path(settings.MEDIA_ROOT)
    buffer = ChunkBuffer()
    with tempfile.TemporaryDirectory(prefix="evenframe-zip-") as scratch:
        sink = ZipSink(scratch=Path(scratch), root=f"evenframe-campaign-{campaign.pk}", buffer=buffer)
        exporter = _Exporter(campaign=campaign, options=options, media_root=media)
        try:
            for _ in exporter.run(sink):
                chunk = buffer.drain()
                if chunk:
                    yield chunk
            sink.close()
        except Exception:
            log.exception("zip export of campaign %s failed; the download is incomplete", campaign.pk)
            sink.zip.fp = None  # no central directory: the truncated zip is visibly broken, not silently short
            sink.close()
            raise
        tail = buffer.drain()
        if tail:
            yield tail
