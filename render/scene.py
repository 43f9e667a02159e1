"""Scene spec → Mitsuba 3 scene: meshes in memory, BSDFs, emitters, two sensors.

One scene holds both passes:

- ``rgb_camera``: a ``thinlens`` sensor (aperture radius from the f-number,
  focus distance from the spec) rendered by the ``path`` integrator;
- ``label_camera``: a ``perspective`` pinhole sensor with the same pose and
  intrinsics, a ``box`` reconstruction filter and one un-jittered sample per
  pixel (so every pixel is sampled at its centre, like
  ``camera.project_points``), rendered by an ``aov`` integrator that outputs
  ``shape_index`` and ``depth``.

The ``shape_index`` AOV is the shape's registry id (a reinterpretation of the
shape pointer), not its position in the scene dict or in ``scene.shapes()``;
:func:`build_scene` reads each shape's registry id and maps it to its
instance id through the shape's ``id()`` (``"i{instance_id}_p{k}"``; room
and light shapes map to 0, the background).

Call :func:`render.backend.init_renderer` before anything here.

References
----------
Mitsuba 3 plugin reference: ``thinlens``, ``perspective``, ``aov``,
``roughplastic``, ``roughconductor``, ``rectangle``, ``spot``, ``directional``,
``constant``. OpenCV camera model (pinhole, ``X_cam = R X_world + t``).
"""

from __future__ import annotations

import functools
import math
import re
import weakref
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .appearance import box_uv, roughness_spread, texture_cache_dir, yaw_frame
from .backdrop import LUMA, card_image, window_mean_radiance
from .camera import aperture_radius_m, camera_matrices
from .distractors import distractor_world_parts, texture_frame
from .dressing import WALL_THICKNESS_M, room_parts
from .layout import object_world_parts
from .lights import emitter_quantities
from .user_models import normal_rgb
from .user_models import texture_linear_rgb as user_texture_linear_rgb

# Near clip of both sensors. The perspective sensor starts its rays on the
# near plane, so the ``depth`` AOV (hit distance) is measured from there;
# :func:`render_label_pass` adds the near plane back.
NEAR_CLIP_M = 0.01
FAR_CLIP_M = 1000.0

# Index of refraction of the dielectric coatings: acrylic ≈ 1.49, polyurethane varnish ≈ 1.5 (from
# memory). One value for both, so plastic and varnish share pooled ``roughplastic`` instances.
PLASTIC_IOR = 1.5
VARNISH_IOR = 1.5
# Below this GGX alpha a rough BSDF is replaced by its smooth counterpart
# (very small alphas only add sampling noise).
SMOOTH_ALPHA = 1e-3

_INSTANCE_SHAPE_ID = re.compile(r"^i(\d+)_p\d+$")
# Distractors (unlabelled clutter) are "d{k}_p{j}": background to the labels, like the room.
_DISTRACTOR_SHAPE_ID = re.compile(r"^d(\d+)_p\d+$")

RGB_SENSOR_ID = "rgb_camera"
LABEL_SENSOR_ID = "label_camera"


def _mi() -> Any:
    import mitsuba as mi

    return mi


# ---------------------------------------------------------------------------
# Meshes and materials
# ---------------------------------------------------------------------------


def mesh_from_arrays(
    name: str, vertices_m: np.ndarray, faces: np.ndarray, bsdf: Any | None = None, uv: np.ndarray | None = None
) -> Any:
    """An in-memory ``mi.Mesh`` from (V, 3) vertices in metres, (F, 3) vertex indices and optional (V, 2)
    texture coordinates.

    No vertex normals are given, so shading uses the face normals (flat
    shading: box edges stay sharp).
    """
    mi = _mi()
    vertices = np.ascontiguousarray(vertices_m, dtype=np.float32).reshape(-1)
    indices = np.ascontiguousarray(faces, dtype=np.uint32).reshape(-1)
    if vertices.size == 0 or indices.size == 0:
        raise ValueError(f"mesh {name!r} is empty")
    props = mi.Properties()
    props.set_id(name)
    if bsdf is not None:
        props["bsdf"] = bsdf
    mesh = mi.Mesh(
        name,
        vertex_count=vertices.size // 3,
        face_count=indices.size // 3,
        props=props,
        has_vertex_texcoords=uv is not None,
    )
    params = mi.traverse(mesh)
    # The buffer types differ per variant (scalar: dr.scalar.ArrayXf; llvm: dr.llvm.ad.Float).
    params["vertex_positions"] = type(params["vertex_positions"])(vertices)
    params["faces"] = type(params["faces"])(indices)
    if uv is not None:
        texcoords = np.ascontiguousarray(uv, dtype=np.float32).reshape(-1)
        if texcoords.size != 2 * (vertices.size // 3):
            raise ValueError(
                f"mesh {name!r}: {texcoords.size // 2} texture coordinates for {vertices.size // 3} vertices"
            )
        params["vertex_texcoords"] = type(params["vertex_texcoords"])(texcoords)
    params.update()
    return mesh


def emitting_quad(
    name: str,
    centre_m: Any,
    half_u_m: Any,
    half_v_m: Any,
    normal: Any,
    *,
    bsdf: dict[str, Any],
    emitter: dict[str, Any] | None,
    with_uv: bool = False,
) -> Any:
    """A one-sided area emitter on the rectangle ``centre ± half_u ± half_v`` facing ``normal``
    (``emitter=None``: the same quad, not emitting).

    ``with_uv``: texture coordinates u = 0 → 1 along ``half_u`` and v = 0 → 1 along ``half_v`` (for a
    textured radiance, :func:`render.backdrop.card_image`).

    Two triangles (an ``mi.Mesh``) rather than Mitsuba's ``rectangle`` shape: a rectangle keeps its
    placement as constants compiled into the render kernel, so every frame with a differently
    placed panel or window would compile a new kernel (about 0.5 s each, measured); a mesh keeps
    its vertices in a buffer and the kernel is reused. The winding makes the face normal
    ``normal`` (an area emitter emits on its normal's side).
    """
    mi = _mi()
    centre, half_u, half_v = (np.asarray(v, float).reshape(3) for v in (centre_m, half_u_m, half_v_m))
    corners = np.array(
        [centre - half_u - half_v, centre + half_u - half_v, centre + half_u + half_v, centre - half_u + half_v]
    )
    faces = np.array([[0, 1, 2], [0, 2, 3]])
    if float(np.dot(np.cross(half_u, half_v), np.asarray(normal, float))) < 0:
        faces = faces[:, ::-1]
    props = mi.Properties()
    props.set_id(name)
    props["bsdf"] = mi.load_dict(bsdf)
    if emitter is not None:
        props["emitter"] = mi.load_dict(emitter)
    mesh = mi.Mesh(name, vertex_count=4, face_count=2, has_vertex_texcoords=with_uv, props=props)
    params = mi.traverse(mesh)
    params["vertex_positions"] = type(params["vertex_positions"])(corners.astype(np.float32).reshape(-1))
    params["faces"] = type(params["faces"])(faces.astype(np.uint32).reshape(-1))
    if with_uv:
        uv = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]], np.float32)
        params["vertex_texcoords"] = type(params["vertex_texcoords"])(uv.reshape(-1))
    params.update()
    return mesh


def roughness_to_alpha(roughness: float) -> float:
    """GGX alpha from perceptual roughness: alpha = roughness² (Burley 2012, common practice)."""
    return float(roughness) ** 2


_IOR = {"plastic": PLASTIC_IOR, "varnish": VARNISH_IOR}


def _bsdf_type(kind: str, alpha: float) -> str:
    """The Mitsuba BSDF plugin a material kind becomes (inside ``twosided``)."""
    if kind == "diffuse":
        return "diffuse"
    if kind in ("plastic", "varnish"):
        return "plastic" if alpha < SMOOTH_ALPHA else "roughplastic"
    if kind == "metal":
        return "roughconductor"
    raise ValueError(f"unknown material kind {kind!r} (known: diffuse, plastic, varnish, metal)")


def bsdf_dict(material: dict[str, Any]) -> dict[str, Any]:
    """Mitsuba BSDF dict for a spec material ``{"kind", "rgb", "roughness"}`` (and an optional ``texture``
    record, :mod:`render.appearance`, whose base-colour image replaces ``rgb``).

    Every BSDF is wrapped in ``twosided``: procedural parts and the room's
    walls are seen from whichever side, and a one-sided BSDF renders black
    from behind.
    """
    kind = material.get("kind", "diffuse")
    rgb = [float(c) for c in material.get("rgb", [0.5, 0.5, 0.5])]
    colour: dict[str, Any] = {"type": "rgb", "value": rgb}
    if material.get("texture") or material.get("user_texture"):
        # Linear RGB already (raw); bilinear lookup, repeated: the box projection's uv run past 1.
        colour = _bitmap_texture(_base_colour_image(material))
    alpha = roughness_to_alpha(float(material.get("roughness", 0.5)))
    bsdf_type = _bsdf_type(kind, alpha)
    span = material.get("roughness_span")
    if span and bsdf_type in ("plastic", "roughplastic"):
        # The texture's gloss varies: one GGX lobe whose specular weight follows the roughness map (a gloss map).
        inner: dict[str, Any] = {
            "type": "roughplastic",
            "distribution": "ggx",
            "alpha": max(alpha, SMOOTH_ALPHA),
            "diffuse_reflectance": colour,
            "specular_reflectance": _bitmap_texture(_gloss_weight(material)),
            "int_ior": _IOR[kind],
        }
    elif bsdf_type == "diffuse":
        inner = {"type": "diffuse", "reflectance": colour}
    elif bsdf_type == "plastic":
        inner = {"type": "plastic", "diffuse_reflectance": colour, "int_ior": _IOR[kind]}
    elif bsdf_type == "roughplastic":
        inner = {
            "type": "roughplastic",
            "distribution": "ggx",
            "alpha": alpha,
            "diffuse_reflectance": colour,
            "int_ior": _IOR[kind],
        }
    else:
        inner = {
            "type": "roughconductor",
            "material": "none",
            "distribution": "ggx",
            "alpha": max(alpha, SMOOTH_ALPHA),
            "specular_reflectance": colour,
        }
        if span:
            # GGX alpha per texel, roughness between the span's ends by the map (roughconductor takes a texture).
            low, high = span
            alphas = (low + (high - low) * _roughness_weight(material)) ** 2
            inner["alpha"] = _bitmap_texture(np.maximum(alphas, SMOOTH_ALPHA).astype(np.float32))
    normal = _normal_image(material)
    if normal is not None:
        # The relief of tiles and parquet (appearance.NORMAL_MAP_FAMILIES) bends the shading normal.
        inner = {"type": "normalmap", "bsdf": inner, "normalmap": _bitmap_texture(normal)}
    return {"type": "twosided", "material": inner}


def _bitmap_texture(image: np.ndarray, wrap_mode: str = "repeat") -> dict[str, Any]:
    """A ``bitmap`` texture of a linear (raw) float32 image, looked up bilinearly."""
    return {
        "type": "bitmap",
        # A writable copy: nanobind refuses read-only arrays.
        "bitmap": _mi().Bitmap(np.array(image, dtype=np.float32, order="C")),
        "raw": True,
        "filter_type": "bilinear",
        "wrap_mode": wrap_mode,
    }


def _roughness_weight(material: dict[str, Any]) -> np.ndarray:
    spread = roughness_spread(material["texture"])
    assert spread is not None  # only called for materials with a roughness_span
    return spread[3]


# Gloss maps (:func:`_gloss_weight`) per (texture record JSON, texture cache, span ends, roughness): a pooled BSDF
# taken again for a material seen before skips recomputing its map. 256 KB each at the default 256 px.
_GLOSS_CACHE: dict[tuple[str, str, float, float, float], np.ndarray] = {}
_GLOSS_CACHE_SIZE = 64


def _gloss_weight(material: dict[str, Any]) -> np.ndarray:
    """A glossy textured material's specular weight per texel (H, W, 1): (r̄ / r)², in [0.2, 1], where r is the
    roughness the map gives the texel (between the span's ends) and r̄ the material's. A GGX highlight's peak
    falls as 1 / α² = 1 / r⁴ (Walter et al., "Microfacet models for refraction through rough surfaces",
    EGSR 2007); the square root of that keeps rougher texels visibly duller without blacking them out.

    Read-only, cached per process on everything it depends on: the texture record (and the texture cache it is
    read from, as :func:`render.appearance.roughness_spread` keys it), the span and the roughness."""
    low, high = (float(v) for v in material["roughness_span"])
    mean = max(float(material.get("roughness", 0.5)), 0.05)
    key = (_json_key(material["texture"]), str(texture_cache_dir()), low, high, mean)
    gloss = _GLOSS_CACHE.get(key)
    if gloss is None:
        roughness = low + (high - low) * _roughness_weight(material)
        gloss = np.clip((mean / np.maximum(roughness, 0.05)) ** 2, 0.2, 1.0).astype(np.float32)
        gloss.setflags(write=False)
        if len(_GLOSS_CACHE) >= _GLOSS_CACHE_SIZE:
            _GLOSS_CACHE.pop(next(iter(_GLOSS_CACHE)))
        _GLOSS_CACHE[key] = gloss
    return gloss


def roughness_span(material: dict[str, Any]) -> tuple[float, float] | None:
    """The ends of a textured glossy material's roughness (perceptual, snapped to :data:`ROUGHNESS_STEP`), or None
    when it renders with one roughness.

    The texture's roughness map (:func:`render.appearance.roughness_spread`) is shifted so its mean is the
    material's roughness; its 2nd and 98th percentiles become the ends. A metal's ``roughconductor`` takes the
    GGX alpha per texel directly. Mitsuba's ``roughplastic`` takes one alpha, so plastics and varnish keep the
    material's and weight their specular lobe per texel instead (:func:`_gloss_weight`, a gloss map — common
    practice in real-time material systems): a two-lobe ``blendbsdf`` was measured 13 % slower per default
    frame. None for plain or matte materials, families without a map, and maps that vary by less than two
    snapping steps.
    """
    texture = material.get("texture")
    kind = material.get("kind", "diffuse")
    if not texture or kind not in ("plastic", "varnish", "metal"):
        return None
    spread = roughness_spread(texture)
    if spread is None:
        return None
    mean, low, high, _ = spread
    roughness = float(material.get("roughness", 0.5))
    ends = [min(1.0, max(0.05, roughness + value - mean)) for value in (low, high)]
    ends = [round(round(value / ROUGHNESS_STEP) * ROUGHNESS_STEP, 6) for value in ends]
    if ends[1] - ends[0] < 2 * ROUGHNESS_STEP - 1e-9:
        return None
    return ends[0], ends[1]


# Roughness is snapped to this grid for plastic, varnish and metal. ``roughplastic`` integrates its
# transmittance tables when it is built (~50 ms per instance, measured here), so instances are
# pooled per (kind, roughness) and only recoloured per frame; a 0.025 step in perceptual
# roughness is not visible at our resolutions.
ROUGHNESS_STEP = 0.025

# The parameter that carries a material's colour, per BSDF type (inside ``twosided``).
_COLOUR_PARAMETER = {
    "diffuse": "brdf_0.reflectance.value",
    "plastic": "brdf_0.diffuse_reflectance.value",
    "roughplastic": "brdf_0.diffuse_reflectance.value",
    "roughconductor": "brdf_0.specular_reflectance.value",
}


def _base_colour_image(material: dict[str, Any]) -> np.ndarray:
    """Linear base-colour image of a textured material: a procedural ``texture`` or an upload's ``user_texture``."""
    if material.get("user_texture"):
        return user_texture_linear_rgb(material["user_texture"])
    from .appearance import texture_linear_rgb  # deferred: tests patch render.appearance.texture_linear_rgb

    return texture_linear_rgb(material["texture"])


def _normal_image(material: dict[str, Any]) -> np.ndarray | None:
    """The normal map of a procedurally textured material, when its family has one that shows, or an upload's own."""
    if material.get("user_normal"):
        return normal_rgb(material["user_normal"])
    if not material.get("texture"):
        return None
    from .appearance import texture_normal_rgb  # deferred: tests patch render.appearance.texture_normal_rgb

    return texture_normal_rgb(material["texture"])


def _snapped_material(material: dict[str, Any]) -> dict[str, Any]:
    kind = material.get("kind", "diffuse")
    roughness = float(material.get("roughness", 1.0))
    if kind == "diffuse":
        roughness = 1.0
    else:
        roughness = round(round(roughness / ROUGHNESS_STEP) * ROUGHNESS_STEP, 6)
    snapped = {"kind": kind, "rgb": [float(c) for c in material.get("rgb", [0.5, 0.5, 0.5])], "roughness": roughness}
    if material.get("texture"):
        snapped["texture"] = material["texture"]
        span = roughness_span(material)
        if span:
            snapped["roughness_span"] = list(span)
    if material.get("user_texture"):
        snapped["user_texture"] = material["user_texture"]
    if material.get("user_normal"):
        snapped["user_normal"] = material["user_normal"]
    return snapped


class BsdfPool:
    """Reusable BSDF instances per (variant, kind, snapped roughness).

    :meth:`acquire` returns an instance with the requested colour (set through ``mi.traverse``);
    :meth:`release` hands instances back once the scene that used them is gone (see
    :class:`BuiltScene`), so a live scene's materials are never recoloured.
    """

    def __init__(self) -> None:
        self._free: dict[tuple, list[Any]] = {}

    def acquire(self, material: dict[str, Any]) -> tuple[tuple, Any]:
        mi = _mi()
        snapped = _snapped_material(material)
        # Textured instances are pooled apart, per texture size: their colour is an image, set the same way.
        image = _base_colour_image(snapped) if snapped.get("texture") or snapped.get("user_texture") else None
        normal = _normal_image(snapped)
        span = snapped.get("roughness_span")
        key = (
            mi.variant(),
            snapped["kind"],
            snapped["roughness"],
            None if image is None else image.shape,
            None if normal is None else normal.shape,
            # The span's ends only enter the gloss (or alpha) map's texels: one pool for all of them.
            None if not span else "gloss map",
        )
        free = self._free.setdefault(key, [])
        if not free:
            return key, mi.load_dict(bsdf_dict(snapped))
        bsdf = free.pop()
        params = mi.traverse(bsdf)
        if span and image is not None:
            # A gloss-varying texture: its colour, its gloss map (or a metal's alpha map) and its relief.
            weight = _roughness_weight(snapped)
            low, high = span
            metal = snapped["kind"] == "metal"
            for name in list(params.keys()):
                if name.endswith("diffuse_reflectance.data") or (metal and name.endswith("specular_reflectance.data")):
                    params[name] = mi.TensorXf(image.copy())
                elif name.endswith("specular_reflectance.data"):
                    params[name] = mi.TensorXf(_gloss_weight(snapped).copy())
                elif name.endswith("alpha.data"):
                    alphas = np.maximum((low + (high - low) * weight) ** 2, SMOOTH_ALPHA).astype(np.float32)
                    params[name] = mi.TensorXf(alphas)
                elif name.endswith("normalmap.data") and normal is not None:
                    params[name] = mi.TensorXf(normal.copy())
            params.update()
            return key, bsdf
        name = _COLOUR_PARAMETER[_bsdf_type(snapped["kind"], roughness_to_alpha(snapped["roughness"]))]
        if normal is not None:
            # Inside a normalmap the BSDF is its nested_bsdf.
            name = name.replace("brdf_0.", "brdf_0.nested_bsdf.", 1)
            params["brdf_0.normalmap.data"] = mi.TensorXf(normal.copy())
        if image is not None:
            params[name.removesuffix(".value") + ".data"] = mi.TensorXf(image.copy())
        else:
            params[name] = snapped["rgb"]
        params.update()
        return key, bsdf

    def release(self, items: list[tuple[tuple, Any]]) -> None:
        for key, bsdf in items:
            self._free.setdefault(key, []).append(bsdf)


BSDF_POOL = BsdfPool()


# ---------------------------------------------------------------------------
# Sensors
# ---------------------------------------------------------------------------


def camera_to_world(rotation: np.ndarray, translation: np.ndarray) -> np.ndarray:
    """Mitsuba ``to_world`` (4×4) from OpenCV extrinsics ``X_cam = R X_world + t``.

    Mitsuba's camera frame is x left, y up, z forward; OpenCV's is x right,
    y down, z forward. The columns are therefore (−r₀, −r₁, r₂, C) with
    ``C = −Rᵀ t`` the camera centre.
    """
    rotation = np.asarray(rotation, dtype=float)
    translation = np.asarray(translation, dtype=float).reshape(3)
    matrix = np.eye(4)
    matrix[:3, 0] = -rotation[0]
    matrix[:3, 1] = -rotation[1]
    matrix[:3, 2] = rotation[2]
    matrix[:3, 3] = -rotation.T @ translation
    return matrix


def _fov_and_offsets(k_matrix: np.ndarray, width_px: int, height_px: int) -> tuple[float, float, float]:
    k_matrix = np.asarray(k_matrix, dtype=float)
    fx, fy = k_matrix[0, 0], k_matrix[1, 1]
    if abs(fx - fy) > 1e-6 * fx:
        raise ValueError(f"non-square pixels (fx={fx}, fy={fy}) are not supported")
    fov_x_deg = math.degrees(2.0 * math.atan(width_px / (2.0 * fx)))
    # Mitsuba's principal point offset is in units of the film size, relative to its centre, and
    # positive towards its camera frame's +x (left) / +y (up): the opposite of OpenCV's pixel axes.
    offset_x = (width_px / 2.0 - k_matrix[0, 2]) / width_px
    offset_y = (height_px / 2.0 - k_matrix[1, 2]) / height_px
    return fov_x_deg, offset_x, offset_y


def sensor_dicts(
    k_matrix: np.ndarray,
    rotation: np.ndarray,
    translation: np.ndarray,
    width_px: int,
    height_px: int,
    *,
    spp: int,
    aperture_radius_m: float = 0.0,
    focus_distance_m: float = 1.0,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """(rgb sensor, label sensor) dicts with identical pose and intrinsics."""
    mi = _mi()
    fov_x_deg, offset_x, offset_y = _fov_and_offsets(k_matrix, width_px, height_px)
    to_world = mi.ScalarTransform4f(camera_to_world(rotation, translation).tolist())
    common = {
        "fov": fov_x_deg,
        "fov_axis": "x",
        "near_clip": NEAR_CLIP_M,
        "far_clip": FAR_CLIP_M,
        "to_world": to_world,
    }
    if offset_x or offset_y:
        common["principal_point_offset_x"] = offset_x
        common["principal_point_offset_y"] = offset_y
    # Box filter: each sample lands in one pixel only. A wider filter (Mitsuba's default gaussian)
    # correlates the noise of neighbouring pixels (lag-1 correlation 0.39, measured), which the
    # denoiser then keeps as if it were texture.
    rgb_film = {
        "type": "hdrfilm",
        "width": width_px,
        "height": height_px,
        "pixel_format": "rgb",
        "rfilter": {"type": "box"},
    }
    label_film = {
        "type": "hdrfilm",
        "width": width_px,
        "height": height_px,
        "pixel_format": "rgb",
        "rfilter": {"type": "box"},
        "sample_border": False,
    }
    if aperture_radius_m > 0:
        rgb_sensor: dict[str, Any] = {
            "type": "thinlens",
            "aperture_radius": float(aperture_radius_m),
            "focus_distance": float(focus_distance_m),
            **common,
        }
    else:
        rgb_sensor = {"type": "perspective", **common}
    rgb_sensor["film"] = rgb_film
    rgb_sensor["sampler"] = {"type": "independent", "sample_count": int(spp)}
    label_sensor = {
        "type": "perspective",
        **common,
        "film": label_film,
        # One un-jittered stratified sample sits at the pixel centre (integer + 0.5).
        "sampler": {"type": "stratified", "sample_count": 1, "jitter": False},
    }
    return rgb_sensor, label_sensor


# ---------------------------------------------------------------------------
# Integrators (built once per process and variant)
# ---------------------------------------------------------------------------

_INTEGRATORS: dict[tuple[str, str, int], Any] = {}


def aov_integrator() -> Any:
    """The label-pass integrator: channels shape_index, depth, albedo R G B, shading normal X Y Z (world).

    The albedo and normal are the denoiser's auxiliary images. Taking them from the label pass (one
    pixel-centre pinhole sample) rather than from the RGB pass's own samples costs no extra kernel
    compilation (about 0.5 s per frame here, since every frame's camera compiles a new kernel) and
    measured within 0.2 dB PSNR of same-sample auxiliary images on the quality benchmark's seeds.
    """
    mi = _mi()
    key = (mi.variant(), "aov", 0)
    if key not in _INTEGRATORS:
        _INTEGRATORS[key] = mi.load_dict(
            {"type": "aov", "aovs": "shape:shape_index,dist:depth,albedo:albedo,nn:sh_normal"}
        )
    return _INTEGRATORS[key]


def path_integrator(max_depth: int) -> Any:
    mi = _mi()
    key = (mi.variant(), "path", int(max_depth))
    if key not in _INTEGRATORS:
        _INTEGRATORS[key] = mi.load_dict({"type": "path", "max_depth": int(max_depth)})
    return _INTEGRATORS[key]


# ---------------------------------------------------------------------------
# Scene
# ---------------------------------------------------------------------------


@dataclass
class BuiltScene:
    """A loaded Mitsuba scene with its two sensors and the shape → instance map.

    Scenes from :func:`build_scene` borrow pooled BSDFs (see :class:`BsdfPool`) until this object
    is garbage collected; do not keep ``scene`` alive without it.
    """

    scene: Any
    rgb_sensor: Any
    label_sensor: Any
    width_px: int
    height_px: int
    k_matrix: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray
    spp: int
    max_depth: int
    # shape registry id (the value of the shape_index AOV) → instance id (0 = background)
    instance_lut: np.ndarray = field(default_factory=lambda: np.zeros(1, np.uint16))
    shape_instance: dict[str, int] = field(default_factory=dict)
    # instance id → list of world-space (vertices (V, 3), faces (F, 3)) of its parts
    instance_triangles: dict[int, list[tuple[np.ndarray, np.ndarray]]] = field(default_factory=dict)
    # Sunlight (a delta light entering through the windows) is rendered in a scene of its own when the
    # sky enters through window portals, whose emitting rectangles would block the sun's shadow rays.
    # The two renders add up: light transport is linear in the emitters.
    sun_scene: Any = None
    sun_sensor: Any = None
    window_light: str = "dome"
    # The camera's direct view of the outdoor scene through the windows (window_view_scenes), when there is one.
    window_view_scenes: tuple | None = None


@dataclass
class RadiancePass:
    """The RGB pass: linear radiance (Y in cd/m²) and, when asked for, the denoiser's auxiliary images."""

    radiance_rgb: np.ndarray
    albedo_rgb: np.ndarray | None = None
    normal_xyz: np.ndarray | None = None


def shape_index_values(scene: Any) -> list[tuple[Any, int]]:
    """(shape, value the ``shape_index`` AOV writes for it) for every shape of ``scene``.

    Measured on Mitsuba 3.9: the JIT variants write the shape's registry id
    (``reinterpret_array(UInt32, ShapePtr)``, 1-based and counting every shape
    the process has ever created); ``scalar_rgb`` writes the shape's position
    in ``scene.shapes()`` plus one. Neither is the order of the scene dict.
    Background pixels are 0 on both.
    """
    mi = _mi()
    shapes = list(scene.shapes())
    if mi.variant().startswith("scalar"):
        return [(shape, position + 1) for position, shape in enumerate(shapes)]
    import drjit as dr

    values = []
    for shape in shapes:
        registry_id = dr.reinterpret_array(mi.UInt32, mi.ShapePtr(shape))
        values.append((shape, int(np.asarray(registry_id).reshape(-1)[0])))
    return values


def instance_of_shape_id(shape_id: str) -> int:
    """Instance id of a shape named ``"i{instance_id}_p{k}"``; 0 for any other shape (room, lights)."""
    match = _INSTANCE_SHAPE_ID.match(shape_id)
    return int(match.group(1)) if match else 0


def opaque_lens_constants(scene: Any) -> None:
    """Turn the thin-lens aperture radius and focus distance into kernel inputs.

    Mitsuba's ``thinlens`` sensor keeps both as constants compiled into the render kernel, so each
    frame's aperture (it follows the sampled focal length and f-number) and focus distance would
    compile a new kernel (about 0.5 s of CPU per frame, measured); as opaque variables they are
    read from memory and one compiled kernel serves every frame of the same structure. The
    camera's pose and field of view are opaque already. No effect on the scalar variant.
    """
    import drjit as dr

    mi = _mi()
    if not dr.is_jit_v(mi.Float):
        return
    params = mi.traverse(scene)
    keys = [key for key in params.keys() if key.endswith((".aperture_radius", ".focus_distance"))]
    for key in keys:
        params[key] = dr.opaque(mi.Float, float(dr.ravel(params[key])[0]))  # type: ignore[index]  # drjit's stub types ravel() as returning object
    if keys:
        params.update()


def load_scene(
    scene_dict: dict[str, Any],
    *,
    width_px: int,
    height_px: int,
    k_matrix: np.ndarray,
    rotation: np.ndarray,
    translation: np.ndarray,
    spp: int,
    max_depth: int,
) -> BuiltScene:
    """``mi.load_dict`` the scene, find both sensors and build the shape → instance lookup table."""
    mi = _mi()
    scene = mi.load_dict(scene_dict)
    opaque_lens_constants(scene)
    sensors = {sensor.id(): sensor for sensor in scene.sensors()}
    registry_to_instance: dict[int, int] = {}
    shape_instance: dict[str, int] = {}
    for shape, value in shape_index_values(scene):
        instance_id = instance_of_shape_id(shape.id())
        shape_instance[shape.id()] = instance_id
        registry_to_instance[value] = instance_id
    lut = np.zeros(max(registry_to_instance, default=0) + 1, dtype=np.uint16)
    for registry_id, instance_id in registry_to_instance.items():
        lut[registry_id] = instance_id
    return BuiltScene(
        scene=scene,
        rgb_sensor=sensors[RGB_SENSOR_ID],
        label_sensor=sensors[LABEL_SENSOR_ID],
        width_px=width_px,
        height_px=height_px,
        k_matrix=np.asarray(k_matrix, float),
        rotation=np.asarray(rotation, float),
        translation=np.asarray(translation, float).reshape(3),
        spp=spp,
        max_depth=max_depth,
        instance_lut=lut,
        shape_instance=shape_instance,
    )


def render_rgb(built: BuiltScene, *, seed: int = 0) -> np.ndarray:
    """Path-traced linear sRGB radiance (H, W, 3) float32; Y is luminance in cd/m²."""
    return render_radiance(built, seed=seed, aux=False).radiance_rgb


#: The sun pass takes this many times the frame's samples per pixel. Its light (a bright patch and the bounce from
#: it, on textured floors) is the noisiest part of a sunlit frame. Measured on the quality benchmark's worst sunlit
#: seed (4), 320×240, 4 spp, denoised, against two 2048-spp reference passes (PSNR against the converged image
#: estimated, see render.bench_quality.truth_psnr): factor 2 → 26.1 dB, 4 → 27.3 dB, 8 → 28.2 dB, for 5.2 / 7.4 /
#: 11.6 CPU s per frame (one thread). At 640×480 a sunlit frame at 8× took about 60 CPU s against about 15 for a
#: lamp- or window-lit one, which raised the mean CPU per default frame from about 0.30 to 0.47 of the previous
#: pipeline's. 2 keeps the mean within a third; the worst sunlit seed then stays near 26 dB.
SUN_PASS_SPP_FACTOR = 2


def render_radiance(built: BuiltScene, *, seed: int = 0, aux: bool = False) -> RadiancePass:
    """The RGB pass of :func:`build_scene`'s scene(s); with ``aux``, also the albedo and shading normal.

    With window portals and a sun, the sun's scene is rendered with the same seed and
    :data:`SUN_PASS_SPP_FACTOR` times the sample count and added: the sum is the radiance of all the lights
    together (linearity of light transport).
    ``aux`` images come from the label pass (see :func:`aov_integrator`); a frame that renders the
    label pass anyway takes them from :func:`render_label_and_aux` instead.
    """
    mi = _mi()
    seed = int(seed) & 0x7FFFFFFF
    image = mi.render(
        built.scene, sensor=built.rgb_sensor, integrator=path_integrator(built.max_depth), spp=built.spp, seed=seed
    )
    result = RadiancePass(radiance_rgb=np.array(image, dtype=np.float32)[..., :3])
    if built.sun_scene is not None:
        sun = mi.render(
            built.sun_scene,
            sensor=built.sun_sensor,
            integrator=path_integrator(built.max_depth),
            spp=built.spp * SUN_PASS_SPP_FACTOR,
            seed=seed,
        )
        result.radiance_rgb = result.radiance_rgb + np.array(sun, dtype=np.float32)[..., :3]
    if aux:
        labels = render_label_and_aux(built)
        result.albedo_rgb, result.normal_xyz = labels.albedo_rgb, labels.normal_xyz
    return result


def render_window_view(built: BuiltScene, *, seed: int = 0) -> np.ndarray | None:
    """What the outdoor scene adds to the camera's direct view of the windows (H, W, 3), or None without one.

    The room is lit through each window by its mean outdoor radiance (uniform over the pane, sampled as a
    portal); the camera, looking through a window, should see the outdoor scene itself. Both
    :func:`window_view_scenes` are rendered with one-segment paths (the emitters the camera sees directly,
    with the frame's lens, pixel filter and occluders) and the same seed, so the window's pixel coverage
    cancels in their difference, which :func:`render.frame.render_frame` adds to the raw radiance before denoising.
    Exact for the direct view; a window seen in a mirror or through the pane's own reflection keeps the
    uniform light (about 15 % of the pane, the glass's reflectance).
    """
    if built.window_view_scenes is None:
        return None
    mi = _mi()
    seed = int(seed) & 0x7FFFFFFF
    textured, uniform = (
        np.array(
            mi.render(scene, sensor=scene.sensors()[0], integrator=path_integrator(1), spp=built.spp, seed=seed),
            dtype=np.float32,
        )[..., :3]
        for scene in built.window_view_scenes
    )
    return textured - uniform


def _ray_cosines(k_matrix: np.ndarray, width_px: int, height_px: int) -> np.ndarray:
    """cos of the angle between each pixel-centre ray and the optical axis (H, W)."""
    u = (np.arange(width_px) + 0.5 - k_matrix[0, 2]) / k_matrix[0, 0]
    v = (np.arange(height_px) + 0.5 - k_matrix[1, 2]) / k_matrix[1, 1]
    return (1.0 / np.sqrt(1.0 + u[None, :] ** 2 + v[:, None] ** 2)).astype(np.float32)


_COSINE_CACHE: dict[tuple, np.ndarray] = {}


@dataclass
class LabelPass:
    """The label pass: instance ids, z-depth and the denoiser's auxiliary images (all (H, W[, 3]))."""

    instance_ids: np.ndarray
    depth_m: np.ndarray
    albedo_rgb: np.ndarray
    normal_xyz: np.ndarray


def render_label_pass(built: BuiltScene) -> tuple[np.ndarray, np.ndarray]:
    """(instance ids (H, W) uint16, z-depth along the optical axis (H, W) float32 metres; 0 = no hit)."""
    result = render_label_and_aux(built)
    return result.instance_ids, result.depth_m


def render_label_and_aux(built: BuiltScene) -> LabelPass:
    """The pinhole label pass: instance ids, z-depth, first-hit albedo and shading normal."""
    mi = _mi()
    image = np.array(mi.render(built.scene, sensor=built.label_sensor, integrator=aov_integrator(), spp=1))
    shape_index = image[..., 0].astype(np.int64)
    distance = image[..., 1]
    if shape_index.max(initial=0) >= built.instance_lut.size or shape_index.min(initial=0) < 0:
        raise RuntimeError("shape_index AOV returned an id that belongs to no shape of this scene")
    instance_ids = built.instance_lut[shape_index]
    key = (built.k_matrix.tobytes(), built.width_px, built.height_px)
    cosines = _COSINE_CACHE.get(key)
    if cosines is None:
        cosines = _COSINE_CACHE.setdefault(key, _ray_cosines(built.k_matrix, built.width_px, built.height_px))
    # The ray starts on the near plane: z = (t + near/cos)·cos = t·cos + near.
    depth_m = np.where(distance > 0, distance * cosines + NEAR_CLIP_M, 0.0).astype(np.float32)
    return LabelPass(
        instance_ids=instance_ids,
        depth_m=depth_m,
        albedo_rgb=np.ascontiguousarray(image[..., 2:5], dtype=np.float32),
        normal_xyz=np.ascontiguousarray(image[..., 5:8], dtype=np.float32),
    )


# ---------------------------------------------------------------------------
# Spec → scene
# ---------------------------------------------------------------------------

# World-space part geometry per placed object, keyed by the object's JSON: frames that share a
# layout (same layout sub-seed) skip rebuilding the procedural meshes.
_PART_CACHE: dict[str, list[tuple[str, np.ndarray, np.ndarray, dict[str, Any]]]] = {}
_PART_CACHE_SIZE = 256


def _cached_parts(key: str, build: Any) -> list[tuple[str, np.ndarray, np.ndarray, dict[str, Any]]]:
    parts = _PART_CACHE.get(key)
    if parts is None:
        parts = [
            (
                part.name,
                np.asarray(part.mesh.vertices, dtype=np.float32),
                np.asarray(part.mesh.faces, dtype=np.uint32),
                dict(part.material),
            )
            for part in build()
        ]
        if len(_PART_CACHE) >= _PART_CACHE_SIZE:
            _PART_CACHE.pop(next(iter(_PART_CACHE)))
        _PART_CACHE[key] = parts
    return parts


def _json_key(value: Any) -> str:
    import json

    return json.dumps(value, sort_keys=True, separators=(",", ":"))


def _normalized(vector: Any) -> np.ndarray:
    array = np.asarray(vector, dtype=float)
    return array / np.linalg.norm(array)


def _look_at(origin: Any, target: Any, up: Any = (0.0, 0.0, 1.0)) -> Any:
    mi = _mi()
    origin = np.asarray(origin, dtype=float)
    direction = _normalized(np.asarray(target, dtype=float) - origin)
    up = np.asarray(up, dtype=float)
    if abs(float(direction @ _normalized(up))) > 0.999:
        up = np.array([0.0, 1.0, 0.0])
    return mi.ScalarTransform4f().look_at(origin=origin.tolist(), target=(origin + direction).tolist(), up=up.tolist())


def emitter_sampling_weights(lights: list[dict[str, Any]], room: dict[str, Any]) -> list[float]:
    """Next-event-estimation sampling weight of each light (Mitsuba's ``sampling_weight``).

    Lamps keep Mitsuba's uniform weight 1; the sun gets its flux through the windows relative to
    the mean lamp flux (E·A_windows / mean Φ_lamp, at least 1), because it outshines a room's lamps
    by one to two orders of magnitude. Any positive weights leave the estimate unbiased (MIS); these
    cut the relative RMSE of a sunlit 32-spp frame about 2× (measured against 1024 spp) and leave
    lamp-lit frames unchanged. A power-proportional weight for the lamps too was measured worse
    (panels then starve the bulbs).

    References
    ----------
    Pharr, Jakob, Humphreys, *Physically Based Rendering*, 4th ed. (2023), §12.6 "Light sampling"
    (power-based light sampling); Veach (1997), multiple importance sampling.
    """
    window_area_m2 = sum(float(w["width_m"]) * float(w["height_m"]) for w in room.get("windows") or [])
    mean_lamp_flux_lm = _mean_lamp_flux_lm(lights)
    weights = []
    for light in lights:
        weight = 1.0
        if light["kind"] == "sun" and mean_lamp_flux_lm > 0:
            weight = max(1.0, float(light["illuminance_lux"]) * window_area_m2 / mean_lamp_flux_lm)
        weights.append(round(weight, 6))
    return weights


def _mean_lamp_flux_lm(lights: list[dict[str, Any]]) -> float:
    lamp_flux = [float(light["flux_lm"]) for light in lights if light["kind"] in ("panel", "point", "spot")]
    return sum(lamp_flux) / len(lamp_flux) if lamp_flux and sum(lamp_flux) > 0 else 0.0


#: Window glass: soda-lime float glass, refractive index about 1.52 (from memory; 1.5 is the usual round value).
GLASS_IOR = 1.5


def thin_glass_transmittance(cos_theta: Any, ior: float = GLASS_IOR) -> np.ndarray:
    """Transmittance of a thin non-absorbing pane (both faces, all inner reflections) at incidence cos θ.

    Unpolarized Fresnel reflectance r of one air–glass face, then the geometric series of the light bounced
    between the faces: R = r + (1 − r)² r / (1 − r²) = 2r / (1 + r), T = 1 − R — the model of Mitsuba's
    ``thindielectric`` BSDF. At normal incidence and n = 1.5: r = 0.04, T = 0.923.

    References
    ----------
    E. Hecht, *Optics*, 5th ed. (2017), §4.6 (Fresnel equations); Mitsuba 3 documentation, ``thindielectric``.
    """
    cos_i = np.clip(np.abs(np.asarray(cos_theta, dtype=np.float64)), 1e-9, 1.0)
    sin_t = np.sqrt(np.maximum(0.0, 1.0 - cos_i**2)) / ior
    cos_t = np.sqrt(np.maximum(0.0, 1.0 - sin_t**2))
    r_s = ((cos_i - ior * cos_t) / (cos_i + ior * cos_t)) ** 2
    r_p = ((ior * cos_i - cos_t) / (ior * cos_i + cos_t)) ** 2
    r = 0.5 * (r_s + r_p)
    return 1.0 - 2.0 * r / (1.0 + r)


@functools.lru_cache(maxsize=8)
def diffuse_glass_transmittance(ior: float = GLASS_IOR) -> float:
    """Cosine-weighted hemispherical mean of :func:`thin_glass_transmittance`: T̄ = 2 ∫₀¹ T(μ) μ dμ (0.845 at 1.5),
    the fraction of a uniform sky's light that a pane lets into a room."""
    mu, weights = np.polynomial.legendre.leggauss(64)
    mu = 0.5 * (mu + 1.0)
    return float(np.sum(0.5 * weights * 2.0 * thin_glass_transmittance(mu, ior) * mu))


def glass_bsdf() -> dict[str, Any]:
    """The window pane: transmits T̄ (:func:`diffuse_glass_transmittance`) straight through at every angle and
    mirrors the rest (a ``mask`` of opacity 1 − T̄ over a perfect mirror).

    Real glass transmits 0.92 at normal incidence and less at grazing angles (Fresnel). The pane keeps
    its hemispherical mean instead, so the light a uniform sky sends into the room is right, and so the
    portal (which can only emit the same radiance in every direction) and the brute-force pane are the
    same optical model; what differs is only how the light is found, which the portal test checks.
    """
    return {
        "type": "mask",
        "opacity": {"type": "uniform", "value": 1.0 - diffuse_glass_transmittance()},
        "bsdf": {"type": "conductor", "material": "none"},
    }


def portal_bsdf() -> dict[str, Any]:
    """The surface of a window that emits the outside's light (a portal, or a brute-force pane carrying the
    outdoor scene): an opaque mirror of reflectance 1 − T̄.

    It reflects like the pane (:func:`glass_bsdf`) but lets nothing through: a ray through a portal would meet
    nothing, and the light from outside is the emitter's. Not a ``mask``: Mitsuba's path tracer counts a
    surface's emission only on the mask's opaque share, so a masked portal showed the camera (and the rays
    that hit it) 1 − T̄ = 15 % of its radiance — windows looked dark grey (measured: a unit emitter behind a
    mask of opacity 0.155 renders 0.17 at 64 spp, behind a diffuse surface 1.0).
    """
    return {
        "type": "conductor",
        "material": "none",
        "specular_reflectance": {"type": "uniform", "value": 1.0 - diffuse_glass_transmittance()},
    }


def window_glass_entries(room: dict[str, Any], window_radiance: list[np.ndarray] | None = None) -> dict[str, Any]:
    """Plain panes (no emission) in the window openings' outer faces: the glass of ``window_light="dome"``,
    where the sky is found by paths that leave through it.

    With ``window_radiance`` (each window's outdoor light, :func:`outdoor_windows`), each pane emits it (times
    the glass's T̄, like a portal) instead, at a next-event sampling weight so small that the light is still
    found by the paths that hit it: the brute-force counterpart of the portals.
    """
    entries = {}
    for index, frame in enumerate(window_portal_frames(room)):
        emitter, bsdf = None, glass_bsdf()
        if window_radiance is not None:
            bsdf = portal_bsdf()
            emitter = {
                "type": "area",
                "radiance": _rgb(np.asarray(window_radiance[index]) * diffuse_glass_transmittance()),
                "sampling_weight": BRUTE_FORCE_SAMPLING_WEIGHT,
            }
        entries[f"window_glass_{index}"] = _window_quad(f"window_glass_{index}", frame, bsdf=bsdf, emitter=emitter)
    return entries


#: Next-event sampling weight of a brute-force window (relative to a lamp's 1): next-event estimation almost
#: never picks it, and multiple importance sampling then gives its light to the paths that hit it.
BRUTE_FORCE_SAMPLING_WEIGHT = 1e-6


def _rgb(value: Any) -> dict[str, Any]:
    return {"type": "rgb", "value": [float(v) for v in np.asarray(value).reshape(3)]}


@dataclass
class OutdoorWindows:
    """A room's outdoor scene (:mod:`render.backdrop`) per window: the light it sends in and what the camera sees.

    ``radiance_rgb``: each window's cosine-weighted mean outdoor radiance (sky above, ground below, the skyline
    between), which its emitter sends into the room; ``cards``: each window's image of the outdoor scene as
    seen from the camera, (rows, cols, 3). Both in the units of the room's sky radiance, before the glass.
    """

    radiance_rgb: list[np.ndarray]
    cards: list[np.ndarray]


def outdoor_windows(spec: dict[str, Any]) -> OutdoorWindows | None:
    """The room's :class:`OutdoorWindows`; None when it has no outdoor scene (no ``room.backdrop``, no windows, no
    dome)."""
    room = spec["room"]
    backdrop = room.get("backdrop")
    domes = [light for light in spec["lights"] if light["kind"] == "dome"]
    if not backdrop or not room.get("windows") or not domes:
        return None
    sky_rgb = np.sum([emitter_quantities(light)["radiance_rgb"] for light in domes], axis=0)
    sun = None
    for light in spec["lights"]:
        if light["kind"] == "sun":
            quantities = emitter_quantities(light)
            sun = (quantities["direction"], quantities["irradiance_rgb"])
    frames = window_portal_frames(room)
    position = spec["camera"]["position_m"]
    return OutdoorWindows(
        radiance_rgb=[window_mean_radiance(frame, backdrop, sky_rgb, sun) for frame in frames],
        cards=[card_image(frame, position, backdrop, sky_rgb, sun) for frame in frames],
    )


def window_view_scenes(room: dict[str, Any], outdoor: OutdoorWindows, shapes: dict[str, Any], sensor: dict) -> tuple:
    """Two scenes for the camera's direct view of the windows: the room's shapes (occluders) with each window
    emitting its camera-view image (``cards``), and with each emitting its uniform light (``radiance_rgb``), both
    times the glass's T̄. Rendered with paths of one segment (emitters seen directly), their difference is
    what the outdoor scene adds to the frame over the uniform light (:func:`render_window_view`)."""
    mi = _mi()
    transmittance = diffuse_glass_transmittance()
    scenes = []
    for textured in (True, False):
        scene_dict: dict[str, Any] = {"type": "scene", RGB_SENSOR_ID: dict(sensor), **shapes}
        for index, frame in enumerate(window_portal_frames(room)):
            radiance = (
                _bitmap_texture(outdoor.cards[index] * transmittance, wrap_mode="clamp")
                if textured
                else _rgb(outdoor.radiance_rgb[index] * transmittance)
            )
            name = f"window_view_{index}"
            scene_dict[name] = _window_quad(
                name,
                frame,
                bsdf={"type": "diffuse"},
                emitter={"type": "area", "radiance": radiance},
                with_uv=textured,
            )
        scene = mi.load_dict(scene_dict)
        opaque_lens_constants(scene)
        scenes.append(scene)
    return tuple(scenes)


def window_portal_frames(room: dict[str, Any]) -> list[dict[str, Any]]:
    """Each window opening's outer rectangle: centre, in-plane half axes and inward normal (world, m).

    The rectangle lies in the wall's *outer* face (the wall is ``dressing.WALL_THICKNESS_M`` thick), so
    the window reveals see the sky through it exactly as they would see the open sky. The axes are
    right-handed, ``u × v = n``, so Mitsuba's rectangle (which emits towards its local +z) faces the room.
    """
    width, depth, t = float(room["width_m"]), float(room["depth_m"]), WALL_THICKNESS_M
    frames = []
    for window in room.get("windows") or []:
        along = float(window["center_m"])
        z = float(window["sill_m"]) + float(window["height_m"]) / 2.0
        half_w, half_h = float(window["width_m"]) / 2.0, float(window["height_m"]) / 2.0
        wall = window["wall"]
        if wall == "south":
            centre, u, v, n = (along, -t, z), (1, 0, 0), (0, 0, -1), (0, 1, 0)
        elif wall == "north":
            centre, u, v, n = (along, depth + t, z), (1, 0, 0), (0, 0, 1), (0, -1, 0)
        elif wall == "west":
            centre, u, v, n = (-t, along, z), (0, 1, 0), (0, 0, 1), (1, 0, 0)
        elif wall == "east":
            centre, u, v, n = (width + t, along, z), (0, 1, 0), (0, 0, -1), (-1, 0, 0)
        else:
            raise ValueError(f"unknown wall {wall!r}")
        frames.append(
            {
                "wall": wall,
                "centre_m": np.array(centre, float),
                "u": np.array(u, float) * half_w,
                "v": np.array(v, float) * half_h,
                "normal": np.array(n, float),
                "area_m2": 4.0 * half_w * half_h,
            }
        )
    return frames


def _window_quad(
    name: str, frame: dict[str, Any], *, bsdf: dict[str, Any], emitter: dict[str, Any] | None, with_uv: bool = False
) -> Any:
    """:func:`emitting_quad` filling a window opening (a frame of :func:`window_portal_frames`), facing the room."""
    return emitting_quad(
        name, frame["centre_m"], frame["u"], frame["v"], frame["normal"], bsdf=bsdf, emitter=emitter, with_uv=with_uv
    )


def window_portal_entries(
    room: dict[str, Any],
    dome: dict[str, Any],
    *,
    reference_flux_lm: float,
    window_radiance: list[np.ndarray] | None = None,
) -> dict[str, Any]:
    """Scene-dict entries that replace a uniform sky (``dome``) by emitters in the window openings.

    Seen from inside a closed room, a sky of uniform radiance L is visible only through the window
    openings, and every ray that leaves through an opening meets L. A one-sided Lambertian area
    emitter of radiance L filling each opening therefore gives the same radiance along every path
    from inside (nothing outside the room's convex shell can send a ray back in), so the estimate
    stays unbiased — while next-event estimation now aims shadow rays at the openings instead of at
    the whole sphere, most of which the walls block. Each portal is also the window's pane
    (:func:`portal_bsdf`): it mirrors the pane's share of the room (1 − T̄) and emits the sky times the pane's
    transmittance T̄; a ray through it would leave the room and meet nothing, so it lets none through. Its NEE
    sampling weight is its flux Φ = π L A = E A over ``reference_flux_lm`` (the mean lamp flux, or the mean
    portal flux without lamps), at least 1 with lamps.

    With ``window_radiance`` (:func:`outdoor_windows`: each window's mean outdoor radiance, in the units of all
    domes' radiance together), each portal emits that times T̄ instead of the plain sky, and its flux is
    π × its luminance × T̄ × A. The brute-force counterpart is :func:`window_glass_entries` with the same.

    References
    ----------
    Bitterli, Novák, Jarosz, "Portal-masked environment map sampling", *Computer Graphics Forum*
    34(4) (EGSR 2015) (portals for light entering through openings); Pharr, Jakob, Humphreys,
    *Physically Based Rendering*, 4th ed. (2023), §12.5 (portal image infinite lights).
    """
    radiance_rgb = [v * diffuse_glass_transmittance() for v in emitter_quantities(dome)["radiance_rgb"]]
    frames = window_portal_frames(room)
    if not frames or max(radiance_rgb) <= 0:
        return {}
    fluxes = [float(dome["illuminance_lux"]) * frame["area_m2"] * diffuse_glass_transmittance() for frame in frames]
    if window_radiance is not None:
        fluxes = [
            math.pi * float(np.asarray(radiance) @ LUMA) * frame["area_m2"] * diffuse_glass_transmittance()
            for radiance, frame in zip(window_radiance, frames, strict=True)
        ]
    reference = reference_flux_lm if reference_flux_lm > 0 else sum(fluxes) / len(fluxes)
    entries = {}
    for index, (frame, flux_lm) in enumerate(zip(frames, fluxes, strict=True)):
        weight = flux_lm / reference
        if reference_flux_lm > 0:
            weight = max(1.0, weight)
        name = f"window_portal_{index}"
        entries[name] = _window_quad(
            name,
            frame,
            bsdf=portal_bsdf(),
            emitter={
                "type": "area",
                "radiance": (
                    {"type": "rgb", "value": list(radiance_rgb)}
                    if window_radiance is None
                    else _rgb(np.asarray(window_radiance[index]) * diffuse_glass_transmittance())
                ),
                "sampling_weight": round(float(weight), 6),
            },
        )
    return entries


def emitter_entries(light: dict[str, Any], index: int, *, sampling_weight: float = 1.0) -> dict[str, dict[str, Any]]:
    """Scene-dict entries (id → plugin dict, or a built mesh for panels) for one light of the spec.

    Magnitudes come from :func:`render.lights.emitter_quantities`, so the rendered
    linear-sRGB radiance has Y = luminance in cd/m².
    """
    entries = _emitter_entries(light, index)
    if sampling_weight != 1.0:
        for entry in entries.values():
            (entry["emitter"] if "emitter" in entry else entry)["sampling_weight"] = float(sampling_weight)
    for name, entry in entries.items():
        if "quad" in entry:
            entries[name] = emitting_quad(name, *entry["quad"], bsdf=entry["bsdf"], emitter=entry["emitter"])
    return entries


def _emitter_entries(light: dict[str, Any], index: int) -> dict[str, dict[str, Any]]:
    quantities = emitter_quantities(light)
    kind = light["kind"]
    if kind == "panel":
        size_x, size_y = (float(v) for v in light["size_m"])
        # A ceiling panel emits downwards.
        return {
            f"light_{index}_panel": {
                "quad": (light["center_m"], (size_x / 2.0, 0.0, 0.0), (0.0, size_y / 2.0, 0.0), (0.0, 0.0, -1.0)),
                "bsdf": {"type": "diffuse", "reflectance": {"type": "rgb", "value": [0.8, 0.8, 0.8]}},
                "emitter": {"type": "area", "radiance": {"type": "rgb", "value": quantities["radiance_rgb"]}},
            }
        }
    if kind == "point":
        return {
            f"light_{index}_point": {
                "type": "point",
                "position": [float(v) for v in light["position_m"]],
                "intensity": {"type": "rgb", "value": quantities["intensity_rgb"]},
            }
        }
    if kind == "spot":
        return {
            f"light_{index}_spot": {
                "type": "spot",
                "to_world": _look_at(light["position_m"], light["target_m"]),
                "intensity": {"type": "rgb", "value": quantities["intensity_rgb"]},
                "cutoff_angle": float(quantities["cutoff_angle_deg"]),
                "beam_width": float(quantities["beam_width_deg"]),
            }
        }
    if kind == "sun":
        return {
            f"light_{index}_sun": {
                "type": "directional",
                "direction": quantities["direction"],
                "irradiance": {"type": "rgb", "value": quantities["irradiance_rgb"]},
            }
        }
    if kind == "dome":
        return {
            f"light_{index}_dome": {
                "type": "constant",
                "radiance": {"type": "rgb", "value": quantities["radiance_rgb"]},
            }
        }
    raise ValueError(f"unknown light kind {kind!r}")


def scene_parts(
    spec: dict[str, Any],
) -> tuple[list[tuple[str, np.ndarray, np.ndarray, dict[str, Any]]], dict[int, list[tuple[np.ndarray, np.ndarray]]]]:
    """World-space parts ``(shape_id, vertices, faces, material)`` of the room, objects and distractors, and per
    instance id its ``(vertices, faces)`` list (the labels' amodal geometry).

    Distractor shapes are named ``"d{k}_p{j}"`` (k: position in ``spec["distractors"]``), so
    :func:`instance_of_shape_id` maps them to 0: they hide objects in the label pass like the room
    does and never get a label or amodal geometry of their own."""
    parts: list[tuple[str, np.ndarray, np.ndarray, dict[str, Any]]] = []
    room = spec["room"]
    for k, (name, vertices, faces, material) in enumerate(
        _cached_parts("room:" + _json_key(room), lambda: room_parts(room))
    ):
        safe = re.sub(r"[^A-Za-z0-9_]", "_", name)
        parts.append((f"room_{k}_{safe}", vertices, faces, material))
    triangles: dict[int, list[tuple[np.ndarray, np.ndarray]]] = {}
    for obj in spec["objects"]:
        instance_id = int(obj["instance_id"])
        if not 0 < instance_id < 2**16:
            raise ValueError(f"instance_id {instance_id} does not fit the 16-bit instance image (1..65535)")
        object_parts = _cached_parts("obj:" + _json_key(obj), lambda obj=obj: object_world_parts(obj))
        triangles[instance_id] = [(vertices, faces) for _, vertices, faces, _ in object_parts]
        for k, (_, vertices, faces, material) in enumerate(object_parts):
            parts.append((f"i{instance_id}_p{k}", vertices, faces, material))
    for k, distractor in enumerate(spec.get("distractors") or []):
        distractor_parts = _cached_parts(
            "distractor:" + _json_key(distractor), lambda d=distractor: distractor_world_parts(d)
        )
        for j, (_, vertices, faces, material) in enumerate(distractor_parts):
            parts.append((f"d{k}_p{j}", vertices, faces, material))
    return parts, triangles


#: How light from the sky reaches the room: ``portal`` (area emitters in the window openings, the
#: default) or ``dome`` (the constant emitter found only by paths that leave through a window; the
#: brute-force reference the portals are tested against).
WINDOW_LIGHT_MODES = ("portal", "dome")


def build_scene(spec: dict[str, Any], *, window_light: str = "portal") -> BuiltScene:
    """Spec → loaded Mitsuba scene (both sensors, path integrator settings, shape → instance map).

    ``window_light="portal"`` puts the sky into the window openings
    (:func:`window_portal_entries`, which are also the panes); ``"dome"`` keeps the sky as a constant
    emitter behind plain panes (:func:`window_glass_entries`), found only by paths that leave through them.
    In both, a sun shining into a room with windows renders in ``sun_scene``, alone and without the panes
    (glass would stop its shadow rays), at the glass's transmittance (:func:`glass_bsdf`).
    """
    if window_light not in WINDOW_LIGHT_MODES:
        raise ValueError(f"window_light must be one of {WINDOW_LIGHT_MODES}, got {window_light!r}")
    render = spec["render"]
    width_px, height_px = int(render["width_px"]), int(render["height_px"])
    camera = spec["camera"]
    rotation, translation, k_matrix = camera_matrices(camera, width_px, height_px)
    rgb_sensor, label_sensor = sensor_dicts(
        k_matrix,
        rotation,
        translation,
        width_px,
        height_px,
        spp=int(render["spp"]),
        aperture_radius_m=aperture_radius_m(camera["focal_length_mm"], camera["f_number"]),
        focus_distance_m=float(camera["focus_distance_m"]),
    )
    parts, triangles = scene_parts(spec)
    lights = spec["lights"]
    windows = bool(spec["room"].get("windows"))
    use_portals = window_light == "portal" and windows
    # Glass stops the sun's shadow rays (a delta light behind a delta pane), so with windows the sun renders
    # in a scene of its own, without the panes, its irradiance times the glass's transmittance.
    sun_lights = [light for light in lights if light["kind"] == "sun"] if windows else []
    acquired: list[tuple[tuple, Any]] = []
    try:
        bsdfs: dict[str, Any] = {}
        shapes: dict[str, Any] = {}
        objects_by_instance = {int(obj["instance_id"]): obj for obj in spec["objects"]}
        for shape_id, vertices, faces, material in parts:
            key = _json_key(_snapped_material(material))
            if key not in bsdfs:
                acquired.append(BSDF_POOL.acquire(material))
                bsdfs[key] = acquired[-1][1]
            uv = material.get("uv")  # an upload's own texture coordinates (render.assets, look "keep")
            if uv is None and material.get("texture"):
                # Room surfaces are projected in the room's frame, objects and distractors in their own (the grain
                # turns with them).
                owner = objects_by_instance.get(instance_of_shape_id(shape_id))
                frame = yaw_frame(owner) if owner else None
                distractor = _DISTRACTOR_SHAPE_ID.match(shape_id)
                if distractor:
                    frame = texture_frame(spec["distractors"][int(distractor.group(1))], material)
                vertices, faces, uv = box_uv(vertices, faces, float(material["texture"]["tile_size_m"]), frame)
            shapes[shape_id] = mesh_from_arrays(shape_id, vertices, faces, bsdfs[key], uv=uv)
        scene_dict: dict[str, Any] = {
            "type": "scene",
            RGB_SENSOR_ID: rgb_sensor,
            LABEL_SENSOR_ID: label_sensor,
            **shapes,
        }
        # The outdoor scene through the windows (render.backdrop) replaces the plain sky in both modes.
        outdoor = outdoor_windows(spec)
        window_radiance = outdoor.radiance_rgb if outdoor else None
        if use_portals:
            reference_lm = _mean_lamp_flux_lm(lights)
            domes = [light for light in lights if light["kind"] == "dome"]
            for index, light in enumerate(lights):
                if light["kind"] == "dome" and (outdoor is None or light is domes[0]):
                    scene_dict.update(
                        window_portal_entries(
                            spec["room"], light, reference_flux_lm=reference_lm, window_radiance=window_radiance
                        )
                    )
                elif light["kind"] not in ("sun", "dome"):
                    scene_dict.update(emitter_entries(light, index))
        else:
            if windows:
                scene_dict.update(window_glass_entries(spec["room"], window_radiance))
            weights = emitter_sampling_weights(lights, spec["room"])
            for index, (light, weight) in enumerate(zip(lights, weights, strict=True)):
                if light["kind"] == "dome" and outdoor is not None:
                    continue  # the panes carry the outdoor scene; a dome behind them would count the sky twice
                if light["kind"] != "sun" or not sun_lights:
                    scene_dict.update(emitter_entries(light, index, sampling_weight=weight))
        built = load_scene(
            scene_dict,
            width_px=width_px,
            height_px=height_px,
            k_matrix=k_matrix,
            rotation=rotation,
            translation=translation,
            spp=int(render["spp"]),
            max_depth=int(render["max_depth"]),
        )
        built.window_light = window_light
        if outdoor is not None:
            built.window_view_scenes = window_view_scenes(spec["room"], outdoor, shapes, rgb_sensor)
        if sun_lights:
            sun_dict: dict[str, Any] = {"type": "scene", RGB_SENSOR_ID: dict(rgb_sensor), **shapes}
            for index, light in enumerate(lights):
                if light["kind"] == "sun":
                    through_glass = {
                        **light,
                        "illuminance_lux": float(light["illuminance_lux"]) * diffuse_glass_transmittance(),
                    }
                    sun_dict.update(emitter_entries(through_glass, index))
            built.sun_scene = _mi().load_dict(sun_dict)
            opaque_lens_constants(built.sun_scene)
            built.sun_sensor = built.sun_scene.sensors()[0]
    except BaseException:
        BSDF_POOL.release(acquired)
        raise
    built.instance_triangles = triangles
    # The pooled BSDFs go back to the pool when this BuiltScene is garbage collected.
    weakref.finalize(built, BSDF_POOL.release, acquired)
    return built
