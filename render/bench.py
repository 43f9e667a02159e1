"""Benchmark: end-to-end frame time against Mitsuba's render call alone.

``python -m render.bench --frames 5 [--width 640 --height 480 --spp 32] [--variant llvm_ad_rgb]``

Renders one warm-up frame (JIT compilation, integrator construction; excluded), then ``--frames``
frames end to end (spec, scene build, render, label pass, labels, encode with the files written
to a temporary directory) and prints the median of each stage and the overhead ratio

    end-to-end wall time of a frame / its ``render`` stage (``mi.render`` of the RGB pass alone)

as the median over frames. Target: ≤ 1.15 at 640×480, 32 spp on a 2-core machine.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

from .cli import default_composition

TARGET_RATIO = 1.15


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m render.bench", description=__doc__.split("\n\n")[0])
    parser.add_argument("--frames", type=int, default=5)
    parser.add_argument("--width", type=int, default=640)
    parser.add_argument("--height", type=int, default=480)
    parser.add_argument("--spp", type=int, default=32)
    parser.add_argument("--seed", type=int, default=1, help="seed of the first measured frame")
    parser.add_argument("--variant", default="llvm_ad_rgb", choices=("llvm_ad_rgb", "scalar_rgb"))
    parser.add_argument("--threads", type=int)
    args = parser.parse_args(argv)
    if args.frames < 1:
        parser.error("--frames must be at least 1")

    from .backend import init_renderer  # deferred: the render core loads after the arguments are checked

    # deferred: the render core loads after the arguments are checked
    from .frame import STAGES, render_frame_from_inputs

    choice = init_renderer(variant=args.variant, threads=args.threads)
    budget = {"render": {"width_px": args.width, "height_px": args.height, "spp": args.spp}}
    composition = default_composition()
    print(
        f"bench: {args.width}x{args.height}, {args.spp} spp, variant {choice.variant}, "
        f"classes {','.join(f'{k}={v}' for k, v in composition.items())}, {args.frames} frames + 1 warm-up"
    )

    rows: list[tuple[dict[str, float], float]] = []
    with tempfile.TemporaryDirectory(prefix="evenframe-bench-") as tmp:
        for index in range(args.frames + 1):
            seed = args.seed + index - 1 if index else 0
            start = time.perf_counter()
            result = render_frame_from_inputs(
                budget,
                composition,
                seed,
                out_dir=Path(tmp) / f"frame{index}",
                variant=choice.variant,
                threads=args.threads,
            )
            end_to_end_s = time.perf_counter() - start
            label = "warm-up" if index == 0 else f"frame {index}"
            stages = " ".join(f"{k}={v:.3f}" for k, v in result.timings_s.items())
            print(
                f"  {label:<8} seed {seed:<4} e2e {end_to_end_s:6.3f} s  ratio "
                f"{end_to_end_s / result.timings_s['render']:5.3f}  ({stages})"
            )
            if index:
                rows.append((result.timings_s, end_to_end_s))

    print(f"\nmedian over {len(rows)} frames")
    print(f"{'stage':<12} {'seconds':>9}")
    for stage in STAGES:
        print(f"{stage:<12} {statistics.median(t[stage] for t, _ in rows):>9.3f}")
    end_to_end = statistics.median(e for _, e in rows)
    print(f"{'end-to-end':<12} {end_to_end:>9.3f}")
    ratio = statistics.median(e / t["render"] for t, e in rows)
    verdict = "meets" if ratio <= TARGET_RATIO else "MISSES"
    print(
        f"\nend-to-end / render ratio (median of per-frame ratios): {ratio:.3f}  "
        f"({verdict} the target {TARGET_RATIO:.2f})"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
