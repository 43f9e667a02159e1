"""Textured materials: assignment in the spec, box-projected texture coordinates, textures in the render.

Frames here are tiny; the flat-surface share over 50 default frames comes from
``python -m render.bench_appearance``.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from render import appearance, backend
from render.budget import DEFAULT_BUDGET, BudgetError, normalize_budget

LLVM = "llvm_ad_rgb" in backend.available_variants()


@pytest.fixture(autouse=True)
def _texture_cache(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("EVENFRAME_TEXTURE_CACHE", str(tmp_path_factory.getbasetemp() / "textures"))


def _budget(**appearance_fields) -> dict:
    budget = copy.deepcopy(DEFAULT_BUDGET)
    budget["render"].update(width_px=48, height_px=36, spp=1)
    budget["appearance"].update(appearance_fields)
    return budget


def _textures(spec: dict) -> list[dict | None]:
    out = [spec["room"]["materials"][slot].get("texture") for slot in sorted(spec["room"]["materials"])]
    for obj in spec["objects"]:
        out += [obj["materials"][slot].get("texture") for slot in sorted(obj.get("materials") or {})]
    return out


def test_box_uv_maps_each_face_along_its_dominant_axis_in_metres():
    # A floor quad (normal +z) and a wall quad (normal −y): u, v are the two other coordinates / tile size.
    vertices = np.array(
        [[0, 0, 0], [2, 0, 0], [2, 3, 0], [0, 3, 0], [0, 1, 0], [2, 1, 0], [2, 1, 2.5], [0, 1, 2.5]], dtype=float
    )
    faces = np.array([[0, 1, 2], [0, 2, 3], [4, 5, 6], [4, 6, 7]])
    out_vertices, out_faces, uv = appearance.box_uv(vertices, faces, tile_size_m=0.5)
    assert out_vertices.shape == (12, 3) and out_faces.shape == (4, 3) and uv.shape == (12, 2)
    assert np.allclose(out_vertices[out_faces], vertices[faces])  # same triangles, unshared corners
    floor, wall = uv[:6], uv[6:]
    assert np.allclose(floor, out_vertices[:6, :2] / 0.5)  # (x, y) / tile
    assert np.allclose(wall, out_vertices[6:][:, [0, 2]] / 0.5)  # (x, z) / tile
    # A 2 m edge spans 4 texture repeats of a 0.5 m tile, whatever the mesh.
    assert np.ptp(floor[:, 0]) == pytest.approx(4.0)


def test_box_uv_in_an_objects_own_frame_turns_with_the_object():
    vertices = np.array([[0, 0, 0], [1, 0, 0], [1, 0.2, 0]], dtype=float)
    faces = np.array([[0, 1, 2]])
    obj = {"yaw_deg": 90.0, "position_m": [3.0, 2.0, 0.0]}
    rotation, origin = appearance.yaw_frame(obj)
    world = vertices @ rotation.T + origin  # the object's local triangle placed in the room
    _, _, uv_local = appearance.box_uv(vertices, faces, 1.0)
    _, _, uv_placed = appearance.box_uv(world, faces, 1.0, appearance.yaw_frame(obj))
    assert np.allclose(uv_local, uv_placed)


def test_box_uv_refuses_a_non_positive_tile():
    with pytest.raises(ValueError, match="tile_size_m"):
        appearance.box_uv(np.zeros((3, 3)), np.array([[0, 1, 2]]), 0.0)


def test_textures_go_to_texturable_families_only_and_keep_the_rest_of_the_spec():
    from render.cli import default_composition
    from render.spec import make_spec

    composition = default_composition()
    plain = make_spec(_budget(texture_probability=0.0), composition, 11)
    dressed = make_spec(_budget(texture_probability=1.0), composition, 11)
    assert not any(_textures(plain))
    # Textures take no draw from the layout, lighting or camera streams.
    for key in ("lights", "camera"):
        assert plain[key] == dressed[key]
    strip = [{k: v for k, v in obj.items() if k != "materials"} for obj in dressed["objects"]]
    assert strip == [{k: v for k, v in obj.items() if k != "materials"} for obj in plain["objects"]]
    materials = list(dressed["room"]["materials"].values()) + [
        m for o in dressed["objects"] for m in (o.get("materials") or {}).values()
    ]
    for material in materials:
        allowed = appearance.TEXTURE_FAMILIES.get(material.get("family", ""), ())
        texture = material.get("texture")
        assert (texture is not None) == bool(allowed), material
        if texture:
            assert texture["family"] in allowed
            low, high = DEFAULT_BUDGET["appearance"]["texture_scale"]
            base = appearance.texture_record(texture["family"], texture["variant"], 1.0)["tile_size_m"]
            assert low * base - 1e-6 <= texture["tile_size_m"] <= high * base + 1e-6


def test_frames_that_share_a_layout_share_their_surfaces():
    from render.cli import default_composition
    from render.spec import make_spec

    budget = _budget(texture_probability=1.0)
    first = make_spec(budget, default_composition(), 5, layout_seed=77)
    second = make_spec(budget, default_composition(), 6, layout_seed=77)
    other = make_spec(budget, default_composition(), 5, layout_seed=78)
    assert _textures(first) == _textures(second)
    assert _textures(first) != _textures(other)


def test_variants_are_a_fixed_library_per_family():
    a = appearance.texture_record("parquet", 3, 1.0)
    b = appearance.texture_record("parquet", 3, 1.0)
    c = appearance.texture_record("parquet", 4, 1.0)
    assert a == b and a["params"] != c["params"]
    assert appearance.texture_record("parquet", 3, 2.0)["tile_size_m"] == pytest.approx(2 * a["tile_size_m"])


def test_appearance_budget_is_checked():
    with pytest.raises(BudgetError, match="appearance.texture_probability"):
        normalize_budget({"appearance": {"texture_probability": 1.5}})
    with pytest.raises(BudgetError, match="appearance.texture_scale"):
        normalize_budget({"appearance": {"texture_scale": [2.0, 1.0]}})
    assert normalize_budget()["appearance"] == DEFAULT_BUDGET["appearance"]


@pytest.mark.skipif(not LLVM, reason="libLLVM >= 17 is needed for the quick JIT renders here")
def test_textured_surfaces_show_their_texture_in_the_albedo_image():
    """The label pass's albedo image (Mitsuba ``aov`` integrator, ``albedo``) of a textured floor varies from
    pixel to pixel, and its mean matches the texture's mean linear colour (box projection samples the
    whole tile evenly over many repeats; tolerance 15 % for the part of the tile in view)."""
    from render.scene import build_scene, render_label_and_aux
    from render.spec import make_spec

    backend.init_renderer(variant="llvm_ad_rgb")
    budget = _budget(texture_probability=1.0)
    budget["render"].update(width_px=96, height_px=72)
    budget["appearance"]["distractor_count"] = [0, 0]  # a rug's top would count as floor
    for seed in range(40):
        spec = make_spec(budget, {"chair": 1}, seed)
        texture = spec["room"]["materials"]["floor"].get("texture")
        if texture and texture["family"] in ("parquet", "ceramic_tile", "stone_tile", "marble", "carpet"):
            break
    else:
        raise AssertionError("no textured floor among 40 seeds")
    aux = render_label_and_aux(build_scene(spec))
    # Floor pixels: depth > 0 and the surface normal points up.
    floor = (aux.depth_m > 0) & (aux.normal_xyz[..., 2] > 0.99) & (aux.instance_ids == 0)
    assert floor.sum() > 200
    albedo = aux.albedo_rgb[floor]
    assert albedo.std(axis=0).max() > 0.01  # not one flat colour
    expected = appearance.texture_linear_rgb(texture).reshape(-1, 3).mean(axis=0)
    assert np.allclose(albedo.mean(axis=0), expected, rtol=0.15, atol=0.01)


def test_texture_families_in_the_budget_limit_what_surfaces_wear():
    """Only allowed families are drawn; a surface none of whose families is allowed stays plain, and the other
    surfaces' draws do not move (each material draws the same four numbers whatever it becomes)."""
    from render.spec import make_spec

    families_seen = set()
    for seed in range(30):
        full = make_spec(None, {"chair": 2, "sofa": 1}, seed)
        only = make_spec({"appearance": {"texture_families": ["parquet", "plaster"]}}, {"chair": 2, "sofa": 1}, seed)
        for slot, material in only["room"]["materials"].items():
            texture = material.get("texture")
            if texture:
                families_seen.add(texture["family"])
                assert texture["family"] in ("parquet", "plaster")
                assert full["room"]["materials"][slot].get("texture", {}).get("variant") is not None
        for obj in only["objects"]:
            assert all("texture" not in m for m in obj["materials"].values())
    assert families_seen == {"parquet", "plaster"}


@pytest.mark.parametrize("normal", [(0, 0, 1), (0, 0, -1), (1, 0, 0), (-1, 0, 0), (0, 1, 0), (0, -1, 0)])
def test_normal_map_tilt_follows_the_lambert_cosine_law_on_every_face(monkeypatch, normal):
    """A normal map that tilts every normal 20° towards +v, on a Lambertian quad lit by a directional light 45° off
    the face's normal towards its +v direction (∂p/∂v of the box projection): Lambert's cosine law gives the
    radiance ratio cos(45° − 20°) / cos 45° = 1.28 against the flat quad (0.85 would mean the tangent frame is
    left-handed on that face, so the map's +y runs along −v). Reference: Lambert's cosine law; Mitsuba's ``normalmap`` convention (n = 2·rgb − 1 in
    the frame (∂p/∂u, n × ∂p/∂u, n))."""
    import mitsuba as mi

    from render.scene import bsdf_dict, mesh_from_arrays

    backend.init_renderer(variant="llvm_ad_rgb")
    tilt = np.radians(20.0)
    tilted = np.array([0.0, np.sin(tilt), np.cos(tilt)], dtype=np.float32)
    monkeypatch.setattr(appearance, "texture_linear_rgb", lambda texture: np.full((8, 8, 3), 0.5, np.float32))
    n = np.asarray(normal, dtype=float)
    # Two in-plane axes, any orientation: the box projection decides which is u.
    a = np.roll(np.abs(n), 1)
    b = np.cross(n, a)
    corners = np.array([-a - b, a - b, a + b, -a + b]) * 0.5
    faces = np.array([[0, 1, 2], [0, 2, 3]])
    if np.cross(corners[1] - corners[0], corners[2] - corners[0]) @ n < 0:
        faces = faces[:, ::-1]
    vertices, faces_uv, uv = appearance.box_uv(corners, faces, 1.0)
    tri = vertices[faces_uv[0]]
    # ∂p/∂v of the first triangle: solve [Δp] = [Δuv] · [∂p/∂u; ∂p/∂v].
    duv = uv[faces_uv[0][1:]] - uv[faces_uv[0][0]]
    dp = tri[1:] - tri[0]
    dp_dv = np.linalg.solve(duv, dp)[1]
    dp_dv /= np.linalg.norm(dp_dv)
    to_light = np.cos(np.pi / 4) * n + np.sin(np.pi / 4) * dp_dv
    means = {}
    for mapped in (False, True):
        encoded = (np.broadcast_to((tilted if mapped else np.array([0.0, 0.0, 1.0])), (8, 8, 3)) + 1.0) / 2.0
        monkeypatch.setattr(appearance, "texture_normal_rgb", lambda texture, e=encoded: e.astype(np.float32))
        material = {
            "kind": "diffuse",
            "rgb": [0.5, 0.5, 0.5],
            "roughness": 1.0,
            "texture": {"family": "ceramic_tile", "params": {}, "seed": 0},
        }
        bsdf = mi.load_dict(bsdf_dict(material))
        scene = mi.load_dict(
            {
                "type": "scene",
                "quad": mesh_from_arrays("quad", vertices, faces_uv, bsdf, uv=uv),
                "sun": {"type": "directional", "direction": (-to_light).tolist(), "irradiance": 1.0},
                "sensor": {
                    "type": "perspective",
                    "fov": 20.0,
                    "to_world": mi.ScalarTransform4f().look_at(
                        origin=(2.0 * n).tolist(), target=[0, 0, 0], up=a.tolist()
                    ),
                    "film": {"type": "hdrfilm", "width": 16, "height": 16, "rfilter": {"type": "box"}},
                    "sampler": {"type": "independent", "sample_count": 4},
                },
                "integrator": {"type": "direct"},
            }
        )
        means[mapped] = float(np.asarray(mi.render(scene)).mean())
    assert means[True] / means[False] == pytest.approx(np.cos(np.radians(25.0)) / np.cos(np.radians(45.0)), rel=0.02)


def test_pooled_bsdfs_take_the_colour_and_relief_of_each_new_material():
    """A BSDF handed back to the pool and taken again for another tiled material carries the new material's
    base colour and normal map, read back through ``mi.traverse`` (the same images a fresh BSDF is built from)."""
    import mitsuba as mi

    from render.scene import BsdfPool

    backend.init_renderer(variant="llvm_ad_rgb")
    pool = BsdfPool()

    def tiled(variant: int) -> dict:
        return {
            "kind": "plastic",
            "rgb": [0.5, 0.5, 0.5],
            "roughness": 0.3,
            "family": "floor_tile",
            "texture": appearance.texture_record("ceramic_tile", variant, 1.0),
        }

    first, second = tiled(1), tiled(2)
    key, bsdf = pool.acquire(first)
    pool.release([(key, bsdf)])
    key_again, reused = pool.acquire(second)
    assert key_again == key and reused is bsdf  # the same instance, recoloured
    params = mi.traverse(reused)
    assert np.allclose(np.asarray(params["brdf_0.normalmap.data"]), appearance.texture_normal_rgb(second["texture"]))
    assert np.allclose(
        np.asarray(params["brdf_0.nested_bsdf.diffuse_reflectance.data"]),
        appearance.texture_linear_rgb(second["texture"]),
    )
    assert not np.allclose(
        appearance.texture_normal_rgb(first["texture"]), appearance.texture_normal_rgb(second["texture"])
    )
    # And its gloss map: the specular weight of the second tile's roughness map, not the first's.
    from render.scene import _gloss_weight, _snapped_material

    gloss = np.asarray(params["brdf_0.nested_bsdf.specular_reflectance.data"])
    assert np.allclose(gloss, _gloss_weight(_snapped_material(second)))
    assert not np.allclose(gloss, _gloss_weight(_snapped_material(first)))
    # A family without relief gets no normal map.
    assert appearance.texture_normal_rgb(appearance.texture_record("marble", 1, 1.0)) is None


def test_a_one_metre_checker_on_the_floor_has_its_corners_where_project_points_puts_them(monkeypatch):
    """A checker of 1 m squares (a 2 m texture tile of 2 × 2 squares, box-projected in metres) on a floor seen by
    a 28 mm camera: at every grid corner that OpenCV ``cv2.projectPoints`` places inside the image (with our
    camera's R, t, K), the albedo image shows the checker's corner — points inside its four squares (projected
    the same way) alternate dark and light. A wrong texture scale, a shifted projection or a mirrored axis moves the squares'
    corners off the predicted pixels. Reference: OpenCV projectPoints (pinhole model)."""
    import cv2
    import mitsuba as mi

    from render.camera import camera_matrices
    from render.scene import aov_integrator, bsdf_dict, mesh_from_arrays, sensor_dicts

    backend.init_renderer(variant="llvm_ad_rgb")
    squares = (np.indices((256, 256)) // 128).sum(axis=0) % 2  # 2 × 2 squares over the 2 m tile
    image = np.where(squares[..., None] == 1, 0.8, 0.05).astype(np.float32).repeat(3, axis=2)
    monkeypatch.setattr(appearance, "texture_linear_rgb", lambda texture: image)
    monkeypatch.setattr(appearance, "texture_normal_rgb", lambda texture: None)
    corners = np.array([[-6.0, -6.0, 0.0], [6.0, -6.0, 0.0], [6.0, 6.0, 0.0], [-6.0, 6.0, 0.0]])
    vertices, faces, uv = appearance.box_uv(corners, np.array([[0, 1, 2], [0, 2, 3]]), 2.0)
    material = {
        "kind": "diffuse",
        "rgb": [0.5, 0.5, 0.5],
        "roughness": 1.0,
        "texture": {"family": "wood", "params": {}, "seed": 0},
    }
    width_px, height_px = 160, 120
    camera = {
        "position_m": [0.3, -3.2, 1.6],
        "target_m": [0.1, 0.6, 0.0],
        "focal_length_mm": 28.0,
        "sensor_width_mm": 36.0,
    }
    rotation, translation, k_matrix = camera_matrices(camera, width_px, height_px)
    _, label_sensor = sensor_dicts(k_matrix, rotation, translation, width_px, height_px, spp=1)
    scene = mi.load_dict(
        {
            "type": "scene",
            "sensor": label_sensor,
            "floor": mesh_from_arrays("floor", vertices, faces, mi.load_dict(bsdf_dict(material)), uv=uv),
        }
    )
    albedo = np.asarray(mi.render(scene, integrator=aov_integrator()))[..., 2:5].mean(axis=2)
    rvec, _ = cv2.Rodrigues(rotation)

    def project(points: np.ndarray) -> np.ndarray:
        return cv2.projectPoints(np.asarray(points, np.float64), rvec, translation, k_matrix, None)[0].reshape(-1, 2)

    checked = 0
    for x in range(-4, 5):
        for y in range(-3, 6):
            (u, v), *neighbours = project([[x, y, 0], [x + 1, y, 0], [x, y + 1, 0], [x - 1, y, 0], [x, y - 1, 0]])
            # Corners whose squares are at least 12 px across (the far rows shrink to a few pixels).
            if (
                not (6 <= u < width_px - 6 and 6 <= v < height_px - 6)
                or min(np.hypot(*(np.asarray(n) - (u, v))) for n in neighbours) < 12
            ):
                continue
            # A point 40 % of the way to the centre of each of the corner's four squares lies inside that square,
            # whatever the perspective: diagonal squares share a colour, neighbouring ones do not.
            centres = project([[x + dx, y + dy, 0] for dx, dy in ((0.5, 0.5), (-0.5, -0.5), (0.5, -0.5), (-0.5, 0.5))])
            inside = (u, v) + 0.4 * (centres - (u, v))
            light = [bool(albedo[int(py), int(px)] > 0.4) for px, py in inside]
            assert light[0] == light[1] and light[2] == light[3] and light[0] != light[2], (x, y, u, v)
            checked += 1
    assert checked >= 6


def test_jitter_hsv_follows_the_hsv_definition():
    """HSV of the sRGB-encoded colour (Smith 1978; scikit-image ``rgb2hsv``): a 120° hue turn takes pure red to
    pure green, saturation × 0 leaves a grey of the same value, value × 0.5 halves the largest encoded channel."""
    from render import srgb

    red = srgb.decode(np.array([1.0, 0.0, 0.0]))
    assert np.allclose(appearance.jitter_hsv(red, 120.0, 1.0, 1.0), [0.0, 1.0, 0.0], atol=1e-9)
    assert np.allclose(appearance.jitter_hsv(red, -120.0, 1.0, 1.0), [0.0, 0.0, 1.0], atol=1e-9)
    orange = srgb.decode(np.array([0.9, 0.5, 0.2]))
    grey = srgb.encode(appearance.jitter_hsv(orange, 0.0, 0.0, 1.0))
    assert np.allclose(grey, 0.9, atol=1e-9)
    assert srgb.encode(appearance.jitter_hsv(orange, 0.0, 1.0, 0.5)).max() == pytest.approx(0.45)
    image = np.random.default_rng(0).uniform(0.01, 0.9, size=(4, 5, 3))
    assert np.allclose(appearance.jitter_hsv(image, 0.0, 1.0, 1.0), image, atol=1e-9)  # no jitter, same colours


def test_colour_jitter_in_the_budget_moves_plain_colours_and_tags_textures():
    from render.spec import make_spec

    composition = {"chair": 2, "sofa": 1, "floor_lamp": 1}
    still = {"hue_jitter_deg": 0.0, "saturation_scale": [1.0, 1.0], "value_scale": [1.0, 1.0]}
    moved = plain = 0
    for seed in range(12):
        off = make_spec({"appearance": still}, composition, seed)
        on = make_spec(None, composition, seed)
        for item_off, item_on in zip(off["objects"], on["objects"], strict=True):
            for slot, material in item_on["materials"].items():
                before = item_off["materials"][slot]
                if material.get("kind") == "metal" or not material.get("family"):
                    assert material["rgb"] == before["rgb"] and "hsv_jitter" not in (material.get("texture") or {})
                    continue
                texture = material.get("texture")
                if texture:
                    hue, sat, val = texture["hsv_jitter"]
                    assert abs(hue) <= 12.0 and 0.8 <= sat <= 1.2 and 0.85 <= val <= 1.15
                    assert "hsv_jitter" not in before["texture"]
                else:
                    plain += 1
                    moved += material["rgb"] != before["rgb"]
    assert plain > 10 and moved == plain


def test_a_jittered_texture_is_its_base_image_jittered_once_per_record():
    record = appearance.texture_record("parquet", 2, 1.0)
    jittered = {**record, "hsv_jitter": [30.0, 1.1, 0.9]}
    image = appearance.texture_linear_rgb(jittered)
    expected = appearance.jitter_hsv(appearance.texture_linear_rgb(record), 30.0, 1.1, 0.9)
    assert np.allclose(image, expected, atol=1e-6) and not image.flags.writeable
    assert appearance.texture_linear_rgb(dict(jittered)) is image  # cached: the HSV round trip runs once


def test_glossy_textures_vary_their_gloss_with_their_roughness_map():
    """Glazed tiles shine and their grout does not: a glossy tile's specular weight is lower where its roughness map
    is rougher (a GGX highlight's peak falls as 1/α², Walter et al., EGSR 2007), a metal takes the map as its GGX
    alpha per texel, and matte or plain materials keep one roughness."""
    import mitsuba as mi

    from render.scene import _gloss_weight, _snapped_material, bsdf_dict, roughness_span

    backend.init_renderer(variant="llvm_ad_rgb")
    tile = {
        "kind": "plastic",
        "rgb": [0.5] * 3,
        "roughness": 0.2,
        "texture": appearance.texture_record("ceramic_tile", 3, 1.0),
    }
    span = roughness_span(tile)
    assert span is not None and span[0] < 0.2 < span[1]
    roughness = appearance.texture_roughness(tile["texture"])
    gloss = _gloss_weight(_snapped_material(tile))[..., 0]
    assert gloss.max() == pytest.approx(1.0) and gloss.min() < 0.6
    assert np.corrcoef(roughness.ravel(), gloss.ravel())[0, 1] < -0.5
    assert float(gloss[roughness <= np.percentile(roughness, 20)].mean()) > float(
        gloss[roughness >= np.percentile(roughness, 95)].mean()
    )

    metal = {
        "kind": "metal",
        "rgb": [0.8] * 3,
        "roughness": 0.3,
        "texture": appearance.texture_record("brushed_metal", 2, 1.0),
    }
    metal_span = roughness_span(metal)
    assert metal_span is not None
    bsdf = mi.load_dict(bsdf_dict(_snapped_material(metal)))
    alphas = np.asarray(mi.traverse(bsdf)["brdf_0.alpha.data"])[..., 0]
    low, high = metal_span
    assert alphas.min() >= low**2 - 1e-6 and alphas.max() <= high**2 + 1e-6 and alphas.std() > 0

    carpet = {
        "kind": "diffuse",
        "rgb": [0.5] * 3,
        "roughness": 0.9,
        "texture": appearance.texture_record("carpet", 1, 1.0),
    }
    assert roughness_span(carpet) is None
    assert roughness_span({"kind": "plastic", "rgb": [0.5] * 3, "roughness": 0.3}) is None


def _all_materials(spec: dict) -> dict[str, list[dict]]:
    from render.appearance import _materials

    kinds: dict[str, list[dict]] = {}
    for kind, material in _materials(spec["room"], spec["objects"], spec.get("distractors")):
        kinds.setdefault(kind, []).append(material)
    return kinds


def test_each_surface_kind_has_its_own_colour_jitter_and_texture_scale():
    """Per surface kind: colour jitter 0 keeps that kind's generated colours while the others are still jittered, and
    a texture scale range multiplies that kind's texture sizes (same draw, so exactly ×2 here)."""
    from render.spec import make_spec

    composition = {"chair": 2, "sofa": 1, "coffee_table": 1}
    still = {"hue_jitter_deg": 0.0, "saturation_scale": [1.0, 1.0], "value_scale": [1.0, 1.0]}
    checked = 0
    for seed in range(4):
        plain = _all_materials(make_spec({"appearance": still}, composition, seed))
        objects_still = _all_materials(make_spec({"appearance": {"objects_colour_jitter": 0.0}}, composition, seed))
        assert objects_still["objects"] == plain["objects"]
        assert objects_still["walls"] != plain["walls"]  # the room is still jittered
        default = _all_materials(make_spec(None, composition, seed))
        bigger = _all_materials(make_spec({"appearance": {"floor_texture_scale": [2.0, 2.0]}}, composition, seed))
        for before, after in zip(default["floor"], bigger["floor"], strict=True):
            if before.get("texture"):
                assert after["texture"]["tile_size_m"] == pytest.approx(2 * before["texture"]["tile_size_m"], rel=1e-4)
                checked += 1
        assert bigger["objects"] == default["objects"] and bigger["walls"] == default["walls"]
    assert checked >= 1


def test_surface_kind_settings_are_checked_like_the_other_ranges():
    from render.budget import BudgetError, normalize_budget

    with pytest.raises(BudgetError, match="appearance.walls_colour_jitter"):
        normalize_budget({"appearance": {"walls_colour_jitter": -1.0}})
    with pytest.raises(BudgetError, match="appearance.floor_texture_scale"):
        normalize_budget({"appearance": {"floor_texture_scale": [2.0, 1.0]}})
