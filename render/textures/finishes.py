"""Applied finishes: painted plaster, wallpaper, brushed metal.

Painted plaster is uniform paint over a relief (roller stipple, orange peel,
knockdown plateaus or trowelled skim coat) with a slight tone variation.
Wallpaper repeats an original motif — stripes, polka dots or a mirror-
symmetric damask-like ornament on a half-drop lattice — on fibrous paper
with the ink slightly raised. Brushed metal is noise stretched along the
brushing direction (x) plus a few long scratches; its base colour is the
metal's specular reflectance.

References
----------
- Ebert et al., *Texturing and Modeling*, 3rd ed. (2003), ch. 2
  (regular patterns from cell coordinates, antialiased edges).
- T. Akenine-Möller et al., *Real-Time Rendering*, 4th ed., CRC Press, 2018,
  tab. 9.2 (specular reflectance F0 of metals).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from .maps import Surface, jittered_palette, mix
from .noise import band_coverage, blur, distance_to_lines, periodic_noise, pixel_coordinates, smoothstep, whole_count

PAINT_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "white": ((0.93, 0.93, 0.91),),
    "warm_white": ((0.94, 0.91, 0.84),),
    "light_grey": ((0.80, 0.80, 0.79),),
    "greige": ((0.76, 0.72, 0.66),),
    "sage": ((0.70, 0.75, 0.66),),
    "pale_blue": ((0.74, 0.81, 0.86),),
    "ochre": ((0.84, 0.70, 0.45),),
    "terracotta": ((0.76, 0.52, 0.42),),
    "blush": ((0.88, 0.76, 0.72),),
}
PLASTER_FINISHES = ("smooth", "orange_peel", "knockdown", "skim")
# (ground, ink, accent) sRGB.
WALLPAPER_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "cream_gold": ((0.92, 0.88, 0.78), (0.76, 0.62, 0.36), (0.84, 0.76, 0.58)),
    "white_grey": ((0.93, 0.93, 0.92), (0.62, 0.63, 0.65), (0.80, 0.80, 0.80)),
    "sage_white": ((0.66, 0.72, 0.62), (0.92, 0.93, 0.88), (0.55, 0.62, 0.52)),
    "navy_gold": ((0.16, 0.20, 0.34), (0.76, 0.62, 0.34), (0.30, 0.34, 0.48)),
    "blush_rose": ((0.92, 0.82, 0.78), (0.76, 0.50, 0.50), (0.86, 0.70, 0.66)),
    "charcoal_silver": ((0.22, 0.22, 0.24), (0.62, 0.62, 0.64), (0.34, 0.34, 0.36)),
    "duck_egg_white": ((0.70, 0.82, 0.82), (0.95, 0.95, 0.93), (0.58, 0.70, 0.70)),
    "mustard_cream": ((0.82, 0.66, 0.30), (0.94, 0.90, 0.80), (0.68, 0.53, 0.22)),
    "green_cream": ((0.22, 0.36, 0.28), (0.90, 0.86, 0.74), (0.34, 0.48, 0.38)),
}
WALLPAPER_PATTERNS = ("stripes", "damask", "dots")
# Specular reflectance at normal incidence, sRGB-encoded (from memory, after Real-Time Rendering tab. 9.2).
METAL_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "stainless": ((0.77, 0.77, 0.76),),
    "aluminium": ((0.93, 0.93, 0.94),),
    "brass": ((0.93, 0.80, 0.52),),
    "copper": ((0.97, 0.80, 0.72),),
    "bronze": ((0.80, 0.62, 0.44),),
    "gold": ((0.98, 0.88, 0.60),),
    "dark_steel": ((0.48, 0.49, 0.51),),
}


def plaster(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Painted plaster: uniform paint, a slight tone variation and one of four reliefs of height ``relief_m``.

    smooth: roller stipple (features 1–5 mm, 0.3 × relief); orange_peel:
    sprayed bumps 1.5–8 mm; knockdown: flattened splatter plateaus 6–60 mm
    across; skim: hand-trowelled coat with overlapping strokes, stronger tone
    variation and burnished (smoother) patches.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    (paint,) = jittered_palette(PAINT_PALETTES[params["palette"]], params)
    relief_m = float(params["relief_m"])
    variation = float(params["colour_variation"])
    finish_kind = params["finish"]
    clouds = periodic_noise(rng, size_px, tile_size_m, largest_m=0.6, smallest_m=0.02, beta=2.2)
    stipple = periodic_noise(rng, size_px, tile_size_m, largest_m=0.005, smallest_m=max(0.001, pixel_m), beta=1.0)
    roughness: np.ndarray = np.full((size_px, size_px), float(params["roughness"]), np.float32)
    tone = variation * clouds
    if finish_kind == "smooth":
        height = 0.3 * relief_m * stipple
    elif finish_kind == "orange_peel":
        bumps = periodic_noise(rng, size_px, tile_size_m, largest_m=0.008, smallest_m=max(0.0015, pixel_m), beta=1.5)
        height = relief_m * (bumps + 0.2 * stipple)
    elif finish_kind == "knockdown":
        splats = periodic_noise(rng, size_px, tile_size_m, largest_m=0.06, smallest_m=max(0.006, 2 * pixel_m), beta=2.0)
        plateau = smoothstep(0.4, 0.7, splats)
        height = relief_m * (plateau + 0.15 * stipple)
        tone = tone - 0.3 * variation * plateau
    else:
        strokes = np.zeros((size_px, size_px), np.float32)
        for angle in rng.uniform(0.0, 180.0, size=3):
            stroke = periodic_noise(
                rng,
                size_px,
                tile_size_m,
                largest_m=0.25,
                smallest_m=max(0.004, 2 * pixel_m),
                beta=2.0,
                stretch=6.0,
                angle_deg=float(angle),
            )
            mask = smoothstep(-0.2, 0.8, periodic_noise(rng, size_px, tile_size_m, largest_m=0.5, smallest_m=0.05))
            strokes += stroke * mask
        burnish = smoothstep(0.5, 1.5, strokes)
        height = 0.4 * relief_m * (strokes + 0.1 * stipple)
        tone = 2.0 * variation * (0.7 * clouds + 0.4 * strokes)
        roughness = roughness - 0.25 * burnish
    albedo = paint * (1.0 + tone + 0.004 * stipple)[..., None]
    roughness = roughness + 0.02 * stipple
    return Surface(
        albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), {"finish": finish_kind}
    )


def _damask_motif(rng: np.random.Generator, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A random mirror-symmetric ornament in cell coordinates a, b ∈ [−0.5, 0.5]: (fill, accent) in [0, 1].

    Gaussian lobes placed on one half and mirrored about a = 0, a short
    central stem, all inside an ogee-like envelope, filled where the sum
    passes a threshold and outlined just outside it; the envelope's own
    outline draws the ogee frame that links neighbouring motifs.
    """
    mirrored = np.abs(a)
    field = 0.7 * np.exp(-((mirrored / 0.03) ** 2)) * smoothstep(0.30, 0.18, np.abs(b))
    for _ in range(int(rng.integers(8, 13))):
        ax, by = rng.uniform(0.0, 0.26), rng.uniform(-0.34, 0.34)
        sx, sy = rng.uniform(0.03, 0.09), rng.uniform(0.03, 0.10)
        field += rng.uniform(0.5, 1.0) * np.exp(-(((mirrored - ax) / sx) ** 2 + ((b - by) / sy) ** 2))
    # Ogee envelope: an ellipse pinched towards the top and bottom tips.
    envelope = 1.0 - (a / (0.40 * (1.0 - 0.55 * np.abs(2.0 * b) ** 1.5) + 1e-3)) ** 2 - (b / 0.44) ** 2
    field = field * np.sqrt(np.clip(envelope, 0.0, 1.0))
    fill = smoothstep(0.40, 0.46, field)
    outline = smoothstep(0.20, 0.24, field) * (1.0 - smoothstep(0.27, 0.31, field))
    frame_distance = np.abs(envelope + 0.25)
    frame = 1.0 - smoothstep(0.03, 0.06, frame_distance)
    return fill.astype(np.float32), np.maximum(outline, frame * (1.0 - fill)).astype(np.float32)


def wallpaper(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Wallpaper: stripes, polka dots or a damask-like ornament repeating every ``repeat_m`` across (x).

    The repeat is snapped so whole repeats span the image (an even number for
    the half-drop patterns). ``ink_coverage`` is the inked fraction of a
    stripe repeat, or of a dot's cell. Damask cells are 1.4 × as tall as
    wide, odd columns dropped by half a cell. Ink stands 30 µm proud of the
    paper and is a little glossier.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    ground, ink, accent = jittered_palette(WALLPAPER_PALETTES[params["palette"]], params)
    pattern = params["pattern"]
    coverage = float(params["ink_coverage"])
    y_px, x_px = pixel_coordinates(size_px)
    half_drop = pattern != "stripes"
    columns = whole_count(tile_size_m, float(params["repeat_m"]), multiple=2 if half_drop else 1)
    cell_w = size_px / columns
    accent_mask: np.ndarray = np.zeros((size_px, size_px), np.float32)
    if pattern == "stripes":
        ink_mask = band_coverage(distance_to_lines(x_px, cell_w, 0.5 * cell_w), coverage * cell_w)
        for _ in range(int(rng.integers(0, 3))):
            offset = rng.uniform(0.0, cell_w)
            accent_mask = np.maximum(
                accent_mask, band_coverage(distance_to_lines(x_px, cell_w, offset), max(1.0, 0.03 * cell_w))
            )
        accent_mask = accent_mask * (1.0 - ink_mask)
        info: dict[str, Any] = {"repeat_m": tile_size_m / columns}
    else:
        rows = whole_count(tile_size_m, (1.4 if pattern == "damask" else 1.0) * tile_size_m / columns)
        cell_h = size_px / rows
        column = np.floor(x_px / cell_w)
        drop = np.where(column % 2 == 1, 0.5 * cell_h, 0.0)
        a = x_px / cell_w - column - 0.5
        b = ((y_px + drop) % size_px) / cell_h
        b = b - np.floor(b) - 0.5
        if pattern == "dots":
            radius_cells = min(np.sqrt(coverage * cell_h / (np.pi * cell_w)), 0.45)
            distance_px = np.hypot(a * cell_w, b * cell_h)
            ink_mask = 1.0 - smoothstep(radius_cells * cell_w - 0.7, radius_cells * cell_w + 0.7, distance_px)
        else:
            ink_mask, accent_mask = _damask_motif(rng, a, b)
        info = {"repeat_m": tile_size_m / columns, "repeat_height_m": tile_size_m / rows}
    fibres = periodic_noise(
        rng, size_px, tile_size_m, largest_m=0.004, smallest_m=pixel_m, beta=0.5, stretch=3.0, angle_deg=90.0
    )
    mottle = periodic_noise(rng, size_px, tile_size_m, largest_m=0.3, smallest_m=0.02, beta=2.0)
    paper = 1.0 + float(params["paper_texture"]) * (0.03 * fibres + 0.015 * mottle)
    albedo = mix(mix(ground, accent, 0.8 * accent_mask), ink, ink_mask) * paper[..., None]
    ink_total = np.clip(ink_mask + 0.8 * accent_mask, 0.0, 1.0)
    height = 30e-6 * blur(ink_total, 0.6) + float(params["paper_texture"]) * 8e-6 * fibres
    roughness = float(params["roughness"]) * (1.0 - 0.25 * ink_total) + 0.03 * fibres
    return Surface(albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), info)


def brushed_metal(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Brushed metal: fine streaks along x (the brushing direction), long scratches, streaky roughness.

    Streaks are noise 60 and 12 times longer along x than across; the relief
    ``relief_m`` is exaggerated over real brush grooves (~1 µm, narrower than
    a pixel) so the normal map carries the streaked highlight that a scalar
    roughness cannot. ``scratches_per_m2`` long scratches, 5–30 % of the tile
    long, within ±2° of the brushing direction.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    (metal,) = jittered_palette(METAL_PALETTES[params["palette"]], params)
    fine = periodic_noise(
        rng, size_px, tile_size_m, largest_m=tile_size_m, smallest_m=0.7 * pixel_m, beta=0.8, stretch=60.0
    )
    coarse = periodic_noise(
        rng, size_px, tile_size_m, largest_m=0.3 * tile_size_m, smallest_m=3 * pixel_m, beta=1.5, stretch=12.0
    )
    streak = 0.7 * fine + 0.5 * coarse
    scratches = np.zeros((size_px, size_px), np.float32)
    count = int(rng.poisson(float(params["scratches_per_m2"]) * tile_size_m**2))
    for _ in range(count):
        length = int(rng.uniform(0.05, 0.3) * size_px)
        slope = np.tan(np.deg2rad(rng.uniform(-2.0, 2.0)))
        x0, y0 = int(rng.integers(size_px)), rng.uniform(0.0, size_px)
        cols = np.arange(length)
        line_y = y0 + slope * (cols - 0.5 * length)
        fade = np.sin(np.pi * (cols + 0.5) / length) * rng.uniform(0.4, 1.0)
        for dy in (-1, 0, 1, 2):
            rows = np.floor(line_y).astype(np.int64) + dy
            cover = band_coverage(rows + 0.5 - line_y, 0.8) * fade
            np.maximum.at(scratches, (rows % size_px, (x0 + cols) % size_px), cover.astype(np.float32))
    contrast = float(params["brush_contrast"])
    albedo = metal * (1.0 + contrast * streak + 0.08 * scratches)[..., None]
    roughness = float(params["roughness"]) * (1.0 + 0.12 * streak) + 0.08 * scratches
    height = float(params["relief_m"]) * (0.6 * fine + 0.3 * coarse) - 4.0 * float(params["relief_m"]) * scratches
    return Surface(
        albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), {"scratches": count}
    )
