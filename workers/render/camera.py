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
  :func:`workers.render.labels.rasterize_triangles`.

Exposure: the render's Y channel (0.2126 R + 0.7152 G + 0.0722 B, linear
sRGB) is luminance in cd/m². :func:`exposure_scale` maps it to the sensor
signal (1.0 = saturation), :func:`apply_sensor_noise` adds shot and read
noise, :func:`encode_srgb_8bit` clips and encodes; ``workers.render.frame.expose``
chains metering (with auto-ISO), exposure, noise and encoding.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

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
    encoded = np.where(linear <= 0.0031308, 12.92 * linear, 1.055 * np.power(linear, 1.0 / 2.4) - 0.055)
    return np.round(encoded * 255.0).astype(np.uint8)


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
            value = base * 10.0 ** exponent
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
    try:
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


def _hidden_centres(
    rotations: np.ndarray, positions: np.ndarray, centres: np.ndarray, corners: np.ndarray
) -> np.ndarray:
    """(C,) count of object centres that fall inside the projected box of a nearer object (a cheap occlusion proxy).

    The projected box of an object is the 2-D extent of its bounding-box corners (normalized image
    coordinates x/z, y/z), shrunk to 80 % about its middle because boxes overstate silhouettes.
    """
    cam_centres = np.einsum("cij,cpj->cpi", rotations, centres[None] - positions[:, None])  # (C, n, 3)
    cam_corners = np.einsum("cij,cpkj->cpki", rotations, corners[None] - positions[:, None, None])  # (C, n, 8, 3)
    z_corner = np.maximum(cam_corners[..., 2], 0.05)
    xy_corner = cam_corners[..., :2] / z_corner[..., None]
    lo, hi = xy_corner.min(axis=2), xy_corner.max(axis=2)  # (C, n, 2)
    mid, half = (lo + hi) / 2, (hi - lo) / 2 * 0.8
    z_centre = cam_centres[..., 2]
    xy_centre = cam_centres[..., :2] / np.maximum(z_centre, 0.05)[..., None]
    # inside[c, i, j]: centre of j inside the box of i, and i nearer than j
    inside = (np.abs(xy_centre[:, None, :, :] - mid[:, :, None, :]) < half[:, :, None, :]).all(axis=3)
    nearer = z_centre[:, :, None] < z_centre[:, None, :]
    in_front = (cam_corners[..., 2] > 0.05).all(axis=2)[:, :, None]
    hidden = (inside & nearer & in_front).any(axis=1)
    return hidden.sum(axis=1)


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


DEFAULT_MAX_ZOOM_OUT = 1.6


def sample_camera(budget: dict[str, Any], room: dict[str, Any], objects: list[dict[str, Any]], rng) -> dict[str, Any]:
    """Sample a camera pose and settings that frame the placed objects.

    Eye height, focal length, f-number, ISO and exposure compensation come from ``budget["camera"]``
    (f-number and ISO log-uniformly, i.e. uniform in stops). The camera stands at least 0.3 m from
    the walls and outside every object's footprint (plus 0.15 m). For each of up to 24 candidate
    positions the view direction bisects the smallest yaw and pitch ranges that hold every object
    centre; candidates are scored by the number of centres in frame plus half the share of
    bounding-box corners in frame, minus one per centre hidden behind a nearer object's projected
    box and one per footprint closer than 0.8 m to the camera. When no candidate holds every centre at the sampled focal
    length, the focal length is shortened to the longest one that fits, but by at most the budget's ``max_zoom_out``
    and not below the budget's minimum, so that focal-length coverage stays spread over the budget. The look-at target lies along the view direction at the mean object
    distance; the focus distance is the target distance times ``1 ± focus_jitter_fraction``.

    Parameters
    ----------
    budget : dict
        A normalized budget (``camera`` and ``render`` sections are read).
    room : dict
        Room dict with ``width_m``, ``depth_m``, ``height_m``.
    objects : list of dict
        Placed objects (``position_m``, ``footprint_m``, ``yaw_deg``, ``height_m``).
    rng : numpy.random.Generator
        The camera stream.

    Returns
    -------
    dict
        JSON-able camera spec (floats rounded to 6 decimals): ``position_m``, ``target_m``, ``up``,
        ``focal_length_mm``, ``sensor_width_mm``, ``f_number``, ``focus_distance_m``, ``iso``,
        ``exposure_compensation_ev``, ``shutter_limits_s``, ``full_well_electrons``,
        ``read_noise_electrons``.

    References
    ----------
    Field of view as in :func:`horizontal_fov_deg`; the framing heuristic is our own.
    """
    cam = budget["camera"]
    render = budget.get("render", {})
    width_px = int(render.get("width_px", 640))
    height_px = int(render.get("height_px", 480))
    room_w, room_d, room_h = float(room["width_m"]), float(room["depth_m"]), float(room["height_m"])

    focal_length_mm = _uniform(rng, cam["focal_length_mm"])
    sensor_width_mm = float(cam["sensor_width_mm"])
    f_number = _log_uniform(rng, cam["f_number"])
    iso = nominal_iso(_log_uniform(rng, cam["iso"]), *cam["iso"])
    compensation_ev = _uniform(rng, cam["exposure_compensation_ev"])
    eye_height_m = min(_uniform(rng, cam["eye_height_m"]), room_h - 0.1)

    bounds = [object_bounds_m(obj) for obj in objects]
    footprints = np.array([[lo[0], lo[1], hi[0], hi[1]] for lo, hi in bounds]).reshape(-1, 4)
    margin_x = min(WALL_MARGIN_M, room_w / 2)
    margin_y = min(WALL_MARGIN_M, room_d / 2)

    # Rejection-sample floor positions clear of every footprint (vectorized over tries).
    xy = np.column_stack([
        rng.uniform(margin_x, room_w - margin_x, _POSITION_TRIES),
        rng.uniform(margin_y, room_d - margin_y, _POSITION_TRIES),
    ])
    if len(footprints):
        inside = (
            (xy[:, None, 0] > footprints[None, :, 0] - OBJECT_MARGIN_M)
            & (xy[:, None, 0] < footprints[None, :, 2] + OBJECT_MARGIN_M)
            & (xy[:, None, 1] > footprints[None, :, 1] - OBJECT_MARGIN_M)
            & (xy[:, None, 1] < footprints[None, :, 3] + OBJECT_MARGIN_M)
        ).any(axis=1)
        free = xy[~inside]
        if len(free) == 0:  # crowded room: keep the first try rather than fail
            free = xy[:1]
    else:
        free = xy
    free = free[:_POSITION_CANDIDATES]
    positions = np.column_stack([free, np.full(len(free), eye_height_m)])

    if objects:
        centres = np.array([(lo + hi) / 2 for lo, hi in bounds])
        corners = np.stack([_box_corners(lo, hi) for lo, hi in bounds]).reshape(-1, 3)
        yaw, pitch, span_yaw, span_pitch = _aim(positions, centres)
        # Keep 15 % of the field of view free on each side for the objects' extent.
        half_w = sensor_width_mm / 2
        half_h = half_w * height_px / width_px
        with np.errstate(divide="ignore"):
            fit_w = half_w / np.tan(np.minimum(span_yaw / 0.7, np.pi * 0.99) / 2)
            fit_h = half_h / np.tan(np.minimum(span_pitch / 0.7, np.pi * 0.99) / 2)
        fit_focal_mm = np.where(span_yaw < np.pi * 0.69, np.minimum(fit_w, fit_h), 0.0)
        direction = np.column_stack([np.cos(pitch) * np.cos(yaw), np.cos(pitch) * np.sin(yaw), np.sin(pitch)])
        mean_distance = np.linalg.norm(centres[None] - positions[:, None], axis=2).mean(axis=1)
        targets = positions + direction * np.maximum(mean_distance, 0.5)[:, None]
        # When no candidate frames every object, zoom out — but by at most the budget's max_zoom_out: shortening all the
        # way to fit would pile the focal-length coverage up at the budget's short end. Objects still cut by
        # the frame edge are labelled as truncated.
        if not (fit_focal_mm >= focal_length_mm).any():
            zoom_out = float(cam.get("max_zoom_out", DEFAULT_MAX_ZOOM_OUT))
            shortest_mm = max(float(cam["focal_length_mm"][0]), focal_length_mm / zoom_out)
            focal_length_mm = max(shortest_mm, min(focal_length_mm, float(fit_focal_mm.max())))
        focal_px = focal_length_mm * width_px / sensor_width_mm
        rotations = _rotations_towards(positions, targets)
        centre_in = _in_frame(rotations, positions, centres, focal_px, width_px, height_px)
        corner_in = _in_frame(rotations, positions, corners, focal_px, width_px, height_px)
        scores = centre_in.sum(axis=1) + 0.5 * corner_in.reshape(len(positions), len(objects), 8).mean(axis=2).sum(1)
        scores -= _hidden_centres(rotations, positions, centres, corners.reshape(len(objects), 8, 3))
        # Standing right next to furniture fills the frame with it.
        gap_x = np.maximum(np.maximum(footprints[None, :, 0] - positions[:, None, 0], 0),
                           positions[:, None, 0] - footprints[None, :, 2])
        gap_y = np.maximum(np.maximum(footprints[None, :, 1] - positions[:, None, 1], 0),
                           positions[:, None, 1] - footprints[None, :, 3])
        scores -= (np.hypot(np.maximum(gap_x, 0), np.maximum(gap_y, 0)) < CLOSE_OBJECT_M).sum(axis=1)
        best = int(np.argmax(scores))
        position, target = positions[best], targets[best]
    else:
        position = positions[0]
        target = np.array([room_w / 2, room_d / 2, eye_height_m * 0.8])
        if np.hypot(*(target - position)[:2]) < 0.3:
            target[:2] = position[:2] + np.array([0.5, 0.0])

    jitter = float(cam["focus_jitter_fraction"])
    focus_distance_m = float(np.linalg.norm(target - position)) * (1.0 + _uniform(rng, (-jitter, jitter)))
    shutter = cam["shutter_s"]
    return {
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
