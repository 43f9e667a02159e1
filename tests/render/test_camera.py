"""Camera model checks against OpenCV, Mitsuba 3, ISO exposure definitions and handbook values."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from render import camera
from render.budget import normalize_budget


def _random_pose(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    position = rng.uniform(-3, 3, 3)
    target = position + rng.normal(size=3) * 2
    R, t = camera.look_at_extrinsics(position, target)
    return position, target, R, t


def test_project_points_matches_opencv():
    # Reference: OpenCV cv2.projectPoints with rvec = Rodrigues(R), tvec = t, zero distortion.
    rng = np.random.default_rng(1)
    K = camera.intrinsics(35.0, 36.0, 640, 480)
    for _ in range(20):
        position, target, R, t = _random_pose(rng)
        points = target + rng.normal(size=(50, 3))
        points = points[camera.camera_depths_m(points, R, t) > 0.1]
        ours = camera.project_points(points, R, t, K)
        rvec, _ = cv2.Rodrigues(R)
        theirs, _ = cv2.projectPoints(points, rvec, t.astype(float), K, np.zeros(5))
        np.testing.assert_allclose(ours, theirs.reshape(-1, 2), atol=1e-6)


def test_look_at_frame_is_a_rotation_and_centres_the_target():
    rng = np.random.default_rng(2)
    K = camera.intrinsics(50.0, 36.0, 640, 480)
    for _ in range(10):
        position, target, R, t = _random_pose(rng)
        np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-12)
        assert np.linalg.det(R) == pytest.approx(1.0)
        np.testing.assert_allclose(camera.project_points(target[None], R, t, K)[0], [320.0, 240.0], atol=1e-9)
        # world up (+z) points to image up (−v) for a camera that is not upside down
        above = camera.project_points((target + [0, 0, 0.01])[None], R, t, K)[0]
        assert above[1] < 240.0


def test_intrinsics_and_fov_handbook_values():
    # Photography handbook worked example: 50 mm lens on a 36 × 24 mm sensor has a 39.6° horizontal
    # and 27.0° vertical angle of view (from memory).
    assert camera.horizontal_fov_deg(50.0, 36.0) == pytest.approx(39.6, abs=0.05)
    assert camera.vertical_fov_deg(50.0, 36.0, 600, 400) == pytest.approx(27.0, abs=0.05)
    assert camera.sensor_size_mm(36.0, 600, 400) == pytest.approx((36.0, 24.0))
    K = camera.intrinsics(50.0, 36.0, 640, 480)
    assert K[0, 0] == pytest.approx(50 * 640 / 36) and K[1, 1] == K[0, 0]
    assert (K[0, 2], K[1, 2]) == (320.0, 240.0)
    # consistency: the frame edge is at half the FOV
    assert math.degrees(math.atan(320.0 / K[0, 0])) * 2 == pytest.approx(camera.horizontal_fov_deg(50.0, 36.0))


def test_hyperfocal_and_depth_of_field():
    # Handbook worked example: 50 mm at f/8, c = 0.03 mm → H ≈ 10.4 m (from memory).
    h = camera.hyperfocal_distance_m(50.0, 8.0, 0.03)
    assert h == pytest.approx(10.47, abs=0.05)
    # Focused at H the far limit is infinite and the near limit is about H/2 (standard result).
    near, far = camera.depth_of_field_limits_m(50.0, 8.0, h, 0.03)
    assert far == math.inf and near == pytest.approx(h / 2, rel=0.01)
    near, far = camera.depth_of_field_limits_m(50.0, 2.0, 3.0, 0.03)
    assert near < 3.0 < far < 4.0
    assert camera.aperture_radius_m(50.0, 2.0) == pytest.approx(0.0125)


def test_ev100_sunny_16():
    # "Sunny 16" (common practice): f/16, 1/100 s, ISO 100 → EV100 = log2(256 · 100) ≈ 14.64.
    assert camera.ev100(16.0, 1 / 100, 100) == pytest.approx(math.log2(25600), abs=1e-12)
    assert camera.ev100(16.0, 1 / 100, 100) == pytest.approx(14.64, abs=0.005)
    assert camera.ev100(16.0, 1 / 100, 200) == pytest.approx(13.64, abs=0.005)


def test_exposure_scale_iso12232_saturation():
    # ISO 12232 saturation-based speed: H_sat = 78 / S; with H = q L t / N², q = 0.65 (ISO 2720),
    # the luminance L_sat = 78 N² / (q t S) must map to exactly 1.0.
    for n, t, s in [(2.8, 1 / 60, 100), (8.0, 1 / 250, 400), (16.0, 1 / 100, 100)]:
        l_sat = 78 * n**2 / (0.65 * t * s)
        assert camera.exposure_scale(n, t, s) * l_sat == pytest.approx(1.0, rel=1e-12)
        assert camera.exposure_scale(n, t, s) == pytest.approx(1 / (1.2 * 2 ** camera.ev100(n, t, s)), rel=1e-12)


def test_metered_shutter_iso2720_grey_card():
    # ISO 2720 reflected-light meter, K = 12.5: N²/t = L S / K. A sunlit 18 % grey card
    # (E = 100 000 lx, L = 0.18 E / π ≈ 5730 cd/m²) at ISO 100 meters to EV100 = log2(L S / K) ≈ 15.5.
    luminance = 0.18 * 100_000 / math.pi
    t = camera.metered_shutter_s(luminance, 16.0, 100.0, shutter_limits_s=(1e-5, 30.0))
    assert camera.ev100(16.0, t, 100.0) == pytest.approx(math.log2(luminance * 100 / 12.5), abs=1e-9)
    assert camera.ev100(16.0, t, 100.0) == pytest.approx(15.5, abs=0.1)
    # The metered scene mean lands at q K / 78 ≈ 0.104 of saturation.
    assert camera.exposure_scale(16.0, t, 100.0) * luminance == pytest.approx(0.65 * 12.5 / 78, rel=1e-9)
    # Compensation +1 EV doubles the time; limits clamp.
    assert camera.metered_shutter_s(luminance, 16.0, 100.0, compensation_ev=1.0) == pytest.approx(2 * t)
    assert camera.metered_shutter_s(1e-3, 16.0, 100.0, shutter_limits_s=(1 / 500, 1 / 8)) == 1 / 8
    assert camera.metered_shutter_s(1e9, 16.0, 100.0, shutter_limits_s=(1 / 500, 1 / 8)) == 1 / 500


@pytest.mark.parametrize("exact_below", [0.0, 50.0])
def test_sensor_noise_variance_matches_shot_plus_read_model(exact_below):
    # EMVA 1288 linear model (from memory): variance in electrons = mean electrons + read².
    full_well, read = 20000.0, 5.0
    variances = []
    for iso in (100.0, 400.0, 1600.0, 6400.0):
        gain = full_well * 100.0 / iso
        for level in (0.0005, 0.02, 0.3):
            flat = np.full((256, 256, 3), level, dtype=np.float32)
            noisy = camera.apply_sensor_noise(
                flat,
                iso,
                full_well_electrons=full_well,
                read_noise_electrons=read,
                rng=np.random.default_rng(7),
                exact_poisson_below_electrons=exact_below,
            )
            expected = (level * gain + read**2) / gain**2
            assert noisy.var() == pytest.approx(expected, rel=0.03)
            assert noisy.mean() == pytest.approx(level, abs=5 * math.sqrt(expected / noisy.size))  # 5 std errors
        variances.append(noisy.var())
    assert variances == sorted(variances)  # more noise at higher ISO
    again = camera.apply_sensor_noise(
        flat,
        6400.0,
        full_well_electrons=full_well,
        read_noise_electrons=read,
        rng=np.random.default_rng(7),
        exact_poisson_below_electrons=exact_below,
    )
    np.testing.assert_array_equal(again, noisy)  # deterministic for a seed


def test_sensor_noise_on_a_full_frame_follows_the_model():
    # The default (Gaussian-only) path on a VGA frame of varying signal: each pixel's residual, divided by the
    # EMVA 1288 standard deviation sqrt(electrons + read²) / gain, is standard normal. Speed is measured by
    # benchmarks, not here.
    signal = np.random.default_rng(0).random((480, 640, 3), dtype=np.float32)
    kept = signal.copy()
    full_well, read, iso = 30000.0, 3.0, 800.0
    noisy = camera.apply_sensor_noise(
        signal, iso, full_well_electrons=full_well, read_noise_electrons=read, rng=np.random.default_rng(1)
    )
    assert noisy.shape == signal.shape and noisy.dtype == np.float32
    np.testing.assert_array_equal(signal, kept)  # the input is not written to
    gain = full_well * 100.0 / iso
    z = (noisy.astype(np.float64) - signal) * gain / np.sqrt(signal.astype(np.float64) * gain + read**2)
    n = z.size
    assert abs(z.mean()) < 5 / math.sqrt(n)  # 5 standard errors of the mean
    assert z.std() == pytest.approx(1.0, abs=5 * math.sqrt(0.5 / n))  # 5 standard errors of the std


def test_srgb_encoding():
    # IEC 61966-2-1 sRGB: linear 0.5 encodes to 0.7354 → 188; 0.0031308 is the breakpoint.
    out = camera.encode_srgb_8bit(np.array([0.0, 0.5, 1.0, 2.0, -1.0]))
    assert out.tolist() == [0, 188, 255, 255, 0]


def test_nominal_iso_series():
    # ISO 12232 marked speeds in 1/3 stops (from memory): 100, 125, 160, 200, 250, 320, 400, ...
    assert camera.nominal_iso_values(100, 400) == [100, 125, 160, 200, 250, 320, 400]
    assert camera.nominal_iso(2524.0, 100, 3200) == 2500
    assert camera.nominal_iso(115.7, 100, 3200) == 125
    assert camera.nominal_iso(150.0, 150, 155) == 150.0  # no marked speed inside: keep the value


FAKE_ROOM = {"width_m": 5.0, "depth_m": 4.0, "height_m": 2.6, "windows": []}


def _fake_objects() -> list[dict]:
    return [
        {
            "instance_id": 1,
            "class_name": "chair",
            "asset_id": "a",
            "position_m": [1.2, 1.0, 0.0],
            "yaw_deg": 30.0,
            "footprint_m": [0.5, 0.5],
            "height_m": 0.9,
            "placement": "floor",
        },
        {
            "instance_id": 2,
            "class_name": "table",
            "asset_id": "b",
            "position_m": [2.5, 2.0, 0.0],
            "yaw_deg": 0.0,
            "footprint_m": [1.2, 0.8],
            "height_m": 0.75,
            "placement": "floor",
        },
        {
            "instance_id": 3,
            "class_name": "lamp",
            "asset_id": "c",
            "position_m": [4.2, 3.2, 0.0],
            "yaw_deg": 0.0,
            "footprint_m": [0.3, 0.3],
            "height_m": 1.5,
            "placement": "floor",
        },
        {
            "instance_id": 4,
            "class_name": "sofa",
            "asset_id": "d",
            "position_m": [3.0, 3.4, 0.0],
            "yaw_deg": 180.0,
            "footprint_m": [2.0, 0.9],
            "height_m": 0.85,
            "placement": "floor",
        },
    ]


def test_sample_camera_frames_objects_and_respects_budget():
    budget = normalize_budget({"camera": {"max_zoom_out": 100.0}})  # free to zoom out until everything fits
    cam = budget["camera"]
    objects = _fake_objects()
    all_in = 0
    seeds = range(40)
    for seed in seeds:
        spec = camera.sample_camera(budget, FAKE_ROOM, objects, np.random.default_rng(seed))
        x, y, z = spec["position_m"]
        assert 0.3 <= x <= FAKE_ROOM["width_m"] - 0.3 and 0.3 <= y <= FAKE_ROOM["depth_m"] - 0.3
        assert cam["eye_height_m"][0] <= z <= cam["eye_height_m"][1]
        for obj in objects:
            lo, hi = camera.object_bounds_m(obj)
            assert not (lo[0] <= x <= hi[0] and lo[1] <= y <= hi[1])
        for key in ("focal_length_mm", "f_number", "iso", "exposure_compensation_ev"):
            assert cam[key][0] - 1e-6 <= spec[key] <= cam[key][1] + 1e-6, key
        distance = float(np.linalg.norm(np.subtract(spec["target_m"], spec["position_m"])))
        assert abs(spec["focus_distance_m"] / distance - 1) <= cam["focus_jitter_fraction"] + 1e-5
        assert spec["shutter_limits_s"] == pytest.approx(cam["shutter_s"])
        R, t, K = camera.camera_matrices(spec, 640, 480)
        centres = np.array([(lambda b: (b[0] + b[1]) / 2)(camera.object_bounds_m(o)) for o in objects])
        uv = camera.project_points(centres, R, t, K)
        in_frame = (camera.camera_depths_m(centres, R, t) > 0) & (uv >= 0).all(1) & (uv[:, 0] < 640) & (uv[:, 1] < 480)
        all_in += bool(in_frame.all())
    assert all_in >= 0.8 * len(seeds)
    spec = camera.sample_camera(budget, FAKE_ROOM, objects, np.random.default_rng(3))
    assert spec == camera.sample_camera(budget, FAKE_ROOM, objects, np.random.default_rng(3))


def test_focal_length_keeps_its_budget_spread_without_zoom_out():
    # With max_zoom_out = 1 the sampled focal length is used as drawn: uniform over the budget's range
    # (Kolmogorov–Smirnov against scipy's uniform), never piled up at the short end to fit the objects.
    from scipy import stats

    budget = normalize_budget({"camera": {"max_zoom_out": 1.0}})
    lo, hi = budget["camera"]["focal_length_mm"]
    focal = [
        camera.sample_camera(budget, FAKE_ROOM, _fake_objects(), np.random.default_rng(seed))["focal_length_mm"]
        for seed in range(1000)
    ]
    assert stats.kstest(focal, stats.uniform(loc=lo, scale=hi - lo).cdf).pvalue > 0.01
    zoomed = normalize_budget({"camera": {"max_zoom_out": 100.0}})
    short = [
        camera.sample_camera(zoomed, FAKE_ROOM, _fake_objects(), np.random.default_rng(seed))["focal_length_mm"]
        for seed in range(1000)
    ]
    assert np.median(short) < np.median(focal)  # the trade-off is real: zooming out shortens the lens


# ---------------------------------------------------------------------------------------------------------------------
# Mitsuba 3 agreement: the label pass must match project_points pixel-exactly.
# ---------------------------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def mi():
    mitsuba = pytest.importorskip("mitsuba")
    mitsuba.set_variant("scalar_rgb")
    return mitsuba


def _mitsuba_sensor(mi, spec: dict, width_px: int, height_px: int, *, use_matrix: bool):
    params = camera.mitsuba_sensor_params(spec, width_px, height_px)
    if use_matrix:
        R, t, _ = camera.camera_matrices(spec, width_px, height_px)
        to_world = mi.ScalarTransform4f(camera.mitsuba_to_world(R, t))
    else:
        to_world = mi.ScalarTransform4f().look_at(origin=params["origin"], target=params["target"], up=params["up"])
    return {
        "type": "perspective",
        "fov": params["fov"],
        "fov_axis": params["fov_axis"],
        "to_world": to_world,
        "sampler": {"type": "stratified", "sample_count": 1, "jitter": False},
        "film": {"type": "hdrfilm", "width": width_px, "height": height_px, "rfilter": {"type": "box"}},
    }


SPEC = {
    "position_m": [0.7, 0.4, 1.6],
    "target_m": [2.5, 3.0, 0.5],
    "up": [0, 0, 1],
    "focal_length_mm": 24.0,
    "sensor_width_mm": 36.0,
    "f_number": 4.0,
    "focus_distance_m": 3.0,
}


@pytest.mark.parametrize("use_matrix", [False, True])
def test_mitsuba_pixel_centre_rays_project_to_pixel_centres(mi, use_matrix):
    # Reference: Mitsuba 3 Sensor.sample_ray at film position ((i + 0.5) / W, (j + 0.5) / H).
    width_px, height_px = 40, 30
    sensor = mi.load_dict(_mitsuba_sensor(mi, SPEC, width_px, height_px, use_matrix=use_matrix))
    R, t, K = camera.camera_matrices(SPEC, width_px, height_px)
    for i, j in [(0, 0), (39, 0), (0, 29), (39, 29), (20, 15), (7, 22)]:
        film = mi.Point2f((i + 0.5) / width_px, (j + 0.5) / height_px)
        ray, _ = sensor.sample_ray(0.0, 0.5, film, mi.Point2f(0.5, 0.5))
        point = np.array(ray.o) + 2.0 * np.array(ray.d)
        np.testing.assert_allclose(camera.project_points(point[None], R, t, K)[0], [i + 0.5, j + 0.5], atol=1e-3)


def test_mitsuba_position_aov_render_agrees_with_projection(mi):
    # Reference: a Mitsuba 3 render (aov integrator, world position) of a floor; pixel (0, 0) is the
    # top-left of the returned array, and each pixel's hit point projects back onto its centre.
    width_px, height_px = 48, 32
    scene = mi.load_dict(
        {
            "type": "scene",
            "integrator": {"type": "aov", "aovs": "pos:position"},
            "sensor": _mitsuba_sensor(mi, SPEC, width_px, height_px, use_matrix=True),
            "floor": {"type": "rectangle", "to_world": mi.ScalarTransform4f().scale([50, 50, 1])},
        }
    )
    image = np.array(mi.render(scene))
    R, t, K = camera.camera_matrices(SPEC, width_px, height_px)
    jj, ii = np.mgrid[0:height_px, 0:width_px]
    hit = np.abs(image[..., 2]) < 1e-4
    hit &= np.linalg.norm(image, axis=2) > 0
    assert hit.sum() > 0.5 * width_px * height_px
    uv = camera.project_points(image[hit], R, t, K)
    np.testing.assert_allclose(uv[:, 0], ii[hit] + 0.5, atol=2e-3)
    np.testing.assert_allclose(uv[:, 1], jj[hit] + 0.5, atol=2e-3)
