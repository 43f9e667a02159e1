"""The look of an uploaded model: its materials, read from trimesh's loaded visuals, as spec materials.

An uploaded GLB / glTF or OBJ + MTL keeps its look when its asset says so (``look="keep"``):

- :func:`visual_look` reads one part's visual (``TextureVisuals`` with a ``PBRMaterial`` or ``SimpleMaterial``,
  or ``ColorVisuals``) into a plain :class:`Look`: base colour (linear), roughness, metallic and the base-colour
  texture (sRGB-encoded 8-bit pixels, at most :data:`MAX_TEXTURE_PX` a side);
- :func:`look_material` turns a look into a spec material (``render/README.md``): metallic ≥ 0.5 →
  ``metal`` (its base colour is the specular colour), else ``plastic`` (a dielectric of IOR 1.5 under a diffuse
  base), roughness as the file has it; a textured part adds ``user_texture``, a JSON record naming the model file
  and part, so the spec still re-renders from its JSON alone;
- :func:`texture_linear_rgb` gives the scene (``render.scene.bsdf_dict``) that part's base colour as a
  linear float32 image: the texture decoded from sRGB times the base-colour factor.

- a glTF part's ``normalTexture`` (tangent space, +X right, +Y up in the image, glTF 2.0 §3.9.3) is kept too
  (``Look.normal_texture``) and renders through Mitsuba's ``normalmap`` (:func:`mitsuba_normal_map`).

Not carried over: the normal texture's ``scale``, metallic-roughness and occlusion textures (their factors are
used), emission, transparency (alpha is dropped: the part renders opaque), texture transforms and second UV sets.
OBJ + MTL bump maps (``bump`` / ``map_Bump``) are height maps of no agreed scale and are left out.

References
----------
- glTF 2.0 specification (Khronos, 2021), §3.9 "Materials": base colour = ``baseColorFactor`` × ``baseColorTexture``,
  the texture sRGB-encoded, the factor linear; ``metallicFactor`` and ``roughnessFactor`` default to 1; dielectrics
  have F0 = 0.04 (IOR 1.5); roughness is perceptual, alpha = roughness².
- Wavefront MTL format (Alias|Wavefront, 1995): ``Kd`` diffuse colour, ``map_Kd`` diffuse texture, multiplied by Kd.
- IEC 61966-2-1:1999 sRGB transfer function (:mod:`render.srgb`).
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import srgb

#: Largest texture side kept; bigger images are downsampled (a 1024 px texture already gives ~1 mm texels on a
#: 1 m object, finer than a pixel of our frames; common practice for real-time asset budgets).
MAX_TEXTURE_PX = 1024
#: Base colour of a part that has no material at all: a neutral light grey (sRGB 0.7, linear ≈ 0.45).
DEFAULT_RGB_LINEAR = (0.448, 0.448, 0.448)
LOOKS: tuple[str, ...] = ("keep", "randomize")
#: A dielectric this rough renders as plain diffuse: at GGX alpha = roughness² ≥ 0.9 the 4 % coat's highlight is
#: spread over the hemisphere and no longer visible, and a diffuse BSDF is cheaper and noise-free (common practice).
ROUGH_AS_DIFFUSE = 0.95
# Albedo clamp: no real surface reflects all or none of the light; a texel at 0 or 1 would make the path tracer's
# energy (and the denoiser's albedo) unphysical. Same idea as the procedural palette's clamp (common practice).
ALBEDO_MIN, ALBEDO_MAX = 0.01, 0.95


@dataclass
class Look:
    """One part's material: ``rgb`` linear base colour (the factor), ``roughness`` and ``metallic`` in 0..1,
    ``texture`` (H, W, 3) uint8 sRGB-encoded base-colour pixels or None; ``normal_texture`` the part's normal map
    (glTF) or None."""

    rgb: tuple[float, float, float] = DEFAULT_RGB_LINEAR
    roughness: float = 0.6
    metallic: float = 0.0
    texture: np.ndarray | None = field(default=None, repr=False)
    name: str = ""
    #: (H, W, 3) uint8 tangent-space normal map as the file stores it (glTF convention), or None.
    normal_texture: np.ndarray | None = field(default=None, repr=False)


def _unit_colour(value: Any) -> np.ndarray | None:
    """RGB(A) colour as floats 0..1: trimesh keeps colours as uint8 (0..255), files may give floats."""
    if value is None:
        return None
    array = np.asarray(value, dtype=np.float64).reshape(-1)
    if array.size < 3 or not np.all(np.isfinite(array)):
        return None
    if np.asarray(value).dtype == np.uint8 or array.max() > 1.0:
        array = array / 255.0
    return np.clip(array[:3], 0.0, 1.0)


def _texture_pixels(image: Any) -> np.ndarray | None:
    """PIL image → (H, W, 3) uint8, alpha dropped, downsampled to :data:`MAX_TEXTURE_PX`."""
    if image is None:
        return None
    try:
        from PIL import Image

        rgb = image.convert("RGB")
        if max(rgb.size) > MAX_TEXTURE_PX:
            rgb.thumbnail((MAX_TEXTURE_PX, MAX_TEXTURE_PX), Image.Resampling.LANCZOS)
        pixels = np.asarray(rgb, dtype=np.uint8)
    except (OSError, ValueError, AttributeError):
        return None
    return pixels if pixels.ndim == 3 and pixels.shape[0] > 0 and pixels.shape[1] > 0 else None


def _factor(value: Any, default: float) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return default
    return float(np.clip(number, 0.0, 1.0)) if np.isfinite(number) else default


def visual_look(visual: Any, *, has_uv: bool) -> Look:
    """The :class:`Look` of one trimesh visual. A texture is kept only when the part has texture coordinates.

    ``SimpleMaterial`` (OBJ + MTL): ``Kd`` is the (linear) base colour, its image the texture, roughness from the specular
    exponent by trimesh's ``to_pbr`` ((2 / (Ns + 2))^¼), metallic 0 (MTL has no metals). ``PBRMaterial`` (glTF):
    factors as stored, a missing metallic or roughness factor is 1 (glTF 2.0 §3.9.2 defaults).
    ``ColorVisuals``: the main vertex or face colour (sRGB-encoded 8-bit).
    """
    from trimesh.visual.material import PBRMaterial, SimpleMaterial

    material = getattr(visual, "material", None)
    if isinstance(material, SimpleMaterial):
        base = _unit_colour(material.diffuse)
        pbr = material.to_pbr()
        texture = _texture_pixels(material.image) if has_uv else None
        # Kd is read as linear, like glTF's factor: it multiplies the map (MTL), and Blender's exporter writes the
        # linear base colour there.
        rgb = base if base is not None else np.asarray(DEFAULT_RGB_LINEAR)
        return Look(
            rgb=_rgb_tuple(rgb),
            roughness=_factor(pbr.roughnessFactor, 0.6),
            metallic=0.0,
            texture=texture,
            name=str(getattr(material, "name", "") or ""),
        )
    if isinstance(material, PBRMaterial):
        # glTF: baseColorFactor is linear already (§3.9.2); trimesh stores it as 8-bit.
        base = _unit_colour(material.baseColorFactor)
        rgb = base if base is not None else np.ones(3)
        texture = _texture_pixels(material.baseColorTexture) if has_uv else None
        if texture is None and material.baseColorTexture is None and base is None:
            rgb = np.asarray(DEFAULT_RGB_LINEAR)
        return Look(
            rgb=_rgb_tuple(rgb),
            roughness=_factor(material.roughnessFactor, 1.0),
            metallic=_factor(material.metallicFactor, 1.0),
            texture=texture,
            name=str(getattr(material, "name", "") or ""),
            normal_texture=_texture_pixels(getattr(material, "normalTexture", None)) if has_uv else None,
        )
    if getattr(visual, "kind", None) in ("vertex", "face"):
        colour = _unit_colour(getattr(visual, "main_color", None))
        if colour is not None:
            return Look(rgb=_rgb_tuple(srgb.decode(colour)))
    return Look()


def _rgb_tuple(rgb: Any) -> tuple[float, float, float]:
    array = np.asarray(rgb, dtype=np.float64).reshape(-1)[:3]
    return tuple(round(float(v), 6) for v in array)  # type: ignore[return-value]


def look_rgb_linear(look: Look) -> np.ndarray:
    """The part's mean linear base colour (texture mean × factor, or the factor), clamped to plausible albedos."""
    rgb = np.asarray(look.rgb, dtype=np.float64)
    if look.texture is not None:
        rgb = rgb * srgb.decode(look.texture.reshape(-1, 3).astype(np.float64) / 255.0).mean(axis=0)
    return np.clip(rgb, ALBEDO_MIN, ALBEDO_MAX)


def look_material(look: Look, *, texture_record: dict[str, Any] | None = None) -> dict[str, Any]:
    """Spec material (JSON) of a part: ``{"kind", "rgb", "roughness"}`` plus ``user_texture`` when textured and
    ``user_normal`` (the same record) when it has a normal map.

    Metallic ≥ 0.5 renders as ``metal`` (glTF: a metal's base colour is its specular F0); a dielectric as
    ``plastic`` (glTF dielectric: diffuse base under a specular coat of F0 = 0.04, IOR 1.5), or as ``diffuse`` when
    its roughness is at least :data:`ROUGH_AS_DIFFUSE`. There is no ``family``
    key, so the procedural texture step never paints over the model's own look.
    """
    if look.metallic >= 0.5:
        kind = "metal"
    elif look.roughness >= ROUGH_AS_DIFFUSE:
        kind = "diffuse"
    else:
        kind = "plastic"
    material: dict[str, Any] = {
        "kind": kind,
        "rgb": [round(float(v), 6) for v in look_rgb_linear(look)],
        "roughness": round(float(look.roughness), 6),
    }
    if look.texture is not None and texture_record is not None:
        material["user_texture"] = dict(texture_record)
    if look.normal_texture is not None and texture_record is not None:
        material["user_normal"] = dict(texture_record)
    return material


# --- the model cache and the scene hook --------------------------------------------------------------------------


def texture_record(*, mesh_path: str, unit: str, up_axis: str, front: str | None, part: int) -> dict[str, Any]:
    """The spec's ``user_texture`` record: enough to find the part's texture again from the JSON alone."""
    return {
        "mesh_path": str(mesh_path),
        "unit": str(unit),
        "up_axis": str(up_axis),
        "front": str(front or ""),
        "part": int(part),
    }


def mitsuba_uv(uv: np.ndarray) -> np.ndarray:
    """File texture coordinates (origin bottom left: OBJ, and glTF as trimesh gives it) → Mitsuba's (origin top
    left, v down): v ↦ 1 − v."""
    out = np.array(uv, dtype=np.float64, copy=True)
    out[:, 1] = 1.0 - out[:, 1]
    return out


def mitsuba_normal_map(pixels: np.ndarray) -> np.ndarray:
    """A glTF tangent-space normal map (H, W, 3) uint8 → the float32 image Mitsuba's ``normalmap`` reads
    (n = 2·value − 1 in the shading frame).

    The values are linear (no sRGB decoding: glTF 2.0 §3.9.3 stores the vector itself). Mitsuba's shading frame is
    s = ∂p/∂u and t = n × s, so its y runs *up* the image whatever way v runs, which is glTF's +Y: the channels
    are taken as they are (a rendered test checks the direction). glTF's tangent ``w`` for mirrored texture
    coordinates has no counterpart: a mirrored part's relief is inverted in y. Normals are renormalised after
    8-bit rounding and kept out of the surface.
    """
    vector = np.asarray(pixels, dtype=np.float64)[..., :3] / 255.0 * 2.0 - 1.0
    vector[..., 2] = np.maximum(vector[..., 2], 1e-3)  # a tangent-space normal never points into the surface
    vector /= np.linalg.norm(vector, axis=-1, keepdims=True)
    return ((vector + 1.0) / 2.0).astype(np.float32)


# --- files that must come with a model ---------------------------------------------------------------------------


_MTLLIB = re.compile(r"^\s*mtllib\s+(.+?)\s*$", re.MULTILINE)
_MAP = re.compile(r"^\s*map_Kd\s+(.+?)\s*$", re.MULTILINE | re.IGNORECASE)


def _last_token(value: str) -> str:
    # map_Kd may carry options before the file name (-s 1 1 1 name.png); the name is the last token.
    return value.split()[-1] if value.split() else value


def check_textures_present(model_path: Path) -> None:
    """Refuse an OBJ whose MTL files or base-colour images, or a glTF whose images or buffers, are missing.

    trimesh loads such a model without them (and without a word), which would silently lose its look. Only the
    file names are read here (``mtllib``, ``map_Kd``; glTF ``images[].uri`` and ``buffers[].uri``); the materials
    themselves come from trimesh. Raises ``ValueError`` naming the missing file.
    """
    folder = model_path.parent
    suffix = model_path.suffix.lower()

    def need(reference: str, what: str) -> None:
        relative = reference.replace("\\", "/")
        if relative.startswith("data:"):
            return
        from urllib.parse import unquote

        target = (folder / unquote(relative)).resolve()
        if not target.is_relative_to(folder.resolve()):
            raise ValueError(f"the {what} {reference!r} points outside the model's folder")
        if not target.is_file():
            raise ValueError(f"the {what} {reference!r} is missing (send the model as a .zip with its files)")

    if suffix == ".obj":
        with open(model_path, encoding="utf-8", errors="replace") as handle:
            text = handle.read(MAX_SCAN_BYTES)
        for match in _MTLLIB.finditer(text):
            mtl = match.group(1)
            need(mtl, "material library")
            mtl_text = (folder / mtl.replace("\\", "/")).read_text(encoding="utf-8", errors="replace")
            for image in _MAP.finditer(mtl_text):
                need(_last_token(image.group(1)), "texture")
    elif suffix == ".gltf":
        try:
            document = json.loads(model_path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise ValueError(f"the glTF JSON cannot be read ({exc})") from exc
        for key, what in (("buffers", "buffer"), ("images", "texture")):
            for entry in document.get(key, []) if isinstance(document, dict) else []:
                if isinstance(entry, dict) and isinstance(entry.get("uri"), str):
                    need(entry["uri"], what)


#: mtllib lines sit at the top of an OBJ; reading its first 4 MiB finds them without reading a big file twice.
MAX_SCAN_BYTES = 4 * 1024 * 1024
