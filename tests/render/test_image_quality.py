"""Image pipeline: denoiser, box-filtered film, window portals, exposure that behaves like a camera.

Each check names its outside reference beside it. Frames are tiny (≤ 96 px) so the module stays
quick on two cores; the quality figures themselves come from ``python -m render.bench_quality``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from render import backend

LLVM = "llvm_ad_rgb" in backend.available_variants()
needs_llvm = pytest.mark.skipif(not LLVM, reason="libLLVM >= 17 is needed for the quick JIT renders here")


def _window_spec(
    *,
    spp: int,
    sun: bool,
    width_px: int = 64,
    height_px: int = 48,
    lamps: bool = False,
    textures: bool = True,
    outdoor: bool = False,
) -> dict:
    """A room with one window, lit by the sky (and the sun), no lamps unless asked; a plain sky through the window
    unless ``outdoor`` (render.backdrop)."""
    from render.spec import make_spec

    lighting = {
        "panel_count": [0, 0],
        "point_count": [1, 1] if lamps else [0, 0],
        "spot_count": [0, 0],
        "sun_probability": 1.0 if sun else 0.0,
        "dome_illuminance_lux": [15000.0, 15000.0],
        "sun_illuminance_lux": [60000.0, 60000.0],
        "sun_elevation_deg": [30.0, 30.0],
    }
    budget = {
        "render": {"width_px": width_px, "height_px": height_px, "spp": spp, "max_depth": 5},
        "room": {"window_probability": 1.0, "outdoor_view_probability": 1.0 if outdoor else 0.0},
        "lighting": lighting,
    }
    if not textures:
        budget["appearance"] = {"texture_probability": 0.0}
    for seed in range(200):
        spec = make_spec(budget, {"chair": 1, "coffee_table": 1}, seed)
        kinds = {light["kind"] for light in spec["lights"]}
        if spec["room"]["windows"] and ("sun" in kinds) == sun:
            return spec
    raise AssertionError("no window-lit spec found")


@pytest.fixture(scope="module")
def llvm():
    if not LLVM:
        pytest.skip("libLLVM >= 17 not found")
    backend.init_renderer(variant="llvm_ad_rgb")
    import mitsuba as mi

    return mi


# ---------------------------------------------------------------------------------------------------------------------
# Film and denoiser
# ---------------------------------------------------------------------------------------------------------------------


@needs_llvm
def test_rgb_film_uses_a_box_reconstruction_filter(llvm):
    from render.scene import build_scene

    built = build_scene(_window_spec(spp=1, sun=False))
    rfilter = built.rgb_sensor.film().rfilter()
    # Mitsuba 3 plugin reference: the box filter has radius 0.5 px (one pixel's footprint); the
    # gaussian's default radius is 2 stddev = 1 px, so its samples reach the neighbours.
    assert "box" in str(rfilter).lower()
    assert rfilter.radius() == pytest.approx(0.5)


@needs_llvm
def test_box_filter_noise_is_spatially_uncorrelated(llvm):
    """Lag-1 autocorrelation of the per-pixel noise (1 spp minus a converged mean) is near 0.

    Reference: the sample autocorrelation of independent pixels is 0 ± 2/sqrt(n) (Box & Jenkins,
    *Time Series Analysis*, large-lag standard error, from memory); a gaussian filter gave 0.39.
    """
    from render.scene import build_scene, render_radiance

    spec = _window_spec(spp=1, sun=False, width_px=96, height_px=72)
    built = build_scene(spec)
    noisy = render_radiance(built, seed=3, aux=False).radiance_rgb[..., 1].astype(np.float64)
    built.spp = 256
    mean = render_radiance(built, seed=11, aux=False).radiance_rgb[..., 1].astype(np.float64)
    residual = noisy - mean
    residual -= residual.mean()
    lag1 = float((residual[:, 1:] * residual[:, :-1]).mean() / residual.var())
    assert abs(lag1) < 0.1, lag1


def test_denoiser_loads_here():
    from render.denoise import denoiser_status

    assert denoiser_status() is None


def test_denoiser_refuses_mismatched_auxiliary_images():
    from render.denoise import denoise

    with pytest.raises(ValueError, match="albedo"):
        denoise(np.zeros((8, 8, 3), np.float32), albedo_rgb=np.zeros((4, 8, 3), np.float32))


def test_denoiser_removes_synthetic_noise_from_a_smooth_image():
    """Additive Gaussian noise on a smooth ramp: the RT filter must cut the RMSE several-fold
    (reference: the ramp itself; the RMSE of the noisy input is the noise σ)."""
    from render.denoise import denoise

    height, width = 64, 96
    ramp = np.linspace(0.2, 1.0, width, dtype=np.float32)[None, :, None] * np.ones((height, 1, 3), np.float32)
    noisy = ramp + np.random.default_rng(0).normal(0.0, 0.08, ramp.shape).astype(np.float32)
    clean = denoise(
        noisy,
        albedo_rgb=np.full_like(ramp, 0.5),
        normal_xyz=np.dstack([np.zeros((height, width)), np.zeros((height, width)), np.ones((height, width))]).astype(
            np.float32
        ),
    )
    rmse_in = float(np.sqrt(((noisy - ramp) ** 2).mean()))
    rmse_out = float(np.sqrt(((clean - ramp) ** 2).mean()))
    assert rmse_out < rmse_in / 4, (rmse_in, rmse_out)


@needs_llvm
def test_denoiser_lowers_the_error_of_a_noisy_render(llvm):
    """A 1-spp window-lit render, denoised, is much closer to a 256-spp render of the same scene
    (reference: the converged render; metric: scikit-image PSNR on the exposed 8-bit images)."""
    from skimage.metrics import peak_signal_noise_ratio

    from render.camera import encode_srgb_8bit
    from render.denoise import denoise
    from render.scene import build_scene, render_radiance

    built = build_scene(_window_spec(spp=1, sun=False, width_px=96, height_px=72))
    noisy = render_radiance(built, seed=5, aux=True)
    built.spp = 256
    reference = render_radiance(built, seed=17, aux=False).radiance_rgb
    scale = 0.18 / float(reference.mean())
    denoised = denoise(noisy.radiance_rgb, albedo_rgb=noisy.albedo_rgb, normal_xyz=noisy.normal_xyz)
    psnr_raw = peak_signal_noise_ratio(
        encode_srgb_8bit(reference * scale), encode_srgb_8bit(noisy.radiance_rgb * scale)
    )
    psnr_denoised = peak_signal_noise_ratio(encode_srgb_8bit(reference * scale), encode_srgb_8bit(denoised * scale))
    assert psnr_denoised > psnr_raw + 6.0, (psnr_raw, psnr_denoised)


# ---------------------------------------------------------------------------------------------------------------------
# Window portals
# ---------------------------------------------------------------------------------------------------------------------


def test_portal_rectangles_fill_the_openings_and_face_the_room():
    from render.scene import window_portal_frames

    room = {
        "width_m": 4.0,
        "depth_m": 5.0,
        "height_m": 2.6,
        "windows": [
            {"wall": wall, "center_m": 1.5, "sill_m": 0.9, "width_m": 1.2, "height_m": 1.0}
            for wall in ("south", "north", "west", "east")
        ],
    }
    centre_of_room = np.array([2.0, 2.5, 1.3])
    for frame in window_portal_frames(room):
        u, v, n = frame["u"], frame["v"], frame["normal"]
        assert np.allclose(np.cross(u / np.linalg.norm(u), v / np.linalg.norm(v)), n)  # right-handed: emits along n
        assert float(n @ (centre_of_room - frame["centre_m"])) > 0  # faces the room
        assert frame["area_m2"] == pytest.approx(1.2)
        assert {round(2 * np.linalg.norm(u), 6), round(2 * np.linalg.norm(v), 6)} == {1.2, 1.0}
        assert frame["centre_m"][2] == pytest.approx(1.4)  # sill + height / 2


@needs_llvm
@pytest.mark.parametrize(
    ("sun", "outdoor"), [(False, False), (True, False), (False, True)], ids=["sky", "sky+sun", "outdoor scene"]
)
def test_window_portals_are_unbiased_against_brute_force(llvm, sun, outdoor):
    """Mean radiance of a window-lit room behind glass: portals (low spp) vs the same light found by
    brute-force path tracing (high spp): the constant sky through plain panes, or, with an outdoor scene, the
    panes emitting it at a next-event weight near zero. Reference: the unbiased brute-force estimate;
    tolerance 3 %."""
    from render.scene import build_scene, render_radiance

    spec = _window_spec(spp=64, sun=sun, width_px=48, height_px=36, outdoor=outdoor)
    assert bool(spec["room"].get("backdrop")) == outdoor
    portal = build_scene(spec, window_light="portal")
    assert portal.window_light == "portal" and (portal.sun_scene is not None) == sun
    brute = build_scene(spec, window_light="dome")
    brute.spp = 4096
    if not outdoor:
        # The brute force meets the sky one vertex later than the portal (at the dome, behind the pane the portal
        # is), so the same paths need one more bounce.
        brute.max_depth += 1
    mean_portal = float(np.mean([render_radiance(portal, seed=s, aux=False).radiance_rgb.mean() for s in (1, 2)]))
    mean_brute = float(render_radiance(brute, seed=3, aux=False).radiance_rgb.mean())
    assert mean_portal == pytest.approx(mean_brute, rel=0.03)


@needs_llvm
def test_window_portals_cut_the_noise_of_sky_light(llvm):
    """Same samples, much less noise: per-pixel error against a converged portal render (the brute
    force sees the sky only when a path happens to leave through the window)."""
    from render.scene import build_scene, render_radiance

    spec = _window_spec(spp=4, sun=False, width_px=48, height_px=36)
    reference = build_scene(spec)
    reference.spp = 1024
    target = render_radiance(reference, seed=9, aux=False).radiance_rgb
    errors = {}
    for mode in ("portal", "dome"):
        built = build_scene(spec, window_light=mode)
        errors[mode] = float(np.sqrt(((render_radiance(built, seed=4, aux=False).radiance_rgb - target) ** 2).mean()))
    assert errors["portal"] < errors["dome"] / 2, errors


@needs_llvm
def test_emitting_quad_emits_on_its_normal_side_only(llvm):
    """A one-sided area emitter (Mitsuba ``area`` plugin: emits where the surface normal faces the
    viewer) on our two-triangle quad: seen from the front its radiance is the emitter's, seen from
    behind it is dark."""
    from render.scene import emitting_quad

    mi = llvm
    quad = emitting_quad(
        "q",
        (0.0, 0.0, 0.0),
        (0.5, 0.0, 0.0),
        (0.0, 0.5, 0.0),
        (0.0, 0.0, 1.0),
        bsdf={"type": "diffuse", "reflectance": {"type": "rgb", "value": [0.0, 0.0, 0.0]}},
        emitter={"type": "area", "radiance": {"type": "rgb", "value": [2.0, 2.0, 2.0]}},
    )
    seen = {}
    for side, z in (("front", 3.0), ("back", -3.0)):
        scene = mi.load_dict(
            {
                "type": "scene",
                "quad": quad,
                "integrator": {"type": "path", "max_depth": 2},
                "sensor": {
                    "type": "perspective",
                    "fov": 10.0,
                    "to_world": mi.ScalarTransform4f().look_at(origin=[0, 0, z], target=[0, 0, 0], up=[0, 1, 0]),
                    "film": {"type": "hdrfilm", "width": 8, "height": 8, "rfilter": {"type": "box"}},
                },
            }
        )
        seen[side] = float(np.array(mi.render(scene, spp=4)).mean())
    assert seen["front"] == pytest.approx(2.0, rel=1e-3)
    assert seen["back"] == 0.0


_KERNEL_REUSE_SCRIPT = """
import copy, json, sys
sys.path.insert(0, sys.argv[1])
from tests.render.test_image_quality import _window_spec
from render import backend
backend.init_renderer(variant="llvm_ad_rgb")
import drjit as dr
from render.scene import build_scene, render_label_and_aux, render_radiance

def hashes(spec):
    built = build_scene(spec)
    dr.kernel_history()  # clear
    render_radiance(built, seed=1)
    render_label_and_aux(built)
    return sorted(k["hash"] for k in dr.kernel_history() if k.get("operation_count", 0) > 300)

dr.set_flag(dr.JitFlag.KernelHistory, True)
# Plain-coloured surfaces: textured and plain meshes and BSDFs compile to different callables, whose
# order in the kernel follows object creation; this checks the lens and light constants.
spec = _window_spec(spp=1, sun=True, width_px=32, height_px=24, lamps=True, textures=False)
spec["lights"].append({"kind": "panel", "cct_k": 4000.0, "flux_lm": 2000.0, "size_m": [0.6, 0.6],
                       "center_m": [1.0, 1.0, spec["room"]["height_m"] - 0.01]})
hashes(spec)  # the first scene of a process may differ in kernel parameter order
settled = hashes(spec)
changed = copy.deepcopy(spec)
camera = changed["camera"]
camera["focal_length_mm"] *= 1.3
camera["f_number"] *= 1.4
camera["focus_distance_m"] *= 1.2
camera["position_m"][0] -= 0.05
changed["lights"][-1]["center_m"][0] += 0.4
changed["lights"][-1]["size_m"] = [0.3, 1.2]
print(json.dumps({"settled": settled, "changed": hashes(changed)}))
"""


@needs_llvm
def test_frames_that_differ_in_lens_and_light_placement_reuse_the_compiled_kernels(tmp_path):
    """Aperture, focus distance, focal length, camera pose and lamp placement change from frame to
    frame; none may change the compiled render kernels (each new kernel costs about 0.5 s of CPU).
    Dr.Jit's kernel history names every launched kernel by the hash of its code. Runs in a fresh
    process: which kernels a process compiles depends on the objects it created before."""
    import json
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    env = dict(os.environ, DRJIT_CACHE_DIR=str(tmp_path / "kernels"))
    done = subprocess.run(
        [sys.executable, "-c", _KERNEL_REUSE_SCRIPT, str(root)],
        capture_output=True,
        text=True,
        cwd=root,
        env=env,
        timeout=300,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    result = json.loads(done.stdout.strip().splitlines()[-1])
    assert len(result["settled"]) >= 3  # path tracing (sky + lamps), the sun pass, the label pass
    assert result["changed"] == result["settled"]


# ---------------------------------------------------------------------------------------------------------------------
# Exposure
# ---------------------------------------------------------------------------------------------------------------------

CAMERA = {
    "f_number": 8.0,
    "iso": 800.0,
    "iso_limits": [100.0, 3200.0],
    "exposure_compensation_ev": 0.0,
    "shutter_limits_s": [1 / 500, 1 / 8],
    "full_well_electrons": 30000.0,
    "read_noise_electrons": 3.0,
}


def _correct_shutter_s(luminance: float, f_number: float, iso: float) -> float:
    # ISO 2720:1974 reflected-light meter equation N²/t = L S / K with K = 12.5 (written out here).
    return 12.5 * f_number**2 / (luminance * iso)


@pytest.mark.parametrize("luminance", np.geomspace(0.5, 200000.0, 61).tolist())
def test_exposure_is_never_more_than_a_third_of_a_stop_off_when_the_iso_range_allows(luminance):
    from render.frame import auto_exposure

    chosen = auto_exposure(luminance, CAMERA)
    lo_s, hi_s = CAMERA["shutter_limits_s"]
    iso_lo, iso_hi = CAMERA["iso_limits"]
    # What a correct exposure needs: some ISO in the range with its metered time inside the limits.
    # Shutter times snap to 1/3 stops, so within 1/6 stop of a limit either outcome is right.
    margin = 2 ** (1 / 6)
    feasible = _correct_shutter_s(luminance, 8.0, iso_hi) <= hi_s and _correct_shutter_s(luminance, 8.0, iso_lo) >= lo_s
    clearly_infeasible = (
        _correct_shutter_s(luminance, 8.0, iso_hi) > hi_s * margin
        or _correct_shutter_s(luminance, 8.0, iso_lo) < lo_s / margin
    )
    error_ev = math.log2(chosen["shutter_s"] / _correct_shutter_s(luminance, 8.0, chosen["iso"]))
    assert chosen["exposure_error_ev"] == pytest.approx(error_ev, abs=0.17)
    assert iso_lo <= chosen["iso"] <= iso_hi and lo_s <= chosen["shutter_s"] <= hi_s
    if feasible:
        assert abs(error_ev) <= 1 / 3 + 1e-9, (luminance, chosen)
        assert chosen["limited_by"] is None
    elif clearly_infeasible:
        assert chosen["limited_by"] in ("shortest shutter", "longest shutter")
        # The ISO went as far as the range allows before the shutter clamped.
        assert chosen["iso"] == (iso_lo if chosen["limited_by"] == "shortest shutter" else iso_hi)


def test_meter_reads_the_log_average_luminance():
    """Reinhard et al. 2002, eq. 1: the key of a scene is exp(mean(log(δ + L))). Analytic cases: a
    uniform image reads its own luminance; 3 % of the pixels at 1000× the rest read 1000^0.03 ≈ 1.23×
    the rest (the arithmetic mean would read 31×)."""
    from render.camera import METER_LOG_DELTA_CD_M2, metered_luminance_cd_m2

    uniform = np.full((40, 50, 3), 20.0, dtype=np.float32)
    assert metered_luminance_cd_m2(uniform) == pytest.approx(20.0 + METER_LOG_DELTA_CD_M2, rel=1e-6)
    lamp = np.full((100, 100, 3), 10.0, dtype=np.float32)
    lamp.reshape(-1, 3)[:300] = 10000.0
    expected = math.exp(
        0.97 * math.log(10.0 + METER_LOG_DELTA_CD_M2) + 0.03 * math.log(10000.0 + METER_LOG_DELTA_CD_M2)
    )
    assert metered_luminance_cd_m2(lamp) == pytest.approx(expected, rel=1e-5)
    assert metered_luminance_cd_m2(lamp) / 10.0 == pytest.approx(1000**0.03, rel=1e-3)
    assert metered_luminance_cd_m2(np.zeros((4, 4, 3), dtype=np.float32)) == pytest.approx(METER_LOG_DELTA_CD_M2)


def test_a_lamp_in_view_does_not_darken_the_room():
    """A room at 10 cd/m² with a lamp at 10,000 cd/m² on 3 % of the frame: the room's pixels come out
    within half a stop of where the same room without the lamp puts them (an averaging meter would put
    them 5 stops lower)."""
    from render.camera import LUMINANCE_WEIGHTS
    from render.frame import expose

    camera = dict(CAMERA, sensor_noise=False, f_number=4.0, iso=400.0)
    room = np.full((100, 100, 3), 10.0, dtype=np.float32)
    with_lamp = room.copy()
    with_lamp.reshape(-1, 3)[:300] = 10000.0
    rgb_room, _ = expose(room, camera, rng=np.random.default_rng(0))
    rgb_lamp, _ = expose(with_lamp, camera, rng=np.random.default_rng(0))

    def level(rgb: np.ndarray) -> float:
        code = rgb[-1, -1].astype(np.float64) / 255.0  # a room pixel; IEC 61966-2-1 sRGB decoding
        linear = np.where(code <= 0.04045, code / 12.92, ((code + 0.055) / 1.055) ** 2.4)
        return float(linear @ np.asarray(LUMINANCE_WEIGHTS))

    assert abs(math.log2(level(rgb_lamp) / level(rgb_room))) <= 0.5


def test_bright_scene_lowers_the_iso_instead_of_overexposing():
    """The reported case: the metered time at the sampled ISO is shorter than the shortest shutter."""
    from render.frame import auto_exposure

    luminance = 3000.0  # a bright sunlit room, cd/m² (order of magnitude, from memory)
    assert _correct_shutter_s(luminance, 8.0, 800.0) < 1 / 500  # at ISO 800 the shutter would clamp
    chosen = auto_exposure(luminance, CAMERA)
    assert chosen["iso"] < 800.0
    assert chosen["iso"] in (100, 125, 160, 200, 250, 320, 400, 500, 640)  # ISO 12232 1/3-stop series
    assert abs(chosen["exposure_error_ev"]) <= 1 / 3


def test_sensor_noise_switch_off_gives_the_noise_free_image():
    from render.camera import encode_srgb_8bit, exposure_scale
    from render.frame import expose

    radiance = np.random.default_rng(1).uniform(5.0, 80.0, (24, 32, 3)).astype(np.float32)
    camera = CAMERA | {"sensor_noise": False}
    a, exposure = expose(radiance, camera, rng=np.random.default_rng(1))
    b, _ = expose(radiance, camera, rng=np.random.default_rng(2))
    assert exposure["sensor_noise"] is False
    assert np.array_equal(a, b)
    expected = encode_srgb_8bit(radiance * exposure_scale(exposure["f_number"], exposure["shutter_s"], exposure["iso"]))
    assert np.array_equal(a, expected)
    noisy, on = expose(radiance, CAMERA, rng=np.random.default_rng(1))
    assert on["sensor_noise"] is True and not np.array_equal(noisy, a)


def test_budget_switches_are_booleans():
    from render.budget import BudgetError, normalize_budget

    budget = normalize_budget({"render": {"denoise": False}, "camera": {"sensor_noise": False}})
    assert budget["render"]["denoise"] is False and budget["camera"]["sensor_noise"] is False
    assert normalize_budget()["render"]["denoise"] is True
    for bad in (1, "yes", None, 0.0):
        with pytest.raises(BudgetError, match="render.denoise: expected true or false"):
            normalize_budget({"render": {"denoise": bad}})


def test_truth_psnr_removes_the_references_own_noise():
    """Reference passes and a frame, each the truth plus independent noise: the estimate against the truth
    recovers the frame's true PSNR although the reference is noisier than the frame (the variance of a
    difference of independent errors is the sum of their variances; the mean of n passes has 1/n of one
    pass's variance)."""
    from render.bench_quality import truth_psnr

    rng = np.random.default_rng(3)
    truth = rng.uniform(40, 215, size=(240, 320, 3))
    frame = truth + rng.normal(0, 4.0, truth.shape)
    expected = 10 * np.log10(255.0**2 / np.mean((frame - truth) ** 2))
    for passes in (2, 4):
        runs = [truth + rng.normal(0, 8.0, truth.shape) for _ in range(passes)]
        reference = np.mean(runs, axis=0)
        naive = 10 * np.log10(255.0**2 / np.mean((frame - reference) ** 2))
        estimate = truth_psnr(reference, runs[0], runs[1], frame, passes)
        assert estimate == pytest.approx(expected, abs=0.3)  # sampling error of the MSEs
        assert expected - naive > 1.0  # what the naive score got wrong
