"""Real scene sampling for the planner: room sizes and a low-resolution label pass. No Django.

The scheduler asks :func:`max_objects_for_frame` how many instances a frame's
room may hold (the density limit times the floor area of the room its layout
seed gives). :func:`simulate` runs a campaign's quota filling frame by frame
with either the planner or uniform sampling, using the render core for every
frame: ``make_spec`` samples the room, furniture, lights and camera, and
``render_frame`` at a small resolution and one sample per pixel produces the
label pass whose visibility and box sizes decide acceptance. The RGB pass at
that size and 1 spp costs little next to the scene build and the label pass;
the CPU seconds per frame are measured and reported.
"""

from __future__ import annotations

import copy
import time
from collections import Counter
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from campaigns import planner
from render.budget import normalize_budget

# Render cost grows with the number of objects; a frame never holds more than this many, whatever the room.
MAX_OBJECTS_PER_FRAME = 12


def room_floor_area_m2(*, budget: Mapping[str, Any], seeds: planner.FrameSeeds) -> float:
    """Floor area of the room this frame's layout seed gives (the room is the layout stream's first draw)."""
    from render.layout import sample_room  # deferred: keeps render.layout (trimesh, shapely) out of Django start-up

    # deferred: keeps render.spec (scene samplers, trimesh) out of Django start-up
    from render.spec import axis_rng, derive_sub_seeds

    sub_seeds = derive_sub_seeds(
        seeds.seed, layout_seed=seeds.layout_seed, lighting_seed=seeds.lighting_seed, camera_seed=seeds.camera_seed
    )
    room = sample_room(normalize_budget(dict(budget)), axis_rng(sub_seeds, "layout"))
    return float(room["width_m"]) * float(room["depth_m"])


def max_objects_for_frame(*, budget: Mapping[str, Any], seeds: planner.FrameSeeds) -> int:
    return planner.max_objects_for_room(
        floor_area_m2=room_floor_area_m2(budget=budget, seeds=seeds),
        max_objects_per_m2=budget["room"]["max_objects_per_m2"],
        cap=MAX_OBJECTS_PER_FRAME,
    )


@dataclass(frozen=True)
class QuotaRule:
    target_accepted: int
    min_visible_fraction: float
    min_box_px: float


@dataclass
class SimulationResult:
    strategy: str
    frames: int
    filled: bool
    accepted: dict[str, int]
    placed: dict[str, int]
    surplus: int
    quota_sum: int
    frame_cpu_s: list[float] = field(default_factory=list)
    layout_errors: int = 0
    wall_s: float = 0.0

    @property
    def surplus_fraction(self) -> float:
        return self.surplus / self.quota_sum if self.quota_sum else 0.0


LabelPass = Callable[[dict[str, Any], dict[str, int], planner.FrameSeeds], list[dict[str, Any]]]


def label_pass_budget(budget: Mapping[str, Any], *, width_px: int, height_px: int) -> dict[str, Any]:
    low = copy.deepcopy(dict(budget))
    low["render"] = {**low["render"], "width_px": width_px, "height_px": height_px, "spp": 1, "max_depth": 2}
    return low


def render_core_label_pass(*, threads: int | None = None, variant: str | None = None) -> LabelPass:
    """Labels of one frame from the render core (``make_spec`` + ``render_frame``, nothing written)."""

    def run(budget: dict[str, Any], composition: dict[str, int], seeds: planner.FrameSeeds) -> list[dict[str, Any]]:
        # deferred: render-core entry point stays a call-time import (workers load the renderer late)
        from render.frame import render_frame

        # deferred: keeps render.spec (scene samplers, trimesh) out of Django start-up
        from render.spec import make_spec

        spec = make_spec(
            budget,
            composition,
            seeds.seed,
            layout_seed=seeds.layout_seed,
            lighting_seed=seeds.lighting_seed,
            camera_seed=seeds.camera_seed,
            view_slot=seeds.view_slot,
        )
        return list(render_frame(spec, variant=variant, threads=threads).labels.get("instances", []))

    return run


def simulate(
    *,
    strategy: str,
    quotas: Mapping[str, QuotaRule],
    budget: Mapping[str, Any],
    campaign_seed: int,
    label_width_px: int = 80,
    label_height_px: int = 60,
    max_frames: int = 2000,
    in_flight: int = 1,
    label_pass: LabelPass | None = None,
) -> SimulationResult:
    """Fill ``quotas`` frame by frame with ``strategy`` ("planner" or "uniform") on real scene sampling.

    Both strategies walk the same variation budget, get the same room (and so
    the same density limit) for the same frame index, and judge labels with
    the same per-class thresholds, scaled from the campaign's resolution to
    the label pass's. ``in_flight`` frames are planned before the oldest one's
    labels are known, as the scheduler does with several frames queued.
    """
    from render.layout import LayoutError  # deferred: keeps render.layout (trimesh, shapely) out of Django start-up

    if strategy not in ("planner", "uniform"):
        raise ValueError(f"strategy must be 'planner' or 'uniform', got {strategy!r}")
    label_pass = label_pass or render_core_label_pass()
    scale = label_width_px / float(budget["render"]["width_px"])
    low_budget = label_pass_budget(budget, width_px=label_width_px, height_px=label_height_px)
    variation = budget["variation"]
    names = sorted(quotas)
    accepted: Counter[str] = Counter()
    placed: Counter[str] = Counter()
    rng = np.random.default_rng(np.random.SeedSequence([campaign_seed, 99]))
    pending: list[tuple[dict[str, int], planner.FrameSeeds, int]] = []
    failed_layouts: set[int] = set()
    last: tuple[tuple[int, int, int], dict[str, int]] | None = None
    index = 0
    frames = 0
    layout_errors = 0
    cpu_times: list[float] = []
    wall_start = time.perf_counter()

    def progress() -> list[planner.ClassProgress]:
        flight: Counter[str] = Counter()
        for composition, _, _ in pending:
            flight.update(composition)
        return [planner.ClassProgress(n, quotas[n].target_accepted, accepted[n], placed[n], flight[n]) for n in names]

    def filled() -> bool:
        return all(accepted[n] >= quotas[n].target_accepted for n in names)

    while not filled() and frames < max_frames:
        while len(pending) < in_flight:
            needs = planner.placements_needed(progress())
            if strategy == "planner" and sum(needs.values()) <= 0:
                break
            continue_layout = (
                last is not None
                and last[0][0] not in failed_layouts
                and (strategy == "uniform" or planner.composition_still_useful(last[1], needs))
            )
            coordinates = planner.next_coordinates(
                last[0] if last else None,
                lighting_per_layout=variation["lighting_per_layout"],
                views_per_lighting=variation["views_per_lighting"],
                layouts=variation["layouts"],
                continue_layout=continue_layout,
            )
            seeds = planner.frame_seeds(
                campaign_seed=campaign_seed,
                index=index,
                layout_index=coordinates[0],
                lighting_index=coordinates[1],
                view_index=coordinates[2],
                views_per_lighting=variation["views_per_lighting"],
            )
            if last is not None and continue_layout and coordinates[0] == last[0][0]:
                composition = dict(last[1])
            else:
                limit = max_objects_for_frame(budget=budget, seeds=seeds)
                if strategy == "planner":
                    composition = planner.plan_composition(progress(), max_objects=limit)
                else:
                    composition = planner.uniform_composition(names, max_objects=limit, rng=rng)
            if not composition:
                break
            pending.append((composition, seeds, coordinates[0]))
            last = (coordinates, composition)
            index += 1
        if not pending:
            break
        composition, seeds, layout_index = pending.pop(0)
        frames += 1
        cpu_start = time.process_time()
        try:
            labels = label_pass(low_budget, composition, seeds)
        except LayoutError:
            failed_layouts.add(layout_index)
            layout_errors += 1
            cpu_times.append(time.process_time() - cpu_start)
            continue
        cpu_times.append(time.process_time() - cpu_start)
        placed.update(composition)
        for label in labels:
            name = label.get("class_name")
            if name is None or name not in quotas:
                continue
            rule = quotas[name]
            # No min_contrast: the label pass's 1-spp, low-resolution image is far noisier than the campaign's, so
            # its contrast says nothing about the campaign's frames (box sizes, unlike contrast, scale with size).
            ok, _ = planner.accept_instance(
                label, min_visible_fraction=rule.min_visible_fraction, min_box_px=rule.min_box_px * scale
            )
            if ok:
                accepted[name] += 1
    surplus = sum(max(0, accepted[n] - quotas[n].target_accepted) for n in names)
    return SimulationResult(
        strategy=strategy,
        frames=frames,
        filled=filled(),
        accepted=dict(accepted),
        placed=dict(placed),
        surplus=surplus,
        quota_sum=sum(q.target_accepted for q in quotas.values()),
        frame_cpu_s=cpu_times,
        layout_errors=layout_errors,
        wall_s=time.perf_counter() - wall_start,
    )
