"""Texture generation time per family, and a contact sheet to look at.

``python -m render.bench_textures [--sheet /tmp/tex.png] [--resolution 512] [--seeds 2] [--first-seed 0]
[--family NAME ...]``

For every family and ``seeds`` seeds from ``--first-seed`` on it draws parameters with
``sample_texture_params`` (from a generator seeded by the seed), generates the
set in memory at ``--resolution`` and prints the wall time per family (mean
and maximum over the seeds; one warm-up generation at 64 px first, excluded).
Target: well under 1 s per 512 px set.

The sheet has one row per family and, per seed, four cells: the whole tile's
base colour (downscaled), a 1:1 crop of the base colour, the same crop lit by
a raking light from the upper left through the normal map (Lambert, so relief
shows), and the whole roughness map (black 0, white 1).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw

from render.textures import FAMILIES, generate_texture, sample_texture_params
from render.textures.maps import TextureMaps, linear_to_srgb8, srgb8_to_linear

TARGET_S = 1.0
LABEL_PX = 14


def raking_light(maps: TextureMaps, crop: slice) -> np.ndarray:
    """Base colour × max(0, n·l) for a light 30° above the surface from the upper left (sRGB uint8)."""
    light = np.array([-0.6, -0.6, 0.5], dtype=np.float32)
    light /= np.linalg.norm(light)
    # Normal y points towards increasing rows (down the image); "upper left" is −x, −y.
    shade = np.clip(maps.normal[crop, crop] @ light, 0.0, 1.0) / light[2]
    return linear_to_srgb8(srgb8_to_linear(maps.base_color_srgb8[crop, crop]) * shade[..., None] * 0.8)


def cells(maps: TextureMaps, cell_px: int) -> list[np.ndarray]:
    crop = slice(0, min(cell_px, maps.resolution_px))

    def fit(image: np.ndarray) -> np.ndarray:
        mode = "L" if image.ndim == 2 else "RGB"
        return np.asarray(
            Image.fromarray(image, mode).convert("RGB").resize((cell_px, cell_px), Image.Resampling.LANCZOS)
        )

    rough = np.round(maps.roughness * 255).astype(np.uint8)
    return [
        fit(maps.base_color_srgb8),
        fit(maps.base_color_srgb8[crop, crop]),
        fit(raking_light(maps, crop)),
        fit(rough),
    ]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m render.bench_textures", description=__doc__.split("\n\n")[0])
    parser.add_argument("--sheet", type=Path, help="write the contact sheet PNG here")
    parser.add_argument("--resolution", type=int, default=512)
    parser.add_argument("--seeds", type=int, default=2)
    parser.add_argument("--first-seed", type=int, default=0)
    parser.add_argument("--cell", type=int, default=192, help="sheet cell size, px")
    parser.add_argument("--family", action="append", choices=sorted(FAMILIES), help="only these families")
    args = parser.parse_args(argv)
    names = args.family or list(FAMILIES)

    generate_texture(names[0], None, 0, resolution_px=64)
    rows: list[np.ndarray] = []
    worst = 0.0
    print(f"{'family':<14} {'mean_s':>7} {'max_s':>7}  ({args.resolution} px, {args.seeds} seeds)")
    for name in names:
        times, row_cells = [], []
        for seed in range(args.first_seed, args.first_seed + args.seeds):
            params = sample_texture_params(name, np.random.default_rng(seed))
            start = time.perf_counter()
            maps = generate_texture(name, params, seed, resolution_px=args.resolution)
            times.append(time.perf_counter() - start)
            if args.sheet:
                row_cells.extend(cells(maps, args.cell))
        worst = max(worst, max(times))
        print(f"{name:<14} {statistics.mean(times):7.3f} {max(times):7.3f}")
        if args.sheet:
            row = np.concatenate(row_cells, axis=1)
            label = Image.new("RGB", (row.shape[1], LABEL_PX + 4), (255, 255, 255))
            ImageDraw.Draw(label).text(
                (4, 2),
                f"{name}  (seeds {args.first_seed}.."
                f"{args.first_seed + args.seeds - 1}: full | 1:1 crop | lit | roughness)",
                fill=(0, 0, 0),
            )
            rows.append(np.concatenate([np.asarray(label), row], axis=0))
    if args.sheet:
        Image.fromarray(np.concatenate(rows, axis=0)).save(args.sheet)
        print(f"sheet: {args.sheet}")
    print(f"slowest set: {worst:.3f} s (target < {TARGET_S:.1f} s)")
    return 0 if worst < TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
