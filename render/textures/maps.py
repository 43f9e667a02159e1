"""Texture map containers, colour encoding and the height-field → normal-map conversion.

Conventions (every family follows them):

- **Base colour** is sRGB-encoded 8-bit, ``(n, n, 3)`` uint8: what a PNG holds
  and what Mitsuba's ``bitmap`` texture expects with ``raw=False`` (it
  linearises on load). Generators mix colours in linear RGB and encode once.
- **Roughness** is perceptual roughness, float32 in [0, 1], ``(n, n)``; the
  renderer's GGX alpha is roughness² (``scene.roughness_to_alpha``). On disk
  it is an 8-bit grey PNG to be loaded with ``raw=True``.
- **Normal** is a tangent-space unit vector per pixel, float32 ``(n, n, 3)``:
  x towards increasing column (+u), y towards increasing row (+v; Mitsuba 3's
  ``bitmap`` puts v = 0 on the first row), z out of the surface. On disk it is
  encoded as RGB = round(255 · (n + 1) / 2), loaded with ``raw=True`` under a
  ``normalmap`` BSDF. Tools using the OpenGL convention (green = up on screen)
  read it with the green channel flipped.
- Row 0 is the top of the image; one pixel covers ``tile_size_m / n`` metres.

References
----------
- IEC 61966-2-1:1999, sRGB transfer function.
- B. Burley, "Physically-based shading at Disney", SIGGRAPH 2012 course notes
  (perceptual roughness, alpha = roughness²).
- J. F. Blinn, "Simulation of wrinkled surfaces", SIGGRAPH 1978 (normals from
  a height field's gradient).
"""

from __future__ import annotations

import colorsys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from render import srgb as srgb_transfer


@dataclass(frozen=True)
class Surface:
    """What a family generator returns, before encoding.

    ``albedo_linear`` (n, n, 3) float32 linear RGB; ``roughness`` (n, n) float32;
    ``height_m`` (n, n) float32 surface relief in metres (only its gradient
    matters); ``info`` the geometry actually used (periods snapped so the
    pattern tiles), JSON types only.
    """

    albedo_linear: np.ndarray
    roughness: np.ndarray
    height_m: np.ndarray
    info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class TextureMaps:
    """One texture set in memory; see the module docstring for the encodings and axes."""

    base_color_srgb8: np.ndarray
    roughness: np.ndarray
    normal: np.ndarray
    tile_size_m: float
    info: dict[str, Any] = field(default_factory=dict)

    @property
    def resolution_px(self) -> int:
        return int(self.base_color_srgb8.shape[0])


# Linear albedo above ~0.95 does not occur in paints or fabrics; below 0.005 nothing is that black.
ALBEDO_MIN, ALBEDO_MAX = 0.005, 0.95


def srgb_to_linear(srgb: np.ndarray | Sequence[float]) -> np.ndarray:
    """sRGB-encoded values in [0, 1] to linear float32; IEC 61966-2-1 (``render.srgb.decode``)."""
    return srgb_transfer.decode(np.asarray(srgb, dtype=np.float32))


def linear_to_srgb8(linear: np.ndarray) -> np.ndarray:
    """Linear RGB in [0, 1] to sRGB-encoded uint8 (IEC 61966-2-1), values clipped first."""
    encoded = srgb_transfer.encode(np.clip(linear, 0.0, 1.0).astype(np.float32))
    return np.round(encoded * 255.0).astype(np.uint8)


def srgb8_to_linear(srgb8: np.ndarray) -> np.ndarray:
    """Decode an 8-bit sRGB image to linear float32 in [0, 1]."""
    return srgb_to_linear(np.asarray(srgb8, dtype=np.float32) / 255.0)


def jitter_colour(
    srgb: Sequence[float], *, hue_jitter_deg: float, saturation_jitter: float, value_jitter: float
) -> np.ndarray:
    """Shift an sRGB colour in HSV: hue by degrees, saturation and value by relative amounts; returns linear RGB.

    ``saturation_jitter = 0.1`` multiplies saturation by 1.1; values are
    clipped to [0, 1] in HSV before converting back.
    """
    h, s, v = colorsys.rgb_to_hsv(*(float(c) for c in srgb))
    h = (h + hue_jitter_deg / 360.0) % 1.0
    s = min(max(s * (1.0 + saturation_jitter), 0.0), 1.0)
    v = min(max(v * (1.0 + value_jitter), 0.0), 1.0)
    return srgb_to_linear(colorsys.hsv_to_rgb(h, s, v))


def jittered_palette(colours_srgb: Sequence[Sequence[float]], params: Mapping[str, Any]) -> list[np.ndarray]:
    """A family palette's sRGB colours shifted by the texture's ``hue_jitter_deg``, ``saturation_jitter``
    and ``value_jitter`` parameters (the same shift for every colour), as linear RGB."""
    return [
        jitter_colour(
            c,
            hue_jitter_deg=float(params["hue_jitter_deg"]),
            saturation_jitter=float(params["saturation_jitter"]),
            value_jitter=float(params["value_jitter"]),
        )
        for c in colours_srgb
    ]


def mix(a: np.ndarray, b: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Linear interpolation of colours: ``a`` where t = 0, ``b`` where t = 1; t is (n, n), colours (3,) or (n, n, 3)."""
    t3 = np.asarray(t, dtype=np.float32)[..., None]
    return (np.asarray(a, dtype=np.float32) * (1.0 - t3) + np.asarray(b, dtype=np.float32) * t3).astype(np.float32)


def height_to_normal(height_m: np.ndarray, pixel_m: float) -> np.ndarray:
    """Tangent-space unit normals of a periodic height field: n ∝ (−∂h/∂u, −∂h/∂v, 1).

    Central differences with wrap-around, so the normal map tiles like the
    height field. ``pixel_m`` is the pixel pitch in metres; slopes are physical
    (a 1 mm groove over 1 mm tilts by 45°).

    References
    ----------
    Blinn, "Simulation of wrinkled surfaces", SIGGRAPH 1978.
    """
    h = height_m.astype(np.float32)
    dh_du = (np.roll(h, -1, axis=1) - np.roll(h, 1, axis=1)) / (2.0 * pixel_m)
    dh_dv = (np.roll(h, -1, axis=0) - np.roll(h, 1, axis=0)) / (2.0 * pixel_m)
    normal = np.stack([-dh_du, -dh_dv, np.ones_like(h)], axis=-1)
    return (normal / np.linalg.norm(normal, axis=-1, keepdims=True)).astype(np.float32)


def encode_normal8(normal: np.ndarray) -> np.ndarray:
    """Unit normals to 8-bit RGB, ``round(255 · (n + 1) / 2)``."""
    return np.round((np.clip(normal, -1.0, 1.0) + 1.0) * 127.5).astype(np.uint8)


def decode_normal8(rgb8: np.ndarray) -> np.ndarray:
    """Inverse of :func:`encode_normal8` (not renormalised): ``rgb / 127.5 − 1``."""
    return np.asarray(rgb8, dtype=np.float32) / 127.5 - 1.0


def encode_roughness8(roughness: np.ndarray) -> np.ndarray:
    """Roughness in [0, 1] to 8-bit grey, ``round(255 · r)``."""
    return np.round(np.clip(roughness, 0.0, 1.0) * 255.0).astype(np.uint8)


def finish(surface: Surface, tile_size_m: float) -> TextureMaps:
    """Encode a generator's :class:`Surface`: sRGB 8-bit base colour, clipped roughness, normals from height."""
    size_px = surface.albedo_linear.shape[0]
    albedo = np.clip(surface.albedo_linear, ALBEDO_MIN, ALBEDO_MAX)
    return TextureMaps(
        base_color_srgb8=linear_to_srgb8(albedo),
        roughness=np.clip(surface.roughness, 0.0, 1.0).astype(np.float32),
        normal=height_to_normal(surface.height_m, tile_size_m / size_px),
        tile_size_m=float(tile_size_m),
        info=dict(surface.info),
    )
