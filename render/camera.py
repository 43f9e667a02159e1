"""Camera model: intrinsics, extrinsics, depth of field, exposure, sensor noise, view sampling.

Conventions (see ``README.md``):

- OpenCV camera frame for labels: x right, y down, z forward;
  ``X_cam = R @ X_world + t``; ``K = [[fx, 0, cx], [0, fy, cy], [0, 0, 1]]``
  in pixels, pixel centres at integer + 0.5, so the principal point of a
  centred lens is ``(width_px / 2, height_px / 2)``.
- Mitsuba 3's ``perspective`` / ``thinlens`` sensor looks along +z of its
  local frame with local +x to the image LEFT and local +y UP; film pixel
  (0, 0) is the top-left. ``mitsuba.ScalarTransform4f().look_at(origin,
  target, up)`` builds exactly that frame, and :func:`look_at_extrinsics`
  builds the matching OpenCV frame from the same three vectors (its x axis is
  minus Mitsuba's, its y axis is minus Mitsuba's). :func:`mitsuba_to_world`
  gives the 4×4 matrix for an arbitrary ``(R, t)``. With ``fov`` =
  :func:`horizontal_fov_deg` and ``fov_axis = "x"`` Mitsuba's pinhole and
  :func:`project_points` agree to ~1e-4 px (verified by
  ``tests/render/test_camera.py`` with ``Sensor.sample_ray`` and an ``aov``
  position render).
- Label pass sampling: a 1-sample ``independent`` sampler jitters the sample
  inside the pixel (measured: up to half a pixel). Use
  ``{"type": "stratified", "sample_count": 1, "jitter": False}`` so each
  pixel is sampled exactly at its centre, the same rule as
  :func:`render.labels.rasterize_triangles`.

Exposure: the render's Y channel (0.2126 R + 0.7152 G + 0.0722 B, linear
sRGB) is luminance in cd/m². :func:`exposure_scale` maps it to the sensor
signal (1.0 = saturation), :func:`apply_sensor_noise` adds shot and read
noise, :func:`encode_srgb_8bit` clips and encodes; ``render.frame.expose``
chains metering (with auto-ISO), exposure, noise and encoding.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from render import srgb

from .rounding import round_floats

#: ISO 2720 / ISO 12232 lens transmittance × vignetting × cos⁴ factor in H = q L t / N².
LENS_FACTOR_Q = 0.65
#: ISO 12232 saturation-based speed: H_sat = 78 / S (lux·s).
SATURATION_CONSTANT = 78.0
#: ISO 2720 reflected-light meter calibration constant K (cd·s/m², ISO units); 12.5 is common practice.
METER_CONSTANT_K = 12.5
#: Circle of confusion for a 36 mm wide (full-frame) sensor; common practice (d/1500 of the diagonal ≈ 0.029 mm).
FULL_FRAME_COC_MM = 0.03
#: Mitsuba's default near clip distance (m); also used for near-plane clipping of amodal projections.
NEAR_CLIP_M = 0.01
#: Rec. 709 / sRGB luminance weights of linear R, G, B (IEC 61966-2-1).
LUMINANCE_WEIGHTS = (0.2126, 0.7152, 0.0722)

WALL_MARGIN_M = 0.3
OBJECT_MARGIN_M = 0.15
#: Views with an object footprint closer than this (m) to the camera are scored down.
CLOSE_OBJECT_M = 0.8
_POSITION_CANDIDATES = 24
_POSITION_TRIES = 200


# ---------------------------------------------------------------------------------------------------------------------
# Intrinsics and depth of field
# ---------------------------------------------------------------------------------------------------------------------


def sensor_size_mm(sensor_width_mm: float, width_px: int, height_px: int) -> tuple[float, float]:
    """Sensor (width, height) in mm for square pixels.

    Parameters
    ----------
    sensor_width_mm : float
        Width of the active sensor area in mm.
    width_px, height_px : int
        Image size in pixels.

    Returns
    -------
    (float, float)
        Sensor width and height in mm; height = width · height_px / width_px.

    References
    ----------
    Square pixels: pixel pitch = sensor_width_mm / width_px on both axes (definition).
    """
    return float(sensor_width_mm), float(sensor_width_mm) * height_px / width_px


def intrinsics(focal_length_mm: float, sensor_width_mm: float, width_px: int, height_px: int) -> np.ndarray:
    """Pinhole intrinsic matrix K (pixels) with the principal point at the image centre.

    Parameters
    ----------
    focal_length_mm : float
        Lens focal length in mm.
    sensor_width_mm : float
        Sensor width in mm (square pixels).
    width_px, height_px : int
        Image size in pixels.

    Returns
    -------
    numpy.ndarray, shape (3, 3)
        ``[[fx, 0, cx], [0, fy, cy], [0, 0, 1]]`` with ``fx = fy = f · width_px / sensor_width``
        and ``cx = width_px / 2``, ``cy = height_px / 2`` (pixel centres at integer + 0.5).

    References
    ----------
    Hartley & Zisserman, *Multiple View Geometry*, 2nd ed., §6.1 (finite projective camera).
    """
    focal_px = focal_length_mm * width_px / sensor_width_mm
    return np.array([[focal_px, 0.0, width_px / 2.0], [0.0, focal_px, height_px / 2.0], [0.0, 0.0, 1.0]])


def horizontal_fov_deg(focal_length_mm: float, sensor_width_mm: float) -> float:
    """Horizontal angle of view (degrees) of a rectilinear lens focused at infinity.

    ``2 atan(w / 2f)``; this is Mitsuba's ``fov`` with ``fov_axis = "x"``.

    References
    ----------
    Ray, S. F., *Applied Photographic Optics*, 3rd ed., ch. "Angle of view" (from memory).
    """
    return math.degrees(2.0 * math.atan(sensor_width_mm / (2.0 * focal_length_mm)))


def vertical_fov_deg(focal_length_mm: float, sensor_width_mm: float, width_px: int, height_px: int) -> float:
    """Vertical angle of view (degrees): ``2 atan(h / 2f)`` with h from :func:`sensor_size_mm`.

    References
    ----------
    Ray, S. F., *Applied Photographic Optics*, 3rd ed., ch. "Angle of view" (from memory).
    """
    _, sensor_height_mm = sensor_size_mm(sensor_width_mm, width_px, height_px)
    return math.degrees(2.0 * math.atan(sensor_height_mm / (2.0 * focal_length_mm)))


def hyperfocal_distance_m(focal_length_mm: float, f_number: float, coc_mm: float = FULL_FRAME_COC_MM) -> float:
    """Hyperfocal distance in metres: ``H = f² / (N c) + f``.

    Parameters
    ----------
    focal_length_mm : float
        Focal length f in mm.
    f_number : float
        Aperture f-number N.
    coc_mm : float
        Acceptable circle of confusion c in mm (0.03 mm for full frame, common practice).

    References
    ----------
    Ray, S. F., *Applied Photographic Optics*, 3rd ed., "Depth of field" (from memory);
    the same formula in every photography handbook.
    """
    h_mm = focal_length_mm**2 / (f_number * coc_mm) + focal_length_mm
    return h_mm / 1000.0


def depth_of_field_limits_m(
    focal_length_mm: float, f_number: float, focus_distance_m: float, coc_mm: float = FULL_FRAME_COC_MM
) -> tuple[float, float]:
    """Near and far limits (m) of acceptable sharpness for a lens focused at ``focus_distance_m``.

    ``D_near = s (H − f) / (H + s − 2f)``, ``D_far = s (H − f) / (H − s)`` for s < H, else infinity;
    s, H, f in the same unit (distances measured from the lens).

    Returns
    -------
    (float, float)
        ``(near_m, far_m)``; ``far_m`` is ``math.inf`` at or beyond the hyperfocal distance.

    References
    ----------
    Ray, S. F., *Applied Photographic Optics*, 3rd ed., "Depth of field" (from memory).
    """
    f_m = focal_length_mm / 1000.0
    h_m = hyperfocal_distance_m(focal_length_mm, f_number, coc_mm)
    s_m = float(focus_distance_m)
    near_m = s_m * (h_m - f_m) / (h_m + s_m - 2.0 * f_m)
    far_m = math.inf if s_m >= h_m else s_m * (h_m - f_m) / (h_m - s_m)
    return near_m, far_m


def aperture_radius_m(focal_length_mm: float, f_number: float) -> float:
    """Entrance-pupil radius in metres, ``f / (2 N)``: Mitsuba ``thinlens`` ``aperture_radius``.

    References
    ----------
    Definition of the f-number N = f / D (ISO 517); Mitsuba 3 docs, ``thinlens`` sensor.
    """
    return focal_length_mm / (2.0 * f_number) / 1000.0


# ---------------------------------------------------------------------------------------------------------------------
# Extrinsics and projection
# ---------------------------------------------------------------------------------------------------------------------


def look_at_extrinsics(
    position_m: Sequence[float], target_m: Sequence[float], up: Sequence[float] = (0.0, 0.0, 1.0)
) -> tuple[np.ndarray, np.ndarray]:
    """World-to-camera ``(R, t)`` (OpenCV frame: x right, y down, z forward) looking from position to target.

    The frame is the one Mitsuba's ``look_at(origin=position, target=target, up=up)`` builds, with
    x and y negated (Mitsuba: x left, y up).

    Parameters
    ----------
    position_m, target_m : sequence of 3 floats
        Camera centre and look-at point (m).
    up : sequence of 3 floats
        World up hint; must not be parallel to the viewing direction.

    Returns
    -------
    R : numpy.ndarray, shape (3, 3)
        Rotation, rows are the camera axes (x right, y down, z forward) in world coordinates.
    t : numpy.ndarray, shape (3,)
        Translation, ``t = -R @ position``.

    References
    ----------
    Hartley & Zisserman, *Multiple View Geometry*, 2nd ed., §6.1; Mitsuba 3 ``Transform4f.look_at``.
    """
    position = np.asarray(position_m, dtype=float)
    forward = np.asarray(target_m, dtype=float) - position
    norm = np.linalg.norm(forward)
    if norm == 0:
        raise ValueError("look_at_extrinsics: position and target coincide")
    forward /= norm
    right = np.cross(forward, np.asarray(up, dtype=float))
    right_norm = np.linalg.norm(right)
    if right_norm < 1e-9:
        raise ValueError("look_at_extrinsics: up is parallel to the viewing direction")
    right /= right_norm
    down = np.cross(forward, right)
    rotation = np.stack([right, down, forward])
    return rotation, -rotation @ position


def project_points(points_world: np.ndarray, R: np.ndarray, t: np.ndarray, K: np.ndarray) -> np.ndarray:
    """Pinhole projection of world points to pixel coordinates (no distortion).

    Parameters
    ----------
    points_world : array_like, shape (N, 3)
        Points in world coordinates (m).
    R, t : numpy.ndarray
        World-to-camera rotation (3, 3) and translation (3,), OpenCV convention.
    K : numpy.ndarray, shape (3, 3)
        Intrinsics (pixels).

    Returns
    -------
    numpy.ndarray, shape (N, 2)
        ``(u, v)`` in pixels, pixel centres at integer + 0.5. Points behind the camera project
        through the centre (z < 0 is not masked); check :func:`camera_depths_m` if needed.

    References
    ----------
    Hartley & Zisserman, *Multiple View Geometry*, 2nd ed., eq. 6.8 (x = K [R | t] X).
    """
    points = np.asarray(points_world, dtype=float).reshape(-1, 3)
    camera = points @ np.asarray(R).T + np.asarray(t)
    pixels = camera @ np.asarray(K).T
    return pixels[:, :2] / pixels[:, 2:3]


def camera_depths_m(points_world: np.ndarray, R: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Depth (camera z, m) of world points; positive in front of the camera."""
    points = np.asarray(points_world, dtype=float).reshape(-1, 3)
    return points @ np.asarray(R)[2] + float(np.asarray(t)[2])


def camera_to_world(R: np.ndarray, t: np.ndarray) -> np.ndarray:
    """4×4 camera-to-world matrix of the OpenCV camera frame (x right, y down, z forward)."""
    matrix = np.eye(4)
    matrix[:3, :3] = np.asarray(R).T
    matrix[:3, 3] = -np.asarray(R).T @ np.asarray(t)
    return matrix


def mitsuba_to_world(R: np.ndarray, t: np.ndarray) -> list[list[float]]:
    """Mitsuba sensor ``to_world`` (4×4, row-major nested lists) for OpenCV extrinsics ``(R, t)``.

    Mitsuba's camera frame is OpenCV's with x and y negated (x left, y up, z forward), so
    ``to_world = camera_to_world(R, t) @ diag(-1, -1, 1, 1)``. Pass it as
    ``mitsuba.ScalarTransform4f(mitsuba_to_world(R, t))``.

    References
    ----------
    Mitsuba 3 docs, ``perspective`` sensor ("looks along +z"); verified by rendering in
    ``tests/render/test_camera.py``.
    """
    matrix = camera_to_world(R, t) @ np.diag([-1.0, -1.0, 1.0, 1.0])
    return matrix.tolist()


def mitsuba_sensor_params(camera: dict[str, Any], width_px: int, height_px: int) -> dict[str, Any]:
    """Plain (Mitsuba-free) parameters for the ``thinlens`` / ``perspective`` sensor of a camera spec.

    Returns
    -------
    dict
        ``origin``, ``target``, ``up`` for ``ScalarTransform4f().look_at``; ``fov`` (deg) with
        ``fov_axis = "x"``; ``aperture_radius`` (m) and ``focus_distance`` (m) for ``thinlens``;
        ``near_clip`` (m). The label pass should use ``perspective`` with the same pose and ``fov``.
    """
    return {
        "origin": list(camera["position_m"]),
        "target": list(camera["target_m"]),
        "up": list(camera.get("up", [0.0, 0.0, 1.0])),
        "fov": horizontal_fov_deg(camera["focal_length_mm"], camera["sensor_width_mm"]),
        "fov_axis": "x",
        "aperture_radius": aperture_radius_m(camera["focal_length_mm"], camera["f_number"]),
        "focus_distance": float(camera["focus_distance_m"]),
        "near_clip": NEAR_CLIP_M,
        "width": int(width_px),
        "height": int(height_px),
    }


def camera_matrices(camera: dict[str, Any], width_px: int, height_px: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(R, t, K)`` of a camera spec from :func:`sample_camera`."""
    R, t = look_at_extrinsics(camera["position_m"], camera["target_m"], camera.get("up", (0.0, 0.0, 1.0)))
    K = intrinsics(camera["focal_length_mm"], camera["sensor_width_mm"], width_px, height_px)
    return R, t, K


# ---------------------------------------------------------------------------------------------------------------------
# Exposure
# ---------------------------------------------------------------------------------------------------------------------


def ev100(f_number: float, shutter_s: float, iso: float) -> float:
    """Exposure value referenced to ISO 100: ``EV100 = log2(N² / t · 100 / S)``.

    References
    ----------
    ISO 2720:1974 (exposure value); "sunny 16": f/16, 1/100 s, ISO 100 → EV100 ≈ 14.6 (common practice).
    """
    return math.log2(f_number**2 / shutter_s * 100.0 / iso)


def exposure_scale(f_number: float, shutter_s: float, iso: float) -> float:
    """Factor from scene luminance (cd/m²) to the normalized sensor signal (1.0 = saturation).

    Focal-plane exposure ``H = q L t / N²`` (lux·s) and the ISO 12232 saturation-based speed
    ``H_sat = 78 / S`` give ``signal = H / H_sat = q t S L / (78 N²)``, so the scale is
    ``q t S / (78 N²)`` with q = 0.65. Equivalently ``1 / (1.2 · 2^EV100)`` for any S, since
    ``t S / N² = 100 / 2^EV100`` and ``78 / (0.65 · 100) = 1.2``.

    References
    ----------
    ISO 12232:2019, saturation-based speed S_sat = 78 / H_sat; ISO 2720:1974, q = 0.65.
    """
    return LENS_FACTOR_Q * shutter_s * iso / (SATURATION_CONSTANT * f_number**2)


def metered_shutter_s(
    mean_luminance_cd_m2: float,
    f_number: float,
    iso: float,
    *,
    compensation_ev: float = 0.0,
    shutter_limits_s: tuple[float, float] = (1e-5, 30.0),
) -> float:
    """Shutter time (s) chosen by a reflected-light meter, then clamped to the limits.

    ISO 2720 meter equation ``N² / t = L S / K`` with K = 12.5, so ``t = K N² / (L S)``, times
    ``2^compensation_ev`` (positive compensation lengthens the exposure). A scene whose mean
    luminance equals ``L`` then lands at signal ``q K / 78 ≈ 0.104`` of saturation (≈ 0.36 after
    sRGB encoding: the usual mid-grey placement).

    Parameters
    ----------
    mean_luminance_cd_m2 : float
        Average scene luminance (cd/m²); non-positive values give the longest allowed time.
    f_number, iso : float
        Aperture and sensitivity.
    compensation_ev : float
        Exposure compensation in EV.
    shutter_limits_s : (float, float)
        Shortest and longest allowed times (s).

    References
    ----------
    ISO 2720:1974, reflected-light meter calibration constant K = 12.5 (common practice value).
    """
    lo, hi = float(shutter_limits_s[0]), float(shutter_limits_s[1])
    if not mean_luminance_cd_m2 > 0:
        return hi
    shutter = METER_CONSTANT_K * f_number**2 / (mean_luminance_cd_m2 * iso) * 2.0**compensation_ev
    return min(max(shutter, lo), hi)


def luminance_cd_m2(radiance_rgb: np.ndarray) -> np.ndarray:
    """Luminance Y (cd/m²) of linear sRGB render radiance, ``0.2126 R + 0.7152 G + 0.0722 B``.

    References
    ----------
    IEC 61966-2-1:1999 / ITU-R BT.709-6, luminance coefficients.
    """
    return np.asarray(radiance_rgb, dtype=np.float32)[..., :3] @ np.asarray(LUMINANCE_WEIGHTS, dtype=np.float32)


#: Added to every pixel's luminance before the logarithm of :func:`metered_luminance_cd_m2`, so that
#: black pixels (no light reaches them) do not send the log-average to zero. About a thousandth of a
#: dim room's luminance; our own choice.
METER_LOG_DELTA_CD_M2 = 1e-3


def metered_luminance_cd_m2(radiance_rgb: np.ndarray) -> float:
    """The luminance the exposure is set for: the log-average (geometric mean) of the image's luminance.

    ``exp(mean(log(δ + Y)))`` with δ = :data:`METER_LOG_DELTA_CD_M2`. Unlike the arithmetic mean of an
    averaging meter, it is not carried away by a small, very bright area: a ceiling panel or a sunlit
    patch covering 3 % of the frame at 1000× the room's luminance raises the arithmetic mean 31×
    (the room comes out 5 stops under), the log-average 1.2×. Light sources and sun patches clip,
    as they do in photographs exposed for the room. Measured on 24 default frames: the arithmetic
    mean was up to 4.7× (2.2 stops) the log-average, and their median L* 11–45 with it.

    References
    ----------
    Reinhard, Stark, Shirley, Ferwerda, "Photographic tone reproduction for digital images",
    *ACM Transactions on Graphics* 21(3), 2002, eq. 1 (log-average luminance as the scene's key).
    """
    luminance = luminance_cd_m2(radiance_rgb).astype(np.float64)
    if luminance.size == 0:
        return 0.0
    return float(np.exp(np.log(METER_LOG_DELTA_CD_M2 + np.maximum(luminance, 0.0)).mean()))


def apply_sensor_noise(
    signal_rgb: np.ndarray,
    iso: float,
    *,
    full_well_electrons: float,
    read_noise_electrons: float,
    base_iso: float = 100.0,
    rng: np.random.Generator,
    exact_poisson_below_electrons: float = 0.0,
) -> np.ndarray:
    """Add photon shot noise and read noise to a normalized sensor signal.

    ``electrons = signal · full_well · base_iso / iso`` (raising ISO lowers the electron count that
    reaches saturation, so relative noise rises), then ``electrons + sqrt(electrons + read²) · z``
    with z standard normal: the Gaussian approximation of Poisson(electrons) + Normal(0, read²).
    Its mean and variance are exact; what it leaves out is Poisson's skew at counts of a few
    electrons, where read noise (a few e⁻) already dominates. Pixels below
    ``exact_poisson_below_electrons`` draw exact Poisson shot noise instead (off by default: numpy's
    Poisson sampler is ~5× slower than the normal one). The result is not clipped.

    Parameters
    ----------
    signal_rgb : numpy.ndarray, shape (H, W, 3)
        Linear signal, 1.0 = saturation (values above 1 are allowed).
    iso : float
        Sensitivity used for the exposure.
    full_well_electrons : float
        Electrons at saturation at ``base_iso``.
    read_noise_electrons : float
        Read-noise standard deviation (electrons).
    base_iso : float
        The sensor's native ISO.
    rng : numpy.random.Generator
        Source of randomness (deterministic for a given seed).
    exact_poisson_below_electrons : float
        Electron count under which exact Poisson sampling is used.

    Returns
    -------
    numpy.ndarray, float32, same shape
        Noisy signal in the same units.

    References
    ----------
    EMVA Standard 1288, Release 4.0 (2021), linear camera model: temporal variance = mean electrons
    (shot) + read² (from memory); Janesick, *Photon Transfer* (SPIE, 2007).
    """
    gain = float(full_well_electrons) * float(base_iso) / float(iso)
    electrons = np.maximum(np.asarray(signal_rgb, dtype=np.float32), 0.0) * np.float32(gain)
    read_var = np.float32(read_noise_electrons) ** 2
    normal = rng.standard_normal(electrons.shape, dtype=np.float32)
    noisy = electrons + np.sqrt(electrons + read_var) * normal
    if exact_poisson_below_electrons > 0:
        dim = electrons < exact_poisson_below_electrons
        if dim.any():
            shot = rng.poisson(electrons[dim]).astype(np.float32)
            noisy[dim] = shot + np.float32(read_noise_electrons) * normal[dim]
    noisy /= np.float32(gain)
    return noisy


def encode_srgb_8bit(signal_rgb: np.ndarray) -> np.ndarray:
    """Clip a linear signal to [0, 1] and apply the sRGB transfer function, as uint8.

    References
    ----------
    IEC 61966-2-1:1999, sRGB encoding (12.92 x below 0.0031308, else 1.055 x^(1/2.4) − 0.055).
    """
    linear = np.clip(np.asarray(signal_rgb, dtype=np.float32), 0.0, 1.0)
    return np.round(srgb.encode(linear) * 255.0).astype(np.uint8)


NOMINAL_ISO_DECADE = (100, 125, 160, 200, 250, 320, 400, 500, 640, 800)


def nominal_iso_values(lo: float, hi: float) -> list[float]:
    """Marked ISO speeds in 1/3-stop steps (…, 100, 125, 160, 200, …) that lie inside [lo, hi].

    References
    ----------
    ISO 12232:2019, Table 1 (from memory): speeds are reported rounded to the standard 1/3-stop series.
    """
    values = []
    for exponent in range(-2, 5):
        for base in NOMINAL_ISO_DECADE:
            value = base * 10.0**exponent
            if lo - 1e-9 <= value <= hi + 1e-9:
                values.append(round(value, 6))
    return values


def nominal_iso(iso: float, lo: float, hi: float) -> float:
    """The marked 1/3-stop ISO nearest to ``iso`` (in log scale) inside [lo, hi]; ``iso`` itself if none is."""
    values = nominal_iso_values(lo, hi)
    if not values:
        return float(iso)
    return min(values, key=lambda v: abs(math.log2(v) - math.log2(iso)))


# ---------------------------------------------------------------------------------------------------------------------
# View sampling
# ---------------------------------------------------------------------------------------------------------------------


def object_bounds_m(obj: dict[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Axis-aligned world bounds ``(min_xyz, max_xyz)`` of a placed object.

    Uses ``layout.object_world_bounds`` when that module provides it, else ``obj["bounds_m"]`` when
    stored, else the yawed footprint rectangle centred on ``position_m`` from its base
    (z = position z) up to ``height_m``.
    """
    object_world_bounds: Callable[[dict[str, Any]], tuple[np.ndarray, np.ndarray]] | None
    try:
        # deferred: ImportError fallback when render.layout lacks object_world_bounds
        from .layout import object_world_bounds
    except ImportError:
        object_world_bounds = None
    if object_world_bounds is not None:
        lo, hi = object_world_bounds(obj)
        return np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    if "bounds_m" in obj:
        lo, hi = obj["bounds_m"]
        return np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    x, y, z = (float(v) for v in obj["position_m"])
    width, depth = (float(v) for v in obj["footprint_m"])
    yaw = math.radians(float(obj.get("yaw_deg", 0.0)))
    c, s = abs(math.cos(yaw)), abs(math.sin(yaw))
    half_x = 0.5 * (width * c + depth * s)
    half_y = 0.5 * (width * s + depth * c)
    height = float(obj["height_m"])
    return np.array([x - half_x, y - half_y, z]), np.array([x + half_x, y + half_y, z + height])


def _box_corners(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    index = np.array([[i, j, k] for i in (0, 1) for j in (0, 1) for k in (0, 1)])
    return np.where(index == 0, lo, hi)


def _uniform(rng: np.random.Generator, bounds: Sequence[float]) -> float:
    lo, hi = float(bounds[0]), float(bounds[1])
    return lo if hi <= lo else float(rng.uniform(lo, hi))


def _log_uniform(rng: np.random.Generator, bounds: Sequence[float]) -> float:
    lo, hi = float(bounds[0]), float(bounds[1])
    return lo if hi <= lo else float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _rotations_towards(positions: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """Stacked OpenCV world-to-camera rotations (C, 3, 3) looking from positions to targets, z up."""
    forward = targets - positions
    forward /= np.linalg.norm(forward, axis=1, keepdims=True)
    right = np.cross(forward, np.array([0.0, 0.0, 1.0]))
    right /= np.maximum(np.linalg.norm(right, axis=1, keepdims=True), 1e-12)
    down = np.cross(forward, right)
    return np.stack([right, down, forward], axis=1)


def _in_frame(
    rotations: np.ndarray, positions: np.ndarray, points: np.ndarray, focal_px: float, width_px: int, height_px: int
) -> np.ndarray:
    """(C, P) bool: which points project inside the frame (and 5 cm or more in front) of each candidate view."""
    cam = np.einsum("cij,cpj->cpi", rotations, points[None, :, :] - positions[:, None, :])
    z = cam[..., 2]
    safe_z = np.where(z > 0.05, z, 1.0)
    u = focal_px * cam[..., 0] / safe_z + width_px / 2
    v = focal_px * cam[..., 1] / safe_z + height_px / 2
    return (z > 0.05) & (u >= 0) & (u < width_px) & (v >= 0) & (v < height_px)


def _aim(positions: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """For each position, the yaw/pitch (rad) bisecting the smallest angular ranges holding all centres.

    Returns ``(yaw, pitch, span_yaw, span_pitch)``, each shape (C,). The yaw range is the shortest
    circular arc containing every azimuth (the complement of the largest gap).
    """
    relative = centres[None, :, :] - positions[:, None, :]
    azimuth = np.sort(np.arctan2(relative[..., 1], relative[..., 0]), axis=1)
    elevation = np.arctan2(relative[..., 2], np.hypot(relative[..., 0], relative[..., 1]))
    gaps = np.concatenate([np.diff(azimuth, axis=1), (azimuth[:, :1] + 2 * np.pi) - azimuth[:, -1:]], axis=1)
    largest = np.argmax(gaps, axis=1)
    n = azimuth.shape[1]
    arc_start = np.take_along_axis(azimuth, ((largest + 1) % n)[:, None], axis=1)[:, 0]
    span_yaw = 2 * np.pi - gaps[np.arange(len(positions)), largest]
    yaw = arc_start + span_yaw / 2
    pitch = (elevation.max(axis=1) + elevation.min(axis=1)) / 2
    return yaw, pitch, span_yaw, elevation.max(axis=1) - elevation.min(axis=1)


#: Budgets normalized before these fields existed read these values (the defaults of ``render.budget``).
DEFAULT_MAX_ZOOM_OUT = 1.0
DEFAULT_DISTANCE_M = (1.0, 3.0)
DEFAULT_MIN_VIEW_ANGLE_DEG = 20.0
DEFAULT_MIN_VIEW_DISTANCE_M = 0.5
#: The camera stays at least this far below the ceiling (m); a drawn height above that is redrawn.
CEILING_CLEARANCE_M = 0.1
#: View slots of one layout are kept apart within blocks of this many slots: slot k re-derives the poses of the
#: slots before it in its block (at most 31 extra pose draws, a few ms each), so the cost stays bounded for layouts
#: with thousands of views; slots in different blocks are not compared.
SEPARATION_BLOCK = 32
_AZIMUTHS_PER_SUBJECT = 16
_MAX_DRAWS = 100
#: Steepest view-axis pitch (deg) down and up: steeper views show floor or ceiling more than furniture. Loose enough
#: that a 1.75 m high camera still frames a low chair from 1.5 m (about 60° down): tighter limits reject so many
#: draws of one-object compositions that their distances stop following the budget (measured: 45°/30° gave KS
#: p = 0.01 for distance with one chair, 0.005 for height with one wall clock). Common practice, our own bound.
MAX_PITCH_DOWN_DEG = 60.0
MAX_PITCH_UP_DEG = 45.0
#: Aims tried from each position: the share of the way from "at the subject" to "bisecting all object centres".
_AIM_BLENDS = (0.0, 0.5, 1.0)


def _hidden_mask(rotations: np.ndarray, positions: np.ndarray, centres: np.ndarray, corners: np.ndarray) -> np.ndarray:
    """(C, n) bool: centre of object j falls inside the (80 %) projected box of a nearer object, per view."""
    cam_centres = np.einsum("cij,cpj->cpi", rotations, centres[None] - positions[:, None])  # (C, n, 3)
    cam_corners = np.einsum("cij,cpkj->cpki", rotations, corners[None] - positions[:, None, None])  # (C, n, 8, 3)
    z_corner = np.maximum(cam_corners[..., 2], 0.05)
    xy_corner = cam_corners[..., :2] / z_corner[..., None]
    lo, hi = xy_corner.min(axis=2), xy_corner.max(axis=2)  # (C, n, 2)
    mid, half = (lo + hi) / 2, (hi - lo) / 2 * 0.8
    z_centre = cam_centres[..., 2]
    xy_centre = cam_centres[..., :2] / np.maximum(z_centre, 0.05)[..., None]
    inside = (np.abs(xy_centre[:, None, :, :] - mid[:, :, None, :]) < half[:, :, None, :]).all(axis=3)
    nearer = z_centre[:, :, None] < z_centre[:, None, :]
    in_front = (cam_corners[..., 2] > 0.05).all(axis=2)[:, :, None]
    return (inside & nearer & in_front).any(axis=1)


def _box_in_frame(
    rotations: np.ndarray, positions: np.ndarray, corners: np.ndarray, focal_px: float, width_px: int, height_px: int
) -> tuple[np.ndarray, np.ndarray]:
    """Per view and object: the share of the projected bounding box inside the frame, and its shorter clipped side.

    Returns ``(share, side_px)``, each (C, n); an object with a corner less than 5 cm in front of the
    camera gets share 0 (its projection is unbounded). The projected box of the 8 corners is a cheap,
    generous stand-in for the silhouette: ``1 - share`` estimates the label's truncation fraction.
    """
    cam = np.einsum("cij,cpkj->cpki", rotations, corners[None] - positions[:, None, None])  # (C, n, 8, 3)
    z = cam[..., 2]
    front = (z > 0.05).all(axis=2)
    safe_z = np.where(z > 0.05, z, 1.0)
    u = focal_px * cam[..., 0] / safe_z + width_px / 2
    v = focal_px * cam[..., 1] / safe_z + height_px / 2
    u0, u1, v0, v1 = u.min(axis=2), u.max(axis=2), v.min(axis=2), v.max(axis=2)
    area = np.maximum(u1 - u0, 1e-9) * np.maximum(v1 - v0, 1e-9)
    cu = np.clip(u1, 0, width_px) - np.clip(u0, 0, width_px)
    cv = np.clip(v1, 0, height_px) - np.clip(v0, 0, height_px)
    share = np.where(front, cu * cv / area, 0.0)
    return share, np.where(front, np.minimum(cu, cv), 0.0)


def _layout_entropy(room: dict[str, Any], objects: list[dict[str, Any]]) -> int:
    """A 128-bit integer fixed by the layout (room and placed objects, as their rounded JSON).

    Frames that share a layout have byte-identical rooms and objects, so this keys the pose streams of
    the layout's view slots without the spec having to pass the layout seed.
    """
    import hashlib
    import json

    text = json.dumps(round_floats([room, objects]), sort_keys=True, separators=(",", ":"))
    return int.from_bytes(hashlib.sha256(text.encode("utf-8")).digest()[:16], "big")


def views_apart(
    pose_a: tuple[Sequence[float], Sequence[float]],
    pose_b: tuple[Sequence[float], Sequence[float]],
    *,
    min_angle_deg: float,
    min_distance_m: float,
) -> bool:
    """Whether two camera poses ``(position_m, target_m)`` count as distinct views.

    They do when their centres are at least ``min_distance_m`` apart **or** their viewing directions
    differ by at least ``min_angle_deg``: either one changes what is in the frame (a turn moves the
    content across the image) or how it looks (a step changes perspective and occlusions).
    Both minimums 0 accept everything.
    """
    pa, ta = np.asarray(pose_a[0], dtype=float), np.asarray(pose_a[1], dtype=float)
    pb, tb = np.asarray(pose_b[0], dtype=float), np.asarray(pose_b[1], dtype=float)
    if np.linalg.norm(pa - pb) >= min_distance_m:
        return True
    da, db = (ta - pa) / np.linalg.norm(ta - pa), (tb - pb) / np.linalg.norm(tb - pb)
    return math.degrees(math.acos(float(np.clip(da @ db, -1.0, 1.0)))) >= min_angle_deg


class _Framing:
    """Object geometry and the budget's camera settings, shared by every pose draw of one frame."""

    def __init__(self, budget: dict[str, Any], room: dict[str, Any], objects: list[dict[str, Any]]) -> None:
        cam = budget["camera"]
        render = budget.get("render", {})
        thresholds = budget.get("thresholds", {})
        self.width_px = int(render.get("width_px", 640))
        self.height_px = int(render.get("height_px", 480))
        self.room_w, self.room_d = float(room["width_m"]), float(room["depth_m"])
        self.room_h = float(room["height_m"])
        self.focal_range_mm = (float(cam["focal_length_mm"][0]), float(cam["focal_length_mm"][1]))
        self.height_range_m = (float(cam["eye_height_m"][0]), float(cam["eye_height_m"][1]))
        self.distance_range_m = tuple(float(v) for v in cam.get("distance_m", DEFAULT_DISTANCE_M))
        self.sensor_width_mm = float(cam["sensor_width_mm"])
        self.max_zoom_out = float(cam.get("max_zoom_out", DEFAULT_MAX_ZOOM_OUT))
        self.min_angle_deg = float(cam.get("min_view_angle_deg", DEFAULT_MIN_VIEW_ANGLE_DEG))
        self.min_distance_m = float(cam.get("min_view_distance_m", DEFAULT_MIN_VIEW_DISTANCE_M))
        self.min_visible_fraction = float(thresholds.get("min_visible_fraction", 0.0))
        self.min_box_px = float(thresholds.get("min_box_px", 0.0))
        self.margin_x = min(WALL_MARGIN_M, self.room_w / 2)
        self.margin_y = min(WALL_MARGIN_M, self.room_d / 2)
        bounds = [object_bounds_m(obj) for obj in objects]
        self.footprints = np.array([[lo[0], lo[1], hi[0], hi[1]] for lo, hi in bounds]).reshape(-1, 4)
        self.centres = np.array([(lo + hi) / 2 for lo, hi in bounds]).reshape(-1, 3)
        self.corners = np.stack([_box_corners(lo, hi) for lo, hi in bounds]).reshape(-1, 8, 3) if bounds else None

    def focal_px(self, focal_length_mm: float) -> float:
        return focal_length_mm * self.width_px / self.sensor_width_mm

    def clear_of_furniture(self, xy: np.ndarray) -> np.ndarray:
        """(C,) bool: inside the wall margins and outside every footprint grown by ``OBJECT_MARGIN_M``."""
        ok = (
            (xy[:, 0] >= self.margin_x)
            & (xy[:, 0] <= self.room_w - self.margin_x)
            & (xy[:, 1] >= self.margin_y)
            & (xy[:, 1] <= self.room_d - self.margin_y)
        )
        if len(self.footprints):
            f = self.footprints
            inside = (
                (xy[:, None, 0] > f[None, :, 0] - OBJECT_MARGIN_M)
                & (xy[:, None, 0] < f[None, :, 2] + OBJECT_MARGIN_M)
                & (xy[:, None, 1] > f[None, :, 1] - OBJECT_MARGIN_M)
                & (xy[:, None, 1] < f[None, :, 3] + OBJECT_MARGIN_M)
            ).any(axis=1)
            ok &= ~inside
        return ok

    def draw_settings(self, rng: np.random.Generator) -> tuple[float, float, float]:
        """(focal_length_mm, eye_height_m, distance_m), each uniform over its budget range (three draws)."""
        return (
            _uniform(rng, self.focal_range_mm),
            _uniform(rng, self.height_range_m),
            _uniform(rng, self.distance_range_m),
        )

    def candidate_views(
        self, focal_length_mm: float, height_m: float, distance_m: float, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray]:
        """Positions (C, 3) and unit view directions (C, 3) at exactly ``distance_m`` from a subject's centre.

        Each object is a possible subject: the camera stands on the circle of points at height
        ``height_m`` and 3-D distance ``distance_m`` from its centre (``_AZIMUTHS_PER_SUBJECT`` azimuths,
        random phase), clear of walls and furniture, and looks at the subject, at the bisector of every
        object centre, or halfway between (``_AIM_BLENDS``), pitched no steeper than ``MAX_PITCH_DOWN_DEG`` /
        ``MAX_PITCH_UP_DEG``. Empty arrays when no view fits.
        """
        n = len(self.centres)
        phase = rng.uniform(0.0, 2.0 * np.pi, n)
        radius_sq = distance_m**2 - (height_m - self.centres[:, 2]) ** 2
        steps = np.arange(_AZIMUTHS_PER_SUBJECT) * (2.0 * np.pi / _AZIMUTHS_PER_SUBJECT)
        azimuth = phase[:, None] + steps[None, :]  # (n, A)
        radius = np.sqrt(np.maximum(radius_sq, 0.0))[:, None]
        xy = np.stack(
            [self.centres[:, None, 0] + radius * np.cos(azimuth), self.centres[:, None, 1] + radius * np.sin(azimuth)],
            axis=-1,
        ).reshape(-1, 2)
        subject = np.repeat(np.arange(n), _AZIMUTHS_PER_SUBJECT)
        keep = self.clear_of_furniture(xy) & (radius_sq[subject] > 0.0)
        xy, subject = xy[keep], subject[keep]
        if not len(xy):
            return np.zeros((0, 3)), np.zeros((0, 3))
        positions = np.column_stack([xy, np.full(len(xy), height_m)])
        to_subject = self.centres[subject] - positions
        to_subject /= np.linalg.norm(to_subject, axis=1, keepdims=True)
        yaw, pitch, _, _ = _aim(positions, self.centres)
        bisector = np.column_stack([np.cos(pitch) * np.cos(yaw), np.cos(pitch) * np.sin(yaw), np.sin(pitch)])
        blended: list[np.ndarray] = []
        for blend in _AIM_BLENDS:
            direction = (1.0 - blend) * to_subject + blend * bisector
            norm = np.linalg.norm(direction, axis=1, keepdims=True)
            blended.append(np.where(norm > 1e-6, direction / np.maximum(norm, 1e-12), to_subject))
        directions = np.concatenate(blended)
        positions = np.tile(positions, (len(_AIM_BLENDS), 1))
        pitch_deg = np.degrees(np.arcsin(np.clip(directions[:, 2], -1.0, 1.0)))
        level = (pitch_deg >= -MAX_PITCH_DOWN_DEG) & (pitch_deg <= MAX_PITCH_UP_DEG)
        return positions[level], directions[level]

    def judge(
        self, positions: np.ndarray, directions: np.ndarray, focal_length_mm: float
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(score, useful, all_in)`` per view, each (C,).

        Score: object centres in frame + half the share of bounding-box corners in frame − one per
        centre hidden behind a nearer object's projected box − one per footprint closer than
        ``CLOSE_OBJECT_M``. Useful: at least one object unhidden, in front, with at least
        ``min_visible_fraction`` of its projected box inside the frame and a clipped box side of at
        least ``min_box_px`` — something that can pass the label thresholds. All in: every object centre
        in frame.
        """
        corners = self.corners
        if corners is None:  # no objects: candidate_views() offers no view to judge
            raise ValueError("judge() needs a room with at least one object")
        rotations = _rotations_towards(positions, positions + directions)
        focal_px = self.focal_px(focal_length_mm)
        w, h = self.width_px, self.height_px
        n = len(self.centres)
        centre_in = _in_frame(rotations, positions, self.centres, focal_px, w, h)
        corner_in = _in_frame(rotations, positions, corners.reshape(-1, 3), focal_px, w, h)
        hidden = _hidden_mask(rotations, positions, self.centres, corners)
        score = centre_in.sum(axis=1) + 0.5 * corner_in.reshape(len(positions), n, 8).mean(axis=2).sum(axis=1)
        score -= hidden.sum(axis=1)
        f = self.footprints
        gap_x = np.maximum(np.maximum(f[None, :, 0] - positions[:, None, 0], 0), positions[:, None, 0] - f[None, :, 2])
        gap_y = np.maximum(np.maximum(f[None, :, 1] - positions[:, None, 1], 0), positions[:, None, 1] - f[None, :, 3])
        # Standing right next to furniture fills the frame with it.
        score -= (np.hypot(np.maximum(gap_x, 0), np.maximum(gap_y, 0)) < CLOSE_OBJECT_M).sum(axis=1)
        share, side_px = _box_in_frame(rotations, positions, corners, focal_px, w, h)
        useful = ((share >= max(self.min_visible_fraction, 1e-6)) & (side_px >= self.min_box_px) & ~hidden).any(axis=1)
        return score, useful, np.all(centre_in, axis=1)

    def apart_from(
        self, positions: np.ndarray, directions: np.ndarray, others: Sequence[tuple[np.ndarray, np.ndarray]]
    ) -> tuple[np.ndarray, np.ndarray]:
        """``(apart, spread)`` per view, each (C,), against every earlier pose.

        ``apart``: :func:`views_apart` (vectorized). ``spread`` in [0, 1]: how far beyond the minimums the
        nearest earlier pose is, reaching 1 at three times them (60° or 1.5 m by default); the ranking adds
        it so that later views of a layout prefer new sides of the room over the minimum step from the
        same favourite spot. It only ranks views of an accepted draw, so it leaves the draws' distributions alone.
        """
        ok = np.ones(len(positions), dtype=bool)
        spread = np.ones(len(positions))
        cos_min = math.cos(math.radians(self.min_angle_deg))
        for position, direction in others:
            distance_m = np.linalg.norm(positions - position, axis=1)
            cosine = np.clip(directions @ direction, -1.0, 1.0)
            far = distance_m >= self.min_distance_m
            # cos(angle) <= cos(min) ⇔ angle >= min; a hair of slack so a rounded spec still passes the check.
            turned = cosine <= cos_min + 1e-9
            ok &= far | turned
            angle_share = np.degrees(np.arccos(cosine)) / max(3.0 * self.min_angle_deg, 1e-9)
            distance_share = distance_m / max(3.0 * self.min_distance_m, 1e-9)
            spread = np.minimum(spread, np.maximum(angle_share, distance_share))
        if self.min_angle_deg <= 0 and self.min_distance_m <= 0:
            spread[:] = 1.0  # no separation asked for
        return ok, np.clip(spread, 0.0, 1.0)

    def fitting_focal_mm(self, position: np.ndarray, direction: np.ndarray) -> float:
        """Longest focal length (mm) that keeps every object centre inside the middle 85 % of the frame from this pose.

        0 when a centre is behind the camera. The 15 % border leaves room for the objects' extent around
        their centres (the limiting centre would otherwise sit exactly on the frame edge).
        """
        rotation = _rotations_towards(position[None], (position + direction)[None])[0]
        cam = (self.centres - position) @ rotation.T
        if (cam[:, 2] <= 0.05).any():
            return 0.0
        with np.errstate(divide="ignore"):
            fit_u = (self.width_px / 2) / np.abs(cam[:, 0] / cam[:, 2])
            fit_v = (self.height_px / 2) / np.abs(cam[:, 1] / cam[:, 2])
        return 0.85 * float(np.min(np.minimum(fit_u, fit_v))) * self.sensor_width_mm / self.width_px

    def sample_pose(
        self, rng: np.random.Generator, others: Sequence[tuple[np.ndarray, np.ndarray]] = ()
    ) -> tuple[float, np.ndarray, np.ndarray, float]:
        """One accepted ``(focal_length_mm, position_m, direction, distance_m)``.

        Focal length, height and distance are drawn first, each from its budget distribution; only the
        subject, the azimuth on the circle and the aim are then chosen. A draw with no useful view
        (see :meth:`judge`) or no view apart from ``others`` is rejected and the whole triple drawn
        again, never clamped, so accepted frames keep the budget's distributions as long as
        rejections are rare (``tests/render/test_camera_framing.py`` checks this with a KS test).
        After ``_MAX_DRAWS`` rejections the best view of any draw is kept (useful ones first).
        """
        fallback: tuple[float, float, np.ndarray, np.ndarray, float, float] | None = None
        for _ in range(_MAX_DRAWS):
            focal_length_mm, height_m, distance_m = self.draw_settings(rng)
            if height_m > self.room_h - CEILING_CLEARANCE_M:
                continue
            positions, directions = self.candidate_views(focal_length_mm, height_m, distance_m, rng)
            if not len(positions):
                continue
            # With zoom-out allowed, views are judged at the widest permitted lens (the old trade-off, opt-in).
            shortest_mm = max(self.focal_range_mm[0], focal_length_mm / self.max_zoom_out)
            score, useful, all_in = self.judge(positions, directions, shortest_mm)
            if self.max_zoom_out > 1.0:
                # Zoom-out asks for every object in view; that choice biases the distances too (opt-in).
                useful &= all_in
            apart, spread = self.apart_from(positions, directions, others)
            rank = score + spread + 1000.0 * useful + 2000.0 * apart
            best = int(np.argmax(rank))
            if useful[best] and apart[best]:
                return self._finish(focal_length_mm, positions[best], directions[best], distance_m, shortest_mm)
            if fallback is None or rank[best] > fallback[0]:
                fallback = (
                    float(rank[best]),
                    focal_length_mm,
                    positions[best],
                    directions[best],
                    distance_m,
                    shortest_mm,
                )
        if fallback is None:
            raise ValueError("sample_camera: no camera position fits in the room clear of the furniture")
        return self._finish(*fallback[1:])

    def _finish(
        self, focal_length_mm: float, position: np.ndarray, direction: np.ndarray, distance_m: float, shortest_mm: float
    ) -> tuple[float, np.ndarray, np.ndarray, float]:
        if self.max_zoom_out > 1.0:
            fit_mm = self.fitting_focal_mm(position, direction)
            focal_length_mm = min(focal_length_mm, max(shortest_mm, fit_mm))
        return focal_length_mm, position, direction, distance_m


def _slot_poses(
    framing: _Framing, room: dict[str, Any], objects: list[dict[str, Any]], view_slot: int
) -> tuple[float, np.ndarray, np.ndarray, float]:
    """The pose of ``view_slot``, drawn after (and apart from) the earlier slots of its block.

    Slot j's pose comes from a stream keyed by the layout and j alone, so every frame of the layout
    derives the same poses for the earlier slots without knowing their seeds.
    """
    entropy = _layout_entropy(room, objects)
    others: list[tuple[np.ndarray, np.ndarray]] = []
    start = view_slot - view_slot % SEPARATION_BLOCK
    for slot in range(start, view_slot + 1):
        rng = np.random.default_rng(np.random.SeedSequence(entropy, spawn_key=(slot,)))
        pose = framing.sample_pose(rng, others)
        others.append((pose[1], pose[2]))
    return pose


def sample_camera(
    budget: dict[str, Any],
    room: dict[str, Any],
    objects: list[dict[str, Any]],
    rng: np.random.Generator,
    *,
    view_slot: int | None = None,
) -> dict[str, Any]:
    """Sample a camera pose and settings that frame the placed objects.

    Focal length, eye height and subject distance (``camera.distance_m``) are drawn first, each
    uniformly over its budget range; f-number and ISO log-uniformly (uniform in stops). Only then is
    the view chosen: the camera stands on the circle of points at that height and that distance from
    one object's centre (its subject), at least 0.3 m from the walls and outside every footprint
    (plus 0.15 m), and aims at the subject, at the bisector of all object centres, or halfway;
    views are scored as in :meth:`_Framing.judge`. Objects may be cut by the frame edge (the labels
    measure truncation, the thresholds decide); a draw from which nothing could pass the thresholds
    is redrawn whole, so accepted frames keep the budget's distributions. ``camera.max_zoom_out`` > 1
    still lets the lens shorten towards the budget's minimum to fit every centre (opt-in; it piles
    focal lengths up at the short end). The look-at target lies along the view axis at the subject
    distance; the focus distance is that distance times ``1 ± focus_jitter_fraction``.

    Parameters
    ----------
    budget : dict
        A normalized budget (``camera``, ``render`` and ``thresholds`` sections are read).
    room : dict
        Room dict with ``width_m``, ``depth_m``, ``height_m``.
    objects : list of dict
        Placed objects (``position_m``, ``footprint_m``, ``yaw_deg``, ``height_m``).
    rng : numpy.random.Generator
        The camera stream (f-number, ISO, compensation, focus; the pose too unless ``view_slot``).
    view_slot : int, optional
        Index of this view among the views of its layout (e.g. lighting index × views per lighting +
        view index). Given, the pose is drawn on a stream keyed by the layout and the slot, apart
        (``camera.min_view_angle_deg`` or ``camera.min_view_distance_m``) from the poses of the
        earlier slots of its block of ``SEPARATION_BLOCK``; the spec records it as ``view_slot``.

    Returns
    -------
    dict
        JSON-able camera spec (floats rounded to 6 decimals): ``position_m``, ``target_m``, ``up``,
        ``focal_length_mm``, ``sensor_width_mm``, ``f_number``, ``focus_distance_m``, ``iso``,
        ``exposure_compensation_ev``, ``shutter_limits_s``, ``full_well_electrons``,
        ``read_noise_electrons``; ``view_slot`` when given.

    Raises
    ------
    ValueError
        ``view_slot`` is not a non-negative integer, or no position in the room is clear of the furniture.

    References
    ----------
    Field of view as in :func:`horizontal_fov_deg`. Rejection sampling: a draw is accepted or redrawn
    whole, so the accepted values follow the proposal's distribution when acceptance does not depend
    on them (Devroye, *Non-Uniform Random Variate Generation*, 1986, ch. II.3, from memory). The
    framing heuristic is our own.
    """
    if view_slot is not None and (
        isinstance(view_slot, bool) or not isinstance(view_slot, (int, np.integer)) or view_slot < 0
    ):
        raise ValueError(f"sample_camera: view_slot must be a non-negative integer, got {view_slot!r}")
    cam = budget["camera"]
    sensor_width_mm = float(cam["sensor_width_mm"])
    f_number = _log_uniform(rng, cam["f_number"])
    iso = nominal_iso(_log_uniform(rng, cam["iso"]), *cam["iso"])
    compensation_ev = _uniform(rng, cam["exposure_compensation_ev"])
    framing = _Framing(budget, room, objects)

    if objects:
        if view_slot is None:
            focal_length_mm, position, direction, distance_m = framing.sample_pose(rng)
        else:
            focal_length_mm, position, direction, distance_m = _slot_poses(framing, room, objects, int(view_slot))
        target = position + direction * distance_m
    else:
        focal_length_mm, height_m, distance_m = framing.draw_settings(rng)
        height_m = min(height_m, framing.room_h - CEILING_CLEARANCE_M)
        xy = np.column_stack(
            [
                rng.uniform(framing.margin_x, framing.room_w - framing.margin_x, 1),
                rng.uniform(framing.margin_y, framing.room_d - framing.margin_y, 1),
            ]
        )
        position = np.array([xy[0, 0], xy[0, 1], height_m])
        towards = np.array([framing.room_w / 2, framing.room_d / 2, height_m * 0.8]) - position
        if np.hypot(*towards[:2]) < 0.3:
            towards[:2] = (0.5, 0.0)
        target = position + towards / np.linalg.norm(towards) * distance_m

    jitter = float(cam["focus_jitter_fraction"])
    focus_distance_m = float(np.linalg.norm(target - position)) * (1.0 + _uniform(rng, (-jitter, jitter)))
    shutter = cam["shutter_s"]
    spec = {
        "position_m": round_floats(position),
        "target_m": round_floats(target),
        "up": [0.0, 0.0, 1.0],
        "focal_length_mm": round_floats(focal_length_mm),
        "sensor_width_mm": round_floats(sensor_width_mm),
        "f_number": round_floats(f_number),
        "focus_distance_m": round_floats(max(focus_distance_m, 0.05)),
        "iso": round_floats(iso),
        "iso_limits": round_floats([float(cam["iso"][0]), float(cam["iso"][1])]),
        "exposure_compensation_ev": round_floats(compensation_ev),
        "shutter_limits_s": round_floats([float(shutter[0]), float(shutter[1])]),
        "full_well_electrons": round_floats(float(cam["full_well_electrons"])),
        "read_noise_electrons": round_floats(float(cam["read_noise_electrons"])),
        "sensor_noise": bool(cam.get("sensor_noise", True)),
    }
    if view_slot is not None:
        spec["view_slot"] = int(view_slot)
    return spec
