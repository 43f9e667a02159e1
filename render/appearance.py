"""Textured materials: which surfaces get a procedural texture, its texture coordinates, and its pixels.

Three steps, each pure or cached:

1. :func:`assign_textures` (at spec time, on its own ``appearance`` random stream so that rooms,
   objects, lights and cameras of a seed do not change): each material whose family has texture
   families (:data:`TEXTURE_FAMILIES`: a wooden table gets wood grain, a floor parquet, tiles or
   carpet, a wall plaster or wallpaper, upholstery fabric or leather…) gets, with the budget's
   ``appearance.texture_probability``, a ``texture`` record ``{"family", "variant", "params",
   "seed", "tile_size_m", "resolution_px"}``. Variants: each family has a fixed library of
   ``appearance.texture_variants`` parameter sets (variant k: parameters drawn with seed k), so a
   fleet generates each texture once (:func:`render.textures.texture_set` caches it on
   disk) however many frames use it; the physical scale still varies per material by
   ``appearance.texture_scale``.
2. :func:`box_uv` (at scene build): texture coordinates by box projection in metres. Each
   triangle is projected along the axis its normal is closest to, and u, v are metres divided by
   the texture's physical size, so a 9 cm parquet board is 9 cm in every frame whatever the
   mesh. Objects are projected in their own frame (the grain turns with the table).
3. :func:`texture_linear_rgb` (at scene build): the cached base-colour image decoded to linear RGB,
   kept in memory per process.

References
----------
Tobin et al., "Domain randomization for transferring deep neural networks from simulation to the
real world", IROS 2017; Tremblay et al., "Training deep networks with synthetic data: bridging the
reality gap by domain randomization", CVPR Workshops 2018 (random textures on objects and scene).
Box (tri-planar) projection: common practice in real-time rendering for meshes without UVs.
"""

from __future__ import annotations

import functools
import json
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from render import srgb

from .textures import sample_texture_params, srgb8_to_linear, texture_set

#: Asset material family (``render.assets.FAMILIES``) → texture families it may wear.
#: Plastic, painted and ceramic surfaces, foliage, paper and lampshades stay plain-coloured: in a
#: home they are plain.
TEXTURE_FAMILIES: dict[str, tuple[str, ...]] = {
    "wood": ("wood",),
    "floor_wood": ("parquet", "wood"),
    "floor_tile": ("ceramic_tile", "stone_tile", "marble"),
    "carpet": ("carpet",),
    "wall_paint": ("plaster",),
    "wallpaper": ("wallpaper",),
    "ceiling_paint": ("plaster",),
    "fabric": ("fabric",),
    "bedding": ("fabric",),
    "leather": ("leather",),
    "metal": ("brushed_metal",),
    "concrete": ("concrete",),
    "terracotta": ("concrete",),
    # Distractors (render.distractors): a rug wears one whole rug texture, a picture a print of a pattern.
    "rug": ("rug",),
    "artwork": ("wallpaper", "marble", "rug"),
}

#: Texture families whose relief is rendered with their normal map (Mitsuba ``normalmap``): the grout between tiles
#: and the joints between parquet boards, lines a few millimetres wide that catch grazing light at room scale.
#: The other families' relief is either negligible (mean tilt under 0.5°: wood, marble, concrete, plaster,
#: wallpaper, brushed metal) or finer than a pixel at 640×480 (fabric weave, carpet tufts, leather grain), where
#: a normal map would only alias into noise the denoiser cannot tell from texture.
NORMAL_MAP_FAMILIES: tuple[str, ...] = ("parquet", "ceramic_tile", "stone_tile")

#: Texture families whose roughness map is rendered (glossy surfaces whose gloss varies at room scale: boards that
#: shine differently, glazed tiles and matte grout, polished stone, worn leather, brushed metal). The matte
#: families (carpet, fabric, plaster, wallpaper, rugs, concrete) render as diffuse, where roughness does nothing.
ROUGHNESS_MAP_FAMILIES: tuple[str, ...] = (
    "wood",
    "parquet",
    "ceramic_tile",
    "stone_tile",
    "marble",
    "leather",
    "brushed_metal",
)

#: Base-colour image size. 256 px over a 0.4–2.4 m tile is 1.6–9.4 mm per texel, about a pixel of a
#: 640×480 frame 1–3 m away; 512 px made textured renders slower (3 MB per texture, memory-bound lookups).
TEXTURE_RESOLUTION_PX = 256


def texture_cache_dir() -> Path:
    """Where generated textures are kept: ``EVENFRAME_TEXTURE_CACHE``, else ``<EVENFRAME_DATA_DIR>/texture_cache``
    (``./data/texture_cache`` without either)."""
    explicit = os.environ.get("EVENFRAME_TEXTURE_CACHE")
    if explicit:
        return Path(explicit)
    return Path(os.environ.get("EVENFRAME_DATA_DIR", "data")) / "texture_cache"


@functools.lru_cache(maxsize=4096)
def _variant_params(family: str, variant: int) -> tuple[tuple[str, Any], ...]:
    params = sample_texture_params(family, np.random.default_rng(np.random.SeedSequence(variant, spawn_key=(7,))))
    return tuple(sorted(params.items()))


def texture_record(family: str, variant: int, scale: float) -> dict[str, Any]:
    """The spec's ``texture`` record of one variant of a family, its tile scaled by ``scale``."""
    params = dict(_variant_params(family, int(variant)))
    tile_size_m = float(params.get("tile_size_m", 1.0)) * float(scale)
    return {
        "family": family,
        "variant": int(variant),
        "params": params,
        "seed": int(variant),
        "tile_size_m": round(tile_size_m, 6),
        "resolution_px": TEXTURE_RESOLUTION_PX,
    }


def _materials(
    spec_room: dict[str, Any], objects: list[dict[str, Any]], distractors: list[dict[str, Any]] | None = None
) -> Iterator[tuple[str, dict[str, Any]]]:
    """Every material dict of the room, the objects and the distractors with its surface kind
    (:data:`render.budget.SURFACE_KINDS`), in a fixed order."""
    for slot in sorted(spec_room.get("materials", {})):
        yield ("floor" if slot == "floor" else "walls"), spec_room["materials"][slot]
    for kind, items in (("objects", objects), ("clutter", distractors or [])):
        for item in items:
            for slot in sorted(item.get("materials", {}) or {}):
                yield kind, item["materials"][slot]


def assign_textures(
    room: dict[str, Any],
    objects: list[dict[str, Any]],
    appearance: dict[str, Any],
    rng: np.random.Generator,
    *,
    distractors: list[dict[str, Any]] | None = None,
) -> None:
    """Give the materials of ``room``, ``objects`` and ``distractors`` their textures, in place (see the module
    docstring).

    ``appearance`` is the budget's section: ``texture_probability``, ``texture_families`` (the families
    allowed), ``texture_variants``, ``texture_scale`` [low, high], and the colour jitter ``hue_jitter_deg``,
    ``saturation_scale`` and ``value_scale`` (:func:`jitter_hsv`): a plain material's ``rgb`` is jittered here, a
    textured one records ``hsv_jitter`` [hue °, saturation ×, value ×] and its image is jittered at scene build.
    Per surface kind (:data:`render.budget.SURFACE_KINDS`), ``<kind>_texture_scale`` [low, high] multiplies the texture scale
    range (the product drawn log-uniformly with the same draw) and ``<kind>_colour_jitter`` j scales the jitter:
    the hue turn × j, the saturation and value factors raised to the power j (j = 0: the colours as generated,
    1: the jitter above, 2: twice as many stops either way).
    Metals and materials without a family (an upload's own look) keep their colour. Every material draws the same
    number of random numbers whatever it becomes, so one material's outcome never shifts another's; the
    distractors' materials come last, so the room and the objects wear the same textures with or without them.
    """
    probability = float(appearance["texture_probability"])
    allowed = set(appearance.get("texture_families") or ())
    variants = int(appearance["texture_variants"])
    scale_low, scale_high = (float(v) for v in appearance["texture_scale"])
    hue_deg = float(appearance.get("hue_jitter_deg", 0.0))
    sat_low, sat_high = (float(v) for v in appearance.get("saturation_scale", (1.0, 1.0)))
    val_low, val_high = (float(v) for v in appearance.get("value_scale", (1.0, 1.0)))
    for surface_kind, material in _materials(room, objects, distractors):
        draw_use, draw_family, draw_variant, draw_scale, draw_hue, draw_sat, draw_val = rng.random(7)
        strength = float(appearance.get(f"{surface_kind}_colour_jitter", 1.0))
        jitter = [
            round(hue_deg * strength * (2.0 * draw_hue - 1.0), 6),
            round((sat_low + (sat_high - sat_low) * draw_sat) ** strength, 6),
            round((val_low + (val_high - val_low) * draw_val) ** strength, 6),
        ]
        kind_low, kind_high = (float(v) for v in appearance.get(f"{surface_kind}_texture_scale", (1.0, 1.0)))
        jitters = material.get("family") and material.get("kind") != "metal" and jitter != [0.0, 1.0, 1.0]
        families = [f for f in TEXTURE_FAMILIES.get(str(material.get("family", "")), ()) if f in allowed]
        if not families or draw_use >= probability:
            if jitters and "rgb" in material:
                rgb = jitter_hsv(np.asarray(material["rgb"], dtype=np.float64), *jitter)
                material["rgb"] = [round(float(v), 6) for v in np.clip(rgb, ALBEDO_MIN, ALBEDO_MAX)]
            continue
        family = families[min(int(draw_family * len(families)), len(families) - 1)]
        variant = min(int(draw_variant * variants), variants - 1)
        low, high = scale_low * kind_low, scale_high * kind_high
        scale = low * (high / low) ** draw_scale  # log-uniform: as many halvings as doublings
        material["texture"] = texture_record(family, variant, scale)
        if jitters:
            material["texture"]["hsv_jitter"] = jitter


#: Albedo limits of a jittered colour (as :func:`render.assets.sample_material` keeps them): no paint or fabric
#: reflects more than 95 % or less than 0.5 %.
ALBEDO_MIN, ALBEDO_MAX = 0.005, 0.95


def jitter_hsv(rgb_linear: np.ndarray, hue_deg: float, saturation_scale: float, value_scale: float) -> np.ndarray:
    """Linear RGB (…, 3) with its hue turned by ``hue_deg``, saturation and value scaled (clipped to [0, 1]).

    Done in HSV of the sRGB-encoded colour (the space people pick colours in), then decoded back to linear.

    References
    ----------
    A. R. Smith, "Color gamut transform pairs", SIGGRAPH 1978 (HSV); scikit-image ``color.rgb2hsv`` /
    ``hsv2rgb``; IEC 61966-2-1 (sRGB). Colour randomization: Tobin et al. 2017 (domain randomization).
    """
    from skimage.color import hsv2rgb, rgb2hsv

    linear = np.asarray(rgb_linear, dtype=np.float64)
    hsv = rgb2hsv(np.clip(srgb.encode(np.clip(linear, 0.0, 1.0)), 0.0, 1.0).reshape(-1, 1, 3))
    hsv[..., 0] = (hsv[..., 0] + float(hue_deg) / 360.0) % 1.0
    hsv[..., 1] = np.clip(hsv[..., 1] * float(saturation_scale), 0.0, 1.0)
    hsv[..., 2] = np.clip(hsv[..., 2] * float(value_scale), 0.0, 1.0)
    return srgb.decode(hsv2rgb(hsv)).reshape(linear.shape)


def box_uv(
    vertices_m: np.ndarray, faces: np.ndarray, tile_size_m: float, frame: tuple[np.ndarray, np.ndarray] | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Box-projected texture coordinates: (vertices (3F, 3), faces (F, 3), uv (3F, 2)).

    Vertices are unshared (each triangle gets its own three), since one corner may belong to faces
    projected along different axes. A triangle whose normal is closest to ±x is mapped (y, z), to ±y
    (x, z), to ±z (x, y), in metres divided by ``tile_size_m``; u is mirrored on the faces where that
    would make the tangent frame left-handed (normal maps then tilt the same way on every face). ``frame`` = (rotation (3, 3), origin (3,))
    projects in a local frame ``local = rotation.T @ (world − origin)`` instead of the world's.
    """
    if not tile_size_m > 0:
        raise ValueError(f"tile_size_m must be positive, got {tile_size_m!r}")
    vertices = np.asarray(vertices_m, dtype=np.float64)
    faces = np.asarray(faces, dtype=np.int64).reshape(-1, 3)
    corners = vertices[faces]  # (F, 3, 3)
    local = corners if frame is None else (corners - np.asarray(frame[1], float)) @ np.asarray(frame[0], float)
    normals = np.cross(local[:, 1] - local[:, 0], local[:, 2] - local[:, 0])
    axis = np.argmax(np.abs(normals), axis=1)  # 0: x, 1: y, 2: z
    keep = np.array([[1, 2], [0, 2], [0, 1]])[axis]  # (F, 2): the two coordinates kept
    uv = np.take_along_axis(local, np.repeat(keep[:, None, :], 3, axis=1), axis=2) / float(tile_size_m)
    # Mirror u where (∂p/∂u × ∂p/∂v) would point against the face's normal, so every face's tangent frame is
    # right-handed and a normal map's +y runs along +v everywhere: y × z = +x and x × y = +z, but x × z = −y, so
    # faces looking down −x or −z are mirrored, and for y those looking up +y.
    positive = normals[np.arange(len(faces)), axis] > 0
    uv[positive == (axis == 1), :, 0] *= -1.0
    count = len(faces)
    return (corners.reshape(-1, 3), np.arange(3 * count, dtype=np.int64).reshape(count, 3), uv.reshape(-1, 2))


def yaw_frame(obj: dict[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """(rotation, origin) of an object's own frame: yawed about z by ``yaw_deg``, origin at ``position_m``."""
    yaw = np.radians(float(obj.get("yaw_deg", 0.0)))
    rotation = np.array([[np.cos(yaw), -np.sin(yaw), 0.0], [np.sin(yaw), np.cos(yaw), 0.0], [0.0, 0.0, 1.0]])
    return rotation, np.asarray(obj.get("position_m", (0.0, 0.0, 0.0)), dtype=float)


@functools.lru_cache(maxsize=256)
def _linear_texture(family: str, params_json: str, seed: int, resolution_px: int, cache_dir: str) -> np.ndarray:
    from PIL import Image

    paths = texture_set(family, json.loads(params_json), seed, Path(cache_dir), resolution_px=resolution_px)
    with Image.open(paths.base_color) as image:
        srgb8 = np.asarray(image.convert("RGB"))
    linear = np.ascontiguousarray(srgb8_to_linear(srgb8), dtype=np.float32)
    linear.setflags(write=False)
    return linear


@functools.lru_cache(maxsize=256)
def _normal_texture(family: str, params_json: str, seed: int, resolution_px: int, cache_dir: str) -> np.ndarray:
    from PIL import Image

    paths = texture_set(family, json.loads(params_json), seed, Path(cache_dir), resolution_px=resolution_px)
    with Image.open(paths.normal) as image:
        encoded = np.ascontiguousarray(np.asarray(image.convert("RGB"), dtype=np.float32) / 255.0)
    encoded.setflags(write=False)
    return encoded


@functools.lru_cache(maxsize=256)
def _roughness_texture(family: str, params_json: str, seed: int, resolution_px: int, cache_dir: str) -> np.ndarray:
    from PIL import Image

    paths = texture_set(family, json.loads(params_json), seed, Path(cache_dir), resolution_px=resolution_px)
    with Image.open(paths.roughness) as image:
        roughness = np.ascontiguousarray(np.asarray(image.convert("L"), dtype=np.float32) / 255.0)
    roughness.setflags(write=False)
    return roughness


def texture_roughness(texture: dict[str, Any]) -> np.ndarray | None:
    """Perceptual roughness map (H, W) float32 in [0, 1] of a spec ``texture`` record, or None for a family not in
    :data:`ROUGHNESS_MAP_FAMILIES`. Same rows as :func:`texture_linear_rgb`."""
    if str(texture["family"]) not in ROUGHNESS_MAP_FAMILIES:
        return None
    return _roughness_texture(
        str(texture["family"]),
        json.dumps(dict(texture["params"]), sort_keys=True),
        int(texture["seed"]),
        int(texture.get("resolution_px", TEXTURE_RESOLUTION_PX)),
        str(texture_cache_dir()),
    )


@functools.lru_cache(maxsize=256)
def _roughness_spread(
    family: str, params_json: str, seed: int, resolution_px: int, cache_dir: str
) -> tuple[float, float, float, np.ndarray]:
    roughness = _roughness_texture(family, params_json, seed, resolution_px, cache_dir)
    low, high = (float(v) for v in np.percentile(roughness, [2.0, 98.0]))
    weight = np.clip((roughness - low) / max(high - low, 1e-6), 0.0, 1.0).astype(np.float32)[..., None]
    weight.setflags(write=False)
    return float(roughness.mean()), low, high, np.ascontiguousarray(weight)


def roughness_spread(texture: dict[str, Any]) -> tuple[float, float, float, np.ndarray] | None:
    """``(mean, low, high, weight)`` of a texture's roughness map: its mean, 2nd and 98th percentiles, and the map
    rescaled to [0, 1] between them as an (H, W, 1) float32 image (cached per record); None without a map."""
    if str(texture["family"]) not in ROUGHNESS_MAP_FAMILIES:
        return None
    return _roughness_spread(
        str(texture["family"]),
        json.dumps(dict(texture["params"]), sort_keys=True),
        int(texture["seed"]),
        int(texture.get("resolution_px", TEXTURE_RESOLUTION_PX)),
        str(texture_cache_dir()),
    )


def texture_normal_rgb(texture: dict[str, Any]) -> np.ndarray | None:
    """Tangent-space normal map (H, W, 3) float32 of a spec ``texture`` record, encoded as Mitsuba's ``normalmap``
    reads it (n = 2·value − 1; x along +u, y along +v, z out of the surface), or None for a family not in
    :data:`NORMAL_MAP_FAMILIES`. Same rows as :func:`texture_linear_rgb`."""
    if str(texture["family"]) not in NORMAL_MAP_FAMILIES:
        return None
    params_json = json.dumps(dict(texture["params"]), sort_keys=True)
    return _normal_texture(
        str(texture["family"]),
        params_json,
        int(texture["seed"]),
        int(texture.get("resolution_px", TEXTURE_RESOLUTION_PX)),
        str(texture_cache_dir()),
    )


def texture_linear_rgb(texture: dict[str, Any]) -> np.ndarray:
    """Linear-RGB base colour (H, W, 3) float32 of a spec ``texture`` record, from the disk cache.

    Row 0 is v = 0 (Mitsuba's bitmap convention). Generated on a cache miss; the decoded image is
    kept in memory per process (read-only), and so is its colour-jittered copy when the record has ``hsv_jitter``.
    """
    key = (
        str(texture["family"]),
        json.dumps(dict(texture["params"]), sort_keys=True),
        int(texture["seed"]),
        int(texture.get("resolution_px", TEXTURE_RESOLUTION_PX)),
        str(texture_cache_dir()),
    )
    jitter = texture.get("hsv_jitter")
    if jitter:
        return _jittered_texture(*key, tuple(float(v) for v in jitter))
    return _linear_texture(*key)


# Frames of one layout share their texture records, jitter included; the HSV round trip costs about 30 ms per
# 256 px image, so it is done once per record and process (128 images: about 100 MB at most).
@functools.lru_cache(maxsize=128)
def _jittered_texture(
    family: str, params_json: str, seed: int, resolution_px: int, cache_dir: str, jitter: tuple[float, ...]
) -> np.ndarray:
    image = np.ascontiguousarray(
        jitter_hsv(_linear_texture(family, params_json, seed, resolution_px, cache_dir), *jitter), dtype=np.float32
    )
    image.setflags(write=False)
    return image
