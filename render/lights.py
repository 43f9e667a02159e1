"""Lights: colour temperature to linear sRGB, photometric quantities to render units, light sampling.

Render units: the RGB renderer works in linear sRGB (ITU-R BT.709 primaries, D65 white) and its
luminance Y = 0.2126 R + 0.7152 G + 0.0722 B is read as photometric: radiance Y in cd/m²,
intensity Y in cd, irradiance Y in lux. A light's colour is :func:`cct_to_linear_srgb` (Y = 1)
times its photometric magnitude, so luminous flux is preserved whatever the colour.

Mitsuba 3 parameters per light kind (see :func:`emitter_quantities`):

- ``point``: ``intensity`` = Φ / 4π (cd).
- ``panel``: ``area`` emitter on a ``rectangle``, ``radiance`` = Φ / (π A) (cd/m²). Mitsuba's
  rectangle spans [-1, 1]² in its local xy plane and emits only towards local +z, so scale it by
  (sx / 2, sy / 2) and flip it (rotate 180° about x) so it faces down (−z).
- ``spot``: ``intensity`` (cd, on the axis), ``cutoff_angle`` = cone_deg / 2, ``beam_width`` =
  3/4 of the cutoff (Mitsuba's default) with Mitsuba's linear-in-angle falloff between them;
  :func:`spot_intensity_cd` accounts for that falloff exactly.
- ``sun``: ``directional`` emitter, ``irradiance`` = E (lux), ``direction`` = :func:`sun_direction`.
- ``dome``: ``constant`` emitter, ``radiance`` = E / π (cd/m²), E the sky's illuminance on a
  horizontal plane outdoors; in the closed room it only enters through the window openings.

colour-science is *not* a dependency here (it is the tests' reference).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from .camera import object_bounds_m
from .rounding import round_floats

#: CIE XYZ → linear sRGB (IEC 61966-2-1:1999, D65 white, BT.709 primaries).
XYZ_TO_LINEAR_SRGB = np.array(
    [
        [3.2406, -1.5372, -0.4986],
        [-0.9689, 1.8758, 0.0415],
        [0.0557, -0.2040, 1.0570],
    ]
)
LUMINANCE_WEIGHTS = np.array([0.2126, 0.7152, 0.0722])

#: Daylight colour temperatures (K): direct sun 5000–6500 K, sky 6500–10 000 K (CIE daylight, from memory).
SUN_CCT_K = (5000.0, 6500.0)
SKY_CCT_K = (6500.0, 10000.0)
#: Sun azimuths accepted around a window's outward normal (degrees each side).
SUN_WINDOW_HALF_ANGLE_DEG = 60.0
#: Below this outdoor sky illuminance (lux) a window without sun does not light a room well enough
#: to go without lamps: a daylight factor of ~2 % (common practice) leaves < 100 lx inside.
DOME_ONLY_MIN_LUX = 5000.0
#: Fallback flux (lm) for the lamp forced into a room whose budget flux range is [0, 0].
FALLBACK_LAMP_FLUX_LM = 1000.0

CEILING_GAP_M = 0.01
WALL_MARGIN_M = 0.3
OBJECT_MARGIN_M = 0.2

#: Outward normal azimuth (degrees, counter-clockwise from +x) of each wall.
WALL_OUTWARD_AZIMUTH_DEG = {"east": 0.0, "north": 90.0, "west": 180.0, "south": 270.0}


# ---------------------------------------------------------------------------------------------------------------------
# Colour
# ---------------------------------------------------------------------------------------------------------------------


def cct_to_xy(cct_k: float) -> tuple[float, float]:
    """CIE 1931 chromaticity (x, y) of a Planckian (black-body) radiator.

    Krystek's rational approximation of the Planckian locus in CIE 1960 (u, v), then
    ``x = 3u / (2u − 8v + 4)``, ``y = 2v / (2u − 8v + 4)``. Valid 1000–15 000 K, with
    |Δu|, |Δv| < 1e-4 against the exact locus (source's claim, from memory).

    Parameters
    ----------
    cct_k : float
        Colour temperature in kelvin, 1000–15 000 K (clamped to that range).

    References
    ----------
    M. Krystek, "An algorithm to calculate correlated colour temperature", *Color Research &
    Application* 10(1), 38–40 (1985); CIE 15:2004 (1960 UCS ↔ xy relations).
    """
    t = min(max(float(cct_k), 1000.0), 15000.0)
    u = (0.860117757 + 1.54118254e-4 * t + 1.28641212e-7 * t * t) / (1.0 + 8.42420235e-4 * t + 7.08145163e-7 * t * t)
    v = (0.317398726 + 4.22806245e-5 * t + 4.20481691e-8 * t * t) / (1.0 - 2.89741816e-5 * t + 1.61456053e-7 * t * t)
    denominator = 2.0 * u - 8.0 * v + 4.0
    return 3.0 * u / denominator, 2.0 * v / denominator


def xy_to_linear_srgb(x: float, y: float) -> list[float]:
    """Linear sRGB of chromaticity (x, y) at luminance Y = 1.

    XYZ = (x / y, 1, (1 − x − y) / y) through the IEC 61966-2-1 matrix. Chromaticities outside the
    sRGB gamut give negative components; those are clipped to 0 and the colour rescaled so that
    Y = 0.2126 R + 0.7152 G + 0.0722 B is again exactly 1 (a small hue shift, no flux change).
    Within 1000–25 000 K only temperatures below about 1900 K need the clip (blue < 0).

    References
    ----------
    IEC 61966-2-1:1999 (sRGB), ITU-R BT.709-6 primaries; CIE 15:2004 (xyY → XYZ).
    """
    xyz = np.array([x / y, 1.0, (1.0 - x - y) / y])
    rgb = np.clip(XYZ_TO_LINEAR_SRGB @ xyz, 0.0, None)
    rgb /= float(LUMINANCE_WEIGHTS @ rgb)
    return [float(c) for c in rgb]


def cct_to_linear_srgb(cct_k: float) -> list[float]:
    """Linear sRGB (Y = 1) of a black body at ``cct_k`` kelvin: :func:`xy_to_linear_srgb` ∘ :func:`cct_to_xy`.

    References
    ----------
    Krystek (1985); IEC 61966-2-1:1999.
    """
    return xy_to_linear_srgb(*cct_to_xy(cct_k))


# ---------------------------------------------------------------------------------------------------------------------
# Photometry → render units
# ---------------------------------------------------------------------------------------------------------------------


def point_intensity_cd(flux_lm: float) -> float:
    """Luminous intensity (cd) of an isotropic point source: ``I = Φ / 4π``.

    References
    ----------
    DiLaura et al., *The Lighting Handbook*, 10th ed., IES (2011), ch. 6 "Photometry" (from memory).
    """
    return flux_lm / (4.0 * math.pi)


def panel_radiance_cd_m2(flux_lm: float, area_m2: float) -> float:
    """Luminance (cd/m²) of a one-sided Lambertian emitter of area A: ``L = Φ / (π A)``.

    A Lambertian surface of luminance L emits M = π L (lm/m²) into its hemisphere.

    References
    ----------
    IES Lighting Handbook, 10th ed. (2011), "Photometry": M = π L for Lambertian emitters (from memory).
    """
    return flux_lm / (math.pi * area_m2)


def spot_solid_angle_sr(cone_deg: float, beam_deg: float | None = None) -> float:
    """Effective solid angle (sr) of a spot: flux = axial intensity × this.

    Hard-edged cone of full angle θ (``beam_deg`` None or equal to ``cone_deg``):
    ``Ω = 2π (1 − cos(θ/2))``. With Mitsuba's linear falloff from the beam half-angle β to the cutoff
    half-angle γ, ``∫ falloff dΩ = 2π (1 − (sin γ − sin β) / (γ − β))`` (integrating
    ``(γ − θ) / (γ − β) · sin θ`` over β..γ), which tends to the hard cone as β → γ.

    References
    ----------
    Solid angle of a cone (any photometry text); Mitsuba 3 ``spot`` emitter source (``falloff_curve``).
    """
    gamma = math.radians(cone_deg) / 2.0
    if beam_deg is None or beam_deg >= cone_deg:
        return 2.0 * math.pi * (1.0 - math.cos(gamma))
    beta = math.radians(beam_deg) / 2.0
    return 2.0 * math.pi * (1.0 - (math.sin(gamma) - math.sin(beta)) / (gamma - beta))


def spot_intensity_cd(flux_lm: float, cone_deg: float, beam_deg: float | None = None) -> float:
    """Axial luminous intensity (cd) of a spot light emitting ``flux_lm`` into a cone of full angle ``cone_deg``.

    ``I = Φ / (2π (1 − cos(θ/2)))`` for a hard-edged cone (``beam_deg`` None). For Mitsuba's spot,
    pass ``beam_deg`` (full angle of the constant-intensity core; Mitsuba's default is 3/4 of the
    cone) to use the exact falloff integral of :func:`spot_solid_angle_sr`; the hard-cone value
    would under-deliver the flux by about 22 % at the default beam width.

    References
    ----------
    Definition of intensity, I = dΦ / dΩ (IES Lighting Handbook, 10th ed., from memory).
    """
    return flux_lm / spot_solid_angle_sr(cone_deg, beam_deg)


def sun_irradiance(illuminance_lux: float) -> float:
    """Mitsuba ``directional`` ``irradiance`` (render units) for a sun of illuminance E: ``E`` itself.

    E is measured on a plane facing the sun; the cosine law for tilted surfaces is applied by the
    renderer.

    References
    ----------
    Lambert's cosine law, E(θ) = E⊥ cos θ (any photometry text); Mitsuba 3 docs, ``directional``.
    """
    return float(illuminance_lux)


def dome_radiance_cd_m2(illuminance_lux: float) -> float:
    """Radiance (cd/m²) of a uniform sky giving illuminance E on a horizontal plane: ``L = E / π``.

    ``E = ∫ L cos θ dΩ`` over the upper hemisphere = π L.

    References
    ----------
    Uniform-luminance sky, E_h = π L (CIE S 011/E:2003 sky type 1 simplified; any photometry text).
    """
    return float(illuminance_lux) / math.pi


def sun_direction(elevation_deg: float, azimuth_deg: float) -> list[float]:
    """Unit vector pointing FROM the sun INTO the scene (the direction sunlight travels).

    The sun itself is in direction ``(cos e cos a, cos e sin a, sin e)`` with the azimuth a
    counter-clockwise from +x (east = 0°, north = 90° in our room frame) and elevation e above the
    horizon; the returned vector is its negative (Mitsuba ``directional`` ``direction``).

    References
    ----------
    Spherical to Cartesian coordinates (definition).
    """
    e, a = math.radians(elevation_deg), math.radians(azimuth_deg)
    return [-math.cos(e) * math.cos(a), -math.cos(e) * math.sin(a), -math.sin(e)]


def emitter_quantities(light: dict[str, Any]) -> dict[str, Any]:
    """Render-unit quantities (plain floats, no Mitsuba import) for one light dict from :func:`sample_lights`.

    Returns
    -------
    dict
        point: ``intensity_rgb``; panel: ``radiance_rgb``, ``area_m2``; spot: ``intensity_rgb``,
        ``cutoff_angle_deg``, ``beam_width_deg``; sun: ``irradiance_rgb``, ``direction``;
        dome: ``radiance_rgb``. Each ``*_rgb`` is linear sRGB whose Y equals the photometric value.

    References
    ----------
    As in :func:`point_intensity_cd`, :func:`panel_radiance_cd_m2`, :func:`spot_intensity_cd`,
    :func:`sun_irradiance`, :func:`dome_radiance_cd_m2`.
    """
    colour = np.asarray(cct_to_linear_srgb(light["cct_k"]))
    kind = light["kind"]
    if kind == "point":
        return {"intensity_rgb": (colour * point_intensity_cd(light["flux_lm"])).tolist()}
    if kind == "panel":
        area_m2 = float(light["size_m"][0]) * float(light["size_m"][1])
        return {"radiance_rgb": (colour * panel_radiance_cd_m2(light["flux_lm"], area_m2)).tolist(), "area_m2": area_m2}
    if kind == "spot":
        cone = float(light["cone_deg"])
        beam = 0.75 * cone
        return {
            "intensity_rgb": (colour * spot_intensity_cd(light["flux_lm"], cone, beam)).tolist(),
            "cutoff_angle_deg": cone / 2.0,
            "beam_width_deg": beam / 2.0,
        }
    if kind == "sun":
        return {
            "irradiance_rgb": (colour * sun_irradiance(light["illuminance_lux"])).tolist(),
            "direction": sun_direction(light["elevation_deg"], light["azimuth_deg"]),
        }
    if kind == "dome":
        return {"radiance_rgb": (colour * dome_radiance_cd_m2(light["illuminance_lux"])).tolist()}
    raise ValueError(f"unknown light kind {kind!r}")


# ---------------------------------------------------------------------------------------------------------------------
# Sampling
# ---------------------------------------------------------------------------------------------------------------------


def _uniform(rng: np.random.Generator, bounds: Sequence[float]) -> float:
    lo, hi = float(bounds[0]), float(bounds[1])
    return lo if hi <= lo else float(rng.uniform(lo, hi))


def _count(rng: np.random.Generator, bounds: Sequence[int]) -> int:
    return int(rng.integers(int(bounds[0]), int(bounds[1]) + 1))


def _object_boxes(objects: list[dict[str, Any]]) -> np.ndarray:
    """(N, 6) array of world AABBs [xmin, ymin, zmin, xmax, ymax, zmax] (camera.object_bounds_m)."""
    boxes = [np.concatenate(object_bounds_m(obj)) for obj in objects]
    return np.array(boxes).reshape(-1, 6)


def _clear_of_objects(point: np.ndarray, boxes: np.ndarray, margin_m: float) -> bool:
    if not len(boxes):
        return True
    inside = (point > boxes[:, :3] - margin_m) & (point < boxes[:, 3:] + margin_m)
    return not bool(inside.all(axis=1).any())


def _azimuth_segments(lo_deg: float, hi_deg: float, centre_deg: float, half_deg: float) -> list[tuple[float, float]]:
    """Intersection of the budget azimuth range [lo, hi] with [centre ± half] on the circle, as segments."""
    window = (centre_deg - half_deg, centre_deg + half_deg)
    if hi_deg - lo_deg >= 360.0:
        return [window]
    segments = []
    for shift in (-720.0, -360.0, 0.0, 360.0, 720.0):
        a, b = max(lo_deg + shift, window[0]), min(hi_deg + shift, window[1])
        if b > a:
            segments.append((a, b))
    return segments


def _sample_sun_azimuth(rng: np.random.Generator, budget_range: Sequence[float], wall: str) -> float:
    """Azimuth (deg, 0–360) of a sun behind ``wall`` (±60° of its outward normal), in the budget range if possible."""
    centre = WALL_OUTWARD_AZIMUTH_DEG[wall]
    segments = _azimuth_segments(float(budget_range[0]), float(budget_range[1]), centre, SUN_WINDOW_HALF_ANGLE_DEG)
    if not segments:  # the budget's range never faces this window: entering through the window wins
        segments = [(centre - SUN_WINDOW_HALF_ANGLE_DEG, centre + SUN_WINDOW_HALF_ANGLE_DEG)]
    lengths = np.array([b - a for a, b in segments])
    pick = int(rng.choice(len(segments), p=lengths / lengths.sum())) if len(segments) > 1 else 0
    a, b = segments[pick]
    return float(rng.uniform(a, b)) % 360.0


def _panel(rng, lighting, room, placed: list[tuple[float, float, float, float]]) -> dict[str, Any]:
    width, depth, height = room["width_m"], room["depth_m"], room["height_m"]
    sx = min(_uniform(rng, lighting["panel_size_m"]), width - 0.2)
    sy = min(_uniform(rng, lighting["panel_size_m"]), depth - 0.2)
    best, best_gap = None, -math.inf
    for _ in range(8):  # best-candidate sampling: spread panels, avoid overlaps
        cx = float(rng.uniform(0.1 + sx / 2, width - 0.1 - sx / 2))
        cy = float(rng.uniform(0.1 + sy / 2, depth - 0.1 - sy / 2))
        gap = min(
            (max(abs(cx - px) - (sx + psx) / 2, abs(cy - py) - (sy + psy) / 2) for px, py, psx, psy in placed),
            default=math.inf,
        )
        if gap > best_gap:
            best, best_gap = (cx, cy), gap
        if gap > 0.3:
            break
    if best is None:  # every candidate's gap compares greater than -inf unless the room's size is NaN
        raise ValueError(f"no ceiling panel position in a {width} x {depth} m room")
    placed.append((best[0], best[1], sx, sy))
    return {
        "kind": "panel",
        "center_m": [best[0], best[1], height - CEILING_GAP_M],
        "size_m": [sx, sy],
        "flux_lm": _uniform(rng, lighting["panel_flux_lm"]),
        "cct_k": _uniform(rng, lighting["cct_k"]),
    }


def _free_point(rng, room, boxes: np.ndarray, z_range: tuple[float, float]) -> list[float]:
    width, depth = room["width_m"], room["depth_m"]
    mx, my = min(WALL_MARGIN_M, width / 2), min(WALL_MARGIN_M, depth / 2)
    point = None
    for _ in range(32):
        point = np.array([rng.uniform(mx, width - mx), rng.uniform(my, depth - my), rng.uniform(*z_range)])
        if _clear_of_objects(point, boxes, OBJECT_MARGIN_M):
            break
    if point is None:  # the loop above always runs, so a candidate was drawn
        raise RuntimeError("no candidate point was drawn")
    return [float(v) for v in point]


def _point(rng, lighting, room, boxes) -> dict[str, Any]:
    height = room["height_m"]
    # pendants and lamp heads: from table-lamp height up to 0.25 m below the ceiling
    z_range = (min(1.2, height - 0.5), height - 0.25)
    return {
        "kind": "point",
        "position_m": _free_point(rng, room, boxes, z_range),
        "flux_lm": _uniform(rng, lighting["point_flux_lm"]),
        "cct_k": _uniform(rng, lighting["cct_k"]),
    }


def _spot(rng, lighting, room, boxes) -> dict[str, Any]:
    height = room["height_m"]
    position = _free_point(rng, room, boxes, (height - 0.15, height - 0.05))
    if len(boxes):
        box = boxes[int(rng.integers(len(boxes)))]
        target = (box[:3] + box[3:]) / 2
    else:
        target = np.array([rng.uniform(0, room["width_m"]), rng.uniform(0, room["depth_m"]), 0.0])
    return {
        "kind": "spot",
        "position_m": position,
        "target_m": [float(v) for v in target],
        "flux_lm": _uniform(rng, lighting["spot_flux_lm"]),
        "cone_deg": _uniform(rng, lighting["spot_cone_deg"]),
        "cct_k": _uniform(rng, lighting["cct_k"]),
    }


def sample_lights(budget: dict[str, Any], room: dict[str, Any], objects: list[dict[str, Any]], rng) -> list[dict]:
    """Sample the lights of one lighting variant within ``budget["lighting"]``.

    Interior lamps: ``panel_count`` ceiling panels (just below the ceiling, spread apart),
    ``point_count`` bulbs between 1.2 m and 0.25 m below the ceiling clear of objects, and
    ``spot_count`` ceiling spots aimed at random objects; flux, size, cone and CCT uniform in their
    ranges. Daylight, only for rooms with a window: a ``dome`` sky always, and with
    ``sun_probability`` a ``sun`` whose azimuth puts it outside one window's wall (within ±60° of
    that wall's outward normal, intersected with the budget's azimuth range when they overlap).
    So that no frame is black, one interior lamp is added (a panel, else a point, else a spot,
    whichever the budget allows first) when there is no window, or no sun and a sky dimmer than
    :data:`DOME_ONLY_MIN_LUX`.

    Parameters
    ----------
    budget : dict
        A normalized budget; the ``lighting`` section is read.
    room : dict
        Room dict (``width_m``, ``depth_m``, ``height_m``, ``windows``).
    objects : list of dict
        Placed objects (lights avoid their bounds; spots aim at them).
    rng : numpy.random.Generator
        The lighting stream.

    Returns
    -------
    list of dict
        JSON-able light dicts (floats rounded to 6 decimals); kinds ``panel``, ``point``, ``spot``,
        ``sun``, ``dome`` in that order.

    References
    ----------
    Daylight CCTs from CIE 15:2004 daylight locus range (from memory); daylight factor rule of
    thumb (common practice).
    """
    lighting = budget["lighting"]
    boxes = _object_boxes(objects)
    lights: list[dict[str, Any]] = []
    placed_panels: list[tuple[float, float, float, float]] = []
    counts = {kind: _count(rng, lighting[f"{kind}_count"]) for kind in ("panel", "point", "spot")}

    windows = list(room.get("windows") or [])
    daylight: list[dict[str, Any]] = []
    if windows:
        dome_lux = _uniform(rng, lighting["dome_illuminance_lux"])
        if rng.random() < float(lighting["sun_probability"]):
            window = windows[int(rng.integers(len(windows)))]
            daylight.append(
                {
                    "kind": "sun",
                    "elevation_deg": _uniform(rng, lighting["sun_elevation_deg"]),
                    "azimuth_deg": _sample_sun_azimuth(rng, lighting["sun_azimuth_deg"], window["wall"]),
                    "illuminance_lux": _uniform(rng, lighting["sun_illuminance_lux"]),
                    "cct_k": _uniform(rng, SUN_CCT_K),
                }
            )
        daylight.append({"kind": "dome", "illuminance_lux": dome_lux, "cct_k": _uniform(rng, SKY_CCT_K)})
        has_sun = daylight[0]["kind"] == "sun" and daylight[0]["illuminance_lux"] > 0
        needs_lamp = not has_sun and dome_lux < DOME_ONLY_MIN_LUX
    else:
        needs_lamp = True

    forced_kind = None
    if needs_lamp and sum(counts.values()) == 0:
        forced_kind = next((k for k in ("panel", "point", "spot") if lighting[f"{k}_count"][1] > 0), "panel")
        counts[forced_kind] = 1

    for _ in range(counts["panel"]):
        lights.append(_panel(rng, lighting, room, placed_panels))
    for _ in range(counts["point"]):
        lights.append(_point(rng, lighting, room, boxes))
    for _ in range(counts["spot"]):
        lights.append(_spot(rng, lighting, room, boxes))
    if needs_lamp and not any(light["flux_lm"] > 0 for light in lights):
        # A budget flux range of [0, 0] would still leave the frame black.
        lights[0]["flux_lm"] = FALLBACK_LAMP_FLUX_LM
    lights.extend(daylight)
    return [{key: round_floats(value) for key, value in light.items()} for light in lights]
