"""User mesh import: round trips through trimesh's own writers, unit and axis normalization, refusals."""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from render import meshes
from render.meshes import MeshError, load_user_mesh


def _box(extents: tuple[float, float, float], offset: tuple[float, float, float] = (0.0, 0.0, 0.0)) -> trimesh.Trimesh:
    mesh = trimesh.creation.box(extents=extents)
    mesh.apply_translation(offset)
    return mesh


@pytest.mark.parametrize("extension", ["obj", "ply", "stl", "glb"])
def test_round_trip_through_trimesh_writers(tmp_path, extension):
    # Reference: files written by trimesh's exporters (OBJ, PLY, STL, glTF binary).
    source = _box((0.4, 0.6, 0.8), offset=(3.0, -2.0, 5.0))
    path = tmp_path / f"box.{extension}"
    source.export(path)
    mesh = load_user_mesh(path, unit="m")
    assert len(mesh.faces) == 12
    # Recentred to the local-frame convention: footprint centre at the origin, base on z = 0.
    np.testing.assert_allclose(mesh.bounds, [[-0.2, -0.3, 0.0], [0.2, 0.3, 0.8]], atol=1e-6)
    assert mesh.volume == pytest.approx(0.4 * 0.6 * 0.8, rel=1e-6)


def test_centimetres_explicit_and_guessed(tmp_path):
    path = tmp_path / "chair_cm.obj"
    _box((45.0, 50.0, 90.0)).export(path)
    for unit in ("cm", "auto"):
        mesh = load_user_mesh(path, unit=unit)
        np.testing.assert_allclose(mesh.extents, [0.45, 0.50, 0.90], atol=1e-9)


def test_millimetres_guessed_and_inches_explicit(tmp_path):
    path = tmp_path / "table_mm.stl"
    _box((1200.0, 800.0, 740.0)).export(path)
    np.testing.assert_allclose(load_user_mesh(path).extents, [1.2, 0.8, 0.74], atol=1e-9)
    path_in = tmp_path / "stool_in.ply"
    _box((12.0, 12.0, 18.0)).export(path_in)
    # 1 in = 25.4 mm exactly (international yard and pound agreement, 1959).
    np.testing.assert_allclose(load_user_mesh(path_in, unit="in").extents, [0.3048, 0.3048, 0.4572], atol=1e-9)


def test_y_up_becomes_z_up_with_front_on_plus_y(tmp_path):
    # glTF 2.0 spec, "Coordinate System and Units": +Y up, the front of an asset faces +Z.
    body = _box((0.4, 1.0, 0.3))  # 1 m tall along y
    nose = _box((0.1, 0.1, 0.1), offset=(0.0, 0.0, 0.2))  # marks the front (+z in glTF)
    path = tmp_path / "lamp.glb"
    trimesh.util.concatenate([body, nose]).export(path)
    mesh = load_user_mesh(path, unit="m", up_axis="y")
    np.testing.assert_allclose(mesh.extents, [0.4, 0.4, 1.0], atol=1e-6)  # GLB stores float32
    # The nose (glTF z from 0.15 to 0.25) now sticks out on +y: the asset local frame's front.
    front = mesh.vertices[mesh.vertices[:, 1] > 0.1 + 1e-6]
    assert len(front) == 4 and np.all(np.abs(front[:, 0]) <= 0.05 + 1e-6)
    assert mesh.bounds[1][1] == pytest.approx(0.2, abs=1e-6)


def test_scene_with_node_transforms_is_flattened(tmp_path):
    scene = trimesh.Scene()
    scene.add_geometry(
        _box((0.2, 0.2, 0.2)), node_name="a", transform=trimesh.transformations.translation_matrix([1, 0, 0])
    )
    scene.add_geometry(
        _box((0.2, 0.2, 0.2)), node_name="b", transform=trimesh.transformations.translation_matrix([0, 0, 1])
    )
    path = tmp_path / "two.glb"
    scene.export(path)
    mesh = load_user_mesh(path, unit="m")
    assert len(mesh.faces) == 24
    np.testing.assert_allclose(mesh.extents, [1.2, 0.2, 1.2], atol=1e-6)


def _refusal(path, **kwargs) -> str:
    with pytest.raises(MeshError) as info:
        load_user_mesh(path, **kwargs)
    message = str(info.value)
    assert "\n" not in message and path.name in message  # one line that names the file
    return message


def test_refuses_empty_files(tmp_path):
    empty = tmp_path / "empty.stl"
    empty.write_bytes(b"")
    assert "empty" in _refusal(empty)
    points = tmp_path / "points.obj"
    points.write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\n")
    assert "no triangles" in _refusal(points)


@pytest.mark.parametrize("extension", ["glb", "ply", "stl", "obj"])
def test_refuses_corrupt_files(tmp_path, extension):
    path = tmp_path / f"junk.{extension}"
    path.write_bytes(np.random.default_rng(7).integers(0, 256, 4000, dtype=np.uint8).tobytes())
    message = _refusal(path)
    assert "unreadable or corrupt" in message or "no triangles" in message


def test_refuses_truncated_and_non_finite(tmp_path):
    bad_index = tmp_path / "bad_index.obj"
    bad_index.write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 7\n")
    assert "corrupt" in _refusal(bad_index) or "do not exist" in _refusal(bad_index)
    nan = tmp_path / "nan.obj"
    nan.write_text("v nan 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n")
    assert "NaN" in _refusal(nan)


def test_refuses_unsupported_extension_and_missing_file(tmp_path):
    fbx = tmp_path / "sofa.fbx"
    fbx.write_bytes(b"Kaydara FBX Binary")
    assert "unsupported file type '.fbx'" in _refusal(fbx)
    assert "cannot read" in _refusal(tmp_path / "missing.obj")


def test_refuses_absurd_scale(tmp_path):
    huge = tmp_path / "huge.obj"
    _box((50.0, 50.0, 50.0)).export(huge)
    assert "largest extent 50 m" in _refusal(huge, unit="m")
    tiny = tmp_path / "tiny.obj"
    _box((0.001, 0.001, 0.001)).export(tiny)
    assert "outside 0.02–10.0 m" in _refusal(tiny)
    # auto: 20,000 units reads as millimetres, 20 m, still refused.
    building = tmp_path / "building.stl"
    _box((20000.0, 100.0, 100.0)).export(building)
    assert "(unit mm)" in _refusal(building)


def test_refuses_too_many_faces(tmp_path, monkeypatch):
    path = tmp_path / "dense.ply"
    trimesh.creation.icosphere(subdivisions=3, radius=0.3).export(path)  # 1280 faces
    monkeypatch.setattr(meshes, "MAX_FACES", 1000)
    assert "1,280 faces, over the 1,000 limit" in _refusal(path)


def test_refuses_unknown_unit_and_axis(tmp_path):
    path = tmp_path / "box.obj"
    _box((0.4, 0.4, 0.4)).export(path)
    assert "unknown unit 'ft'" in _refusal(path, unit="ft")
    assert "unknown up axis 'x'" in _refusal(path, up_axis="x")
