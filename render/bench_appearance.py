"""Appearance benchmark: how much of what the camera sees is a flat colour, and what textures cost.

``python -m render.bench_appearance [--frames 50] [--cpu-frames 10] [--width 320 --height 240]``

1. Flat share: over ``--frames`` default frames (seeds 0, 1, …, default composition), the share of
   visible pixels (depth > 0) whose albedo — the label pass's ``albedo`` image, Mitsuba's ``aov``
   integrator — does not vary in their 5 × 5 neighbourhood (every channel's range < 1e-4): pixels on
   a plain-coloured surface. Printed with textures off (``appearance.texture_probability`` = 0, the
   previous frames) and at the default budget. Goal: < 25 % at the defaults.
2. Cost: over ``--cpu-frames`` default frames end to end at ``--cpu-width`` × ``--cpu-height``
   (640×480), after a first pass that warms the texture cache, the scene-build stage (geometry,
   texture look-up and texture coordinates) as a share of the frame's wall time. Goal: ≤ 10 %.

The texture cache is ``EVENFRAME_TEXTURE_CACHE`` (default ``data/texture_cache``).
"""

from __future__ import annotations

import argparse
import copy
import statistics
import sys
import time
from typing import Any

import numpy as np

from .budget import DEFAULT_BUDGET
from .cli import default_composition

GOAL_FLAT_SHARE = 0.25
GOAL_BUILD_SHARE = 0.10
FLAT_RANGE = 1e-4


def flat_share(albedo_rgb: np.ndarray, visible: np.ndarray) -> float:
    """Share of ``visible`` pixels whose albedo's per-channel range over the 5 × 5 neighbourhood is < 1e-4."""
    from scipy import ndimage

    spread = np.zeros(visible.shape, dtype=np.float32)
    for channel in range(3):
        values = np.asarray(albedo_rgb[..., channel], dtype=np.float32)
        spread = np.maximum(spread, ndimage.maximum_filter(values, size=5) - ndimage.minimum_filter(values, size=5))
    flat = (spread < FLAT_RANGE) & visible
    return float(flat.sum() / max(int(visible.sum()), 1))


def _budget(width_px: int, height_px: int, texture_probability: float | None = None) -> dict[str, Any]:
    budget = copy.deepcopy(DEFAULT_BUDGET)
    budget["render"].update(width_px=width_px, height_px=height_px)
    if texture_probability is not None:
        budget["appearance"]["texture_probability"] = texture_probability
    return budget


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m render.bench_appearance", description=__doc__.split("\n\n")[0])
    parser.add_argument("--frames", type=int, default=50)
    parser.add_argument("--width", type=int, default=320)
    parser.add_argument("--height", type=int, default=240)
    parser.add_argument("--cpu-frames", type=int, default=10)
    parser.add_argument("--cpu-width", type=int, default=640)
    parser.add_argument("--cpu-height", type=int, default=480)
    parser.add_argument("--variant", default="llvm_ad_rgb", choices=("llvm_ad_rgb", "scalar_rgb"))
    args = parser.parse_args(argv)
    if args.frames < 1 or args.cpu_frames < 0:
        parser.error("--frames must be at least 1 and --cpu-frames at least 0")

    from .backend import init_renderer  # deferred: the render core loads after the arguments are checked
    from .frame import render_frame  # deferred: the render core loads after the arguments are checked

    # deferred: the render core loads after the arguments are checked
    from .scene import build_scene, render_label_and_aux
    from .spec import make_spec  # deferred: the render core loads after the arguments are checked

    choice = init_renderer(variant=args.variant)
    composition = default_composition()
    print(f"bench_appearance: {args.frames} frames at {args.width}x{args.height}, variant {choice.variant}")
    shares: dict[str, list[float]] = {"textures off": [], "default budget": []}
    for label, probability in (("textures off", 0.0), ("default budget", None)):
        budget = _budget(args.width, args.height, probability)
        for seed in range(args.frames):
            try:
                spec = make_spec(budget, composition, seed)
            except ValueError:
                continue
            aux = render_label_and_aux(build_scene(spec))
            shares[label].append(flat_share(aux.albedo_rgb, aux.depth_m > 0))
    print(
        f"\nshare of visible pixels on flat-coloured surfaces (albedo constant over 5x5), {len(shares['textures off'])} frames:"
    )
    for label, values in shares.items():
        print(f"  {label:<15} mean {np.mean(values):.3f}  median {np.median(values):.3f}  max {np.max(values):.3f}")
    mean_share = float(np.mean(shares["default budget"]))
    print(
        f"goal < {GOAL_FLAT_SHARE:.2f} at the defaults: {mean_share:.3f} "
        f"({'meets' if mean_share < GOAL_FLAT_SHARE else 'MISSES'})"
    )

    if args.cpu_frames:
        budget = _budget(args.cpu_width, args.cpu_height)
        specs = [make_spec(budget, composition, 1000 + seed) for seed in range(args.cpu_frames)]
        for spec in specs:  # warm the texture cache (and the kernels' disk cache)
            render_frame(spec)
        rows = []
        for spec in specs:
            start = time.perf_counter()
            result = render_frame(spec)
            rows.append((result.timings_s["scene_build"], time.perf_counter() - start))
        share = statistics.median(build / total for build, total in rows)
        print(
            f"\nscene build (geometry, textures, texture coordinates) at {args.cpu_width}x{args.cpu_height}, "
            f"warm texture cache, {len(rows)} frames: median {statistics.median(b for b, _ in rows):.3f} s of "
            f"{statistics.median(t for _, t in rows):.3f} s per frame, share {share:.3f} "
            f"(goal <= {GOAL_BUILD_SHARE:.2f}: {'meets' if share <= GOAL_BUILD_SHARE else 'MISSES'})"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
