"""Textiles and hides: carpet, rug, woven fabric, leather.

Carpet and rug pile are tufts on a cellular lattice (one Worley cell per
tuft) with per-tuft tone and fibre noise; loop pile lays the tufts in rows.
A rug image is the whole rug: guard stripes and a border band with a
repeating motif run round the edge, the field inside carries a medallion, a
diamond lattice or bands. Fabric is woven from whole numbers of warp (along
y) and weft (along x) threads: the weave matrix says which is on top in each
crossing, the visible thread is a rounded yarn that dips where it passes
under. Leather is a pebble grain (cells with creased borders) plus wrinkles.

References
----------
- S. Worley, "A cellular texture basis function", SIGGRAPH 1996 (cells).
- A. Kiekens, "Woven fabric structures", in *Handbook of Textile Fibre
  Structure*, Woodhead, 2009 (plain, twill and basket weave matrices).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from .maps import Surface, jittered_palette, mix
from .noise import periodic_noise, pixel_coordinates, smoothstep, whole_count, worley

CARPET_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    # (pile, fleck) sRGB
    "beige": ((0.72, 0.66, 0.56), (0.52, 0.46, 0.38)),
    "grey": ((0.58, 0.58, 0.58), (0.36, 0.36, 0.37)),
    "charcoal": ((0.30, 0.30, 0.31), (0.50, 0.50, 0.50)),
    "navy": ((0.20, 0.24, 0.36), (0.34, 0.38, 0.50)),
    "taupe": ((0.55, 0.50, 0.45), (0.38, 0.34, 0.30)),
    "sage": ((0.56, 0.60, 0.50), (0.40, 0.44, 0.36)),
    "burgundy": ((0.45, 0.16, 0.18), (0.30, 0.10, 0.12)),
    "oatmeal": ((0.80, 0.75, 0.66), (0.45, 0.40, 0.34)),
}
CARPET_PILES = ("cut", "loop", "berber")
RUG_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    # (field, border, motif, accent) sRGB
    "persian_red": ((0.55, 0.14, 0.13), (0.12, 0.16, 0.30), (0.88, 0.82, 0.68), (0.80, 0.60, 0.25)),
    "navy_ivory": ((0.14, 0.18, 0.32), (0.86, 0.80, 0.66), (0.70, 0.22, 0.18), (0.85, 0.68, 0.35)),
    "ivory_blue": ((0.88, 0.83, 0.72), (0.20, 0.30, 0.48), (0.36, 0.48, 0.62), (0.70, 0.30, 0.24)),
    "terracotta": ((0.72, 0.38, 0.24), (0.20, 0.16, 0.14), (0.90, 0.78, 0.52), (0.35, 0.45, 0.40)),
    "modern_grey": ((0.62, 0.62, 0.60), (0.30, 0.30, 0.32), (0.84, 0.82, 0.78), (0.80, 0.62, 0.30)),
    "sage_cream": ((0.56, 0.62, 0.50), (0.88, 0.84, 0.72), (0.36, 0.42, 0.34), (0.76, 0.56, 0.44)),
}
RUG_DESIGNS = ("medallion", "lattice", "bands")
FABRIC_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "linen": ((0.80, 0.75, 0.65),),
    "oatmeal": ((0.72, 0.67, 0.58),),
    "charcoal": ((0.28, 0.28, 0.30),),
    "grey": ((0.55, 0.55, 0.56),),
    "navy": ((0.18, 0.22, 0.36),),
    "teal": ((0.14, 0.40, 0.42),),
    "mustard": ((0.78, 0.60, 0.22),),
    "rust": ((0.62, 0.32, 0.22),),
    "olive": ((0.42, 0.45, 0.28),),
    "blush": ((0.78, 0.60, 0.58),),
    "burgundy": ((0.46, 0.14, 0.20),),
    "forest": ((0.18, 0.32, 0.24),),
}
WEAVES = ("plain", "twill", "basket")
LEATHER_PALETTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "black": ((0.09, 0.08, 0.08),),
    "dark_brown": ((0.28, 0.17, 0.11),),
    "cognac": ((0.58, 0.32, 0.16),),
    "tan": ((0.70, 0.50, 0.32),),
    "oxblood": ((0.34, 0.10, 0.10),),
    "navy": ((0.14, 0.16, 0.24),),
    "cream": ((0.86, 0.80, 0.70),),
    "grey": ((0.46, 0.45, 0.44),),
}


def _pile(
    rng: np.random.Generator,
    size_px: int,
    tile_size_m: float,
    tuft_pitch_m: float,
    *,
    loop: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Tufted pile: (tuft brightness variation, tuft height profile 0–1, tuft id, tufts per side)."""
    pixel_m = tile_size_m / size_px
    # Loop rows alternate their offset, so they come in pairs.
    tufts = whole_count(tile_size_m, tuft_pitch_m, multiple=2 if loop else 1)
    if loop:
        y_px, x_px = pixel_coordinates(size_px)
        # Loop rows every pitch, odd rows offset by half a loop; the image origin at a loop's centre.
        pitch = size_px / tufts
        gy = y_px / pitch + 0.5
        row = np.floor(gy)
        gx = x_px / pitch + 0.5 + 0.5 * (row % 2)
        column = np.floor(gx)
        fy, fx = gy - row, gx - column
        profile = np.sin(np.pi * fy) * np.sqrt(np.clip(np.sin(np.pi * fx), 0.0, 1.0))
        ids = (row.astype(np.int64) % tufts) * tufts + column.astype(np.int64) % tufts
    else:
        f1, _, ids = worley(rng, size_px, tufts, jitter=0.8)
        profile = np.clip(1.0 - f1 / 0.75, 0.0, 1.0) ** 0.7
    per_tuft = rng.standard_normal(tufts * tufts).astype(np.float32)[ids]
    fibres = periodic_noise(rng, size_px, tile_size_m, largest_m=tuft_pitch_m, smallest_m=0.7 * pixel_m, beta=0.3)
    variation = 0.6 * per_tuft + 0.5 * fibres + 0.6 * (profile - 0.5)
    return variation.astype(np.float32), profile.astype(np.float32), ids, tufts


def carpet(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Wall-to-wall carpet: cut pile (random tufts), loop pile (rows of loops) or berber (loops with flecks).

    ``tuft_pitch_m`` is the tuft spacing (gauge), snapped so whole tufts span
    the image; ``fleck_amount`` is the fraction of tufts in the fleck colour;
    ``mottle`` the relative tone variation over decimetres (shading).
    """
    tile_size_m = float(params["tile_size_m"])
    pile, fleck = jittered_palette(CARPET_PALETTES[params["palette"]], params)
    kind = params["pile"]
    variation, profile, ids, tufts = _pile(rng, size_px, tile_size_m, float(params["tuft_pitch_m"]), loop=kind != "cut")
    # Berber yarn is flecked by design; cut and loop pile only carry a few stray tufts of the second colour.
    fleck_fraction = float(params["fleck_amount"]) * (1.0 if kind == "berber" else 0.3)
    flecked = (rng.random(tufts * tufts) < fleck_fraction).astype(np.float32)[ids]
    mottle = periodic_noise(rng, size_px, tile_size_m, largest_m=0.4, smallest_m=0.03, beta=2.0)
    yarn = mix(pile, fleck, 0.75 * flecked * (0.4 + 0.6 * profile))
    albedo = yarn * (1.0 + 0.12 * variation + float(params["mottle"]) * mottle)[..., None]
    # Pile height 4–8 mm, but only the tuft-scale relief shows: tips up, crevices down.
    height = 0.001 * profile
    roughness = 0.9 + 0.05 * variation
    return Surface(
        albedo.astype(np.float32),
        roughness.astype(np.float32),
        height.astype(np.float32),
        {"tufts_per_side": tufts, "tuft_pitch_m": tile_size_m / tufts},
    )


def _rug_pattern(
    rng: np.random.Generator,
    size_px: int,
    tile_size_m: float,
    border_m: float,
    design: str,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Colour index per pixel for a rug: 0 field, 1 border, 2 motif, 3 accent."""
    y_px, x_px = pixel_coordinates(size_px)
    pixel_m = tile_size_m / size_px
    u, v = x_px * pixel_m, y_px * pixel_m
    edge = np.minimum(np.minimum(u, tile_size_m - u), np.minimum(v, tile_size_m - v))
    index = np.zeros((size_px, size_px), np.int8)
    # Guard stripes: outer border-coloured band, a thin accent line; the main border; an inner accent line.
    outer, line = 0.15 * border_m, 0.06 * border_m
    index[edge < border_m + line] = 1
    index[(edge >= outer) & (edge < outer + line)] = 3
    index[(edge >= border_m) & (edge < border_m + line)] = 3
    # Border motif: diamonds repeating along each side, a whole number per side, centred on the side's middle.
    band_start, band_width = outer + line, border_m - outer - line
    along = np.where(np.minimum(u, tile_size_m - u) < np.minimum(v, tile_size_m - v), v, u) - 0.5 * tile_size_m
    repeats = max(3, round(tile_size_m / (1.6 * band_width)))
    period = tile_size_m / repeats
    a = (along / period + 0.5) % 1.0 - 0.5
    b = (edge - band_start) / band_width - 0.5
    in_band = (edge >= band_start) & (edge < border_m)
    diamond = np.abs(a) * 2.0 * (period / band_width) * 0.5 + np.abs(b) * 2.0
    index[in_band & (diamond < 0.75)] = 2
    index[in_band & (diamond < 0.3)] = 3
    field = edge >= border_m + line
    half = 0.5 * tile_size_m - border_m - line
    fu = (u - 0.5 * tile_size_m) / half
    fv = (v - 0.5 * tile_size_m) / half
    if design == "medallion":
        rhombus = np.abs(fu) + np.abs(fv)
        index[field & (rhombus < 0.62)] = 3
        index[field & (rhombus < 0.55)] = 2
        index[field & (rhombus < 0.40)] = 1
        index[field & (rhombus < 0.22)] = 3
        index[field & (rhombus < 0.10)] = 2
        corner = (1.0 - np.abs(fu)) + (1.0 - np.abs(fv))
        index[field & (corner < 0.42)] = 2
        index[field & (corner < 0.30)] = 1
    elif design == "lattice":
        cells = int(rng.integers(3, 7))
        p = (fu + 1.0) * 0.5 * cells
        q = (fv + 1.0) * 0.5 * cells
        da = np.abs(p - np.floor(p) - 0.5) + np.abs(q - np.floor(q) - 0.5)
        index[field & (da < 0.35)] = 2
        index[field & (da < 0.18)] = 3
        index[field & (da > 0.92)] = 1
    else:
        bands = int(rng.integers(4, 9))
        position = (fv + 1.0) * 0.5 * bands
        zig = np.abs(((fu + 1.0) * 4.0 * bands / 2.0) % 2.0 - 1.0) * 0.25
        stripe = (position + zig) % 1.0
        kinds = rng.integers(1, 4, size=bands + 1)
        band_index = np.clip(np.floor(position + zig).astype(np.int64), 0, bands)
        chosen = kinds[band_index].astype(np.int8)
        index = np.where(field & (stripe < 0.45), chosen, index)
    return index, {"border_m": border_m, "border_repeats": repeats}


def rug(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """A whole square rug ``tile_size_m`` on a side: guard stripes, motif border, patterned field, tufted pile.

    The image is meant to be mapped once onto the rug's top face. It still
    wraps seamlessly: the outermost guard stripe runs along all four edges,
    so the two sides of the wrap see the same colour. Abrash — the row-wise
    shade variation of hand-dyed wool — varies the tone along y by
    ``abrash`` (relative).
    """
    tile_size_m = float(params["tile_size_m"])
    colours = np.stack(jittered_palette(RUG_PALETTES[params["palette"]], params))
    index, info = _rug_pattern(rng, size_px, tile_size_m, float(params["border_width_m"]), params["design"])
    variation, profile, _, tufts = _pile(rng, size_px, tile_size_m, float(params["tuft_pitch_m"]), loop=False)
    # Abrash: tone bands across the rug (along y), long along x.
    abrash = periodic_noise(
        rng, size_px, tile_size_m, largest_m=0.5 * tile_size_m, smallest_m=0.02 * tile_size_m, beta=1.5, stretch=40.0
    )
    wear = periodic_noise(rng, size_px, tile_size_m, largest_m=0.5 * tile_size_m, smallest_m=0.05, beta=2.0)
    albedo = colours[index] * (1.0 + 0.06 * variation + float(params["abrash"]) * abrash + 0.03 * wear)[..., None]
    height = 0.0008 * profile
    roughness = 0.92 + 0.04 * variation
    info.update({"tufts_per_side": tufts})
    return Surface(albedo.astype(np.float32), roughness.astype(np.float32), height.astype(np.float32), info)


def weave_matrix(weave: str) -> np.ndarray:
    """Boolean repeat of a weave: True where the warp thread (column) is over the weft (row).

    plain: 1/1; twill: 2/2 with the diagonal rising by one thread per pick;
    basket: 2/2 pairs.
    """
    if weave == "plain":
        return np.array([[True, False], [False, True]])
    if weave == "twill":
        return np.array([[(i + j) % 4 < 2 for i in range(4)] for j in range(4)])
    if weave == "basket":
        return np.array([[((i // 2) + (j // 2)) % 2 == 0 for i in range(4)] for j in range(4)])
    raise ValueError(f"unknown weave {weave!r}")


def fabric(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Woven fabric: warp along y and weft along x, ``thread_pitch_m`` apart, in a plain, twill or basket weave.

    The thread count per side is a whole multiple of the weave repeat (so the
    cloth tiles). Each visible float is a rounded yarn (elliptical cross
    section, 85 % of the pitch wide) that dips at the ends where it passes
    under; yarns vary in tone (``yarn_variation``) and show fibre streaks
    along their length. The weft is ``weft_contrast`` (relative value)
    lighter or darker than the warp.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    (warp_colour,) = jittered_palette(FABRIC_PALETTES[params["palette"]], params)
    weft_colour = warp_colour * (1.0 + float(params["weft_contrast"]))
    matrix = weave_matrix(params["weave"])
    repeat = matrix.shape[0]
    threads = whole_count(tile_size_m, float(params["thread_pitch_m"]), multiple=repeat)
    y_px, x_px = pixel_coordinates(size_px)
    # The image origin at the centre of a crossing, so the wrap edge runs along yarns, not between them.
    gx, gy = x_px * threads / size_px + 0.5, y_px * threads / size_px + 0.5
    i, j = np.floor(gx).astype(np.int64), np.floor(gy).astype(np.int64)
    fx, fy = gx - i, gy - j

    def up(di: int, dj: int) -> np.ndarray:
        return matrix[(j + dj) % repeat, (i + di) % repeat]

    warp_up = up(0, 0)
    # Across the yarn: elliptical profile over 85 % of the pitch; along it: dips where it goes under.
    across = np.where(warp_up, fx, fy) - 0.5
    cross = np.sqrt(np.clip(1.0 - (across / 0.425) ** 2, 0.0, 1.0))
    along = np.where(warp_up, fy, fx)
    start_down = np.where(warp_up, ~up(0, -1), up(-1, 0))
    end_down = np.where(warp_up, ~up(0, 1), up(1, 0))
    dip = np.ones_like(along)
    dip = np.where(start_down, dip * smoothstep(0.0, 0.45, along), dip)
    dip = np.where(end_down, dip * smoothstep(0.0, 0.45, 1.0 - along), dip)
    profile = cross * (0.35 + 0.65 * dip)
    yarn_variation = float(params["yarn_variation"])
    warp_tone = 1.0 + yarn_variation * rng.standard_normal(threads).astype(np.float32)
    weft_tone = 1.0 + yarn_variation * rng.standard_normal(threads).astype(np.float32)
    fibre_y = periodic_noise(
        rng,
        size_px,
        tile_size_m,
        largest_m=4 * float(params["thread_pitch_m"]),
        smallest_m=0.7 * pixel_m,
        beta=0.5,
        stretch=6.0,
        angle_deg=90.0,
    )
    fibre_x = periodic_noise(
        rng,
        size_px,
        tile_size_m,
        largest_m=4 * float(params["thread_pitch_m"]),
        smallest_m=0.7 * pixel_m,
        beta=0.5,
        stretch=6.0,
    )
    tone = np.where(
        warp_up, warp_tone[i % threads] * (1.0 + 0.06 * fibre_y), weft_tone[j % threads] * (1.0 + 0.06 * fibre_x)
    )
    colour = np.where(warp_up[..., None], warp_colour, weft_colour)
    shade = 0.55 + 0.45 * profile
    albedo = colour * (tone * shade)[..., None]
    height = 0.3 * float(params["thread_pitch_m"]) * profile
    roughness = 0.85 + 0.1 * (1.0 - profile)
    return Surface(
        albedo.astype(np.float32),
        roughness.astype(np.float32),
        height.astype(np.float32),
        {"threads_per_side": threads, "thread_pitch_m": tile_size_m / threads},
    )


def leather(params: Mapping[str, Any], rng: np.random.Generator, size_px: int) -> Surface:
    """Leather: pebble grain of cells ``grain_size_m`` across with creased borders, plus broad wrinkles.

    Cells are domed (height rises with the distance to the cell border, F2 −
    F1); creases are darker and rougher; wrinkles are ridged noise 1–4 cm
    long, scaled by ``wrinkle_strength``.
    """
    tile_size_m = float(params["tile_size_m"])
    pixel_m = tile_size_m / size_px
    (hide,) = jittered_palette(LEATHER_PALETTES[params["palette"]], params)
    cells = whole_count(tile_size_m, float(params["grain_size_m"]))
    f1, f2, ids = worley(rng, size_px, cells, jitter=0.9)
    border = f2 - f1
    dome = smoothstep(0.0, 0.5, border)
    crease = 1.0 - smoothstep(0.0, 0.12, border)
    wrinkle_field = periodic_noise(
        rng,
        size_px,
        tile_size_m,
        largest_m=0.04,
        smallest_m=max(0.004, 3 * pixel_m),
        beta=2.0,
        stretch=3.0,
        angle_deg=float(rng.uniform(0.0, 180.0)),
    )
    wrinkle = (1.0 - smoothstep(0.0, 0.35, np.abs(wrinkle_field))) * float(params["wrinkle_strength"])
    clouds = periodic_noise(rng, size_px, tile_size_m, largest_m=0.2, smallest_m=0.01, beta=2.0)
    cell_tone = rng.standard_normal(cells * cells).astype(np.float32)[ids]
    variation = float(params["colour_variation"])
    depth = float(params["crease_depth_m"])
    albedo = (
        hide
        * (1.0 + variation * clouds + 0.3 * variation * cell_tone - 0.25 * crease - 0.15 * wrinkle + 0.08 * dome)[
            ..., None
        ]
    )
    height = depth * (dome - 0.6 * wrinkle)
    roughness = float(params["roughness"]) * (1.0 + 0.3 * crease + 0.2 * wrinkle - 0.1 * dome)
    return Surface(
        albedo.astype(np.float32),
        roughness.astype(np.float32),
        height.astype(np.float32),
        {"grain_cells_per_side": cells, "grain_size_m": tile_size_m / cells},
    )
