"""The texture family registry: generators, parameter ranges with units, slot kinds; sampling and generation.

Every family takes the same colour parameters — ``palette`` (a named base
palette of the family), ``hue_jitter_deg`` (degrees), ``saturation_jitter`` and
``value_jitter`` (relative: 0.1 multiplies saturation or value by 1.1) — plus
``tile_size_m``, the side of the square the image covers in metres, and its
own geometry in metres. Ranges are what :func:`sample_texture_params` draws
from and what :func:`canonical_params` accepts; each carries its unit and
where the numbers come from (``# from memory``: handbook or trade values
recalled, ``# common practice``: rules of thumb).

A family also lists the material slot kinds it suits (:data:`SLOT_KINDS`), so
a randomization budget can restrict families per slot kind, and the material
kind of the scene spec its maps belong under (``diffuse``, ``plastic``,
``varnish``, ``metal``; for ``metal`` the base colour is the specular
reflectance).

Output encodings and axes: see :mod:`render.textures.maps`.

References
----------
- J. Tobin et al., "Domain randomization for transferring deep neural
  networks from simulation to the real world", IROS 2017 (random textures
  per surface as a training signal).
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from render.rounding import round_floats

from . import finishes, stone, textiles, wood
from .maps import Surface, TextureMaps, finish

SLOT_KINDS: tuple[str, ...] = (
    "floor",
    "wall",
    "ceiling",
    "wood_furniture",
    "upholstery",
    "metal",
    "stone_counter",
    "rug",
)
MATERIAL_KINDS: tuple[str, ...] = ("diffuse", "plastic", "varnish", "metal")
RESOLUTION_RANGE_PX = (16, 4096)
DEFAULT_RESOLUTION_PX = 512


class TextureParamError(ValueError):
    """Invalid family, parameters, seed or resolution; ``errors`` maps each field to a message."""

    def __init__(self, errors: dict[str, str]) -> None:
        super().__init__("; ".join(f"{k}: {v}" for k, v in errors.items()))
        self.errors = errors


@dataclass(frozen=True)
class ParamRange:
    """A numeric parameter: inclusive range, unit, source note; drawn uniformly (log-uniformly if ``log``)."""

    low: float
    high: float
    unit: str
    note: str
    default: float | None = None
    integer: bool = False
    log: bool = False

    def default_value(self) -> float | int:
        if self.default is not None:
            value = self.default
        elif self.log:
            value = math.sqrt(self.low * self.high)
        else:
            value = 0.5 * (self.low + self.high)
        return int(round(value)) if self.integer else float(value)

    def sample(self, rng: np.random.Generator) -> float | int:
        if self.integer:
            return int(rng.integers(int(self.low), int(self.high) + 1))
        if self.log:
            value = math.exp(rng.uniform(math.log(self.low), math.log(self.high)))
        else:
            value = rng.uniform(self.low, self.high)
        # exp(log(x)) can overshoot a bound by an ulp.
        return float(min(max(value, self.low), self.high))

    def error(self, value: Any) -> str | None:
        if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
            return f"must be a number ({self.unit})"
        if self.integer and float(value) != int(value):
            return "must be a whole number"
        if not math.isfinite(float(value)) or not self.low <= float(value) <= self.high:
            return f"must be in [{self.low:g}, {self.high:g}] {self.unit}".rstrip()
        return None


@dataclass(frozen=True)
class Choice:
    """A categorical parameter: one of ``options`` (the first is the default unless ``default`` says otherwise)."""

    options: tuple[str, ...]
    note: str
    default: str | None = None

    def default_value(self) -> str:
        return self.default if self.default is not None else self.options[0]

    def sample(self, rng: np.random.Generator) -> str:
        return self.options[int(rng.integers(len(self.options)))]

    def error(self, value: Any) -> str | None:
        return None if value in self.options else f"must be one of {', '.join(self.options)}"


Param = ParamRange | Choice
SurfaceGenerator = Callable[[Mapping[str, Any], np.random.Generator, int], Surface]


@dataclass(frozen=True)
class TextureFamily:
    """One texture family: its generator, parameters, the slot kinds it suits, its material kind and version.

    Bump ``version`` whenever the generator's output changes for the same
    parameters and seed: it is part of the cache key.
    """

    name: str
    generate: SurfaceGenerator
    params: Mapping[str, Param]
    slot_kinds: tuple[str, ...]
    material_kind: str
    version: int
    description: str


def _colour(palettes: Mapping[str, Any], hue_deg: float, saturation: float, value: float) -> dict[str, Param]:
    """The colour parameters every family shares: a palette name and symmetric HSV jitter ranges."""
    return {
        "palette": Choice(tuple(palettes), "named base palettes of the family"),
        "hue_jitter_deg": ParamRange(-hue_deg, hue_deg, "deg", "hue rotation of the palette", default=0.0),
        "saturation_jitter": ParamRange(-saturation, saturation, "relative", "saturation × (1 + jitter)", default=0.0),
        "value_jitter": ParamRange(-value, value, "relative", "value × (1 + jitter)", default=0.0),
    }


R, C = ParamRange, Choice

FAMILIES: dict[str, TextureFamily] = {
    "wood": TextureFamily(
        "wood",
        wood.wood,
        {
            "tile_size_m": R(0.4, 1.2, "m", "a table top or cabinet side per repeat"),  # common practice
            "grain_spacing_m": R(
                0.004, 0.03, "m", "grain lines on a sawn face 4–30 mm apart", log=True
            ),  # common practice
            "grain_waviness": R(0.0, 1.0, "1", "0 straight quarter-sawn stripes, 1 strong flat-sawn arches"),
            "pore_strength": R(0.0, 1.0, "1", "0 diffuse-porous (maple), 1 ring-porous (oak, ash)"),
            "grain_contrast": R(0.35, 1.0, "1", "late-wood darkening"),
            "roughness": R(0.15, 0.5, "1", "gloss to matte varnish"),  # common practice
            **_colour(wood.WOOD_PALETTES, 6.0, 0.12, 0.12),
        },
        ("wood_furniture",),
        "varnish",
        1,
        "figured solid wood, grain along u",
    ),
    "parquet": TextureFamily(
        "parquet",
        wood.parquet,
        {
            "tile_size_m": R(0.8, 2.0, "m", "several boards long and a dozen rows wide"),  # common practice
            "board_width_m": R(0.06, 0.20, "m", "strip parquet 60–90 mm, plank floors to 200 mm"),  # common practice
            "board_length_m": R(
                0.4, 2.0, "m", "strips 0.4–0.9 m, engineered planks 1.2–2.2 m", log=True
            ),  # common practice
            "joint_width_m": R(0.0005, 0.003, "m", "hairline to micro-bevelled joints"),  # common practice
            "joint_depth_m": R(0.0003, 0.0015, "m", "micro-bevel depth"),  # common practice
            "board_tone_variation": R(0.02, 0.15, "relative", "value spread between boards of one floor"),
            "grain_spacing_m": R(
                0.004, 0.02, "m", "grain lines on a board face 4–20 mm apart", log=True
            ),  # common practice
            "grain_waviness": R(0.0, 1.0, "1", "straight to arched grain"),
            "pore_strength": R(0.0, 1.0, "1", "diffuse- to ring-porous"),
            "grain_contrast": R(0.3, 0.9, "1", "late-wood darkening"),
            "roughness": R(0.2, 0.55, "1", "lacquered to oiled floors"),  # common practice
            **_colour(wood.WOOD_PALETTES, 6.0, 0.12, 0.12),
        },
        ("floor",),
        "varnish",
        1,
        "strip parquet, boards along u, staggered ends",
    ),
    "ceramic_tile": TextureFamily(
        "ceramic_tile",
        stone.ceramic_tile,
        {
            "tile_size_m": R(0.4, 2.4, "m", "at least two pieces per repeat for most sizes"),
            "piece_width_m": R(0.1, 0.6, "m", "10 cm wall tiles to 60 cm floor tiles", log=True),  # common practice
            "piece_aspect": R(1, 3, "1", "square, 1:2 and 1:3 (subway, plank)", integer=True),  # common practice
            "layout": C(("grid", "running_bond"), "stack bond or half-offset rows"),
            "grout_width_m": R(0.0015, 0.008, "m", "2 mm rectified to 8 mm rustic joints"),  # common practice
            "grout": C(tuple(stone.GROUT_COLOURS), "grout colours"),
            "piece_tone_variation": R(0.0, 0.05, "relative", "shade variation between pieces"),
            "glaze_mottle": R(0.0, 0.06, "relative", "glaze unevenness within a piece"),
            "glaze_roughness": R(0.05, 0.4, "1", "gloss to satin glaze"),  # common practice
            "edge_bevel_m": R(0.0005, 0.003, "m", "cushion-edge radius"),  # common practice
            **_colour(stone.CERAMIC_PALETTES, 5.0, 0.1, 0.1),
        },
        ("floor", "wall", "stone_counter"),
        "plastic",
        1,
        "glazed ceramic tiles with grout",
    ),
    "stone_tile": TextureFamily(
        "stone_tile",
        stone.stone_tile,
        {
            "tile_size_m": R(0.8, 2.0, "m", "several pieces per repeat"),
            "piece_width_m": R(0.2, 0.6, "m", "natural stone floor and wall tiles 20–60 cm"),  # common practice
            "piece_aspect": R(1, 2, "1", "square or 1:2", integer=True),  # common practice
            "layout": C(("grid", "running_bond"), "stack bond or half-offset rows"),
            "grout_width_m": R(0.002, 0.01, "m", "2–10 mm joints"),  # common practice
            "grout": C(tuple(stone.GROUT_COLOURS), "grout colours"),
            "piece_tone_variation": R(0.0, 0.08, "relative", "shade variation between pieces"),
            "roughness": R(0.25, 0.75, "1", "honed to tumbled"),  # common practice
            "edge_bevel_m": R(0.001, 0.004, "m", "eased edge radius"),  # common practice
            **_colour(stone.STONE_PALETTES, 4.0, 0.1, 0.1),
        },
        ("floor", "wall"),
        "plastic",
        1,
        "natural stone tiles (limestone, travertine, slate, granite) with grout",
    ),
    "marble": TextureFamily(
        "marble",
        stone.marble,
        {
            "tile_size_m": R(0.6, 2.0, "m", "a counter top or a slab section"),  # common practice
            "vein_count": R(1, 4, "1", "primary veins across the repeat", integer=True),
            "turbulence": R(0.2, 0.8, "vein spacings", "how far the veins meander"),
            "vein_width_m": R(0.0008, 0.006, "m", "primary vein half-width", log=True),
            "vein_contrast": R(0.4, 1.0, "1", "vein colour weight"),
            "roughness": R(0.03, 0.3, "1", "polished to honed"),  # common practice
            **_colour(stone.MARBLE_PALETTES, 4.0, 0.1, 0.08),
        },
        ("stone_counter", "floor", "wall"),
        "plastic",
        1,
        "veined marble slab",
    ),
    "concrete": TextureFamily(
        "concrete",
        stone.concrete,
        {
            "tile_size_m": R(0.6, 2.4, "m", "a wall or floor section"),
            "finish": C(tuple(stone.CONCRETE_ROUGHNESS), "as cast, power-troweled or ground and polished"),
            "roughness_offset": R(-0.1, 0.1, "1", "added to the finish's roughness"),
            "mottle_contrast": R(0.03, 0.15, "relative", "cloudy tone variation"),
            "pores_per_m2": R(0.0, 2000.0, "1/m²", "bug holes, none to dense on cast faces"),  # common practice
            **_colour(stone.CONCRETE_PALETTES, 4.0, 0.15, 0.1),
        },
        ("floor", "wall", "ceiling", "stone_counter"),
        "diffuse",
        1,
        "cast, troweled or polished concrete",
    ),
    "carpet": TextureFamily(
        "carpet",
        textiles.carpet,
        {
            "tile_size_m": R(0.3, 1.0, "m", "a floor patch"),
            "pile": C(textiles.CARPET_PILES, "cut pile, loop pile, berber loop with flecks"),
            "tuft_pitch_m": R(0.0025, 0.006, "m", "tufting gauge 1/10 in to 1/4 in"),  # from memory
            "fleck_amount": R(0.0, 0.25, "1", "fraction of tufts in the fleck colour"),
            "mottle": R(0.01, 0.06, "relative", "pile shading over decimetres"),
            **_colour(textiles.CARPET_PALETTES, 6.0, 0.15, 0.12),
        },
        ("floor",),
        "diffuse",
        1,
        "wall-to-wall carpet",
    ),
    "rug": TextureFamily(
        "rug",
        textiles.rug,
        {
            "tile_size_m": R(1.2, 3.0, "m", "the whole rug's side: 4×6 ft to 10×10 ft"),  # common practice
            "border_width_m": R(0.08, 0.3, "m", "border band 6–12 % of the rug's side"),  # common practice
            "design": C(textiles.RUG_DESIGNS, "field layouts"),
            "tuft_pitch_m": R(0.002, 0.005, "m", "hand-knotted to machine-tufted pile"),  # from memory
            "abrash": R(0.0, 0.08, "relative", "row-wise tone variation of the dyed wool"),
            **_colour(textiles.RUG_PALETTES, 8.0, 0.15, 0.12),
        },
        ("rug",),
        "diffuse",
        1,
        "a whole square rug: border and patterned field, mapped once",
    ),
    "fabric": TextureFamily(
        "fabric",
        textiles.fabric,
        {
            "tile_size_m": R(0.05, 0.2, "m", "a few centimetres of cloth per repeat"),
            "weave": C(textiles.WEAVES, "weave structures"),
            "thread_pitch_m": R(0.001, 0.004, "m", "upholstery yarns 2.5–10 per cm"),  # common practice
            "weft_contrast": R(-0.3, 0.3, "relative", "weft value relative to warp (two-tone cloth)"),
            "yarn_variation": R(0.0, 0.12, "relative", "tone spread between yarns"),
            **_colour(textiles.FABRIC_PALETTES, 8.0, 0.15, 0.15),
        },
        ("upholstery",),
        "diffuse",
        1,
        "woven upholstery cloth, warp along v",
    ),
    "leather": TextureFamily(
        "leather",
        textiles.leather,
        {
            "tile_size_m": R(0.08, 0.3, "m", "a cushion panel"),
            "grain_size_m": R(0.001, 0.004, "m", "pebble grain cells 1–4 mm"),  # from memory
            "crease_depth_m": R(0.00005, 0.0003, "m", "grain relief"),  # from memory
            "wrinkle_strength": R(0.0, 1.0, "1", "broad wrinkles"),
            "colour_variation": R(0.02, 0.1, "relative", "tone variation of the finish"),
            "roughness": R(0.3, 0.65, "1", "semi-aniline sheen to matte pigmented"),  # common practice
            **_colour(textiles.LEATHER_PALETTES, 6.0, 0.15, 0.12),
        },
        ("upholstery",),
        "plastic",
        1,
        "pebble-grain upholstery leather",
    ),
    "plaster": TextureFamily(
        "plaster",
        finishes.plaster,
        {
            "tile_size_m": R(0.5, 2.0, "m", "a wall section"),
            "finish": C(finishes.PLASTER_FINISHES, "wall and ceiling textures"),
            "relief_m": R(0.0001, 0.001, "m", "texture relief 0.1–1 mm"),  # common practice
            "colour_variation": R(0.005, 0.03, "relative", "paint and substrate tone variation"),
            "roughness": R(0.6, 0.95, "1", "eggshell to flat paint"),  # common practice
            **_colour(finishes.PAINT_PALETTES, 6.0, 0.15, 0.06),
        },
        ("wall", "ceiling"),
        "diffuse",
        1,
        "painted plaster with a textured relief",
    ),
    "wallpaper": TextureFamily(
        "wallpaper",
        finishes.wallpaper,
        {
            "tile_size_m": R(0.5, 1.5, "m", "a wall section, several repeats"),
            "pattern": C(finishes.WALLPAPER_PATTERNS, "original simple motifs"),
            "repeat_m": R(0.05, 0.53, "m", "pattern repeat up to the 53 cm roll width", log=True),  # from memory
            "ink_coverage": R(0.15, 0.5, "1", "inked fraction of a repeat"),
            "paper_texture": R(0.2, 1.0, "1", "fibre and mottle strength"),
            "roughness": R(0.5, 0.9, "1", "vinyl satin to matte paper"),  # common practice
            **_colour(finishes.WALLPAPER_PALETTES, 10.0, 0.15, 0.1),
        },
        ("wall",),
        "diffuse",
        1,
        "wallpaper: stripes, dots, damask-like ornament",
    ),
    "brushed_metal": TextureFamily(
        "brushed_metal",
        finishes.brushed_metal,
        {
            "tile_size_m": R(0.1, 0.6, "m", "a panel or a table frame"),
            "brush_contrast": R(0.02, 0.1, "relative", "streak tone variation"),
            "roughness": R(0.15, 0.45, "1", "fine satin to coarse brushed"),  # common practice
            "relief_m": R(5e-6, 3e-5, "m", "streak relief, exaggerated to sub-pixel grooves' look"),
            "scratches_per_m2": R(0.0, 300.0, "1/m²", "long scratches"),
            **_colour(finishes.METAL_PALETTES, 3.0, 0.1, 0.06),
        },
        ("metal",),
        "metal",
        1,
        "brushed metal, brushing along u; base colour is specular reflectance",
    ),
}


def families_for_slot(slot_kind: str) -> tuple[str, ...]:
    """Names of the families that suit a material slot kind, in registry order."""
    if slot_kind not in SLOT_KINDS:
        raise TextureParamError({"slot_kind": f"unknown slot kind {slot_kind!r} (known: {', '.join(SLOT_KINDS)})"})
    return tuple(name for name, family in FAMILIES.items() if slot_kind in family.slot_kinds)


def _family(name: str) -> TextureFamily:
    if name not in FAMILIES:
        raise TextureParamError({"family": f"unknown texture family {name!r} (known: {', '.join(FAMILIES)})"})
    return FAMILIES[name]


def sample_texture_params(family: str, rng: np.random.Generator) -> dict[str, Any]:
    """Draw every parameter of ``family`` inside its range; returns canonical (rounded, sorted) parameters."""
    spec = _family(family)
    return canonical_params(family, {name: param.sample(rng) for name, param in spec.params.items()})


def canonical_params(family: str, params: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Defaults filled in, values checked against the ranges, floats rounded to 6 decimals, keys sorted.

    Raises :class:`TextureParamError` with one message per offending field.
    """
    spec = _family(family)
    given = dict(params or {})
    errors = {name: "unknown parameter" for name in given if name not in spec.params}
    out: dict[str, Any] = {}
    for name, param in spec.params.items():
        value = given.get(name, param.default_value())
        message = param.error(value)
        if message:
            errors[name] = message
            continue
        if isinstance(param, ParamRange):
            value = int(value) if param.integer else float(value)
        out[name] = value
    if errors:
        raise TextureParamError(errors)
    return round_floats(dict(sorted(out.items())))


def check_request(seed: int, resolution_px: int) -> None:
    """Refuse seeds that are not non-negative integers and resolutions outside :data:`RESOLUTION_RANGE_PX`."""
    errors = {}
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        errors["seed"] = "must be a non-negative integer"
    low, high = RESOLUTION_RANGE_PX
    if (
        isinstance(resolution_px, bool)
        or not isinstance(resolution_px, (int, np.integer))
        or not low <= resolution_px <= high
    ):
        errors["resolution_px"] = f"must be an integer in [{low}, {high}]"
    if errors:
        raise TextureParamError(errors)


def texture_rng(family: str, seed: int) -> np.random.Generator:
    """The generator's random stream: the seed, with the family name mixed in so families never share noise."""
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(family.encode())]))


def generate_texture(
    family: str,
    params: Mapping[str, Any] | None = None,
    seed: int = 0,
    *,
    resolution_px: int = DEFAULT_RESOLUTION_PX,
) -> TextureMaps:
    """Generate one texture set in memory: sRGB 8-bit base colour, roughness, tangent-space normals.

    Pure and deterministic: the same family, parameters, seed and resolution
    give byte-identical arrays; missing parameters take their defaults.
    ``info`` of the result holds the parameters, seed and the geometry the
    generator actually used (periods snapped to tile).
    """
    canonical = canonical_params(family, params)
    check_request(seed, resolution_px)
    spec = FAMILIES[family]
    surface = spec.generate(canonical, texture_rng(family, seed), int(resolution_px))
    maps = finish(surface, float(canonical["tile_size_m"]))
    info = {
        "family": family,
        "params": canonical,
        "seed": int(seed),
        "resolution_px": int(resolution_px),
        "version": spec.version,
        "material_kind": spec.material_kind,
        "geometry": round_floats(maps.info),
    }
    return TextureMaps(maps.base_color_srgb8, maps.roughness, maps.normal, maps.tile_size_m, info)
