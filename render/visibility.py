"""Photometric visibility of each instance in the final 8-bit image: does it stand out from its surroundings?

An object can lie inside the camera frustum, unoccluded, and still be invisible in the image: too dark, lost in
the sensor noise, or of the same colour as what surrounds it. :func:`instance_contrasts` measures this per instance
from the final sRGB image and the label pass's instance-id image, so that a threshold (``min_contrast`` in the
budget) can reject such instances.

The measure (C below) is::

    contrast = ΔE*ab(mean L*a*b* of inside, mean L*a*b* of ring) / max(σ_noise, 1 L*)

where each part does the following:

``inside``
    the instance mask eroded by 1 px (3 × 3 square), so the outermost pixel layer, which anti-aliasing and depth
    of field mix with the background, does not count; if the erosion empties the mask (objects 1 or 2 px thin),
    the mask itself is used.
``ring``
    a thin band around the mask: ``dilate(mask, 1 + r) − dilate(mask, 1)`` (square structuring elements, so
    chessboard distances 2 … 1 + r from the mask), with ``r = max(2, round(0.01 · min(H, W)))`` px, clipped to
    the image. It skips the 1-px band just outside the mask (mixed pixels again) and may contain other instances:
    what surrounds the object in the image, whatever it is, is what the object has to stand out from.
``ΔE*ab``
    the CIE 1976 colour difference (Euclidean distance in CIELAB) between the mean L*a*b* of ``inside`` and the
    mean L*a*b* of ``ring``. Lightness and chroma both count: a red object on a grey wall of equal L* is visible.
    CIELAB is computed from the 8-bit values by IEC 61966-2-1 sRGB decoding, the IEC 61966-2-1 linear-RGB → XYZ
    matrix (D65, white = its row sums so that 255/255/255 is exactly L* = 100, a* = b* = 0) and the CIE 15:2004
    L*a*b* formulas, once for the whole image.
``σ_noise``
    the image noise standard deviation in L* units, estimated on the whole image's L* channel with Immerkær's
    method (:func:`noise_sigma_lightness`). Dividing by it says how many noise standard deviations of a single
    pixel the object's mean colour differs by; a difference buried in grain is not a visible one.
``1 L*``
    ``NOISE_FLOOR_LSTAR``: on a clean image σ_noise ≈ 0 and the ratio would explode, so the divisor is at least
    about one just-noticeable difference; a noise-free image then gives C = ΔE*ab in JND units.

Notes
-----
The two means average many pixels, so their own noise is much smaller than σ_noise; C is *not* a statistical
signal-to-noise ratio of the means but the colour step measured in units of per-pixel noise (what the eye or a
detector sees pixel by pixel). Immerkær's estimator treats image structure (edges, texture) as noise, so on a
strongly textured frame σ_noise is an overestimate and C an underestimate: a conservative direction for rejection.

References
----------
J. Immerkær, "Fast noise variance estimation", Computer Vision and Image Understanding 64(2), 300–302 (1996):
    σ = sqrt(π/2) / (6 (W − 2)(H − 2)) · Σ |I ∗ N|, N = [[1, −2, 1], [−2, 4, −2], [1, −2, 1]].
CIE 15:2004, Colorimetry, 3rd ed.: CIE 1976 L*a*b* (CIELAB) and the colour difference ΔE*ab.
IEC 61966-2-1:1999, Multimedia systems and equipment — Colour measurement and management — Default RGB colour
    space — sRGB: the transfer function and the RGB → XYZ matrix.

The combination of these published parts into the one ratio C (ring geometry, erosion, noise floor) is our own
measure for accepting or rejecting labels, not a published visibility metric.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import cv2
import numpy as np
from scipy import ndimage

from render import srgb

# ΔE*ab ≈ 1 to 2.3 is commonly quoted as a just-noticeable difference (Sharma, Digital Color Imaging Handbook, 2003,
# cited from memory).
NOISE_FLOOR_LSTAR = 1.0  # common practice

# Ring width: 1 % of the shorter image side, at least 2 px; our own choice, not from a standard.
RING_FRACTION = 0.01
RING_MIN_PX = 2

# IEC 61966-2-1 linear sRGB → CIE XYZ (D65), rows X, Y, Z.
_SRGB_TO_XYZ = np.array(
    [[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]],
    dtype=np.float64,
)
# Reference white = XYZ of linear RGB (1, 1, 1) = the matrix row sums (0.9505, 1.0000, 1.0890), as in IEC 61966-2-1.
_WHITE_XYZ = _SRGB_TO_XYZ.sum(axis=1)
# Matrix that maps linear RGB straight to (X/Xn, Y/Yn, Z/Zn).
_RGB_TO_XYZ_N = (_SRGB_TO_XYZ / _WHITE_XYZ[:, None]).astype(np.float32)


# Linear light of every 8-bit code value (exact decoding once, in float64, then a table look-up per pixel).
_LINEAR_OF_CODE = srgb.decode(np.arange(256) / 255.0).astype(np.float32)

# CIE 15:2004: f(t) = t^(1/3) for t > (6/29)^3, else t / (3 (6/29)^2) + 4/29.
_LAB_EPSILON = (6.0 / 29.0) ** 3
_LAB_LINEAR_SLOPE = 1.0 / (3.0 * (6.0 / 29.0) ** 2)
_LAB_LINEAR_OFFSET = 4.0 / 29.0

# Immerkær (1996) kernel: the difference of two Laplacian approximations, blind to planes and smooth ramps.
_IMMERKAER_KERNEL = np.array([[1.0, -2.0, 1.0], [-2.0, 4.0, -2.0], [1.0, -2.0, 1.0]], dtype=np.float32)

_SQUARE_3X3 = np.ones((3, 3), dtype=np.uint8)


def _check_rgb(rgb: np.ndarray) -> np.ndarray:
    rgb = np.asarray(rgb)
    if rgb.ndim != 3 or rgb.shape[2] != 3 or rgb.dtype != np.uint8:
        raise ValueError(f"expected an (H, W, 3) uint8 sRGB image, got shape {rgb.shape} dtype {rgb.dtype}")
    return rgb


def _srgb8_to_lab(rgb: np.ndarray) -> np.ndarray:
    """CIELAB (D65) of an (H, W, 3) uint8 sRGB image: (H, W, 3) float32 L* (0..100), a*, b*.

    IEC 61966-2-1 decoding (exact, by table) and matrix, then the CIE 15:2004 L*a*b* formulas. OpenCV does the
    per-pixel table look-up and 3 × 3 matrix (numpy's ``@`` on an (N, 3) array is ~50× slower here).
    """
    rgb = np.ascontiguousarray(_check_rgb(rgb))
    linear = cv2.LUT(rgb, _LINEAR_OF_CODE)  # (H, W, 3) float32, 0..1
    xyz_n = cv2.transform(linear, _RGB_TO_XYZ_N)  # X/Xn, Y/Yn, Z/Zn
    f = np.cbrt(xyz_n)
    dark = xyz_n <= _LAB_EPSILON
    if dark.any():
        f[dark] = xyz_n[dark] * np.float32(_LAB_LINEAR_SLOPE) + np.float32(_LAB_LINEAR_OFFSET)
    lab = np.empty_like(f)
    lab[..., 0] = 116.0 * f[..., 1] - 16.0
    lab[..., 1] = 500.0 * (f[..., 0] - f[..., 1])
    lab[..., 2] = 200.0 * (f[..., 1] - f[..., 2])
    return lab


def _noise_sigma_of_channel(channel: np.ndarray) -> float:
    """Immerkær (1996) noise standard deviation of a 2-D float image, in the image's units."""
    height, width = channel.shape
    if height < 3 or width < 3:
        raise ValueError(f"noise estimation needs an image of at least 3 × 3 pixels, got {width} × {height}")
    response = cv2.filter2D(np.ascontiguousarray(channel, dtype=np.float32), cv2.CV_32F, _IMMERKAER_KERNEL)
    total = float(np.abs(response[1:-1, 1:-1]).sum(dtype=np.float64))  # interior: no border extrapolation
    return math.sqrt(math.pi / 2.0) / (6.0 * (width - 2) * (height - 2)) * total


def noise_sigma_lightness(rgb: np.ndarray) -> float:
    """Robust estimate of the noise standard deviation of an sRGB image, in CIE L* units (0..100).

    Immerkær's estimator, σ = sqrt(π/2) / (6 (W − 2)(H − 2)) · Σ |I ∗ N| with
    N = [[1, −2, 1], [−2, 4, −2], [1, −2, 1]], summed over the (H − 2) × (W − 2) interior of the L* channel.
    The kernel cancels constant, linear and (separably) quadratic intensity, so smooth shading does not count as
    noise; edges and fine texture do (an overestimate on busy images).

    Parameters
    ----------
    rgb : numpy.ndarray, uint8, shape (H, W, 3)
        Final 8-bit sRGB image, H, W ≥ 3.

    Returns
    -------
    float
        Noise standard deviation in L* units.
    """
    return _noise_sigma_of_channel(_srgb8_to_lab(rgb)[..., 0])


def ring_width_px(height: int, width: int) -> int:
    """Width r of the ring around each mask in pixels: max(2, round(0.01 · min(H, W)))."""
    return max(RING_MIN_PX, int(round(RING_FRACTION * min(height, width))))


def _bounding_slices(instance_ids: np.ndarray, wanted: list[int]) -> dict[int, tuple[slice, slice] | None]:
    """Bounding box (row slice, column slice) of each wanted id, None when absent; one pass over the image."""
    boxes: dict[int, tuple[slice, slice] | None] = {}
    positive = [i for i in wanted if i > 0]
    if positive and np.issubdtype(instance_ids.dtype, np.integer):
        found = ndimage.find_objects(instance_ids, max_label=max(positive))
        for i in positive:
            boxes[i] = found[i - 1]
    for i in wanted:
        if i in boxes:
            continue
        rows = np.flatnonzero((instance_ids == i).any(axis=1))
        if rows.size == 0:
            boxes[i] = None
            continue
        cols = np.flatnonzero((instance_ids[rows[0] : rows[-1] + 1] == i).any(axis=0))
        boxes[i] = (slice(int(rows[0]), int(rows[-1]) + 1), slice(int(cols[0]), int(cols[-1]) + 1))
    return boxes


def _result(contrast: float, delta_e: float, lightness: float) -> dict[str, float]:
    return {
        "contrast": round(float(contrast), 4),
        "delta_e": round(float(delta_e), 4),
        "lightness": round(float(lightness), 4),
    }


def instance_contrasts(
    rgb: np.ndarray,
    instance_ids: np.ndarray,
    ids: Iterable[int],
    *,
    noise_sigma: float | None = None,
) -> dict[int, dict[str, float]]:
    """Photometric visibility of each instance: colour step to its surrounding ring over the image noise.

    Parameters
    ----------
    rgb : numpy.ndarray, uint8, shape (H, W, 3)
        Final 8-bit sRGB image (after exposure, sensor noise, OETF and quantization).
    instance_ids : numpy.ndarray, integer, shape (H, W)
        Label-pass instance ids (0 = background).
    ids : iterable of int
        Instance ids to measure; ids absent from the image are reported with zeros.
    noise_sigma : float, optional
        Image noise standard deviation in L* units; default :func:`noise_sigma_lightness` of ``rgb``.

    Returns
    -------
    dict of int to dict of str to float
        Per id, rounded to 4 decimals:

        ``contrast`` — ``delta_e / max(noise_sigma, NOISE_FLOOR_LSTAR)``, dimensionless;
        ``delta_e`` — CIE 1976 ΔE*ab between the mean L*a*b* of the eroded mask and of the ring around it;
        ``lightness`` — mean L* (0..100) of the eroded mask.

        An absent id gives all zeros; an empty ring (the mask fills the image) gives contrast and delta_e 0 and
        the lightness of the inside.
    """
    rgb = _check_rgb(rgb)
    instance_ids = np.asarray(instance_ids)
    height, width = rgb.shape[:2]
    if instance_ids.shape != (height, width):
        raise ValueError(f"instance_ids has shape {instance_ids.shape}, the image is {height} × {width}")
    wanted = [int(i) for i in ids]
    if not wanted:
        return {}

    lab = _srgb8_to_lab(rgb)
    if noise_sigma is None:
        noise_sigma = _noise_sigma_of_channel(lab[..., 0])
    divisor = max(float(noise_sigma), NOISE_FLOOR_LSTAR)
    ring_r = ring_width_px(height, width)
    pad = 1 + ring_r
    outer_kernel = np.ones((2 * pad + 1, 2 * pad + 1), dtype=np.uint8)

    results: dict[int, dict[str, float]] = {}
    for instance, box in _bounding_slices(instance_ids, wanted).items():
        if box is None:
            results[instance] = _result(0.0, 0.0, 0.0)
            continue
        # Crop to the box padded by the dilation radius: pixels outside it are farther than 1 + r (chessboard)
        # from the mask, so the morphology inside the crop is exact. Erosion treats outside-the-image as mask
        # (OpenCV's default border), which is right: the frame edge is not an object edge.
        r0, r1 = max(box[0].start - pad, 0), min(box[0].stop + pad, height)
        c0, c1 = max(box[1].start - pad, 0), min(box[1].stop + pad, width)
        mask = (instance_ids[r0:r1, c0:c1] == instance).view(np.uint8)
        lab_crop = lab[r0:r1, c0:c1]

        inside = cv2.erode(mask, _SQUARE_3X3)
        if not inside.any():
            inside = mask
        inside_lab = lab_crop[inside.view(bool)].mean(axis=0, dtype=np.float64)
        lightness = inside_lab[0]

        near = cv2.dilate(mask, _SQUARE_3X3)
        ring = cv2.dilate(mask, outer_kernel) > near
        if not ring.any():
            results[instance] = _result(0.0, 0.0, lightness)
            continue
        ring_lab = lab_crop[ring].mean(axis=0, dtype=np.float64)
        delta_e = float(np.linalg.norm(inside_lab - ring_lab))
        results[instance] = _result(delta_e / divisor, delta_e, lightness)
    return results
