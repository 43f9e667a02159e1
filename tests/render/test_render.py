"""Render core end to end: scene building, label pass, exposure, determinism.

Each check names its outside reference beside it. Frames are tiny (96×72, a few spp) so the
whole module stays well under two minutes on two cores.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
import trimesh

from render import backend

VARIANTS = backend.available_variants()
W, H = 96, 72


def _init(variant: str):
    backend.init_renderer(variant=variant)
    import mitsuba as mi

    return mi


def _look_at_cv(position, target, up=(0.0, 0.0, 1.0)):
    """OpenCV (R, t) built here from first principles (x right, y down, z forward)."""
    position, target, up = (np.asarray(v, float) for v in (position, target, up))
    z = target - position
    z /= np.linalg.norm(z)
    x = np.cross(z, up)
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    rotation = np.stack([x, y, z])
    return rotation, -rotation @ position


def _scene(
    mi,
    k_matrix,
    rotation,
    translation,
    shapes: dict,
    *,
    lights: dict | None = None,
    spp: int = 4,
    width: int = W,
    height: int = H,
    max_depth: int = 3,
):
    from render import scene as sc

    rgb_sensor, label_sensor = sc.sensor_dicts(k_matrix, rotation, translation, width, height, spp=spp)
    scene_dict = {"type": "scene", sc.RGB_SENSOR_ID: rgb_sensor, sc.LABEL_SENSOR_ID: label_sensor}
    scene_dict.update(shapes)
    scene_dict.update(lights or {"ambient": {"type": "constant"}})
    return sc.load_scene(
        scene_dict,
        width_px=width,
        height_px=height,
        k_matrix=k_matrix,
        rotation=rotation,
        translation=translation,
        spp=spp,
        max_depth=max_depth,
    )


def _mesh(mi, name, mesh: trimesh.Trimesh, material=None):
    from render import scene as sc

    bsdf = mi.load_dict(sc.bsdf_dict(material or {"kind": "diffuse", "rgb": [0.5, 0.5, 0.5], "roughness": 1.0}))
    return sc.mesh_from_arrays(name, mesh.vertices, mesh.faces, bsdf)


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("principal_point", [(W / 2, H / 2), (W / 2 - 7.0, H / 2 + 5.0)])
def test_cube_mask_box_matches_projected_corners(variant, principal_point):
    """Reference: OpenCV ``cv2.projectPoints`` of the cube's 8 corners; the mask box is within 1 px."""
    from render import scene as sc

    mi = _init(variant)
    k_matrix = np.array([[80.0, 0.0, principal_point[0]], [0.0, 80.0, principal_point[1]], [0.0, 0.0, 1.0]])
    rotation, translation = _look_at_cv([0.2, -3.0, 1.3], [0.3, 0.0, 0.8])
    cube = trimesh.creation.box(extents=[0.5, 0.4, 0.6])
    cube.apply_transform(trimesh.transformations.rotation_matrix(0.4, [0, 0, 1]))
    cube.apply_translation([0.5, 0.1, 0.9])
    built = _scene(mi, k_matrix, rotation, translation, {"i7_p0": _mesh(mi, "i7_p0", cube)})
    instance_ids, _ = sc.render_label_pass(built)
    ys, xs = np.nonzero(instance_ids == 7)
    assert len(xs) > 50
    mask_box = np.array([xs.min(), ys.min(), xs.max() + 1, ys.max() + 1], float)
    rvec, _ = cv2.Rodrigues(rotation)
    corners, _ = cv2.projectPoints(cube.vertices, rvec, translation, k_matrix, None)
    corners = corners.reshape(-1, 2)
    projected_box = np.array([*corners.min(axis=0), *corners.max(axis=0)])
    np.testing.assert_allclose(mask_box, projected_box, atol=1.0)
    # and our own projection agrees with OpenCV's
    from render.camera import project_points

    np.testing.assert_allclose(project_points(cube.vertices, rotation, translation, k_matrix), corners, atol=1e-6)


@pytest.mark.parametrize("variant", VARIANTS)
def test_shape_index_maps_to_instances(variant):
    """Several objects, ids in shuffled order, extra shapes created before: each instance's mask lies
    around its own projected centre (reference: cv2.projectPoints)."""
    from render import scene as sc

    mi = _init(variant)
    _ = [mi.load_dict({"type": "sphere"}) for _ in range(3)]  # shift the registry ids
    k_matrix = np.array([[90.0, 0.0, W / 2], [0.0, 90.0, H / 2], [0.0, 0.0, 1.0]])
    rotation, translation = _look_at_cv([0.0, -4.0, 0.5], [0.0, 0.0, 0.5])
    rng = np.random.default_rng(3)
    instance_ids = [int(v) for v in rng.permutation(np.arange(1, 700, 97))[:6]]
    shapes, centres = {}, {}
    for k, instance_id in enumerate(instance_ids):
        box = trimesh.creation.box(extents=[0.25, 0.25, 0.25])
        centre = np.array([-1.25 + 0.5 * k, 0.0, 0.5 + 0.3 * (k % 2)])
        box.apply_translation(centre)
        for part in range(2):  # two parts per instance: halves of the box in x
            piece = trimesh.intersections.slice_mesh_plane(box, [1 - 2 * part, 0, 0], centre, cap=True)
            shapes[f"i{instance_id}_p{part}"] = _mesh(mi, f"i{instance_id}_p{part}", piece)
        centres[instance_id] = centre
    floor = trimesh.creation.box(extents=[8, 8, 0.1])
    floor.apply_translation([0, 0, -0.05])
    shapes["room_0_floor"] = _mesh(mi, "room_0_floor", floor)
    built = _scene(mi, k_matrix, rotation, translation, shapes)
    assert built.shape_instance["room_0_floor"] == 0
    ids, _ = sc.render_label_pass(built)
    assert set(np.unique(ids).tolist()) == {0, *instance_ids}
    rvec, _ = cv2.Rodrigues(rotation)
    for instance_id, centre in centres.items():
        ((u, v),) = cv2.projectPoints(centre[None], rvec, translation, k_matrix, None)[0].reshape(-1, 2)
        assert ids[int(v), int(u)] == instance_id
        ys, xs = np.nonzero(ids == instance_id)
        assert abs(xs.mean() + 0.5 - u) < 1.5 and abs(ys.mean() + 0.5 - v) < 1.5


@pytest.mark.parametrize("variant", VARIANTS)
def test_depth_of_a_plane_is_z_depth(variant):
    """Analytic: a plane perpendicular to the optical axis at distance D has z-depth D at every
    pixel (the AOV's ray distance would be D / cos θ off-axis) — within 1 %."""
    from render import scene as sc

    mi = _init(variant)
    distance_m = 2.7
    k_matrix = np.array([[50.0, 0.0, W / 2], [0.0, 50.0, H / 2], [0.0, 0.0, 1.0]])  # wide: 88° across
    rotation, translation = _look_at_cv([0.3, 0.2, 1.0], [0.3, 0.2 + distance_m, 1.0])
    plane = trimesh.creation.box(extents=[20.0, 0.01, 20.0])
    plane.apply_translation([0.3, 0.2 + distance_m + 0.005, 1.0])
    built = _scene(mi, k_matrix, rotation, translation, {"i1_p0": _mesh(mi, "i1_p0", plane)})
    ids, depth_m = sc.render_label_pass(built)
    assert (ids == 1).all()
    np.testing.assert_allclose(depth_m, distance_m, rtol=0.01)
    assert abs(float(depth_m[0, 0]) - distance_m) < 0.01 * distance_m  # the far corner, 50° off axis


@pytest.mark.parametrize("variant", VARIANTS)
def test_lambertian_plane_under_point_source(variant):
    """Analytic (inverse-square and cosine laws): a Lambertian plane of albedo ρ at distance d from a
    point source of intensity I has radiance L = ρ I cos θ / (π r²), r² = d² + ρ_xy², within 3 %.

    The light goes through ``scene.emitter_entries`` (a spec light dict of flux Φ, I = Φ / 4π cd),
    so this also checks the render unit convention: Y of the render is luminance in cd/m².
    """
    from render import scene as sc
    from render.camera import luminance_cd_m2

    mi = _init(variant)
    albedo, distance_m, flux_lm = 0.6, 1.5, 1200.0
    intensity_cd = flux_lm / (4 * math.pi)
    width = height = 32
    k_matrix = np.array([[60.0, 0.0, width / 2], [0.0, 60.0, height / 2], [0.0, 0.0, 1.0]])
    # camera beside the light, looking straight down at the plane z = 0
    rotation, translation = _look_at_cv([0.0, 0.0, distance_m], [0.0, 0.0, 0.0], up=(0.0, 1.0, 0.0))
    plane = trimesh.creation.box(extents=[10.0, 10.0, 0.01])
    plane.apply_translation([0.0, 0.0, -0.005])
    light = {"kind": "point", "position_m": [0.0, 0.0, distance_m], "flux_lm": flux_lm, "cct_k": 6500.0}
    built = _scene(
        mi,
        k_matrix,
        rotation,
        translation,
        {"i1_p0": _mesh(mi, "i1_p0", plane, {"kind": "diffuse", "rgb": [albedo] * 3, "roughness": 1})},
        lights=sc.emitter_entries(light, 0),
        spp=64,
        width=width,
        height=height,
        max_depth=2,
    )
    luminance = luminance_cd_m2(sc.render_rgb(built, seed=1))
    u = (np.arange(width) + 0.5 - width / 2) / 60.0 * distance_m
    v = (np.arange(height) + 0.5 - height / 2) / 60.0 * distance_m
    r2 = distance_m**2 + u[None, :] ** 2 + v[:, None] ** 2
    expected = albedo * intensity_cd * (distance_m / np.sqrt(r2)) / (math.pi * r2)
    centre = (slice(8, 24), slice(8, 24))
    assert abs(luminance[centre].mean() / expected[centre].mean() - 1) < 0.03
    np.testing.assert_allclose(luminance[centre], expected[centre], rtol=0.05)


# ---------------------------------------------------------------------------
# Whole frames
# ---------------------------------------------------------------------------

TINY_BUDGET = {"render": {"width_px": W, "height_px": H, "spp": 4, "max_depth": 4}}
COMPOSITION = {"chair": 2, "coffee_table": 1, "wall_clock": 1}


@pytest.fixture(scope="module")
def tiny_spec():
    from render.spec import make_spec

    return make_spec(TINY_BUDGET, COMPOSITION, 21)


@pytest.mark.parametrize("variant", VARIANTS)
def test_frame_on_each_variant(variant, tiny_spec, tmp_path):
    from render.frame import OUTPUT_FILES, STAGES, render_frame

    result = render_frame(tiny_spec, out_dir=tmp_path, variant=variant)
    assert result.rgb.shape == (H, W, 3) and result.rgb.dtype == np.uint8
    assert result.instance_ids.shape == (H, W) and result.instance_ids.dtype == np.uint16
    assert result.depth_m.shape == (H, W) and result.depth_m.dtype == np.float32
    assert tuple(result.timings_s) == STAGES
    assert result.timings_s["spec"] == 0 and all(v >= 0 for v in result.timings_s.values())
    assert 20 < result.rgb.mean() < 235, "frame is black or blown out"
    labels = result.labels
    assert labels["variant"] == variant
    assert labels["image"] == {"width_px": W, "height_px": H}
    assert np.asarray(labels["camera"]["K"]).shape == (3, 3)
    assert np.asarray(labels["camera"]["R"]).shape == (3, 3) and len(labels["camera"]["t"]) == 3
    assert {"shutter_s", "ev100", "iso"} <= set(labels["exposure"])
    lo, hi = tiny_spec["camera"]["shutter_limits_s"]
    assert lo <= labels["exposure"]["shutter_s"] <= hi
    ids_in_image = set(np.unique(result.instance_ids).tolist()) - {0}
    assert ids_in_image <= {o["instance_id"] for o in tiny_spec["objects"]}
    assert {i["instance_id"] for i in labels["instances"]} == {o["instance_id"] for o in tiny_spec["objects"]}
    # every object pixel has a depth in the room (0 only where a ray leaves through a window)
    assert (result.depth_m[result.instance_ids > 0] > 0).all()
    room = tiny_spec["room"]
    assert result.depth_m.max() < math.hypot(room["width_m"], room["depth_m"], room["height_m"])
    # files
    for name in OUTPUT_FILES:
        assert (tmp_path / name).is_file(), name
    instances_png = cv2.imread(str(tmp_path / "instances.png"), cv2.IMREAD_UNCHANGED)
    assert instances_png.dtype == np.uint16 and (instances_png == result.instance_ids).all()
    rgb_png = cv2.cvtColor(cv2.imread(str(tmp_path / "rgb.png"), cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)
    assert (rgb_png == result.rgb).all()
    assert (np.load(tmp_path / "depth.npy") == result.depth_m).all()
    import json

    assert json.loads((tmp_path / "labels.json").read_text()) == labels
    assert tuple(json.loads((tmp_path / "timings.json").read_text())) == STAGES
    from render.spec import spec_from_json

    assert spec_from_json((tmp_path / "scene.json").read_text()) == tiny_spec


@pytest.mark.parametrize("variant", VARIANTS)
def test_same_spec_renders_identically(variant, tiny_spec):
    """GUIDE §3: threaded backends differ by ~1e-6 in float; labels must match exactly and the
    8-bit RGB almost everywhere (a tiny fraction of pixels ±1)."""
    from render.frame import render_frame
    from render.spec import spec_from_json, spec_to_json

    first = render_frame(tiny_spec, variant=variant)
    second = render_frame(spec_from_json(spec_to_json(tiny_spec)), variant=variant)  # via JSON, as a re-render
    dump = {"sort_keys": True, "separators": (",", ":")}
    import json

    assert json.dumps(first.labels, **dump) == json.dumps(second.labels, **dump)
    assert (first.instance_ids == second.instance_ids).all()
    difference = np.abs(first.rgb.astype(int) - second.rgb.astype(int))
    assert difference.max() <= 1
    assert (difference > 0).mean() < 0.001


def test_metered_exposure_follows_iso_2720():
    """ISO 2720 reflected-light meter, N²/t = L S / K with K = 12.5: a uniform scene of luminance L
    gets t = K N² / (L S) on the 1/3-stop grid (within 1/6 stop), and lands at the ISO 12232
    saturation-based signal q K / 78 ≈ 0.104 of saturation (q = 0.65)."""
    from render.frame import expose

    luminance, f_number, iso = 37.0, 4.0, 200.0
    camera = {
        "f_number": f_number,
        "iso": iso,
        "exposure_compensation_ev": 0.0,
        "shutter_limits_s": [1e-5, 30.0],
        "full_well_electrons": 30000.0,
        "read_noise_electrons": 3.0,
    }
    radiance = np.full((8, 8, 3), luminance, np.float32)
    rgb, exposure = expose(radiance, camera, rng=np.random.default_rng(0), noise=False)
    expected_s = 12.5 * f_number**2 / (luminance * iso)
    assert abs(math.log2(exposure["shutter_s"] / expected_s)) <= 1 / 6 + 1e-9
    thirds = 3 * math.log2(exposure["shutter_s"])
    assert abs(thirds - round(thirds)) < 1e-4
    signal = 0.65 * exposure["shutter_s"] * iso * luminance / (78.0 * f_number**2)
    assert abs(signal / (0.65 * 12.5 / 78.0) - 1) < 0.13  # within 1/6 stop
    # sRGB OETF (IEC 61966-2-1) of that signal
    encoded = 1.055 * signal ** (1 / 2.4) - 0.055
    assert abs(int(rgb[0, 0, 0]) - round(encoded * 255)) <= 1
    # clamped to the limits
    _, dark = expose(radiance * 1e-6, camera | {"shutter_limits_s": [1e-3, 0.125]}, rng=np.random.default_rng(0))
    assert dark["shutter_s"] == 0.125


def test_metered_shutter_ignores_float_noise():
    from render.frame import expose

    camera = {
        "f_number": 2.8,
        "iso": 400.0,
        "exposure_compensation_ev": 0.3,
        "shutter_limits_s": [1e-4, 1.0],
        "full_well_electrons": 30000.0,
        "read_noise_electrons": 3.0,
    }
    radiance = np.random.default_rng(1).uniform(0, 50, (16, 16, 3)).astype(np.float32)
    _, a = expose(radiance, camera, rng=np.random.default_rng(0))
    _, b = expose(radiance * np.float32(1 + 2e-6), camera, rng=np.random.default_rng(0))
    assert a == b


def test_preview_draws_boxes(tiny_spec):
    from render.frame import ACCEPTED_RGB, REJECTED_RGB, draw_preview

    rgb = np.full((H, W, 3), 128, np.uint8)
    labels = {
        "instances": [
            {"instance_id": 1, "class_name": "chair", "accepted": True, "bbox": [10, 20, 30, 25]},
            {
                "instance_id": 2,
                "class_name": "sofa",
                "accepted": False,
                "reject_reasons": ["occluded"],
                "bbox": [50, 30, 20, 20],
            },
        ]
    }
    preview = draw_preview(rgb, labels)
    assert preview.shape == rgb.shape and (rgb == 128).all()  # the input is not modified
    assert (np.abs(preview[44, 10:40].astype(int) - ACCEPTED_RGB).sum(axis=1) < 60).any()
    assert (np.abs(preview[49, 50:70].astype(int) - REJECTED_RGB).sum(axis=1) < 60).any()


def test_auto_iso_raises_sensitivity_before_underexposing():
    # ISO 2720 meter (K = 12.5): a dim scene that would need 1 s at ISO 100 gets ISO raised (marked 1/3-stop
    # speeds, ISO 12232) so that the longest allowed shutter, 1/8 s, is enough: 8x → ISO 800.
    from render import camera as cam
    from render.frame import expose

    f_number, iso = 4.0, 100.0
    luminance = 12.5 * f_number**2 / (1.0 * iso)  # N²/t = L S / K with t = 1 s
    radiance = np.full((8, 8, 3), luminance, dtype=np.float32)
    camera = {
        "f_number": f_number,
        "iso": iso,
        "iso_limits": [100.0, 3200.0],
        "exposure_compensation_ev": 0.0,
        "shutter_limits_s": [1 / 500, 1 / 8],
        "full_well_electrons": 30000.0,
        "read_noise_electrons": 3.0,
    }
    _, exposure = expose(radiance, camera, rng=np.random.default_rng(0), noise=False)
    assert exposure["iso"] == 800.0 and exposure["iso_sampled"] == 100.0
    assert exposure["shutter_s"] == pytest.approx(0.125, rel=0.01)
    # With no headroom the image stays underexposed at the ISO limit.
    _, capped = expose(radiance, camera | {"iso_limits": [100.0, 200.0]}, rng=np.random.default_rng(0), noise=False)
    assert capped["iso"] == 200.0 and capped["shutter_s"] == pytest.approx(0.125)
    assert cam.nominal_iso_values(100, 800)[-1] == 800
