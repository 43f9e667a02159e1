"""Scene spec: canonical JSON, seeding per axis, composition validation."""

from __future__ import annotations

import json

import pytest

from render.budget import BudgetError
from render.spec import (
    AXES,
    SPEC_FORMAT_VERSION,
    derive_sub_seeds,
    make_spec,
    spec_from_json,
    spec_to_json,
    validate_composition,
)

COMPOSITION = {"chair": 2, "wall_clock": 1}


def test_same_inputs_give_byte_identical_json():
    first = spec_to_json(make_spec(None, COMPOSITION, 11))
    second = spec_to_json(make_spec(None, dict(reversed(list(COMPOSITION.items()))), 11))
    assert first == second
    assert "NaN" not in first and ", " not in first and ": " not in first


def test_spec_holds_everything_needed_to_re_render():
    spec = make_spec({"render": {"width_px": 320, "height_px": 240, "spp": 8}}, COMPOSITION, 5)
    assert spec["format_version"] == SPEC_FORMAT_VERSION
    assert spec["seed"] == 5 and set(spec["sub_seeds"]) == set(AXES)
    assert spec["render"] == {"width_px": 320, "height_px": 240, "spp": 8, "max_depth": 6, "denoise": True}
    assert spec["budget"]["render"]["width_px"] == 320  # the full normalized budget
    assert set(spec["budget"]) == {"render", "room", "lighting", "camera", "thresholds", "appearance", "variation"}
    assert spec["thresholds"] == spec["budget"]["thresholds"]
    assert spec["composition"] == {"chair": 2, "wall_clock": 1}
    assert len(spec["objects"]) == 3
    for obj in spec["objects"]:
        assert {"class_name", "params", "materials", "position_m", "yaw_deg", "instance_id"} <= set(obj)
    assert sorted(o["instance_id"] for o in spec["objects"]) == sorted({o["instance_id"] for o in spec["objects"]})
    assert spec["lights"] and all("kind" in light for light in spec["lights"])
    assert {"position_m", "target_m", "focal_length_mm", "f_number", "iso"} <= set(spec["camera"])


def test_floats_are_rounded_to_six_decimals():
    text = spec_to_json(make_spec(None, COMPOSITION, 3))

    def walk(value):
        if isinstance(value, float):
            assert round(value, 6) == value
        elif isinstance(value, dict):
            for item in value.values():
                walk(item)
        elif isinstance(value, list):
            for item in value:
                walk(item)

    walk(json.loads(text))


def test_different_seeds_differ():
    a, b = make_spec(None, COMPOSITION, 1), make_spec(None, COMPOSITION, 2)
    assert spec_to_json(a) != spec_to_json(b)
    assert a["sub_seeds"] != b["sub_seeds"]
    assert a["room"] != b["room"]
    assert a["camera"] != b["camera"]


def test_shared_layout_seed_keeps_layout_and_varies_lighting_and_camera():
    a = make_spec(None, COMPOSITION, 1, layout_seed=77)
    b = make_spec(None, COMPOSITION, 2, layout_seed=77)
    assert a["room"] == b["room"]
    assert a["objects"] == b["objects"]
    assert a["lights"] != b["lights"]
    assert a["camera"] != b["camera"]
    # the same layout and lighting with another view
    c = make_spec(None, COMPOSITION, 3, layout_seed=77, lighting_seed=5)
    d = make_spec(None, COMPOSITION, 4, layout_seed=77, lighting_seed=5)
    assert c["lights"] == d["lights"] and c["objects"] == a["objects"]
    assert c["camera"] != d["camera"]


def test_equal_sub_seeds_on_two_axes_are_still_independent_streams():
    from render.spec import axis_rng

    seeds = {axis: 9 for axis in AXES}
    draws = {axis: axis_rng(seeds, axis).random() for axis in AXES}
    assert len(set(draws.values())) == len(AXES)


def test_sub_seeds_derive_from_seed_sequence():
    import numpy as np

    children = np.random.SeedSequence(42).spawn(len(AXES))
    expected = {
        axis: int(child.generate_state(1, dtype=np.uint32)[0]) for axis, child in zip(AXES, children, strict=True)
    }
    assert derive_sub_seeds(42) == expected
    assert derive_sub_seeds(42, camera_seed=3)["camera"] == 3


def test_json_round_trip():
    spec = make_spec(None, COMPOSITION, 8)
    text = spec_to_json(spec)
    again = spec_from_json(text)
    assert again == spec
    assert spec_to_json(again) == text
    with pytest.raises(ValueError, match="format_version"):
        spec_from_json(json.dumps({**spec, "format_version": 999}))


@pytest.mark.parametrize(
    ("composition", "message"),
    [
        ({"unicorn": 1}, "unknown class 'unicorn'"),
        ({"chair": -1}, "negative"),
        ({"chair": 1.5}, "whole number"),
        ({"chair": True}, "whole number"),
        (["chair"], "expected"),
    ],
)
def test_bad_composition_is_a_clear_value_error(composition, message):
    with pytest.raises(ValueError, match=message):
        validate_composition(composition)
    with pytest.raises(ValueError, match=message):
        make_spec(None, composition, 1)


def test_bad_budget_and_seed():
    with pytest.raises(BudgetError, match="render.spp"):
        make_spec({"render": {"spp": 0}}, COMPOSITION, 1)
    with pytest.raises(ValueError, match="seed"):
        make_spec(None, COMPOSITION, -1)


def test_layout_error_propagates_with_its_reason():
    from render.layout import LayoutError

    tiny = {"room": {"width_m": [2.0, 2.0], "depth_m": [2.0, 2.0], "max_objects_per_m2": 0.05}}
    with pytest.raises(LayoutError) as info:
        make_spec(tiny, {"bed": 3, "sofa": 3}, 1)
    assert str(info.value)


# --- uploaded meshes ----------------------------------------------------------------------------------------


@pytest.fixture
def box_obj(tmp_path):
    import trimesh

    path = tmp_path / "footstool.obj"
    trimesh.creation.box(extents=(0.5, 0.4, 0.35)).export(path)
    return path


def _user_assets(path):
    return {
        "ottoman": [{"asset_id": "user/7", "mesh_path": str(path), "unit": "m", "up_axis": "z", "placement": "floor"}]
    }


def test_user_mesh_appears_with_its_asset_id_and_procedural_variety_stays(box_obj):
    from render.assets import build_asset_parts

    composition = {"ottoman": 2, "chair": 1}
    ids = []
    for seed in range(8):
        spec = make_spec(None, composition, seed, user_assets=_user_assets(box_obj))
        ottomans = [o for o in spec["objects"] if o["class_name"] == "ottoman"]
        ids += [o["asset_id"] for o in ottomans]
        assert all(o["asset_id"] != "user/7" for o in spec["objects"] if o["class_name"] == "chair")
        assert spec["user_assets"]["ottoman"][0]["asset_id"] == "user/7"
    assert "user/7" in ids
    assert any(i.startswith("ottoman/") for i in ids)
    user_obj = next(
        o
        for seed in range(8)
        for o in make_spec(None, composition, seed, user_assets=_user_assets(box_obj))["objects"]
        if o["asset_id"] == "user/7"
    )
    # Re-renderable from its JSON alone: the mesh path and unit are in the object.
    assert user_obj["variant"] == "user" and user_obj["mesh_path"] == str(box_obj.resolve())
    assert user_obj["footprint_m"] == [0.5, 0.4] and user_obj["height_m"] == 0.35
    assert len(build_asset_parts(user_obj)) == 1


def test_user_mesh_spec_is_deterministic_and_round_trips(box_obj):
    first = make_spec(None, {"ottoman": 2}, 5, user_assets=_user_assets(box_obj))
    second = make_spec(None, {"ottoman": 2}, 5, user_assets=_user_assets(box_obj))
    assert spec_to_json(first) == spec_to_json(second)
    assert spec_from_json(spec_to_json(first)) == first


def test_no_user_assets_keeps_the_old_bytes(box_obj):
    plain = spec_to_json(make_spec(None, COMPOSITION, 11))
    assert spec_to_json(make_spec(None, COMPOSITION, 11, user_assets=None)) == plain
    assert spec_to_json(make_spec(None, COMPOSITION, 11, user_assets={})) == plain
    # Uploads of a class the frame does not hold change nothing either.
    assert spec_to_json(make_spec(None, COMPOSITION, 11, user_assets=_user_assets(box_obj))) == plain
    assert "user_assets" not in json.loads(plain)
