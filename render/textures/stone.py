"""Mineral surfaces: ceramic tiles, stone tiles, marble slabs, concrete.

Tiles are laid on a :func:`~.noise.row_lattice` (grid or running bond) with
grout lines on the joints. Each piece has its own tone, a slight random tilt
(a few milliradians: real tiles are not coplanar, which breaks up their
reflections) and a cushioned edge; stone pieces also show their own window
of a periodic stone field. Marble veins are thin bands around the level sets
of a turbulent phase; concrete is multi-scale mottling with pores.

References
----------
- Ebert et al., *Texturing and Modeling*, 3rd ed. (2003), ch. 2 and 6
  (marble from turbulence-distorted bands, ridged noise for veins).
- K. Perlin, "An image synthesizer", SIGGRAPH 1985 (marble as sin(x + turbulence)).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from .maps import Surface, jittered_palette, mix, srgb_to_linear
from .noise import (
    RowLattice,
    blur,
    periodic_noise,
    pixel_coordinates,
    row_lattice,
    smoothstep,
    whole_count,
    worley,
)

# Glaze colours, sRGB.
CERAMIC_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "white": ((0.93, 0.93, 0.91),),
    "cream": ((0.90, 0.86, 0.76),),
    "light_grey": ((0.78, 0.78, 0.77),),
    "anthracite": ((0.24, 0.24, 0.25),),
    "black": ((0.08, 0.08, 0.09),),
    "sage": ((0.62, 0.68, 0.58),),
    "blue": ((0.26, 0.40, 0.58),),
    "teal": ((0.16, 0.42, 0.44),),
    "terracotta": ((0.72, 0.40, 0.28),),
    "sand": ((0.80, 0.72, 0.58),),
}
GROUT_COLOURS: dict[str, tuple[float, float, float]] = {
    "white": (0.88, 0.87, 0.84),
    "light_grey": (0.68, 0.68, 0.66),
    "mid_grey": (0.48, 0.48, 0.47),
    "charcoal": (0.22, 0.22, 0.22),
    "beige": (0.74, 0.68, 0.58),
}
# Stone fields: (kind, (ground, second, accent)) sRGB.
STONE_PALETTES: dict[str, tuple[str, tuple[tuple[float, float, float], ...]]] = {
    "limestone_ivory": ("limestone", ((0.86, 0.82, 0.72), (0.78, 0.72, 0.60), (0.62, 0.56, 0.46))),
    "limestone_grey": ("limestone", ((0.70, 0.70, 0.67), (0.60, 0.60, 0.58), (0.45, 0.45, 0.44))),
    "travertine_beige": ("travertine", ((0.84, 0.76, 0.62), (0.74, 0.62, 0.46), (0.50, 0.40, 0.30))),
    "travertine_silver": ("travertine", ((0.76, 0.74, 0.70), (0.64, 0.62, 0.58), (0.42, 0.40, 0.38))),
    "slate_charcoal": ("slate", ((0.26, 0.27, 0.29), (0.20, 0.21, 0.23), (0.42, 0.34, 0.26))),
    "slate_green": ("slate", ((0.28, 0.32, 0.30), (0.22, 0.25, 0.24), (0.45, 0.38, 0.28))),
    "granite_grey": ("granite", ((0.62, 0.62, 0.62), (0.12, 0.12, 0.13), (0.90, 0.90, 0.88))),
    "granite_black": ("granite", ((0.14, 0.14, 0.15), (0.05, 0.05, 0.06), (0.55, 0.55, 0.56))),
    "granite_pink": ("granite", ((0.72, 0.56, 0.52), (0.14, 0.13, 0.13), (0.88, 0.86, 0.82))),
}
# (ground, vein, cloud) sRGB.
MARBLE_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "carrara": ((0.90, 0.90, 0.89), (0.52, 0.54, 0.57), (0.80, 0.81, 0.82)),
    "calacatta": ((0.95, 0.94, 0.91), (0.50, 0.44, 0.36), (0.88, 0.86, 0.82)),
    "statuario": ((0.96, 0.96, 0.95), (0.36, 0.37, 0.40), (0.90, 0.90, 0.90)),
    "nero": ((0.07, 0.07, 0.08), (0.90, 0.90, 0.88), (0.14, 0.14, 0.15)),
    "verde": ((0.10, 0.22, 0.17), (0.80, 0.86, 0.80), (0.06, 0.14, 0.10)),
    "emperador": ((0.42, 0.30, 0.22), (0.80, 0.70, 0.56), (0.30, 0.20, 0.14)),
    "rosso": ((0.55, 0.22, 0.20), (0.88, 0.82, 0.78), (0.42, 0.15, 0.13)),
}
CONCRETE_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "light_grey": ((0.70, 0.70, 0.68), (0.58, 0.58, 0.56)),
    "mid_grey": ((0.56, 0.56, 0.55), (0.44, 0.44, 0.43)),
    "warm_grey": ((0.64, 0.61, 0.56), (0.52, 0.49, 0.45)),
    "anthracite": ((0.30, 0.30, 0.31), (0.22, 0.22, 0.23)),
    "white": ((0.82, 0.81, 0.78), (0.72, 0.71, 0.68)),
}
# Roughness of concrete finishes (common practice): as-cast and sealed or burnished and polished.
CONCRETE_ROUGHNESS = {"cast": 0.85, "troweled": 0.6, "polished": 0.3}


def _tile_lattice(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> RowLattice:
    """Rows of pieces ``piece_width_m`` high and ``piece_aspect`` times as long, grid or running bond."""
    tile_size_m = float(params["tile_size_m"])
    width_m = float(params["piece_width_m"])
    bond = params["layout"] == "running_bond"
    rows = whole_count(tile_size_m, width_m, multiple=2 if bond else 1)
    per_row = whole_count(tile_size_m, width_m * int(params["piece_aspect"]))
    offsets = np.where(np.arange(rows) % 2 == 1, 0.5 * size_px / per_row, 0.0) if bond else np.zeros(rows)
    return row_lattice(size_px, rows, per_row, offsets)


def _piece_relief(
    lattice: RowLattice,
    rng: np.random.Generator,
    pixel_m: float,
    *,
    grout_px: float,
    bevel_m: float,
    grout_depth_m: float,
    tilt_rad: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Height (m) of tiled pieces and the grout coverage: recessed grout, cushioned edges, tilted pieces."""
    grout = lattice.joint_coverage(grout_px)
    pieces = lattice.rows * lattice.per_row
    slope = rng.normal(0.0, tilt_rad, size=(pieces, 2)).astype(np.float32)
    ids = lattice.piece_id
    along_m = (lattice.along_px - 0.5 * lattice.piece_pitch_px) * pixel_m
    across_m = (lattice.across_px - 0.5 * lattice.row_pitch_px) * pixel_m
    tilt = slope[ids, 0] * along_m + slope[ids, 1] * across_m
    edge_m = (lattice.joint_distance_px - 0.5 * grout_px) * pixel_m
    # Cushion edge: a quarter-round of radius bevel_m falling into the grout.
    cushion = np.sqrt(np.clip(1.0 - (1.0 - np.clip(edge_m / bevel_m, 0.0, 1.0)) ** 2, 0.0, 1.0))
    height = (grout_depth_m * (cushion - 1.0) + tilt) * (1.0 - grout) - grout_depth_m * grout
    return height.astype(np.float32), grout


def ceramic_tile(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Glazed ceramic tiles with grout: per-piece tone and tilt, cushion edges, glaze mottle.

    Grout lines are centred on the joints at multiples of the (snapped) piece
    pitch from the image origin, ``grout_width_m`` wide and 1.5 mm deep.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    lattice = _tile_lattice(params, rng, size_px)
    (glaze,) = jittered_palette(CERAMIC_PALETTES[params["palette"]], params)
    grout_colour = srgb_to_linear(GROUT_COLOURS[params["grout"]])
    grout_px = float(params["grout_width_m"]) / pixel_m
    height, grout = _piece_relief(
        lattice,
        rng,
        pixel_m,
        grout_px=grout_px,
        bevel_m=float(params["edge_bevel_m"]),
        grout_depth_m=0.0015,
        tilt_rad=0.003,
    )
    pieces = lattice.rows * lattice.per_row
    tone = 1.0 + float(params["piece_tone_variation"]) * rng.standard_normal(pieces).astype(np.float32)
    mottle = periodic_noise(rng, size_px, tile_size_m, largest_m=0.1, smallest_m=0.004, beta=2.0)
    speck = periodic_noise(rng, size_px, tile_size_m, largest_m=0.004, smallest_m=pixel_m, beta=0.0)
    glaze_map = (
        glaze * (tone[lattice.piece_id] * (1.0 + float(params["glaze_mottle"]) * mottle + 0.01 * speck))[..., None]
    )
    grout_grain = 1.0 + 0.06 * speck
    albedo = mix(glaze_map, grout_colour * grout_grain[..., None], grout)
    # Edges of the glaze pool a little darker (thicker glaze) where the cushion falls off.
    rim = 1.0 - smoothstep(
        0.0, max(float(params["edge_bevel_m"]) / pixel_m, 1.0), lattice.joint_distance_px - 0.5 * grout_px
    )
    albedo = albedo * (1.0 - 0.06 * rim * (1.0 - grout))[..., None]
    roughness = float(params["glaze_roughness"]) * (1.0 + 0.15 * mottle) * (1.0 - grout) + 0.9 * grout
    height = height + 2e-6 * mottle
    info = {
        "rows": lattice.rows,
        "pieces_per_row": lattice.per_row,
        "piece_width_m": tile_size_m / lattice.rows,
        "piece_length_m": tile_size_m / lattice.per_row,
    }
    return Surface(albedo.astype(np.float32), roughness.astype(np.float32), height, info)


def stone_field(
    kind: str, colours: list[np.ndarray], rng: np.random.Generator, size_px: int, tile_size_m: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A periodic natural-stone surface: (albedo (n, n, 3) linear, height (n, n) m, roughness offset (n, n)).

    ``kind`` is limestone (soft clouds and fossil specks), travertine (bands
    along x and elongated pits), slate (cleft layers, rust patches) or granite
    (interlocking crystals of three minerals).
    """
    pixel_m = tile_size_m / size_px
    ground, second, accent = colours
    clouds = periodic_noise(rng, size_px, tile_size_m, largest_m=0.3, smallest_m=0.01, beta=2.5)
    fine = periodic_noise(rng, size_px, tile_size_m, largest_m=0.01, smallest_m=pixel_m, beta=1.0)
    zero = np.zeros((size_px, size_px), np.float32)
    if kind == "limestone":
        specks = smoothstep(
            2.2, 3.0, periodic_noise(rng, size_px, tile_size_m, largest_m=0.006, smallest_m=pixel_m, beta=0.5)
        )
        albedo = mix(ground, second, smoothstep(-2.0, 2.5, clouds) * 0.55 + 0.08 * fine)
        albedo = mix(albedo, accent, 0.7 * specks)
        return albedo, -40e-6 * specks, 0.05 * specks
    if kind == "travertine":
        bands = periodic_noise(rng, size_px, tile_size_m, largest_m=0.2, smallest_m=0.003, beta=2.0, stretch=8.0)
        pits_field = periodic_noise(rng, size_px, tile_size_m, largest_m=0.02, smallest_m=0.002, beta=1.0, stretch=4.0)
        pits = smoothstep(1.9, 2.6, pits_field)
        albedo = mix(ground, second, 0.6 * smoothstep(-0.5, 2.5, bands + 0.5 * clouds) + 0.06 * fine)
        albedo = mix(albedo, accent, 0.8 * pits)
        return albedo, -0.0015 * pits, 0.2 * pits
    if kind == "slate":
        layers = periodic_noise(rng, size_px, tile_size_m, largest_m=0.15, smallest_m=0.004, beta=2.5, stretch=3.0)
        cleft = np.round(layers * 2.0) / 2.0
        cleft = blur(cleft + 0.15 * layers, 1.0)
        rust = smoothstep(1.0, 3.0, blur(clouds, 3.0))
        albedo = mix(ground, second, smoothstep(-1.0, 1.0, layers) * 0.7 + 0.08 * fine)
        albedo = mix(albedo, accent, 0.3 * rust)
        return albedo, 0.0008 * cleft, zero
    # Granite: Worley crystals, each taking one of three minerals.
    # Crystals of coarse-grained granite are 3–10 mm (from memory); 7 mm stays resolved at 512 px per 2 m.
    cells = whole_count(tile_size_m, 0.007)
    f1, f2, ids = worley(rng, size_px, cells, jitter=0.9)
    mineral = rng.choice(3, size=cells * cells, p=[0.55, 0.2, 0.25])[ids]
    palette = np.stack([ground, second, accent]).astype(np.float32)
    crystal_tone = 1.0 + 0.15 * rng.standard_normal(cells * cells).astype(np.float32)[ids]
    albedo = palette[mineral] * crystal_tone[..., None] * (1.0 + 0.05 * clouds)[..., None]
    albedo = albedo * (1.0 - 0.25 * (1.0 - smoothstep(0.0, 0.08, f2 - f1)))[..., None]
    return albedo.astype(np.float32), zero, 0.03 * fine


def stone_tile(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Natural stone tiles with grout: each piece a different window of one stone field, its own tone and tilt."""
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    lattice = _tile_lattice(params, rng, size_px)
    kind, colours_srgb = STONE_PALETTES[params["palette"]]
    colours = jittered_palette(colours_srgb, params)
    albedo_field, height_field, rough_field = stone_field(kind, colours, rng, size_px, tile_size_m)
    pieces = lattice.rows * lattice.per_row
    shift_y = rng.integers(0, size_px, size=pieces)[lattice.piece_id]
    shift_x = rng.integers(0, size_px, size=pieces)[lattice.piece_id]
    rows_idx, cols_idx = np.indices((size_px, size_px))
    gy, gx = (rows_idx + shift_y) % size_px, (cols_idx + shift_x) % size_px
    tone = 1.0 + float(params["piece_tone_variation"]) * rng.standard_normal(pieces).astype(np.float32)
    stone_albedo = albedo_field[gy, gx] * tone[lattice.piece_id][..., None]
    grout_colour = srgb_to_linear(GROUT_COLOURS[params["grout"]])
    grout_px = float(params["grout_width_m"]) / pixel_m
    height, grout = _piece_relief(
        lattice,
        rng,
        pixel_m,
        grout_px=grout_px,
        bevel_m=float(params["edge_bevel_m"]),
        grout_depth_m=0.002,
        tilt_rad=0.002,
    )
    albedo = mix(stone_albedo, grout_colour, grout)
    height = height + height_field[gy, gx] * (1.0 - grout)
    roughness = (float(params["roughness"]) + rough_field[gy, gx]) * (1.0 - grout) + 0.9 * grout
    info = {
        "rows": lattice.rows,
        "pieces_per_row": lattice.per_row,
        "piece_width_m": tile_size_m / lattice.rows,
        "piece_length_m": tile_size_m / lattice.per_row,
        "stone": kind,
    }
    return Surface(albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), info)


_VEIN_DIRECTIONS = ((1, 0), (1, 1), (1, -1), (2, 1), (1, 2), (2, -1), (1, -2), (0, 1))


def marble_veins(
    rng: np.random.Generator,
    size_px: int,
    tile_size_m: float,
    *,
    count: int,
    direction: tuple[int, int],
    turbulence: float,
    width_m: float,
) -> np.ndarray:
    """Intensity (0–1) of one family of veins: bands around the level sets of a turbulent phase.

    ``phase = count · (k · x) + turbulence · T(x) + 0.02 · count · t(x)`` with x in
    tile units, k a whole-number wave vector (so the bands tile), T smooth
    large-scale noise (meanders and folds) and t small-scale noise (wiggle).
    The distance to the nearest level set is taken to first order,
    ``|phase − round(phase)| / |∇phase|``, so a vein keeps its width where the
    turbulence squeezes or stretches the bands; the width itself varies
    between 0.5 and 1.3 × ``width_m`` and the veins fade in and out.
    """
    pixel_m = tile_size_m / size_px
    y_px, x_px = pixel_coordinates(size_px)
    # Meanders smooth enough that |∇T| stays near the bands' own gradient: few folds, no contour-map loops.
    meander = periodic_noise(rng, size_px, tile_size_m, largest_m=tile_size_m, smallest_m=0.2 * tile_size_m, beta=4.0)
    wiggle = periodic_noise(rng, size_px, tile_size_m, largest_m=0.1 * tile_size_m, smallest_m=5 * pixel_m, beta=2.5)
    warped = turbulence * meander + 0.02 * count * wiggle
    phase = count * (direction[0] * x_px + direction[1] * y_px) / size_px + warped
    gradient = np.hypot(
        count * direction[0] / size_px + _slope(warped, 1), count * direction[1] / size_px + _slope(warped, 0)
    )
    distance_m = np.abs(phase - np.round(phase)) / np.maximum(gradient, 1e-6) * pixel_m
    width = width_m * (
        0.5
        + 0.8
        * smoothstep(
            -1.5,
            1.5,
            periodic_noise(
                rng, size_px, tile_size_m, largest_m=0.3 * tile_size_m, smallest_m=0.02 * tile_size_m, beta=2.0
            ),
        )
    )
    veins = np.exp(-((distance_m / np.maximum(width, 0.5 * pixel_m)) ** 2))
    fade = smoothstep(
        -1.2,
        0.8,
        periodic_noise(rng, size_px, tile_size_m, largest_m=0.5 * tile_size_m, smallest_m=0.05 * tile_size_m, beta=2.0),
    )
    return (veins * (0.3 + 0.7 * fade)).astype(np.float32)


def marble(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Polished marble slab: cloudy ground, meandering primary veins and fainter, thinner secondary veins.

    Primary veins: ``vein_count`` per tile along a random whole-number
    direction, meandering by ``turbulence`` vein spacings, half-width about
    ``vein_width_m`` (:func:`marble_veins`). Secondary veins: twice as many,
    in another direction, 0.4 × as wide, at half strength and shown only in
    patches. The ground clouds darken towards the primary veins.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    ground, vein_colour, cloud_colour = jittered_palette(MARBLE_PALETTES[params["palette"]], params)
    count = int(params["vein_count"])
    first, second = rng.choice(len(_VEIN_DIRECTIONS), size=2, replace=False)
    direction = _VEIN_DIRECTIONS[int(first)]
    turbulence = float(params["turbulence"])
    width_m = float(params["vein_width_m"])
    primary = marble_veins(
        rng, size_px, tile_size_m, count=count, direction=direction, turbulence=turbulence, width_m=width_m
    )
    secondary = marble_veins(
        rng,
        size_px,
        tile_size_m,
        count=2 * count,
        direction=_VEIN_DIRECTIONS[int(second)],
        turbulence=1.5 * turbulence,
        width_m=0.4 * width_m,
    )
    patches = smoothstep(
        0.3,
        1.2,
        periodic_noise(rng, size_px, tile_size_m, largest_m=0.4 * tile_size_m, smallest_m=0.05 * tile_size_m, beta=2.0),
    )
    clouds = periodic_noise(rng, size_px, tile_size_m, largest_m=0.5 * tile_size_m, smallest_m=8 * pixel_m, beta=2.8)
    halo = blur(primary, max(2.0, 0.01 * tile_size_m / pixel_m))
    base = mix(ground, cloud_colour, smoothstep(-1.0, 2.5, clouds + 6.0 * halo))
    vein = np.clip(float(params["vein_contrast"]) * np.maximum(primary, 0.5 * secondary * patches), 0.0, 1.0)
    albedo = mix(base, vein_colour, vein)
    roughness = float(params["roughness"]) * (1.0 + 0.3 * vein) + 0.01 * clouds
    # Polished: nearly flat; veins are softer and stand a few micrometres lower.
    height = -3e-6 * vein
    info = {"vein_direction": list(direction), "vein_spacing_m": float(tile_size_m / (count * np.hypot(*direction)))}
    return Surface(albedo, roughness.astype(np.float32), height.astype(np.float32), info)


def _slope(field: np.ndarray, axis: int) -> np.ndarray:
    """Central difference per pixel along ``axis`` with wrap-around."""
    return 0.5 * (np.roll(field, -1, axis=axis) - np.roll(field, 1, axis=axis))


def concrete(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Concrete: multi-scale mottling, sand speckle, pores (bug holes); polished shows its aggregate.

    Pores are discs of 0.5–2.5 mm radius at ``pores_per_m2`` per square metre
    (one candidate per Worley cell, kept with the matching probability),
    1 mm deep.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    light, dark = jittered_palette(CONCRETE_PALETTES[params["palette"]], params)
    finish_kind = params["finish"]
    clouds = periodic_noise(rng, size_px, tile_size_m, largest_m=0.8, smallest_m=0.02, beta=2.2)
    medium = periodic_noise(rng, size_px, tile_size_m, largest_m=0.05, smallest_m=0.003, beta=1.5)
    sand = periodic_noise(rng, size_px, tile_size_m, largest_m=0.003, smallest_m=pixel_m, beta=0.0)
    mottle = float(params["mottle_contrast"])
    t = np.clip(0.5 + mottle * (2.0 * clouds + 0.8 * medium), 0.0, 1.0)
    albedo = mix(light, dark, t) * (1.0 + 0.04 * sand)[..., None]
    height = 8e-6 * medium + 4e-6 * sand
    roughness = CONCRETE_ROUGHNESS[finish_kind] + float(params["roughness_offset"]) + 0.04 * medium
    if finish_kind == "polished":
        cells = whole_count(tile_size_m, 0.012)
        f1, f2, ids = worley(rng, size_px, cells, jitter=0.9)
        stone_tone = (0.75 + 0.5 * rng.random(cells * cells).astype(np.float32))[ids]
        exposed = smoothstep(0.30, 0.42, 0.6 - f1) * (rng.random(cells * cells) < 0.7)[ids]
        albedo = mix(albedo, light * stone_tone[..., None], 0.7 * exposed)
    elif finish_kind == "troweled":
        swirl = periodic_noise(
            rng,
            size_px,
            tile_size_m,
            largest_m=0.3,
            smallest_m=0.01,
            beta=2.0,
            stretch=4.0,
            angle_deg=float(rng.uniform(0.0, 180.0)),
        )
        burnish = smoothstep(0.3, 1.5, swirl)
        albedo = albedo * (1.0 - 0.08 * burnish)[..., None]
        roughness = roughness - 0.2 * burnish
    cells = whole_count(tile_size_m, 0.02)
    f1, _, ids = worley(rng, size_px, cells, jitter=1.0)
    keep = rng.random(cells * cells) < min(1.0, float(params["pores_per_m2"]) * (tile_size_m / cells) ** 2)
    radius_m = rng.uniform(0.0005, 0.0025, size=cells * cells)
    distance_m = f1 * (tile_size_m / cells)
    pore = keep[ids] * (1.0 - smoothstep(radius_m[ids] - pixel_m, radius_m[ids], distance_m))
    albedo = albedo * (1.0 - 0.45 * pore)[..., None]
    height = height - 0.001 * pore * np.sqrt(np.clip(1.0 - (distance_m / radius_m[ids]) ** 2, 0.0, 1.0))
    roughness = roughness + 0.1 * pore
    return Surface(
        albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), {"pore_cells": cells}
    )
