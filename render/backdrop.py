"""The outdoor scene seen through the windows: sky with clouds, ground, and a skyline of buildings or trees.

A window that shows one flat colour reads as a hole in a box. This module gives each window room an outdoor
scene (drawn at spec time by :func:`sample_backdrop`, a few numbers on a random stream of their own) and turns
it into the radiance image of each window pane (:func:`card_image`), which :func:`render.scene.build_scene` puts
on the window's emitter in place of the plain sky.

The outdoor scene, all in the radiance units of the room's sky (the dome light's ``radiance_rgb``, ``L``):

- **Sky.** Luminance over elevation ``e`` is a blend, by ``cloud_cover``, of the CIE standard overcast sky
  ``(1 + 2 sin e) / 3`` (Moon and Spencer 1942; CIE S 011/E:2003, sky type 1 — from memory) and a clear-sky
  profile brighter towards the horizon and bluer towards the zenith (our own approximation). The profile is
  normalised so that the sky's illuminance on a horizontal plane stays ``π L``: the budget's sky illuminance
  means what it says. Clouds are fractal noise on a cloud layer 1 km up, seen in perspective.
- **Ground** below the horizon, ``ground_below_floor_m`` under the room's floor (the room's storey): grass or
  paving, Lambertian under the sky (radiance = albedo × L) and the sun (+ albedo × E cos θ / π), its texture
  fading to its mean colour with distance (no aliasing) and into haze towards the horizon.
- **Skyline** on a circle ``skyline_distance_m`` around the room: buildings with window rows, or tree crowns,
  lit as vertical surfaces (a vertical plane under an overcast sky receives about 0.4 of the horizontal
  illuminance — from memory, CIE overcast ratio 0.396) plus the sun where it faces it.

The sun's disc is not drawn: direct sunlight is rendered by the sun's own emitter.

Seen from the camera only. Each window's image is the outdoor scene *as seen from the camera's position*
through the pane's points, so the view through the window is in perspective and moves with the camera. The
same image lights the room: for the lighting, the window is a backlit picture of the outdoor scene, exact for
the camera's view and, for the room's other points, off by the parallax of scenery at least 12 m away seen
from a few metres apart. The render of that scene stays unbiased (the picture is the emitter; the portal test
of :mod:`render.scene` holds for it like for a plain sky).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

#: The window image's size (rows, columns). Fixed, so the render kernels of every window room are reused
#: (a texture of another size compiles new ones); 192 × 256 texels over a 1–2 m window is 4–10 mm each.
CARD_SHAPE_PX = (192, 256)

GROUND_KINDS = ("grass", "paving")
SKYLINE_KINDS = ("buildings", "trees", "mixed", "open")
#: How often each skyline kind is drawn (common practice: homes look out on streets and gardens).
SKYLINE_WEIGHTS = (0.35, 0.3, 0.3, 0.05)
STOREY_HEIGHT_M = 3.0  # floor to floor, common practice
PLINTH_M = 0.3  # ground floor above the outdoor ground, common practice
CLOUD_LAYER_M = 1000.0
HAZE_DISTANCE_M = 3000.0  # distance at which haze hides 63 % of the scenery (a clear day; from memory)
#: A vertical surface's share of a horizontal surface's illuminance under an overcast sky (from memory).
VERTICAL_SKY_FACTOR = 0.4
#: A clear sky's colour at the zenith relative to the horizon's (bluer; our own approximation).
ZENITH_TINT = np.array([0.72, 0.86, 1.3])
LUMA = np.array([0.2126, 0.7152, 0.0722])  # Rec. 709 / sRGB luminance weights (IEC 61966-2-1)


def sample_backdrop(rng: np.random.Generator) -> dict[str, Any]:
    """The outdoor scene of one layout: a few numbers; :func:`card_image` draws the rest from ``seed``."""
    storey = int(rng.choice(4, p=[0.45, 0.3, 0.15, 0.1]))
    return {
        "seed": int(rng.integers(0, 2**31 - 1)),
        "ground": str(rng.choice(GROUND_KINDS)),
        "skyline": str(rng.choice(SKYLINE_KINDS, p=SKYLINE_WEIGHTS)),
        "skyline_distance_m": float(math.exp(rng.uniform(math.log(12.0), math.log(150.0)))),
        "ground_below_floor_m": PLINTH_M + STOREY_HEIGHT_M * storey,
        "cloud_cover": float(rng.uniform(0.0, 1.0)),
    }


def _value_noise(x: np.ndarray, y: np.ndarray, seed: int, cell: float, octaves: int = 4) -> np.ndarray:
    """Fractal value noise at points ``(x, y)`` (any units; ``cell`` = the largest feature): about 0 … 1."""
    rng = np.random.default_rng(seed)
    lattice = rng.random((octaves, 128, 128))
    total, weight_sum = np.zeros(np.shape(x)), 0.0
    for octave in range(octaves):
        scale = 2.0**octave / cell
        u, v = np.asarray(x) * scale, np.asarray(y) * scale
        i, j = np.floor(u).astype(np.int64), np.floor(v).astype(np.int64)
        fu, fv = u - i, v - j
        fu, fv = fu * fu * (3 - 2 * fu), fv * fv * (3 - 2 * fv)
        grid = lattice[octave]

        def at(a: np.ndarray, b: np.ndarray, grid: np.ndarray = grid) -> np.ndarray:
            return grid[np.mod(a, 128), np.mod(b, 128)]

        top = at(i, j) * (1 - fu) + at(i + 1, j) * fu
        bottom = at(i, j + 1) * (1 - fu) + at(i + 1, j + 1) * fu
        amplitude = 0.5**octave
        total += amplitude * (top * (1 - fv) + bottom * fv)
        weight_sum += amplitude
    return total / weight_sum


def _clear_profile(sin_e: np.ndarray) -> np.ndarray:
    return 0.6 + 1.2 * (1.0 - sin_e) ** 3


def _overcast_profile(sin_e: np.ndarray) -> np.ndarray:
    return (1.0 + 2.0 * sin_e) / 3.0


@functools.lru_cache(maxsize=64)
def _sky_normaliser(cloud_cover: float) -> float:
    """1 / (2 ∫₀^{π/2} f(e) sin e cos e de): the factor that makes the sky's horizontal illuminance π L."""
    nodes, weights = np.polynomial.legendre.leggauss(64)
    sin_e = 0.5 * (nodes + 1.0)  # substitute s = sin e: 2 ∫₀¹ f(s) s ds
    f = cloud_cover * _overcast_profile(sin_e) + (1 - cloud_cover) * _clear_profile(sin_e)
    return 1.0 / float(np.sum(0.5 * weights * 2.0 * f * sin_e))


@functools.lru_cache(maxsize=32)
def _skyline_profile(
    seed: int, kind: str, distance_m: float, bins: int = 2048
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per azimuth bin: height above the ground (m), kind (0 none, 1 building, 2 tree), albedo RGB, facade offset.

    Buildings 8–30 m wide and 6–30 m high with gaps between them, or tree crowns 4–14 m high (common
    practice for streets and gardens); ``mixed`` puts trees in front of the buildings' gaps.
    """
    rng = np.random.default_rng([seed, 7])
    height = np.zeros(bins)
    what = np.zeros(bins, dtype=np.int8)
    albedo = np.zeros((bins, 3))
    offset = np.zeros(bins)
    azimuth = (np.arange(bins) + 0.5) / bins * 2 * math.pi
    if kind in ("buildings", "mixed"):
        facades = np.array(
            [[0.55, 0.5, 0.42], [0.45, 0.45, 0.45], [0.42, 0.22, 0.16], [0.7, 0.68, 0.62], [0.3, 0.3, 0.33]]
        )
        start = rng.uniform(0, 2 * math.pi)
        angle = 0.0
        while angle < 2 * math.pi:
            width = rng.uniform(8.0, 30.0) / distance_m
            gap = rng.uniform(0.0, 12.0) / distance_m if rng.random() < 0.5 else 0.0
            lo, hi = start + angle, start + angle + min(width, 2 * math.pi - angle)
            inside = ((azimuth - lo) % (2 * math.pi)) < (hi - lo)
            height[inside] = rng.uniform(6.0, 30.0)
            what[inside] = 1
            albedo[inside] = facades[rng.integers(len(facades))] * rng.uniform(0.8, 1.15)
            offset[inside] = rng.uniform(0, 10)
            angle += width + gap
    if kind in ("trees", "mixed"):
        count = int(rng.integers(20, 60))
        for _ in range(count):
            centre = rng.uniform(0, 2 * math.pi)
            crown_m = rng.uniform(2.0, 6.0)
            top_m = rng.uniform(4.0, 14.0)
            # Trees stand nearer than the buildings: their angular size is larger.
            half_angle = crown_m / (0.7 * distance_m)
            delta = np.angle(np.exp(1j * (azimuth - centre)))
            inside = np.abs(delta) < half_angle
            crown = top_m - crown_m + crown_m * np.sqrt(np.clip(1 - (delta[inside] / half_angle) ** 2, 0, 1))
            taller = crown > height[inside]
            index = np.flatnonzero(inside)[taller]
            height[index] = crown[taller]
            what[index] = 2
            albedo[index] = np.array([0.07, 0.13, 0.05]) * rng.uniform(0.7, 1.4)
    return height, what, albedo, offset


def outdoor_radiance(
    directions: np.ndarray,
    origin_m: Any,
    backdrop: Mapping[str, Any],
    sky_rgb: Any,
    sun: tuple[Any, Any] | None = None,
) -> np.ndarray:
    """Radiance (N, 3) of the outdoor scene along unit ``directions`` (N, 3) from ``origin_m`` (world, m; the room's
    floor at z = 0), in the units of ``sky_rgb`` (the sky's uniform-equivalent radiance L).

    ``sun``: ``(direction of travel, irradiance_rgb)`` of a sun (:func:`render.lights.emitter_quantities`),
    which lights the ground and the skyline; None without one.
    """
    d = np.asarray(directions, dtype=np.float64)
    origin = np.asarray(origin_m, dtype=np.float64)
    sky = np.asarray(sky_rgb, dtype=np.float64)
    seed, cover = int(backdrop["seed"]), float(backdrop["cloud_cover"])
    distance_m = float(backdrop["skyline_distance_m"])
    eye_m = max(0.2, float(origin[2]) + float(backdrop["ground_below_floor_m"]))
    sin_e = np.clip(d[:, 2], -1.0, 1.0)
    horizontal = np.maximum(np.hypot(d[:, 0], d[:, 1]), 1e-6)
    tan_e = sin_e / horizontal
    azimuth = np.mod(np.arctan2(d[:, 1], d[:, 0]), 2 * math.pi)
    sun_direction = sun_irradiance = None
    if sun is not None:
        sun_direction = -np.asarray(sun[0], dtype=np.float64)  # towards the sun
        sun_direction /= np.linalg.norm(sun_direction)
        sun_irradiance = np.asarray(sun[1], dtype=np.float64)

    # Sky.
    up = np.clip(sin_e, 0.0, 1.0)
    profile = cover * _overcast_profile(up) + (1 - cover) * _clear_profile(up)
    profile *= _sky_normaliser(round(cover, 6))
    blend = up[:, None] ** 0.5
    clear_tint = np.ones(3)[None, :] * (1 - blend) + ZENITH_TINT[None, :] * blend
    clear_tint /= (clear_tint @ LUMA)[:, None]  # luminance 1: the tint changes colour, not brightness
    cloud_x = d[:, 0] / np.maximum(sin_e, 0.03) * CLOUD_LAYER_M
    cloud_y = d[:, 1] / np.maximum(sin_e, 0.03) * CLOUD_LAYER_M
    cloud_field = _value_noise(cloud_x, cloud_y, seed + 1, cell=2500.0, octaves=5)
    clouds = np.clip((cloud_field - (0.75 - 0.55 * cover)) / 0.15, 0.0, 1.0) * np.clip(sin_e / 0.08, 0.0, 1.0)
    tint = clear_tint * (1 - cover) + cover  # overcast skies are grey
    # Clouds are white at the sky's own luminance, so the sky's horizontal illuminance stays π L whatever the cover.
    sky_out = sky[None, :] * profile[:, None] * (tint * (1 - clouds[:, None]) + clouds[:, None])
    horizon_rgb = (
        sky
        * float(_sky_normaliser(round(cover, 6)))
        * (cover * _overcast_profile(np.zeros(1))[0] + (1 - cover) * _clear_profile(np.zeros(1))[0])
    )
    out = sky_out

    # Ground: where the ray meets it before the skyline.
    ground_distance = np.where(sin_e < 0, eye_m / np.maximum(-tan_e, 1e-9), np.inf)
    on_ground = ground_distance < distance_m
    if np.any(on_ground):
        g = ground_distance[on_ground]
        x = origin[0] + d[on_ground, 0] / horizontal[on_ground] * g
        y = origin[1] + d[on_ground, 1] / horizontal[on_ground] * g
        rng = np.random.default_rng([seed, 11])
        detail = np.clip(1.0 - g / 40.0, 0.0, 1.0)  # texture fades to its mean colour with distance
        if backdrop["ground"] == "grass":
            base = np.array([0.09, 0.15, 0.05]) * rng.uniform(0.8, 1.3)
            variation = _value_noise(x, y, seed + 2, cell=3.0) - 0.5
            albedo = base[None, :] * (1 + 0.9 * variation * detail)[:, None]
        else:
            base = np.array([0.3, 0.29, 0.27]) * rng.uniform(0.7, 1.2)
            slab_m = rng.uniform(0.4, 0.9)
            joint = (np.minimum(np.mod(x, slab_m), np.mod(y, slab_m)) < 0.012).astype(float)
            variation = _value_noise(x, y, seed + 3, cell=1.5) - 0.5
            albedo = base[None, :] * (1 + (0.3 * variation - 0.45 * joint) * detail)[:, None]
        irradiance = np.pi * sky  # the sky's horizontal illuminance, by construction
        ground = albedo * (irradiance / np.pi)[None, :]
        if sun_direction is not None and sun_irradiance is not None and sun_direction[2] > 0:
            ground += albedo * (sun_irradiance * sun_direction[2] / np.pi)[None, :]
        haze = 1 - np.exp(-g / HAZE_DISTANCE_M)
        out[on_ground] = ground * (1 - haze[:, None]) + horizon_rgb[None, :] * haze[:, None]

    # Skyline: on the circle of radius distance_m, up to its height above the ground.
    height, what, albedo_bins, offset = _skyline_profile(seed, str(backdrop["skyline"]), round(distance_m, 6))
    bins = len(height)
    index = np.minimum((azimuth / (2 * math.pi) * bins).astype(np.int64), bins - 1)
    ray_height = eye_m + tan_e * distance_m  # above the ground where the ray crosses the circle
    hits = (~on_ground) & (what[index] > 0) & (ray_height < height[index]) & (ray_height >= 0)
    if np.any(hits):
        k = index[hits]
        albedo = albedo_bins[k].copy()
        facing = -np.stack([d[hits, 0], d[hits, 1], np.zeros(int(hits.sum()))], axis=1) / horizontal[hits, None]
        # Lambertian: radiance = albedo × illuminance / π, the illuminance 0.4 × π L from the sky.
        light = VERTICAL_SKY_FACTOR * sky[None, :] * np.ones((len(k), 1))
        if sun_direction is not None and sun_irradiance is not None:
            cos_sun = np.clip(facing @ sun_direction, 0.0, None)
            light = light + sun_irradiance[None, :] * cos_sun[:, None] / np.pi
        building = what[k] == 1
        along_m = azimuth[hits] * distance_m + offset[k]
        up_m = ray_height[hits]
        windows = building & (np.mod(up_m, 3.0) > 1.0) & (np.mod(up_m, 3.0) < 2.4) & (np.mod(along_m, 2.6) < 1.3)
        leaves = what[k] == 2
        if np.any(leaves):
            texture = _value_noise(along_m[leaves], up_m[leaves], seed + 4, cell=1.2)
            albedo[leaves] *= (0.6 + 0.8 * texture)[:, None]
        radiance = albedo * light
        # Window glass mirrors the sky near the horizon more than it lets the dark rooms show.
        radiance[windows] = 0.35 * horizon_rgb[None, :] * np.array([0.8, 0.9, 1.0])
        haze = 1 - np.exp(-distance_m / HAZE_DISTANCE_M)
        out[hits] = radiance * (1 - haze) + horizon_rgb[None, :] * haze
    return out


@functools.lru_cache(maxsize=4)
def _cosine_directions(count: int = 4096) -> np.ndarray:
    """``count`` cosine-weighted directions about +z, stratified (a Fibonacci spiral on the projected disc):
    their mean of f is the cosine-weighted hemispherical mean of f (Malley's method; Pharr, Jakob, Humphreys,
    *Physically Based Rendering*, 4th ed., §A.5.3)."""
    k = np.arange(count) + 0.5
    radius = np.sqrt(k / count)
    angle = k * math.pi * (3.0 - math.sqrt(5.0))
    x, y = radius * np.cos(angle), radius * np.sin(angle)
    return np.stack([x, y, np.sqrt(np.maximum(0.0, 1.0 - x * x - y * y))], axis=1)


def window_mean_radiance(
    frame: Mapping[str, Any], backdrop: Mapping[str, Any], sky_rgb: Any, sun: tuple[Any, Any] | None = None
) -> np.ndarray:
    """A window's cosine-weighted mean outdoor radiance (RGB), seen from its centre over the outward hemisphere:
    the uniform radiance whose light through the window equals the outdoor scene's (Lambertian irradiance of
    the pane, over π). For a uniform sky L over the whole hemisphere it is L; the ground and the skyline
    below the horizon lower it and tint it."""
    outward = -np.asarray(frame["normal"], dtype=np.float64)
    helper = np.array([0.0, 0.0, 1.0]) if abs(outward[2]) < 0.9 else np.array([1.0, 0.0, 0.0])
    tangent = np.cross(helper, outward)
    tangent /= np.linalg.norm(tangent)
    bitangent = np.cross(outward, tangent)
    local = _cosine_directions()
    directions = local[:, :1] * tangent + local[:, 1:2] * bitangent + local[:, 2:3] * outward
    radiance = outdoor_radiance(directions, frame["centre_m"], backdrop, sky_rgb, sun)
    return radiance.mean(axis=0)


def card_points(frame: Mapping[str, Any], shape_px: tuple[int, int] = CARD_SHAPE_PX) -> np.ndarray:
    """World points (rows, cols, 3) of the texel centres of a window image: row ↔ v (0 → 1 along ``v``), column ↔
    u, the convention of Mitsuba's bitmap lookup on :func:`render.scene.emitting_quad` (``with_uv=True``)."""
    rows, cols = shape_px
    v = (np.arange(rows) + 0.5) / rows * 2.0 - 1.0
    u = (np.arange(cols) + 0.5) / cols * 2.0 - 1.0
    centre = np.asarray(frame["centre_m"], float)
    half_u, half_v = np.asarray(frame["u"], float), np.asarray(frame["v"], float)
    return centre + v[:, None, None] * half_v + u[None, :, None] * half_u


def card_image(
    frame: Mapping[str, Any],
    camera_position_m: Any,
    backdrop: Mapping[str, Any],
    sky_rgb: Any,
    sun: tuple[Any, Any] | None = None,
    shape_px: tuple[int, int] = CARD_SHAPE_PX,
) -> np.ndarray:
    """The outdoor scene on a window's outer rectangle as seen from the camera: (rows, cols, 3) float32 radiance."""
    points = card_points(frame, shape_px).reshape(-1, 3)
    directions = points - np.asarray(camera_position_m, float)
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    radiance = outdoor_radiance(directions, camera_position_m, backdrop, sky_rgb, sun)
    return radiance.reshape(*shape_px, 3).astype(np.float32)
