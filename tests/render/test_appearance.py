"""Textured materials: assignment in the spec, box-projected texture coordinates, textures in the render.

Frames here are tiny; the flat-surface share over 50 default frames comes from
``python -m workers.render.bench_appearance``.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from workers.render import appearance, backend
from workers.render.budget import DEFAULT_BUDGET, BudgetError, normalize_budget

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
    vertices = np.array([[0, 0, 0], [2, 0, 0], [2, 3, 0], [0, 3, 0],
                         [0, 1, 0], [2, 1, 0], [2, 1, 2.5], [0, 1, 2.5]], dtype=float)
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
    from workers.render.cli import default_composition
    from workers.render.spec import make_spec

    composition = default_composition()
    plain = make_spec(_budget(texture_probability=0.0), composition, 11)
    dressed = make_spec(_budget(texture_probability=1.0), composition, 11)
    assert not any(_textures(plain))
    # Textures take no draw from the layout, lighting or camera streams.
    for key in ("lights", "camera"):
        assert plain[key] == dressed[key]
    strip = [{k: v for k, v in obj.items() if k != "materials"} for obj in dressed["objects"]]
    assert strip == [{k: v for k, v in obj.items() if k != "materials"} for obj in plain["objects"]]
    materials = list(dressed["room"]["materials"].values()) + [m for o in dressed["objects"]
                                                               for m in (o.get("materials") or {}).values()]
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
    from workers.render.cli import default_composition
    from workers.render.spec import make_spec

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
    from workers.render.scene import build_scene, render_label_and_aux
    from workers.render.spec import make_spec

    backend.init_renderer(variant="llvm_ad_rgb")
    budget = _budget(texture_probability=1.0)
    budget["render"].update(width_px=96, height_px=72)
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
