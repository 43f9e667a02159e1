"""The outdoor scene through the windows (render.backdrop): its sky, its determinism, and what the camera sees.

Outside references are named beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from render import backdrop, backend

LLVM = "llvm_ad_rgb" in backend.available_variants()
needs_llvm = pytest.mark.skipif(not LLVM, reason="libLLVM >= 17 is needed for the JIT renders here")
SKY_RGB = np.array([1000.0, 1000.0, 1000.0])


def _backdrop(**overrides) -> dict:
    scene = {
        "seed": 12345,
        "ground": "grass",
        "skyline": "open",
        "skyline_distance_m": 40.0,
        "ground_below_floor_m": 0.3,
        "cloud_cover": 0.5,
    }
    scene.update(overrides)
    return scene


def _luminance(rgb: np.ndarray) -> np.ndarray:
    return np.asarray(rgb) @ backdrop.LUMA


@pytest.mark.parametrize("cover", [0.0, 0.4, 1.0])
def test_the_sky_keeps_the_budgets_horizontal_illuminance(cover):
    """Illuminance on a horizontal plane, E = ∫ L cos θ dω over the sky (definition of illuminance, CIE S 017), is
    π L for every cloud cover: the budget's sky illuminance keeps its meaning. The cosine-weighted mean over the
    upper hemisphere is E / π (Malley's method, Pharr et al., PBR 4th ed. §A.5.3)."""
    directions = backdrop._cosine_directions()  # about +z: the sky
    radiance = backdrop.outdoor_radiance(directions, (2.0, 2.0, 1.5), _backdrop(cloud_cover=cover), SKY_RGB)
    assert float(_luminance(radiance).mean()) == pytest.approx(float(_luminance(SKY_RGB)), rel=0.01)


def test_an_overcast_sky_is_three_times_brighter_at_the_zenith_than_at_the_horizon():
    """CIE standard overcast sky (Moon and Spencer 1942; CIE S 011/E:2003 type 1 — from memory):
    L(e) ∝ (1 + 2 sin e), so L(zenith) / L(horizon) = 3."""
    directions = np.array([[0.0, 0.0, 1.0], [math.cos(0.002), 0.0, math.sin(0.002)]])
    radiance = backdrop.outdoor_radiance(directions, (2.0, 2.0, 1.5), _backdrop(cloud_cover=1.0), SKY_RGB)
    zenith, horizon = _luminance(radiance)
    assert zenith / horizon == pytest.approx(3.0, rel=0.02)


def test_grass_below_the_horizon_is_green_and_darker_than_the_sky():
    """Ground under a uniform sky is Lambertian: radiance = albedo × L (albedo of grass about 0.1–0.25, green —
    from memory), well below the sky's."""
    down = np.array(
        [[math.cos(a) * math.cos(-0.6), math.sin(a) * math.cos(-0.6), math.sin(-0.6)] for a in np.linspace(0, 6, 50)]
    )
    ground = backdrop.outdoor_radiance(down, (2.0, 2.0, 1.5), _backdrop(), SKY_RGB)
    assert np.all(ground[:, 1] > ground[:, 0]) and np.all(ground[:, 1] > ground[:, 2])
    assert float(_luminance(ground).mean()) < 0.35 * float(_luminance(SKY_RGB))


def test_the_outdoor_scene_is_deterministic_and_varies_with_its_seed():
    frame = {
        "centre_m": np.array([2.0, -0.2, 1.4]),
        "u": np.array([0.6, 0.0, 0.0]),
        "v": np.array([0.0, 0.0, -0.5]),
        "normal": np.array([0.0, 1.0, 0.0]),
    }
    rng_a, rng_b = np.random.default_rng(5), np.random.default_rng(5)
    scene_a, scene_b = backdrop.sample_backdrop(rng_a), backdrop.sample_backdrop(rng_b)
    assert scene_a == scene_b
    one = backdrop.card_image(frame, (2.0, 3.0, 1.5), scene_a, SKY_RGB)
    assert one.shape == (*backdrop.CARD_SHAPE_PX, 3) and np.array_equal(
        one, backdrop.card_image(frame, (2.0, 3.0, 1.5), scene_b, SKY_RGB)
    )
    other = backdrop.card_image(
        frame, (2.0, 3.0, 1.5), {**scene_a, "seed": scene_a["seed"] + 1, "skyline": "buildings"}, SKY_RGB
    )
    assert not np.allclose(one, other)


def test_specs_get_an_outdoor_scene_only_with_windows_and_as_the_budget_says():
    from render.spec import make_spec

    composition = {"chair": 1}
    with_view = [make_spec({"room": {"window_probability": 1.0}}, composition, seed) for seed in range(6)]
    assert all(spec["room"].get("backdrop") for spec in with_view)
    no_windows = make_spec({"room": {"window_probability": 0.0}}, composition, 0)
    assert "backdrop" not in no_windows["room"]
    plain = make_spec({"room": {"window_probability": 1.0, "outdoor_view_probability": 0.0}}, composition, 0)
    assert "backdrop" not in plain["room"]
    # Its own random stream: the room, objects, lights and camera are those of the plain-sky spec.
    view = with_view[0]
    for key in ("objects", "lights", "camera"):
        assert view[key] == plain[key]


@needs_llvm
def test_the_camera_sees_the_outdoor_scene_in_perspective_through_the_window():
    """Pixels that look through a window show the outdoor scene along their own ray: the pinhole model
    (Hartley and Zisserman, *Multiple View Geometry*, 2nd ed., §6.1) gives each pixel's ray, and
    render.backdrop.outdoor_radiance along it, times the pane's transmittance, is what the frame must show
    (plus the pane's faint reflection of the room)."""
    from render.camera import camera_matrices
    from render.scene import (
        build_scene,
        diffuse_glass_transmittance,
        path_integrator,
        render_radiance,
        render_window_view,
    )

    from .test_image_quality import _window_spec

    backend.init_renderer(variant="llvm_ad_rgb")
    import mitsuba as mi

    spec = _window_spec(spp=16, sun=False, width_px=96, height_px=72, outdoor=True)
    from render.scene import window_portal_frames

    room = spec["room"]
    window = window_portal_frames(room)[0]
    spec["camera"]["position_m"] = [room["width_m"] / 2, room["depth_m"] / 2, 1.3]
    spec["camera"]["target_m"] = [float(v) for v in window["centre_m"]]  # looking at the window
    spec["camera"]["f_number"] = 64.0  # all but a pinhole: the window in focus
    built = build_scene(spec)
    frame = render_radiance(built, seed=1).radiance_rgb + render_window_view(built, seed=1)
    uniform_scene = built.window_view_scenes[1]
    uniform = np.array(
        mi.render(uniform_scene, sensor=uniform_scene.sensors()[0], integrator=path_integrator(1), spp=16, seed=1)
    )[..., :3]

    rotation, translation, k_matrix = camera_matrices(spec["camera"], 96, 72)
    rows, cols = np.mgrid[0:72, 0:96]
    pixels = np.stack([cols + 0.5, rows + 0.5, np.ones_like(rows, dtype=float)], axis=-1).reshape(-1, 3)
    directions = (np.linalg.inv(k_matrix) @ pixels.T).T @ rotation  # camera → world: Rᵀ d
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    from render.scene import outdoor_windows

    outdoor = outdoor_windows(spec)
    transmittance = diffuse_glass_transmittance()
    # Fully unoccluded window pixels: the uniform view pass shows the window's own light there, at every sample.
    expected_uniform = outdoor.radiance_rgb[0] * transmittance
    clear = np.all(np.abs(uniform.reshape(-1, 3) - expected_uniform) < 1e-3 * expected_uniform, axis=1)
    assert clear.sum() >= 40, "the camera should see the window"
    expected = (
        backdrop.outdoor_radiance(directions[clear], spec["camera"]["position_m"], spec["room"]["backdrop"], _sky(spec))
        * transmittance
    )
    got = frame.reshape(-1, 3)[clear]
    relative = np.abs(_luminance(got) - _luminance(expected)) / _luminance(expected)
    assert float(np.median(relative)) < 0.1


def _sky(spec: dict) -> np.ndarray:
    from render.lights import emitter_quantities

    return np.sum(
        [emitter_quantities(light)["radiance_rgb"] for light in spec["lights"] if light["kind"] == "dome"], axis=0
    )
