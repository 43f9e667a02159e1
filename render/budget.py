"""The randomization budget: every range the render core samples from.

A budget is a plain JSON dict of sections (``render``, ``room``,
``lighting``, ``camera``, ``thresholds``, ``appearance``, ``variation``). Each field is
described once in :data:`FIELDS` with its unit, physical bounds and a
one-line explanation of what it changes in the image; the dashboard form,
the validation and the docs all read that table.

``normalize_budget`` merges a partial budget over :data:`DEFAULT_BUDGET`,
checks every field and returns a new dict; on bad input it raises
:class:`BudgetError` naming the field, and nothing is changed.
"""

from __future__ import annotations

import copy
import json
import math
from dataclasses import dataclass
from typing import Any

MAX_RESOLUTION_PX = 4096
MAX_SPP = 4096


#: The choices of ``room.room_types`` (``render.dressing.ROOM_TYPES`` holds their finishes) and of
#: ``appearance.texture_families`` (``render.textures.FAMILIES``); kept here so the budget imports no geometry.
ROOM_TYPES: tuple[str, ...] = ("living_room", "bedroom", "dining_room", "office")
TEXTURE_FAMILIES: tuple[str, ...] = (
    "wood",
    "parquet",
    "ceramic_tile",
    "stone_tile",
    "marble",
    "concrete",
    "carpet",
    "rug",
    "fabric",
    "leather",
    "plaster",
    "wallpaper",
    "brushed_metal",
)


class BudgetError(ValueError):
    """A budget field is missing, of the wrong type, out of bounds or min > max.

    Structured for forms: ``section`` and ``name`` say which field (empty when the error is about the budget
    as a whole), ``part`` is ``"min"`` or ``"max"`` for one end of a range, ``detail`` is the message for that
    input; ``str(error)`` reads ``"section.name[ part]: detail"`` for commands and logs.
    """

    def __init__(self, detail: str, *, section: str = "", name: str = "", part: str = "") -> None:
        self.detail, self.section, self.name, self.part = detail, section, name, part
        where = ".".join(p for p in (section, name) if p) + (f" {part}" if part else "")
        super().__init__(f"{where}: {detail}" if where else detail)


@dataclass(frozen=True)
class Field:
    section: str
    name: str
    kind: str  # "range" (float [lo, hi]), "int_range", "float", "int", "probability", "bool" (a switch),
    #            "choices" (a non-empty subset of ``choices``, kept in their order)
    unit: str
    lower: float  # physical lower bound (inclusive)
    upper: float  # physical upper bound (inclusive)
    help: str
    source: str = ""
    choices: tuple[str, ...] = ()


#: Surface kinds with their own texture scale and colour-jitter strength (``appearance.<kind>_…``; the render core's
#: ``appearance.assign_textures`` sorts every material into one), and what each covers.
SURFACE_KINDS: dict[str, str] = {
    "floor": "the floor",
    "walls": "walls, ceiling, doors, window frames, skirting and curtains",
    "objects": "the labelled objects",
    "clutter": "the unlabelled clutter",
}

# Sources for default ranges. Values marked "from memory" were not re-checked
# against the book at hand; "common practice" marks rules of thumb.
FIELDS: tuple[Field, ...] = (
    # render
    Field("render", "width_px", "int", "px", 16, MAX_RESOLUTION_PX, "Image width in pixels."),
    Field("render", "height_px", "int", "px", 16, MAX_RESOLUTION_PX, "Image height in pixels."),
    Field(
        "render",
        "spp",
        "int",
        "samples",
        1,
        MAX_SPP,
        "Path-tracing samples per pixel: more is less noisy and slower, linearly. With the denoiser on, "
        "4 already gives clean frames (python -m render.bench_quality measures it).",
    ),
    Field(
        "render",
        "denoise",
        "bool",
        "",
        0,
        1,
        "Denoise the linear render (Intel Open Image Denoise, with albedo and normal images) before "
        "exposure and sensor noise. Off: the raw path-traced noise stays in the image.",
    ),
    Field(
        "render",
        "max_depth",
        "int",
        "bounces",
        2,
        64,
        "Longest light path; fewer bounces give darker corners and faster frames.",
    ),
    # room
    Field(
        "room",
        "width_m",
        "range",
        "m",
        2.0,
        20.0,
        "Room width (x); wider rooms hold more furniture.",
        "Neufert, Architects' Data, 4th ed. — living rooms 3–6 m across (from memory)",
    ),
    Field(
        "room",
        "depth_m",
        "range",
        "m",
        2.0,
        20.0,
        "Room depth (y).",
        "Neufert, Architects' Data, 4th ed. (from memory)",
    ),
    Field(
        "room",
        "height_m",
        "range",
        "m",
        2.1,
        6.0,
        "Ceiling height; higher ceilings put ceiling lights further away.",
        "Residential ceilings 2.4–3.0 m, common practice (2.4 m minimum, from memory)",
    ),
    Field(
        "room",
        "window_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Chance that a room has a window (and so can receive sunlight).",
    ),
    Field(
        "room",
        "max_objects_per_m2",
        "float",
        "1/m²",
        0.05,
        3.0,
        "Density limit: the most objects placed per square metre of floor.",
    ),
    Field(
        "room",
        "free_placement_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Share of layouts whose furniture stands anywhere at random angles (domain randomization); the rest "
        "are arranged like a home: sofas, beds and shelves against walls, chairs round tables, coffee tables "
        "in front of sofas, side tables and lamps beside seats. Drawn once per layout; 0 arranges every layout.",
        "Tobin et al. 2017 (random placement in domain randomization); default 0.25 keeps most layouts "
        "arranged (common practice)",
    ),
    Field(
        "room",
        "room_types",
        "choices",
        "",
        1,
        4,
        "Kinds of room drawn, each with plausible finishes: floors (parquet, tile, carpet, concrete), paint or "
        "wallpaper, how often windows have curtains.",
        "common practice",
        choices=ROOM_TYPES,
    ),
    Field(
        "room",
        "door_count",
        "int_range",
        "",
        0,
        4,
        "Closed doors with architraves and handles, on walls clear of windows; the floor in front of a door "
        "stays free of furniture.",
    ),
    Field(
        "room",
        "curtain_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Chance that a window has curtains, times the room type's own (living room 0.8, bedroom 0.9, dining "
        "room 0.6, office 0.35). 0 turns curtains off.",
        "common practice",
    ),
    Field(
        "room",
        "outdoor_view_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Chance that a room's windows look out on an outdoor scene (sky with clouds, grass or paving, buildings "
        "or trees, seen in perspective from the camera and lighting the room); otherwise they show a plain sky.",
    ),
    # lighting
    Field("lighting", "panel_count", "int_range", "", 0, 8, "Rectangular ceiling panels (area lights)."),
    Field(
        "lighting",
        "panel_flux_lm",
        "range",
        "lm",
        0.0,
        50000.0,
        "Luminous flux of each panel.",
        "LED ceiling panels 2000–4000 lm, from memory",
    ),
    Field(
        "lighting",
        "panel_size_m",
        "range",
        "m",
        0.05,
        3.0,
        "Side length of each panel; larger panels give softer shadows.",
    ),
    Field("lighting", "point_count", "int_range", "", 0, 8, "Point bulbs (lamps, pendants)."),
    Field(
        "lighting",
        "point_flux_lm",
        "range",
        "lm",
        0.0,
        20000.0,
        "Luminous flux of each bulb.",
        "A-type LED bulbs 450–1600 lm (40–100 W incandescent equivalent), from memory",
    ),
    Field("lighting", "spot_count", "int_range", "", 0, 8, "Spot lights aimed at the furniture."),
    Field("lighting", "spot_flux_lm", "range", "lm", 0.0, 20000.0, "Luminous flux of each spot light."),
    Field("lighting", "spot_cone_deg", "range", "°", 5.0, 120.0, "Full cone angle of the spot lights."),
    Field(
        "lighting",
        "cct_k",
        "range",
        "K",
        1000.0,
        25000.0,
        "Correlated colour temperature of the lamps: 2700 K warm, 6500 K daylight.",
    ),
    Field(
        "lighting",
        "sun_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Chance that sunlight enters through the window (rooms with a window only).",
    ),
    Field(
        "lighting",
        "sun_illuminance_lux",
        "range",
        "lx",
        0.0,
        150000.0,
        "Direct sunlight illuminance on a surface facing the sun.",
        "Direct sun 32,000–100,000 lx, IES Lighting Handbook 10th ed. (from memory)",
    ),
    Field("lighting", "sun_elevation_deg", "range", "°", 0.0, 90.0, "Sun elevation above the horizon."),
    Field("lighting", "sun_azimuth_deg", "range", "°", 0.0, 360.0, "Sun azimuth, counter-clockwise from +x."),
    Field(
        "lighting",
        "dome_illuminance_lux",
        "range",
        "lx",
        0.0,
        150000.0,
        "Sky light outdoors (illuminance on a horizontal plane, sun excluded); it enters through windows.",
        "Diffuse sky 5,000–25,000 lx, overcast to clear, IES Lighting Handbook 10th ed. (from memory)",
    ),
    # camera
    Field(
        "camera",
        "eye_height_m",
        "range",
        "m",
        0.3,
        2.5,
        "Camera height above the floor, from a small child's eye to a standing adult's.",
        "Pheasant & Haslegrave, Bodyspace, 3rd ed.: eye height 5th-pct 4-year-old ≈ 0.9 m, "
        "95th-pct adult male standing ≈ 1.75 m (from memory)",
    ),
    Field("camera", "focal_length_mm", "range", "mm", 4.0, 600.0, "Lens focal length; shorter is wider field of view."),
    Field(
        "camera",
        "max_zoom_out",
        "float",
        "×",
        1.0,
        100.0,
        "How far the lens may zoom out from the sampled focal length to fit every object in view; "
        "1 keeps the sampled focal length, so focal lengths follow their range (objects may be cut by the "
        "frame edge; the truncation thresholds decide). Above 1 focal lengths pile up at the short end.",
    ),
    Field(
        "camera",
        "distance_m",
        "range",
        "m",
        0.3,
        20.0,
        "Distance from the camera to the object it frames (its subject), drawn uniformly; the focus "
        "distance. A draw that does not fit in the room is drawn again, so keep the top below the room size.",
        "1–3 m: the across-a-room distances of 3–6 m rooms (common practice)",
    ),
    Field(
        "camera",
        "min_view_angle_deg",
        "float",
        "°",
        0.0,
        180.0,
        "Views of one layout count as distinct when their viewing directions differ by at least this "
        "much, or their positions by min_view_distance_m. 20° moves the picture by a fifth (18 mm lens) "
        "to a half (50 mm) of its width.",
        "common practice",
    ),
    Field(
        "camera",
        "min_view_distance_m",
        "float",
        "m",
        0.0,
        20.0,
        "Views of one layout count as distinct when their positions are at least this far apart (or "
        "their directions min_view_angle_deg). 0.5 m at 1–3 m from the subject turns it by 10–30°, "
        "changing perspective and occlusions.",
        "common practice",
    ),
    Field(
        "camera",
        "sensor_width_mm",
        "float",
        "mm",
        1.0,
        100.0,
        "Sensor width; 36 mm is full frame. With the focal length it sets the field of view.",
    ),
    Field(
        "camera",
        "f_number",
        "range",
        "",
        0.95,
        64.0,
        "Aperture f-number; small values give shallow depth of field (blur away from focus).",
    ),
    Field(
        "camera",
        "focus_jitter_fraction",
        "float",
        "",
        0.0,
        0.9,
        "Focus distance is the target distance times 1 ± this fraction (missed focus).",
    ),
    Field(
        "camera",
        "shutter_s",
        "range",
        "s",
        1e-5,
        30.0,
        "Exposure time limits; the auto-exposure picks a time inside them.",
    ),
    Field(
        "camera",
        "iso",
        "range",
        "",
        25.0,
        204800.0,
        "Sensor sensitivity (ISO 12232); higher ISO is brighter for the same light and noisier.",
    ),
    Field(
        "camera",
        "exposure_compensation_ev",
        "range",
        "EV",
        -5.0,
        5.0,
        "Offset from the metered exposure; negative is darker.",
    ),
    Field(
        "camera",
        "full_well_electrons",
        "float",
        "e⁻",
        1000.0,
        200000.0,
        "Electrons at sensor saturation at base ISO; smaller wells show more shot noise.",
    ),
    Field(
        "camera",
        "read_noise_electrons",
        "float",
        "e⁻",
        0.0,
        100.0,
        "Read noise of the sensor; dominates in the shadows at high ISO.",
    ),
    Field(
        "camera",
        "sensor_noise",
        "bool",
        "",
        0,
        1,
        "Add the sensor's shot and read noise (seeded per frame). Off gives clean reference images.",
    ),
    # thresholds
    Field(
        "thresholds",
        "min_visible_fraction",
        "float",
        "",
        0.0,
        1.0,
        "Instances less visible than this (occluded or cut by the frame) are not accepted.",
    ),
    Field(
        "thresholds",
        "min_box_px",
        "float",
        "px",
        0.0,
        4096.0,
        "Instances whose visible box has a side shorter than this are not accepted.",
    ),
    Field(
        "thresholds",
        "min_contrast",
        "float",
        "",
        0.0,
        1000.0,
        "Instances that do not stand out from their surroundings in the final image are not accepted: "
        "colour difference ΔE*ab between the object and a thin ring around it, divided by the image "
        "noise (at least 1 ΔE). 0 accepts invisible objects.",
    ),
    # appearance
    Field(
        "appearance",
        "texture_probability",
        "probability",
        "",
        0.0,
        1.0,
        "Share of wood, floor, wall, ceiling, fabric, leather and metal surfaces that wear a procedural "
        "texture (wood grain, parquet, tiles, carpet, plaster, wallpaper, weave…); the rest stay plain.",
        "Tobin et al. 2017; Tremblay et al. 2018 (random textures in domain randomization)",
    ),
    Field(
        "appearance",
        "texture_families",
        "choices",
        "",
        1,
        13,
        "Procedural texture families surfaces may wear, each only where it fits (wood grain on wood, parquet, "
        "tiles, marble or concrete on floors, plaster or wallpaper on walls, weaves on upholstery…). A surface "
        "none of whose families is allowed stays plain.",
        choices=TEXTURE_FAMILIES,
    ),
    Field(
        "appearance",
        "hue_jitter_deg",
        "float",
        "°",
        0.0,
        180.0,
        "Colour jitter of every surface (plain or textured; metals and uploads that keep their look excepted): "
        "its hue turns by up to this many degrees either way.",
        "Tobin et al. 2017 (random colours in domain randomization)",
    ),
    Field(
        "appearance",
        "saturation_scale",
        "range",
        "×",
        0.0,
        3.0,
        "Colour jitter: each surface's saturation is multiplied by a factor drawn from this range (0 = grey).",
    ),
    Field(
        "appearance",
        "value_scale",
        "range",
        "×",
        0.2,
        3.0,
        "Colour jitter: each surface's brightness (HSV value) is multiplied by a factor drawn from this range.",
    ),
    Field(
        "appearance",
        "texture_variants",
        "int",
        "",
        1,
        1000,
        "Texture variants per family. Each is generated once per machine and cached; more variants give "
        "more variety and a larger cache (about 1 MB each).",
    ),
    Field(
        "appearance",
        "texture_scale",
        "range",
        "×",
        0.25,
        4.0,
        "Physical size of a texture relative to its variant's (board width, tile size, weave), drawn "
        "log-uniformly per surface.",
    ),
    *(
        field
        for kind, surfaces in SURFACE_KINDS.items()
        for field in (
            Field(
                "appearance",
                f"{kind}_texture_scale",
                "range",
                "×",
                0.25,
                4.0,
                f"Texture size on {surfaces}, times the texture scale above (the product drawn log-uniformly per "
                "surface).",
            ),
            Field(
                "appearance",
                f"{kind}_colour_jitter",
                "float",
                "×",
                0.0,
                3.0,
                f"Colour jitter strength on {surfaces}: the hue turn times this, the saturation and brightness "
                "factors raised to this power. 0 keeps their generated colours; 1 is the jitter above.",
            ),
        )
    ),
    Field(
        "appearance",
        "distractor_count",
        "int_range",
        "",
        0,
        40,
        "Unlabelled clutter per frame: books, vases, bowls, boxes, cushions, picture frames, mirrors, rugs and "
        "table lamps on floors, tables, seats and walls. It hides parts of labelled objects like any other "
        "thing and never appears in the labels; an item that does not fit is left out. 0 turns it off.",
        "Tobin et al. 2017; Tremblay et al. 2018 (distractor objects in domain randomization)",
    ),
    # variation
    Field("variation", "layouts", "int", "", 1, 10_000_000, "Distinct room layouts."),
    Field("variation", "lighting_per_layout", "int", "", 1, 10_000, "Lighting variants per layout."),
    Field("variation", "views_per_lighting", "int", "", 1, 10_000, "Camera views per lighting variant."),
)

DEFAULT_BUDGET: dict[str, dict[str, Any]] = {
    "render": {"width_px": 640, "height_px": 480, "spp": 4, "max_depth": 6, "denoise": True},
    "room": {
        "width_m": [3.0, 6.0],
        "depth_m": [3.0, 6.0],
        "height_m": [2.4, 3.0],
        "window_probability": 0.6,
        "max_objects_per_m2": 0.6,
        "free_placement_probability": 0.25,
        "room_types": list(ROOM_TYPES),
        "door_count": [1, 2],
        "curtain_probability": 1.0,
        "outdoor_view_probability": 1.0,
    },
    "lighting": {
        "panel_count": [0, 2],
        "panel_flux_lm": [2000.0, 4000.0],
        "panel_size_m": [0.4, 1.2],
        "point_count": [0, 2],
        "point_flux_lm": [450.0, 1600.0],
        "spot_count": [0, 1],
        "spot_flux_lm": [300.0, 1000.0],
        "spot_cone_deg": [25.0, 60.0],
        "cct_k": [2700.0, 6500.0],
        "sun_probability": 0.5,
        "sun_illuminance_lux": [30000.0, 100000.0],
        "sun_elevation_deg": [10.0, 60.0],
        "sun_azimuth_deg": [0.0, 360.0],
        "dome_illuminance_lux": [5000.0, 20000.0],
    },
    "camera": {
        "eye_height_m": [0.9, 1.75],
        "focal_length_mm": [18.0, 50.0],
        "max_zoom_out": 1.0,
        "distance_m": [1.0, 3.0],
        "min_view_angle_deg": 20.0,
        "min_view_distance_m": 0.5,
        "sensor_width_mm": 36.0,
        "f_number": [2.0, 11.0],
        "focus_jitter_fraction": 0.05,
        "shutter_s": [1 / 500, 1 / 8],
        "iso": [100.0, 3200.0],
        "exposure_compensation_ev": [-0.7, 0.7],
        "full_well_electrons": 30000.0,
        "read_noise_electrons": 3.0,
        "sensor_noise": True,
    },
    "thresholds": {"min_visible_fraction": 0.25, "min_box_px": 16.0, "min_contrast": 2.0},
    "appearance": {
        "texture_probability": 0.85,
        "texture_families": list(TEXTURE_FAMILIES),
        "texture_variants": 32,
        "hue_jitter_deg": 12.0,
        "saturation_scale": [0.8, 1.2],
        "value_scale": [0.85, 1.15],
        "texture_scale": [0.8, 1.25],
        **{f"{kind}_texture_scale": [1.0, 1.0] for kind in SURFACE_KINDS},
        **{f"{kind}_colour_jitter": 1.0 for kind in SURFACE_KINDS},
        "distractor_count": [3, 10],
    },
    "variation": {"layouts": 1000, "lighting_per_layout": 2, "views_per_lighting": 2},
}

FIELDS_BY_KEY: dict[tuple[str, str], Field] = {(f.section, f.name): f for f in FIELDS}


def _number(value: Any, where: dict[str, str], *, integer: bool) -> float | int:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise BudgetError(f"expected a number, got {value!r}", **where)
    if isinstance(value, float) and not math.isfinite(value):
        raise BudgetError(f"must be finite, got {value!r}", **where)
    if integer:
        if isinstance(value, float) and not value.is_integer():
            raise BudgetError(f"expected a whole number, got {value!r}", **where)
        return int(value)
    return float(value)


def _check_field(field: Field, value: Any) -> Any:
    where = {"section": field.section, "name": field.name}
    if field.kind == "choices":
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise BudgetError(f"expected a list of names, got {value!r}", **where)
        unknown = [v for v in value if v not in field.choices]
        if unknown:
            raise BudgetError(f"unknown {', '.join(map(repr, unknown))} (known: {', '.join(field.choices)})", **where)
        if not value:
            raise BudgetError(f"choose at least one of {', '.join(field.choices)}", **where)
        return [c for c in field.choices if c in value]
    if field.kind == "bool":
        if not isinstance(value, bool):
            raise BudgetError(f"expected true or false, got {value!r}", **where)
        return value
    integer = field.kind in ("int", "int_range")
    unit = f" {field.unit}" if field.unit else ""
    if field.kind in ("range", "int_range"):
        if not isinstance(value, (list, tuple)) or len(value) != 2:
            raise BudgetError(f"expected [min, max], got {value!r}", **where)
        lo = _number(value[0], {**where, "part": "min"}, integer=integer)
        hi = _number(value[1], {**where, "part": "max"}, integer=integer)
        if lo > hi:
            raise BudgetError(f"min {lo}{unit} is greater than max {hi}{unit}", **where)
        for bound in (lo, hi):
            if bound < field.lower or bound > field.upper:
                raise BudgetError(
                    f"{bound}{unit} is outside the allowed {field.lower:g}–{field.upper:g}{unit}", **where
                )
        return [lo, hi]
    number = _number(value, where, integer=integer)
    if number < field.lower or number > field.upper:
        raise BudgetError(f"{number}{unit} is outside the allowed {field.lower:g}–{field.upper:g}{unit}", **where)
    return number


def normalize_budget(partial: dict[str, Any] | None = None) -> dict[str, Any]:
    """Merge ``partial`` over the defaults, validate, and return a new budget dict.

    Unknown sections or fields are refused (a typo must not silently fall
    back to a default).
    """
    partial = partial or {}
    if not isinstance(partial, dict):
        raise BudgetError(f"budget: expected an object, got {type(partial).__name__}")
    budget = copy.deepcopy(DEFAULT_BUDGET)
    for section, values in partial.items():
        if section not in budget:
            raise BudgetError(f"budget: unknown section {section!r} (known: {', '.join(budget)})")
        if not isinstance(values, dict):
            raise BudgetError(f"expected an object, got {values!r}", section=str(section))
        for name, value in values.items():
            if (section, name) not in FIELDS_BY_KEY:
                known = ", ".join(f.name for f in FIELDS if f.section == section)
                raise BudgetError(f"unknown field (known: {known})", section=str(section), name=str(name))
            budget[section][name] = value
    for field in FIELDS:
        budget[field.section][field.name] = _check_field(field, budget[field.section][field.name])
    lighting = budget["lighting"]
    if lighting["panel_count"][1] + lighting["point_count"][1] + lighting["spot_count"][1] == 0 and (
        lighting["dome_illuminance_lux"][1] == 0 and lighting["sun_probability"] == 0
    ):
        raise BudgetError("every light source is disabled; the frames would be black", section="lighting")
    return budget


def budget_to_json(budget: dict[str, Any]) -> str:
    return json.dumps(budget, sort_keys=True, separators=(",", ":"))


def load_budget_file(path: str) -> dict[str, Any]:
    """Read a JSON budget file and normalize it; clear errors for unreadable files."""
    try:
        with open(path, encoding="utf-8") as handle:
            data = json.load(handle)
    except OSError as exc:
        raise BudgetError(f"budget file {path}: {exc.strerror or exc}") from exc
    except json.JSONDecodeError as exc:
        raise BudgetError(f"budget file {path}: not valid JSON ({exc.msg} at line {exc.lineno})") from exc
    return normalize_budget(data)
