"""Uploaded models keep their look (GLB and OBJ + MTL), face where their file says, and bad zips are refused.

References used below:
- glTF 2.0 specification (Khronos), §3.9.2: base colour = baseColorFactor × baseColorTexture, the texture
  sRGB-encoded; metallicFactor / roughnessFactor; §3.4: +Y up, an asset's front faces +Z.
- Wavefront OBJ / MTL (Alias|Wavefront): ``vt`` texture coordinates with v = 0 at the image's bottom, ``Kd``,
  ``Ns``, ``map_Kd``.
- IEC 61966-2-1:1999 sRGB decoding (``_srgb_decode`` writes the standard's formula out, independent of our module).
- White furnace (Pharr, Jakob & Humphreys, *Physically Based Rendering*, 3rd ed., §14.5 / energy conservation): a
  convex Lambertian surface of albedo ρ under a constant environment of radiance 1 reflects radiance exactly ρ.
"""

from __future__ import annotations

import io
import math
import zipfile
from pathlib import Path

import numpy as np
import pytest
import trimesh
from PIL import Image

from render import assets, backend, scene
from render.meshes import MeshError, extract_model_zip, load_user_model

RED_SRGB8 = (200, 40, 40)
GREEN_SRGB8 = (40, 160, 60)
WIDTH_PX, HEIGHT_PX = 96, 72
FOV_DEG = 20.0
EYE_DISTANCE_M = 2.0
# Tolerance in linear RGB: 16 spp of a Lambertian surface under a constant sky has no variance at all (every
# sample returns ρ), so what is left is bilinear texture filtering at the colour boundary, which the windows avoid.
LINEAR_TOLERANCE = 0.02


def _srgb_decode(value8: tuple[int, int, int]) -> np.ndarray:
    """IEC 61966-2-1:1999 §5.3 decoding (0.04045 break, slope 12.92, 2.4 power with offset 0.055)."""
    c = np.asarray(value8, dtype=float) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _two_colour_texture() -> Image.Image:
    pixels = np.zeros((32, 32, 3), np.uint8)
    pixels[:16] = RED_SRGB8  # image top rows
    pixels[16:] = GREEN_SRGB8
    return Image.fromarray(pixels)


# A 0.4 m × 0.3 m quad, texture coordinates (0,0) bottom left to (1,1) top right (OBJ / glTF-as-trimesh convention).
QUAD_V = np.array([[-0.2, 0.0, 0.0], [0.2, 0.0, 0.0], [0.2, 0.3, 0.0], [-0.2, 0.3, 0.0]])  # in the glTF x-y plane
QUAD_F = np.array([[0, 1, 2], [0, 2, 3]])
QUAD_UV = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])


def _textured_quad_glb(path: Path, *, roughness: float = 1.0, metallic: float = 0.0) -> Path:
    mesh = trimesh.Trimesh(QUAD_V, QUAD_F, process=False)
    material = trimesh.visual.material.PBRMaterial(
        baseColorTexture=_two_colour_texture(), roughnessFactor=roughness, metallicFactor=metallic
    )
    mesh.visual = trimesh.visual.TextureVisuals(uv=QUAD_UV, material=material)
    mesh.export(path)
    return path


def _obj_zip_bytes(*, with_texture: bool = True, extra: dict[str, bytes] | None = None) -> bytes:
    # Hand-written OBJ + MTL (Wavefront formats): the quad in the x-y plane facing +z, Kd 1 (the map is taken as
    # is), Ns 0 → trimesh's roughness (2 / (0 + 2))^(1/4) = 1: a matte surface.
    obj = (
        "mtllib quad.mtl\n"
        + "".join(f"v {x} {y} {z}\n" for x, y, z in QUAD_V)
        + "".join(f"vt {u} {v}\n" for u, v in QUAD_UV)
        + "usemtl painted\nf 1/1 2/2 3/3\nf 1/1 3/3 4/4\n"
    )
    mtl = "newmtl painted\nKd 1.0 1.0 1.0\nNs 0\nmap_Kd textures/paint.png\n"
    png = io.BytesIO()
    _two_colour_texture().save(png, format="PNG")
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("quad.obj", obj)
        archive.writestr("quad.mtl", mtl)
        if with_texture:
            archive.writestr("textures/paint.png", png.getvalue())
        for name, data in (extra or {}).items():
            archive.writestr(name, data)
    return buffer.getvalue()


@pytest.fixture(scope="module")
def mi():
    backend.init_renderer()
    import mitsuba

    return mitsuba


def _front_view(mi, parts: list[assets.Part]) -> np.ndarray:
    """Linear RGB of the parts seen from local +y (their front) under a constant white sky of radiance 1."""
    scene_dict = {
        "type": "scene",
        "integrator": {"type": "path", "max_depth": 3},
        "sky": {"type": "constant", "radiance": {"type": "rgb", "value": 1.0}},
        "sensor": {
            "type": "perspective",
            "fov": FOV_DEG,
            "fov_axis": "x",
            "to_world": mi.ScalarTransform4f().look_at(
                origin=[0, EYE_DISTANCE_M, 0.15], target=[0, 0, 0.15], up=[0, 0, 1]
            ),
            "film": {
                "type": "hdrfilm",
                "width": WIDTH_PX,
                "height": HEIGHT_PX,
                "pixel_format": "rgb",
                "rfilter": {"type": "box"},
            },
            "sampler": {"type": "independent", "sample_count": 16},
        },
    }
    for k, part in enumerate(parts):
        bsdf = mi.load_dict(scene.bsdf_dict(part.material))
        scene_dict[f"p{k}"] = scene.mesh_from_arrays(
            f"p{k}", part.mesh.vertices, part.mesh.faces, bsdf, uv=part.material.get("uv")
        )
    return np.asarray(mi.render(mi.load_dict(scene_dict)), dtype=np.float64)


def _pixel_of(height_m: float) -> tuple[int, int]:
    """Row and column of the point (0, 0, height_m) for the camera of :func:`_front_view` (pinhole projection)."""
    focal_px = (WIDTH_PX / 2) / math.tan(math.radians(FOV_DEG / 2))
    row = HEIGHT_PX / 2 - (height_m - 0.15) / EYE_DISTANCE_M * focal_px
    return int(row), WIDTH_PX // 2


def _window_mean(image: np.ndarray, height_m: float) -> np.ndarray:
    row, col = _pixel_of(height_m)
    return image[row - 2 : row + 3, col - 4 : col + 5].reshape(-1, 3).mean(axis=0)


def _kept_parts(path: Path, *, up_axis: str, front: str | None = None) -> tuple[dict, list[assets.Part]]:
    spec = assets.user_asset_spec(
        path, "wall_clock", "floor", np.random.default_rng(3), unit="m", up_axis=up_axis, front=front, look="keep"
    )
    return spec, assets.build_asset_parts(spec)


def _assert_two_colour_front(image: np.ndarray) -> None:
    # Upper quarter of the quad (z = 0.225 m) shows the image's top rows (red); lower quarter (0.075 m) green.
    np.testing.assert_allclose(_window_mean(image, 0.225), _srgb_decode(RED_SRGB8), atol=LINEAR_TOLERANCE)
    np.testing.assert_allclose(_window_mean(image, 0.075), _srgb_decode(GREEN_SRGB8), atol=LINEAR_TOLERANCE)
    # Outside the quad: the white sky itself (radiance 1).
    np.testing.assert_allclose(image[2, 2], [1.0, 1.0, 1.0], atol=1e-3)


def test_textured_glb_renders_its_texture_colours_under_a_white_sky(tmp_path, mi):
    # glTF file: y up, front +z (glTF 2.0 §3.4), so the quad in its x-y plane faces +z and ends facing local +y.
    spec, parts = _kept_parts(_textured_quad_glb(tmp_path / "quad.glb"), up_axis="+y", front="+z")
    assert len(parts) == 1 and parts[0].material["kind"] == "diffuse"  # roughness 1, metallic 0
    assert "family" not in spec["materials"]["part0"]  # the procedural texture step leaves it alone
    # The spec's mean colour is the texture's mean in linear light (half red, half green rows).
    np.testing.assert_allclose(
        spec["materials"]["part0"]["rgb"], (_srgb_decode(RED_SRGB8) + _srgb_decode(GREEN_SRGB8)) / 2, atol=1e-3
    )
    _assert_two_colour_front(_front_view(mi, parts))


def test_obj_mtl_zip_renders_its_texture_colours_under_a_white_sky(tmp_path, mi):
    archive = tmp_path / "quad.zip"
    archive.write_bytes(_obj_zip_bytes())
    model_path = extract_model_zip(archive, tmp_path / "unpacked")
    assert model_path.name == "quad.obj"
    # OBJ written z-forward like the glTF one; the planner says so with up +y, front +z.
    spec, parts = _kept_parts(model_path, up_axis="+y", front="+z")
    assert parts[0].material["user_texture"]["part"] == 0
    _assert_two_colour_front(_front_view(mi, parts))


def test_randomized_look_ignores_the_texture(tmp_path):
    path = _textured_quad_glb(tmp_path / "quad.glb")
    spec = assets.user_asset_spec(
        path, "wall_clock", "floor", np.random.default_rng(3), unit="m", up_axis="+y", look="randomize"
    )
    assert list(spec["materials"]) == ["body"] and "user_texture" not in spec["materials"]["body"]
    assert "look" not in spec  # the default is not written: older specs keep their bytes


def test_several_materials_become_several_parts_with_their_factors(tmp_path):
    # Two glTF primitives: a matte red seat and a polished gold leg (metallicFactor 1 → a metal, glTF §3.9.2).
    seat = trimesh.creation.box(extents=(0.5, 0.5, 0.05))
    seat.apply_translation((0, 0, 0.45))
    seat.visual = trimesh.visual.TextureVisuals(
        material=trimesh.visual.material.PBRMaterial(
            baseColorFactor=[0.6, 0.1, 0.1, 1.0], roughnessFactor=0.5, metallicFactor=0.0
        )
    )
    leg = trimesh.creation.box(extents=(0.05, 0.05, 0.45))
    leg.apply_translation((0, 0, 0.2))
    leg.visual = trimesh.visual.TextureVisuals(
        material=trimesh.visual.material.PBRMaterial(
            baseColorFactor=[0.9, 0.7, 0.3, 1.0], roughnessFactor=0.2, metallicFactor=1.0
        )
    )
    path = tmp_path / "stool.glb"
    trimesh.Scene([seat, leg]).export(path)
    spec = assets.user_asset_spec(
        path, "ottoman", "floor", np.random.default_rng(1), unit="m", up_axis="z", look="keep"
    )
    materials = sorted(spec["materials"].values(), key=lambda m: m["kind"])
    assert [m["kind"] for m in materials] == ["metal", "plastic"]
    # glTF factors are linear; trimesh keeps them as 8-bit, so 1/255 steps.
    np.testing.assert_allclose(materials[0]["rgb"], [0.9, 0.7, 0.3], atol=2 / 255)
    np.testing.assert_allclose(materials[1]["rgb"], [0.6, 0.1, 0.1], atol=2 / 255)
    assert materials[0]["roughness"] == pytest.approx(0.2, abs=1 / 255)
    assert len(assets.build_asset_parts(spec)) == 2


def _dial_clock_glb(path: Path) -> Path:
    """A wall clock modelled lying flat: dial disc in z ∈ [0, 0.03] with its face (a raised hand) on +z and
    twelve o'clock towards +y; the author's up is +y, the front +z."""
    dial = trimesh.creation.cylinder(radius=0.15, height=0.03, sections=24)
    dial.apply_translation((0, 0, 0.015))
    hand = trimesh.creation.box(extents=(0.01, 0.1, 0.01))
    hand.apply_translation((0, 0.05, 0.035))  # on the face, pointing at twelve
    trimesh.util.concatenate([dial, hand]).export(path)
    return path


def test_flat_modelled_clock_hangs_face_out_on_the_wall(tmp_path):
    from render.layout import object_world_parts, place_objects, sample_room
    from render.spec import normalize_budget

    path = _dial_clock_glb(tmp_path / "clock.glb")
    spec = assets.user_asset_spec(
        path, "wall_clock", "wall", np.random.default_rng(2), unit="m", up_axis="+y", front="+z", look="keep"
    )
    # Local frame: 0.3 m wide, 0.04 m deep (dial + hand), 0.3 m tall; the hand sticks out on +y (the front).
    np.testing.assert_allclose(spec["footprint_m"], [0.3, 0.04], atol=2e-3)
    assert spec["height_m"] == pytest.approx(0.3, abs=2e-3)
    for seed in range(4):
        rng = np.random.default_rng(seed)
        room = sample_room(normalize_budget(None), rng)
        placed = place_objects(room, [dict(spec)], rng)
        world = trimesh.util.concatenate([p.mesh for p in object_world_parts(placed[0])])
        vertices = world.vertices
        # Distance of every vertex from each wall plane; the clock hangs on the nearest one.
        distances = {
            "south": vertices[:, 1],
            "north": room["depth_m"] - vertices[:, 1],
            "west": vertices[:, 0],
            "east": room["width_m"] - vertices[:, 0],
        }
        wall = min(distances, key=lambda w: distances[w].min())
        away = distances[wall]
        assert away.min() == pytest.approx(0.0, abs=0.01)  # back on the wall
        assert away.max() == pytest.approx(0.04, abs=0.005)  # only its depth sticks out into the room
        # The hand (the face) is the part farthest from the wall: the face looks into the room.
        hand = vertices[away > 0.031]
        assert len(hand) >= 4 and np.all(np.abs(hand[:, 2] - hand[:, 2].mean()) < 0.06)
        # Twelve o'clock up: the hand lies above the dial's centre.
        centre_z = (vertices[:, 2].min() + vertices[:, 2].max()) / 2
        assert hand[:, 2].mean() > centre_z + 0.02


@pytest.mark.parametrize(
    ("up_axis", "front", "expected_extents"),
    [
        ("+z", None, (0.4, 0.2, 0.1)),  # no change
        ("+y", None, (0.4, 0.1, 0.2)),  # glTF default: front +z
        ("+x", "-y", (0.1, 0.2, 0.4)),
        ("-z", "+x", (0.2, 0.4, 0.1)),
    ],
)
def test_up_axis_and_front_turn_the_bounding_box(tmp_path, up_axis, front, expected_extents):
    # A 0.4 × 0.2 × 0.1 m box (file x, y, z): its extents show where each file axis ends up (local x, y, z).
    path = tmp_path / "box.ply"
    trimesh.creation.box(extents=(0.4, 0.2, 0.1)).export(path)
    model = load_user_model(path, unit="m", up_axis=up_axis, front=front)
    np.testing.assert_allclose(model.extents_m, expected_extents, atol=1e-6)
    assert model.parts[0].mesh.bounds[0][2] == pytest.approx(0.0, abs=1e-9)


def test_front_along_the_up_axis_is_refused(tmp_path):
    path = tmp_path / "box.ply"
    trimesh.creation.box(extents=(0.4, 0.2, 0.1)).export(path)
    with pytest.raises(MeshError, match="right angles"):
        load_user_model(path, unit="m", up_axis="+y", front="-y")


def test_rotation_is_proper_and_sends_up_and_front_home():
    from render.meshes import FRONT_AXES, UP_AXES, axis_rotation

    for up in UP_AXES:
        for front in FRONT_AXES:
            try:
                rotation = axis_rotation(up, front)
            except ValueError:
                continue
            assert np.linalg.det(rotation) == pytest.approx(1.0)  # a rotation, never a mirror
            up_vec = np.zeros(3)
            up_vec["xyz".index(up[-1])] = -1.0 if up.startswith("-") else 1.0
            front_vec = np.zeros(3)
            front_vec["xyz".index(front[-1])] = -1.0 if front.startswith("-") else 1.0
            np.testing.assert_allclose(rotation @ up_vec, [0, 0, 1], atol=1e-12)
            np.testing.assert_allclose(rotation @ front_vec, [0, 1, 0], atol=1e-12)


# --- zips ---------------------------------------------------------------------------------------------------------


def _zip(tmp_path: Path, entries: dict[str, bytes]) -> Path:
    path = tmp_path / "upload.zip"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in entries.items():
            archive.writestr(name, data)
    return path


@pytest.mark.parametrize("name", ["../evil.obj", "/etc/evil.obj", "C:/evil.obj", "a/../../evil.obj"])
def test_zip_entries_that_escape_are_refused_and_nothing_is_written(tmp_path, name):
    archive = _zip(tmp_path, {name: b"v 0 0 0\n"})
    dest = tmp_path / "out"
    with pytest.raises(MeshError, match="outside"):
        extract_model_zip(archive, dest)
    assert not dest.exists()
    assert not (tmp_path / "evil.obj").exists()


def test_zip_bomb_is_refused(tmp_path):
    # 8 MiB of zeros deflate to ~8 KiB (ratio ~1000:1, zlib's best case), far past any mesh or PNG.
    archive = _zip(tmp_path, {"model.obj": b"v 0 0 0\n", "padding.bin": bytes(8 * 2**20)})
    with pytest.raises(MeshError, match="zip bomb"):
        extract_model_zip(archive, tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_zip_without_or_with_two_models_is_refused(tmp_path):
    with pytest.raises(MeshError, match="exactly one model"):
        extract_model_zip(_zip(tmp_path, {"readme.txt": b"hi"}), tmp_path / "a")
    with pytest.raises(MeshError, match="exactly one model"):
        extract_model_zip(_zip(tmp_path, {"a.obj": b"v 0 0 0\n", "b.obj": b"v 0 0 0\n"}), tmp_path / "b")


def test_missing_texture_in_an_obj_zip_is_a_clear_error(tmp_path):
    archive = tmp_path / "quad.zip"
    archive.write_bytes(_obj_zip_bytes(with_texture=False))
    model = extract_model_zip(archive, tmp_path / "unpacked")
    with pytest.raises(MeshError, match=r"texture 'textures/paint.png' is missing"):
        load_user_model(model, unit="m", up_axis="+y")


def test_a_frame_with_a_kept_look_upload_renders_through_the_scene_hook(tmp_path, mi):
    """make_spec → build_scene (twice: the second reuses pooled BSDFs, recoloured from the image) → render."""
    from render import spec as spec_module
    from render.frame import render_frame

    path = _dial_clock_glb(tmp_path / "clock.glb")
    quad = _textured_quad_glb(tmp_path / "quad.glb")
    entries = {
        "wall_clock": [
            {
                "asset_id": "user/1",
                "mesh_path": str(quad),
                "unit": "m",
                "up_axis": "+y",
                "front": "+z",
                "placement": "wall",
                "look": "keep",
            },
            {
                "asset_id": "user/2",
                "mesh_path": str(path),
                "unit": "m",
                "up_axis": "+y",
                "front": "+z",
                "placement": "wall",
                "look": "keep",
            },
        ]
    }
    budget = {
        "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
        "appearance": {"distractor_count": [0, 0]},
    }
    spec = next(
        s
        for seed in range(20)
        for s in [spec_module.make_spec(budget, {"wall_clock": 2}, seed, user_assets=entries)]
        if any(o["asset_id"] == "user/1" for o in s["objects"])
    )
    textured = [o for o in spec["objects"] if o["asset_id"] == "user/1"][0]
    assert textured["materials"]["part0"]["user_texture"]["mesh_path"] == str(quad.resolve())
    # The spec re-reads from its JSON alone (the texture record is plain JSON).
    assert spec_module.spec_from_json(spec_module.spec_to_json(spec)) == spec
    first = scene.build_scene(spec)
    del first
    result = render_frame(spec, out_dir=tmp_path / "frame")
    assert (tmp_path / "frame" / "rgb.png").is_file()
    # The textured upload is a labelled instance of its own (the label pass counts its shape as the object's).
    assert "user/1" in {row["asset_id"] for row in result.labels["instances"]}


def _tilted_normal_glb(path: Path, tilt_up_deg: float) -> Path:
    """The quad with a constant glTF normal map tilted ``tilt_up_deg`` towards the image's top (+Y, glTF 2.0 §3.9.3)."""
    tilt = math.radians(tilt_up_deg)
    vector = np.array([0.0, math.sin(tilt), math.cos(tilt)])
    pixels = np.broadcast_to(np.round((vector + 1.0) / 2.0 * 255.0).astype(np.uint8), (8, 8, 3)).copy()
    mesh = trimesh.Trimesh(QUAD_V, QUAD_F, process=False)
    material = trimesh.visual.material.PBRMaterial(
        baseColorFactor=[200, 200, 200, 255],
        roughnessFactor=1.0,
        metallicFactor=0.0,
        normalTexture=Image.fromarray(pixels),
    )
    mesh.visual = trimesh.visual.TextureVisuals(uv=QUAD_UV, material=material)
    mesh.export(path)
    return path


def test_a_glb_normal_map_tilts_the_shading_normal_the_way_the_file_says(tmp_path, mi):
    """A normal map tilted 40° towards the texture's top (glTF: +Y up the image, §3.9.3) on a quad whose texture top
    is up: lit by a sun from above and in front, Lambert's cosine law (cos θ = n·l) makes it brighter than the flat
    quad (0.94 vs 0.50 of the irradiance) and the map tilted down darker (0); a flipped green channel would swap
    the two. (Lit this way, the flat quad gets cos 60° = 0.5; tilted up, 0.5·cos 40° + 0.866·sin 40° = 0.94.)"""
    brightness = {}
    for name, tilt in (("up", 40.0), ("flat", 0.0), ("down", -40.0)):
        spec, parts = _kept_parts(_tilted_normal_glb(tmp_path / f"{name}.glb", tilt), up_axis="+y", front="+z")
        material = parts[0].material
        assert ("user_normal" in material) == (tilt != 0.0) or name == "flat"
        scene_dict = {
            "type": "scene",
            "integrator": {"type": "direct"},
            "sun": {
                "type": "directional",
                "direction": [0.0, -0.5, -0.866],
                "irradiance": {"type": "rgb", "value": 1.0},
            },
            "sensor": {
                "type": "perspective",
                "fov": FOV_DEG,
                "fov_axis": "x",
                "to_world": mi.ScalarTransform4f().look_at(
                    origin=[0, EYE_DISTANCE_M, 0.15], target=[0, 0, 0.15], up=[0, 0, 1]
                ),
                "film": {"type": "hdrfilm", "width": WIDTH_PX, "height": HEIGHT_PX, "rfilter": {"type": "box"}},
                "sampler": {"type": "independent", "sample_count": 4},
            },
        }
        for k, part in enumerate(parts):
            bsdf = mi.load_dict(scene.bsdf_dict(scene._snapped_material(part.material) | {"uv": None}))
            scene_dict[f"p{k}"] = scene.mesh_from_arrays(
                f"p{k}", part.mesh.vertices, part.mesh.faces, bsdf, uv=part.material.get("uv")
            )
        image = np.asarray(mi.render(mi.load_dict(scene_dict)), dtype=np.float64)
        brightness[name] = float(_window_mean(image, 0.15).mean())
    assert brightness["flat"] > 0
    # Lambert alone gives 0.94 / 0.5 = 1.88; Mitsuba's normal mapping keeps some light back at strong tilts
    # (measured here: 0.885 instead of 0.94 at 40° on a bare quad), so the bound leaves room for that.
    assert 1.5 < brightness["up"] / brightness["flat"] < 1.95
    assert brightness["down"] < 0.1 * brightness["flat"]


def test_normal_maps_keep_their_channels_and_unit_length():
    """glTF normal texture values are the vector itself (linear, §3.9.3): (128, 255, 128) is tilted up the image."""
    from render.user_materials import mitsuba_normal_map

    up = mitsuba_normal_map(np.array([[[128, 255, 128]]], np.uint8))[0, 0] * 2 - 1
    assert up[1] > 0.5 and abs(up[0]) < 0.02 and np.linalg.norm(up) == pytest.approx(1.0, abs=1e-3)
