"""Light model checks against colour-science, IEC 61966-2-1, analytic photometry and Mitsuba 3."""

from __future__ import annotations

import math
import time
import warnings

import numpy as np
import pytest
from scipy import integrate

from render import lights
from render.budget import normalize_budget

ROOM_WITH_WINDOW = {
    "width_m": 4.0,
    "depth_m": 5.0,
    "height_m": 2.7,
    "windows": [{"wall": "south", "center_m": 2.0, "sill_m": 0.9, "width_m": 1.2, "height_m": 1.2}],
}
ROOM_CLOSED = {"width_m": 4.0, "depth_m": 5.0, "height_m": 2.7, "windows": []}
OBJECTS = [
    {
        "instance_id": 1,
        "class_name": "chair",
        "asset_id": "a",
        "position_m": [1.0, 1.0, 0.0],
        "yaw_deg": 0.0,
        "footprint_m": [0.5, 0.5],
        "height_m": 0.9,
        "placement": "floor",
    },
    {
        "instance_id": 2,
        "class_name": "lamp",
        "asset_id": "b",
        "position_m": [3.0, 4.0, 0.0],
        "yaw_deg": 0.0,
        "footprint_m": [0.4, 0.4],
        "height_m": 1.8,
        "placement": "floor",
    },
]


@pytest.fixture(scope="module")
def colour():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour as colour_science
    return colour_science


def test_cct_to_xy_matches_colour_science_planckian_locus(colour):
    # Reference: colour-science 0.4.7 CCT_to_uv_Planck1900 (Planck's law integrated against the
    # CIE 1931 2° observer), converted with UCS_uv_to_xy.
    for cct_k in np.linspace(2000.0, 10000.0, 41):
        expected = colour.UCS_uv_to_xy(colour.temperature.CCT_to_uv_Planck1900(cct_k))
        np.testing.assert_allclose(lights.cct_to_xy(cct_k), expected, atol=1e-3)


def test_xy_to_linear_srgb_white_point_and_luminance(colour):
    # IEC 61966-2-1: the D65 white (x, y) = (0.3127, 0.3290) is R = G = B.
    np.testing.assert_allclose(lights.xy_to_linear_srgb(0.3127, 0.3290), [1.0, 1.0, 1.0], atol=2e-3)
    # Reference: colour-science XYZ_to_RGB into sRGB (linear, no CCTF) for an in-gamut colour.
    xyz = np.array([0.35, 0.4, 0.3])
    expected = colour.XYZ_to_RGB(xyz, colour.RGB_COLOURSPACES["sRGB"], apply_cctf_encoding=False) / xyz[1]
    xy = xyz[:2] / xyz.sum()
    np.testing.assert_allclose(lights.xy_to_linear_srgb(*xy), expected, rtol=2e-3)
    for cct_k in (1000.0, 1800.0, 2700.0, 6500.0, 25000.0):
        rgb = np.array(lights.cct_to_linear_srgb(cct_k))
        assert (rgb >= 0).all()
        assert float(lights.LUMINANCE_WEIGHTS @ rgb) == pytest.approx(1.0, abs=1e-12)


def test_daylight_is_bluer_than_warm_white():
    warm, daylight = np.array(lights.cct_to_linear_srgb(2700)), np.array(lights.cct_to_linear_srgb(6500))
    assert daylight[2] / daylight[0] > warm[2] / warm[0]
    assert warm[0] > warm[2] and daylight[2] > 0.9 * daylight[0]


def test_point_source_inverse_square_recovers_flux():
    # Analytic physics: an isotropic source of intensity I gives E = I / r² on a sphere; ∮ E dA = Φ.
    flux = 800.0
    intensity = lights.point_intensity_cd(flux)
    radius = 2.5
    assert intensity / radius**2 * 4 * math.pi * radius**2 == pytest.approx(flux)


def test_panel_lambertian_exitance_recovers_flux():
    # Lambertian emitter: Φ = ∫_A ∫_hemisphere L cos θ dΩ dA = π L A (cosine law), integrated numerically.
    flux, area = 3000.0, 0.6 * 0.6
    radiance = lights.panel_radiance_cd_m2(flux, area)
    hemisphere, _ = integrate.dblquad(
        lambda theta, phi: radiance * math.cos(theta) * math.sin(theta), 0, 2 * math.pi, 0, math.pi / 2
    )
    assert hemisphere * area == pytest.approx(flux, rel=1e-9)


def test_dome_gives_illuminance_on_horizontal_plane():
    # Uniform sky of radiance L: E = ∫ L cos θ dΩ over the upper hemisphere = π L.
    radiance = lights.dome_radiance_cd_m2(12000.0)
    e, _ = integrate.dblquad(lambda t, p: radiance * math.cos(t) * math.sin(t), 0, 2 * math.pi, 0, math.pi / 2)
    assert e == pytest.approx(12000.0, rel=1e-9)
    assert lights.sun_irradiance(80000.0) == 80000.0


def test_spot_intensity_integrates_to_flux_with_mitsuba_falloff():
    # Mitsuba 3 spot falloff (src/emitters/spot.cpp): 1 inside the beam half-angle β, linear in angle to
    # 0 at the cutoff γ. ∫ I·falloff dΩ must equal the flux.
    flux, cone, beam = 900.0, 50.0, 37.5
    gamma, beta = math.radians(cone / 2), math.radians(beam / 2)
    intensity = lights.spot_intensity_cd(flux, cone, beam)

    def falloff(theta: float) -> float:
        return 1.0 if theta <= beta else max(0.0, (gamma - theta) / (gamma - beta))

    total, _ = integrate.quad(lambda th: intensity * falloff(th) * 2 * math.pi * math.sin(th), 0, gamma, points=[beta])
    assert total == pytest.approx(flux, rel=1e-9)
    # Hard cone: Φ / (2π (1 − cos(θ/2))).
    assert lights.spot_intensity_cd(flux, cone) == pytest.approx(flux / (2 * math.pi * (1 - math.cos(gamma))))


def test_sun_direction():
    d = np.array(lights.sun_direction(30.0, 90.0))  # sun in the north (+y), 30° up
    np.testing.assert_allclose(d, [0.0, -math.cos(math.radians(30)), -0.5], atol=1e-12)
    assert np.linalg.norm(lights.sun_direction(12.3, 211.0)) == pytest.approx(1.0)


def _azimuth_off_normal(light: dict, wall: str) -> float:
    diff = (light["azimuth_deg"] - lights.WALL_OUTWARD_AZIMUTH_DEG[wall] + 180.0) % 360.0 - 180.0
    return abs(diff)


def test_sample_lights_respects_budget_and_windows():
    budget = normalize_budget()
    lighting = budget["lighting"]
    for seed in range(200):
        room = ROOM_WITH_WINDOW if seed % 2 else ROOM_CLOSED
        result = lights.sample_lights(budget, room, OBJECTS, np.random.default_rng(seed))
        kinds = [light["kind"] for light in result]
        interior = [light for light in result if light["kind"] in ("panel", "point", "spot")]
        for kind in ("panel", "point", "spot"):
            assert kinds.count(kind) <= lighting[f"{kind}_count"][1]
        if not room["windows"]:
            assert interior, "a closed room needs a lamp"
            assert "sun" not in kinds and "dome" not in kinds
        else:
            assert kinds.count("dome") == 1
            if "sun" not in kinds:
                assert interior  # the default sky (≤ 400 lx) alone is too dim
        for light in result:
            if light["kind"] in ("panel", "point", "spot"):
                lo, hi = lighting["cct_k"]
                assert lo <= light["cct_k"] <= hi
                flux_lo, flux_hi = lighting[f"{light['kind']}_flux_lm"]
                assert flux_lo <= light["flux_lm"] <= flux_hi
            if light["kind"] == "panel":
                x, y, z = light["center_m"]
                sx, sy = light["size_m"]
                assert lighting["panel_size_m"][0] <= sx <= lighting["panel_size_m"][1]
                assert sx / 2 <= x <= room["width_m"] - sx / 2 and sy / 2 <= y <= room["depth_m"] - sy / 2
                assert room["height_m"] - 0.05 < z < room["height_m"]
            if light["kind"] in ("point", "spot"):
                p = np.array(light["position_m"])
                assert 0 < p[0] < room["width_m"] and 0 < p[1] < room["depth_m"] and 0 < p[2] < room["height_m"]
            if light["kind"] == "spot":
                assert lighting["spot_cone_deg"][0] <= light["cone_deg"] <= lighting["spot_cone_deg"][1]
            if light["kind"] == "sun":
                assert _azimuth_off_normal(light, "south") <= 60.0 + 1e-6
                # sunlight travels north, i.e. into the room through the south window
                assert lights.sun_direction(light["elevation_deg"], light["azimuth_deg"])[1] > 0
                assert 5000 <= light["cct_k"] <= 6500
                assert lighting["sun_elevation_deg"][0] <= light["elevation_deg"] <= lighting["sun_elevation_deg"][1]
    again = lights.sample_lights(budget, ROOM_WITH_WINDOW, OBJECTS, np.random.default_rng(5))
    assert again == lights.sample_lights(budget, ROOM_WITH_WINDOW, OBJECTS, np.random.default_rng(5))


def test_sample_lights_sun_azimuth_uses_budget_range_and_forced_lamp():
    budget = normalize_budget({"lighting": {"sun_probability": 1.0, "sun_azimuth_deg": [200.0, 300.0]}})
    east = {**ROOM_WITH_WINDOW, "windows": [{**ROOM_WITH_WINDOW["windows"][0], "wall": "east"}]}
    for seed in range(50):
        sun = next(
            x
            for x in lights.sample_lights(budget, ROOM_WITH_WINDOW, [], np.random.default_rng(seed))
            if x["kind"] == "sun"
        )
        assert 210.0 - 1e-6 <= sun["azimuth_deg"] <= 300.0 + 1e-6  # window ∩ budget range
        sun = next(x for x in lights.sample_lights(budget, east, [], np.random.default_rng(seed)) if x["kind"] == "sun")
        assert _azimuth_off_normal(sun, "east") <= 60.0 + 1e-6  # no overlap: entering through the window wins
    only_spots = normalize_budget({"lighting": {"panel_count": [0, 0], "point_count": [0, 0], "spot_count": [0, 2]}})
    for seed in range(30):
        result = lights.sample_lights(only_spots, ROOM_CLOSED, OBJECTS, np.random.default_rng(seed))
        assert any(x["kind"] == "spot" for x in result)


def test_sample_lights_is_fast():
    budget = normalize_budget({"lighting": {"panel_count": [2, 4], "point_count": [2, 4], "spot_count": [1, 3]}})
    rng = np.random.default_rng(0)
    start = time.perf_counter()
    for _ in range(50):
        lights.sample_lights(budget, ROOM_WITH_WINDOW, OBJECTS * 4, rng)
    assert (time.perf_counter() - start) / 50 < 0.002


# ---------------------------------------------------------------------------------------------------------------------
# Mitsuba 3: a white Lambertian floor under our lights has the analytic radiance ρ E / π.
# ---------------------------------------------------------------------------------------------------------------------


def _floor_radiance(mi, emitter: dict, spp: int = 4) -> float:
    scene = mi.load_dict(
        {
            "type": "scene",
            "integrator": {"type": "path", "max_depth": 2},
            "sensor": {
                "type": "perspective",
                "fov": 0.05,  # a tiny pixel footprint: E varies ~1 %/cm obliquely
                "to_world": mi.ScalarTransform4f().look_at(origin=[0, 0, 1], target=[0, 0, 0], up=[0, 1, 0]),
                "sampler": {"type": "independent", "sample_count": spp},
                "film": {"type": "hdrfilm", "width": 1, "height": 1, "rfilter": {"type": "box"}},
            },
            "floor": {
                "type": "rectangle",
                "to_world": mi.ScalarTransform4f().scale([20, 20, 1]),
                "bsdf": {"type": "diffuse", "reflectance": {"type": "rgb", "value": [1.0, 1.0, 1.0]}},
            },
            "light": emitter,
        }
    )
    rgb = np.array(mi.render(scene))[0, 0, :3]
    return float(lights.LUMINANCE_WEIGHTS @ rgb)


def test_mitsuba_units_point_and_sun():
    mi = pytest.importorskip("mitsuba")
    mi.set_variant("scalar_rgb")
    # Point source 1 m up, 0.5 m aside: E = I cos θ / d² (inverse-square and cosine laws), L = E / π.
    light = {"kind": "point", "position_m": [0.5, 0.0, 1.0], "flux_lm": 1000.0, "cct_k": 4000.0}
    q = lights.emitter_quantities(light)
    radiance = _floor_radiance(
        mi,
        {"type": "point", "position": light["position_m"], "intensity": {"type": "rgb", "value": q["intensity_rgb"]}},
    )
    d2 = 0.5**2 + 1.0
    expected = lights.point_intensity_cd(1000.0) * (1.0 / math.sqrt(d2)) / d2 / math.pi
    assert radiance == pytest.approx(expected, rel=1e-3)
    # Sun at 40° elevation: E_horizontal = E sin(elevation).
    sun = {"kind": "sun", "elevation_deg": 40.0, "azimuth_deg": 120.0, "illuminance_lux": 50000.0, "cct_k": 5500.0}
    q = lights.emitter_quantities(sun)
    radiance = _floor_radiance(
        mi,
        {
            "type": "directional",
            "direction": q["direction"],
            "irradiance": {"type": "rgb", "value": q["irradiance_rgb"]},
        },
    )
    assert radiance == pytest.approx(50000.0 * math.sin(math.radians(40.0)) / math.pi, rel=1e-3)
