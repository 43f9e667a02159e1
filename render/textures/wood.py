"""Wood: figured grain for furniture and strip parquet with joints.

Growth rings are the contour lines of ``y + d(x, y)``, where y is across the
grain and d a smooth periodic displacement that is long along the grain:
where d has a local extremum along the grain the contours close into the
arches ("cathedrals") of flat-sawn boards, elsewhere they run as the straight
stripes of quarter-sawn stock. Within a ring the colour darkens from early
to late wood and resets at the next ring; fine pore streaks follow the grain.
The grain runs along the image's x axis (columns, +u).

References
----------
- R. B. Hoadley, *Understanding Wood*, 2nd ed., Taunton, 2000 (ring
  structure, early/late wood, figure).
- Ebert et al., *Texturing and Modeling*, 3rd ed. (2003), ch. 2 (ring
  textures from a distorted distance field).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from .maps import Surface, jittered_palette, mix
from .noise import periodic_noise, pixel_coordinates, row_lattice, smoothstep, warp, whole_count

# (early wood, late wood) sRGB, eyeballed from finished samples.
WOOD_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "oak": ((0.80, 0.65, 0.45), (0.55, 0.38, 0.22)),
    "white_oak": ((0.84, 0.74, 0.58), (0.62, 0.50, 0.36)),
    "walnut": ((0.46, 0.32, 0.22), (0.24, 0.15, 0.10)),
    "maple": ((0.90, 0.80, 0.64), (0.76, 0.62, 0.44)),
    "cherry": ((0.72, 0.44, 0.28), (0.50, 0.26, 0.15)),
    "ash": ((0.86, 0.78, 0.64), (0.62, 0.52, 0.38)),
    "teak": ((0.66, 0.46, 0.26), (0.44, 0.28, 0.14)),
    "wenge": ((0.30, 0.22, 0.17), (0.12, 0.09, 0.07)),
    "pine": ((0.90, 0.76, 0.54), (0.70, 0.46, 0.24)),
    "grey_wash": ((0.72, 0.70, 0.66), (0.50, 0.47, 0.43)),
}


@dataclass(frozen=True)
class Grain:
    """Scalar fields of a wood surface, each (n, n) float32 in [0, 1] unless noted."""

    late_wood: np.ndarray  # darkening from the ring profile
    pores: np.ndarray  # fine dark streaks along the grain
    tone: np.ndarray  # broad colour variation, zero mean, about unit std
    rings: int  # whole grain lines across the image


def wood_grain(
    rng: np.random.Generator,
    size_px: int,
    tile_size_m: float,
    *,
    grain_spacing_m: float,
    waviness: float,
    pore_strength: float,
) -> Grain:
    """Periodic wood grain along x: ring profile, pores and broad tone.

    ``grain_spacing_m`` is the mean spacing of the grain lines as seen on the
    surface (a sawn face cuts the growth rings at a shallow angle, so its
    lines are several times wider apart than the rings themselves); it is
    snapped so a whole number of lines spans the image. ``waviness`` (0–1)
    scales the displacement of the lines, whose standard deviation is
    ``0.05 · waviness · tile_size_m``.
    """
    pixel_m = tile_size_m / size_px
    rings = whole_count(tile_size_m, grain_spacing_m)
    # Smooth and a little longer along the grain (stretch 1.5) so the arches are few, large and elongated like
    # flat-sawn figure; a small wiggle keeps the lines from looking drawn.
    displacement = periodic_noise(
        rng, size_px, tile_size_m, largest_m=tile_size_m, smallest_m=0.12 * tile_size_m, beta=4.0, stretch=1.5
    )
    wiggle = periodic_noise(
        rng, size_px, tile_size_m, largest_m=0.1 * tile_size_m, smallest_m=0.01 * tile_size_m, beta=2.0, stretch=6.0
    )
    shift_m = 0.05 * waviness * tile_size_m * displacement + 0.1 * grain_spacing_m * wiggle
    y_px, _ = pixel_coordinates(size_px)
    phase = (y_px * pixel_m + shift_m) * (rings / tile_size_m)
    ring_index = np.floor(phase).astype(np.int64) % rings
    ring_strength = rng.uniform(0.4, 1.0, size=rings).astype(np.float32)
    within = phase - np.floor(phase)
    # Early wood light, darkening into late wood, a crisp late-wood line, sharp reset at the next ring.
    late = 0.55 * within**3 + 0.7 * smoothstep(0.80, 0.93, within) * (1.0 - smoothstep(0.95, 1.0, within))
    late = np.clip(late, 0.0, 1.0) * ring_strength[ring_index]
    streaks = periodic_noise(
        rng, size_px, tile_size_m, largest_m=0.2 * tile_size_m, smallest_m=0.7 * pixel_m, beta=0.5, stretch=25.0
    )
    streaks = warp(streaks, shift_m / pixel_m, np.zeros_like(shift_m))
    pores = smoothstep(0.8, 2.2, streaks) * pore_strength
    tone = periodic_noise(
        rng, size_px, tile_size_m, largest_m=tile_size_m, smallest_m=0.05 * tile_size_m, beta=2.0, stretch=8.0
    )
    return Grain(late_wood=late.astype(np.float32), pores=pores.astype(np.float32), tone=tone, rings=rings)


def wood(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Figured solid wood (furniture tops, panels): rings, pores and tone, varnished.

    Relief: pores sink ``20 µm`` below the surface and late wood ``5 µm``
    (varnished furniture is nearly flat; only sheen follows the grain).
    """
    tile_size_m = float(params["tile_size_m"])
    early, late_colour = jittered_palette(WOOD_PALETTES[params["palette"]], params)
    grain = wood_grain(
        rng,
        size_px,
        tile_size_m,
        grain_spacing_m=float(params["grain_spacing_m"]),
        waviness=float(params["grain_waviness"]),
        pore_strength=float(params["pore_strength"]),
    )
    contrast = float(params["grain_contrast"])
    darkness = np.clip(contrast * (0.75 * grain.late_wood + 0.45 * grain.pores), 0.0, 1.0)
    albedo = mix(early, late_colour, darkness) * (1.0 + 0.07 * grain.tone)[..., None]
    roughness = float(params["roughness"]) + 0.12 * grain.pores + 0.03 * grain.tone
    height = -(20e-6 * grain.pores + 5e-6 * grain.late_wood)
    return Surface(
        albedo,
        roughness.astype(np.float32),
        height.astype(np.float32),
        {"grain_spacing_m": tile_size_m / grain.rings, "grain_lines": grain.rings},
    )


def parquet(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Strip parquet: rows of boards along x with random end offsets, per-board grain and tone, V-jointed.

    Board width and length are snapped so whole numbers of rows and of boards
    per row span the image (``info`` holds the values used). Each board shows
    its own window of one periodic grain field (shifted by a random offset,
    so neighbours differ) and its own colour: value jitter with standard
    deviation ``board_tone_variation`` (relative) and a hue jitter of a fifth
    of that in turns. Joints are micro-bevelled grooves ``joint_width_m`` wide
    and ``joint_depth_m`` deep, darkened in the base colour.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    rows = whole_count(tile_size_m, float(params["board_width_m"]))
    per_row = whole_count(tile_size_m, float(params["board_length_m"]))
    lattice = row_lattice(size_px, rows, per_row, rng.uniform(0.0, size_px, size=rows))
    early, late_colour = jittered_palette(WOOD_PALETTES[params["palette"]], params)
    grain = wood_grain(
        rng,
        size_px,
        tile_size_m,
        grain_spacing_m=float(params["grain_spacing_m"]),
        waviness=float(params["grain_waviness"]),
        pore_strength=float(params["pore_strength"]),
    )
    boards = rows * per_row
    shift_y = rng.integers(0, size_px, size=boards)
    shift_x = rng.integers(0, size_px, size=boards)
    variation = float(params["board_tone_variation"])
    board_value = np.clip(1.0 + variation * rng.standard_normal(boards), 0.6, 1.4).astype(np.float32)
    board_warmth = (0.2 * variation * rng.standard_normal(boards)).astype(np.float32)
    board_rough = rng.normal(0.0, 0.04, size=boards).astype(np.float32)

    ids = lattice.piece_id
    rows_idx, cols_idx = np.indices((size_px, size_px))
    gather_y = (rows_idx + shift_y[ids]) % size_px
    gather_x = (cols_idx + shift_x[ids]) % size_px
    late = grain.late_wood[gather_y, gather_x]
    pores = grain.pores[gather_y, gather_x]
    tone = grain.tone[gather_y, gather_x]

    contrast = float(params["grain_contrast"])
    darkness = np.clip(contrast * (0.75 * late + 0.45 * pores), 0.0, 1.0)
    albedo = mix(early, late_colour, darkness) * (board_value[ids] * (1.0 + 0.05 * tone))[..., None]
    # Warmer boards: a little more red, a little less blue.
    warmth = board_warmth[ids][..., None] * np.array([1.0, 0.0, -1.0], dtype=np.float32)
    albedo = albedo * (1.0 + warmth)

    joint_px = float(params["joint_width_m"]) / pixel_m
    joint = lattice.joint_coverage(joint_px)
    bevel_px = max(joint_px, 1.0)
    depth_m = float(params["joint_depth_m"])
    groove = 1.0 - smoothstep(0.0, 0.5 * joint_px + bevel_px, lattice.joint_distance_px)
    albedo = albedo * (1.0 - 0.55 * joint - 0.15 * groove)[..., None]
    height = -(depth_m * groove + 20e-6 * pores + 5e-6 * late)
    roughness = float(params["roughness"]) + board_rough[ids] + 0.1 * pores + 0.3 * joint
    info = {
        "rows": rows,
        "boards_per_row": per_row,
        "board_width_m": tile_size_m / rows,
        "board_length_m": tile_size_m / per_row,
        "grain_spacing_m": tile_size_m / grain.rings,
    }
    return Surface(albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), info)
