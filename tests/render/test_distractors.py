"""Unlabelled clutter (distractors): streams, placement, geometry, and what the labels make of them.

Outside references named beside the checks: shapely for footprints and containment, OpenCV
``projectPoints`` for the independent projection of an occluding box, handbook furniture sizes
(from memory) in ``render.distractors.KINDS``.
"""

from __future__ import annotations

import copy
import math

import cv2
import numpy as np
import pytest
import shapely
from shapely.geometry import Polygon, box

from render import appearance, assets, backend, distractors, layout
from render.budget import DEFAULT_BUDGET, BudgetError, normalize_budget
from render.spec import make_spec, spec_to_json

LIVING = {
    "sofa": 1,
    "armchair": 1,
    "coffee_table": 1,
    "side_table": 1,
    "bookshelf": 1,
    "wall_clock": 1,
    "potted_plant": 1,
}
DINING = {"dining_table": 1, "chair": 2, "floor_lamp": 1, "ottoman": 1, "wall_clock": 1}
COMPOSITIONS = (LIVING, DINING, {"chair": 2, "coffee_table": 1, "potted_plant": 1, "wall_clock": 1})
W, H = 64, 48


def _budget(**appearance_fields) -> dict:
    budget = copy.deepcopy(DEFAULT_BUDGET)
    budget["render"].update(width_px=W, height_px=H, spp=1, denoise=False)
    budget["appearance"].update(appearance_fields)
    return budget


def _specs(count_range=(12, 12), seeds=range(30)):
    """Specs of several compositions and seeds (compositions that do not fit a room are skipped)."""
    out = []
    for composition in COMPOSITIONS:
        for seed in seeds:
            try:
                out.append(make_spec(_budget(distractor_count=list(count_range)), composition, seed))
            except ValueError:
                continue
    return out


@pytest.fixture(scope="module")
def crowded_specs():
    return _specs()


def _without(spec: dict, *keys: str) -> dict:
    out = copy.deepcopy(spec)
    out["budget"]["appearance"].pop("distractor_count")
    for key in keys:
        out.pop(key, None)
    return out


# ---------------------------------------------------------------------------------------------------------------------
# Streams and the spec
# ---------------------------------------------------------------------------------------------------------------------


def test_zero_distractors_change_nothing_else_in_the_spec():
    # Textures on everything: distractor materials draw on the texture stream after the room and objects.
    seen = 0
    for composition in COMPOSITIONS:
        for seed in range(6):
            off = make_spec(_budget(distractor_count=[0, 0], texture_probability=1.0), composition, seed)
            on = make_spec(_budget(distractor_count=[6, 10], texture_probability=1.0), composition, seed)
            assert "distractors" not in off
            seen += bool(on.get("distractors"))
            for key in ("room", "objects", "lights", "camera", "sub_seeds"):
                assert on[key] == off[key], key
            # Byte for byte, the spec with clutter is the spec without it plus its "distractors" key.
            assert spec_to_json(_without(on, "distractors")) == spec_to_json(_without(off))
    assert seen >= 15


def test_distractors_are_deterministic_and_recorded_in_full():
    spec = make_spec(_budget(), LIVING, 3)
    assert spec_to_json(spec) == spec_to_json(make_spec(_budget(), LIVING, 3))
    for record in spec["distractors"]:
        assert {"kind", "anchor", "position_m", "yaw_deg", "size_m", "params", "materials"} <= set(record)
        assert record["kind"] in distractors.KINDS
        assert record["anchor"] in ("floor", "surface", "seat", "wall")
        assert all("family" in material for material in record["materials"].values())


def test_frames_that_share_a_layout_share_their_clutter():
    shared = 0
    for seed in range(8):
        a = make_spec(_budget(distractor_count=[8, 8]), LIVING, seed, layout_seed=500 + seed)
        b = make_spec(_budget(distractor_count=[8, 8]), LIVING, seed + 100, layout_seed=500 + seed)
        assert a["camera"] != b["camera"]
        for first, second in ((a, b), (b, a)):
            for record in first.get("distractors", []):
                if record in second.get("distractors", []):
                    shared += 1
                else:  # the other frame's camera or bulbs left it out
                    assert distractors.clear_of_camera_and_lights([record], second["camera"], second["lights"]) == []
    assert shared >= 40


def test_default_count_is_in_the_budget_range(crowded_specs):
    low, high = DEFAULT_BUDGET["appearance"]["distractor_count"]
    counts = [len(make_spec(_budget(), LIVING, seed).get("distractors", [])) for seed in range(20)]
    assert max(counts) <= high and np.mean(counts) >= low
    # Crowded rooms: most of the items drawn find a spot; every anchor is used.
    placed = [len(spec.get("distractors", [])) for spec in crowded_specs]
    assert np.mean(placed) >= 6
    anchors = {record["anchor"] for spec in crowded_specs for record in spec.get("distractors", [])}
    assert anchors == {"floor", "surface", "seat", "wall"}


def test_distractor_count_is_checked():
    with pytest.raises(BudgetError, match="appearance.distractor_count"):
        normalize_budget({"appearance": {"distractor_count": [5, 2]}})
    with pytest.raises(BudgetError, match="appearance.distractor_count"):
        normalize_budget({"appearance": {"distractor_count": [0, 41]}})


# ---------------------------------------------------------------------------------------------------------------------
# Placement (footprints with shapely)
# ---------------------------------------------------------------------------------------------------------------------


def _room_polygon(room: dict) -> Polygon:
    return box(0.0, 0.0, room["width_m"], room["depth_m"])


def test_floor_distractors_stand_inside_the_room_clear_of_furniture(crowded_specs):
    checked = 0
    for spec in crowded_specs:
        room = _room_polygon(spec["room"])
        furniture = [layout.footprint_polygon(o) for o in spec["objects"] if o["anchor"] in ("floor", "against_wall")]
        floor = [d for d in spec.get("distractors", []) if d["anchor"] == "floor"]
        rugs = [d for d in floor if d["kind"] == "rug"]
        items = [d for d in floor if d["kind"] != "rug"]
        assert len(rugs) <= 1
        for rug in rugs:
            assert room.contains(distractors.footprint_polygon(rug)) and rug["position_m"][2] == 0.0
        for k, item in enumerate(items):
            footprint = distractors.footprint_polygon(item)
            assert room.contains(footprint)
            assert all(footprint.intersection(f).area == 0.0 for f in furniture), item["kind"]
            assert all(
                footprint.intersection(distractors.footprint_polygon(other)).area == 0.0 for other in items[k + 1 :]
            )
            # On the floor, or wholly on the rug and lifted by its thickness.
            on_rug = [r for r in rugs if distractors.footprint_polygon(r).contains(footprint)]
            expected_z = on_rug[0]["size_m"][2] if on_rug else 0.0
            assert item["position_m"][2] == pytest.approx(expected_z, abs=1e-6)
            if not on_rug:
                assert all(footprint.intersection(distractors.footprint_polygon(r)).area == 0.0 for r in rugs)
            checked += 1
    assert checked >= 30


def _support_polygon(host: dict, surface: dict) -> Polygon:
    c, s = math.cos(math.radians(host["yaw_deg"])), math.sin(math.radians(host["yaw_deg"]))
    (sx, sy), (w, d) = surface["center_m"], surface["size_m"]
    local = np.array(
        [[sx - w / 2, sy - d / 2], [sx + w / 2, sy - d / 2], [sx + w / 2, sy + d / 2], [sx - w / 2, sy + d / 2]]
    )
    return Polygon(local @ np.array([[c, s], [-s, c]]) + np.asarray(host["position_m"][:2]))


def test_surface_and_seat_distractors_rest_on_their_host(crowded_specs):
    on_surface = on_seat = 0
    for spec in crowded_specs:
        by_id = {o["instance_id"]: o for o in spec["objects"]}
        for item in spec.get("distractors", []):
            if item["anchor"] not in ("surface", "seat"):
                continue
            host = by_id[item["support_instance_id"]]
            footprint = distractors.footprint_polygon(item)
            z = item["position_m"][2]
            if item["anchor"] == "surface":
                resting = [
                    s
                    for s in host["support_surfaces"]
                    if abs(host["position_m"][2] + s["height_m"] - z) <= 0.01
                    and _support_polygon(host, s).buffer(1e-6).contains(footprint)
                ]
                assert resting, (item["kind"], host["class_name"])
                # Clear of the labelled things standing on the same host.
                for other in spec["objects"]:
                    if other.get("support_instance_id") == host["instance_id"]:
                        assert footprint.intersection(layout.footprint_polygon(other)).area == 0.0
                on_surface += 1
            else:
                seat = assets.seat_area(host)
                assert host["class_name"] in ("sofa", "armchair")
                assert z == pytest.approx(host["position_m"][2] + seat["height_m"], abs=0.01)
                assert _support_polygon(host, seat).buffer(1e-6).contains(footprint)
                assert z + item["size_m"][2] <= host["position_m"][2] + seat["back_top_m"] + 1e-6  # below the back
                on_seat += 1
        seat_items = [d for d in spec.get("distractors", []) if d["anchor"] == "seat"]
        for k, a in enumerate(seat_items):
            for b in seat_items[k + 1 :]:
                assert distractors.footprint_polygon(a).intersection(distractors.footprint_polygon(b)).area == 0.0
    assert on_surface >= 30 and on_seat >= 10


def _wall_rect(item: dict, room: dict) -> tuple[str, float, float, float, float]:
    """(wall, u0, u1, z0, z1) of a wall item: its extent along the wall and in height, computed here."""
    x, y, z = item["position_m"]
    wall = item["wall"]
    along = x if wall in ("south", "north") else y
    width = item["footprint_m"][0] if "footprint_m" in item else item["size_m"][0]
    height = item["height_m"] if "height_m" in item else item["size_m"][2]
    return wall, along - width / 2, along + width / 2, z, z + height


def test_wall_distractors_hang_on_a_wall_clear_of_windows_and_wall_items(crowded_specs):
    checked = 0
    facing = {"south": 0.0, "north": 180.0, "west": 270.0, "east": 90.0}
    for spec in crowded_specs:
        room = spec["room"]
        plane = {
            "south": ("y", 0.0),
            "north": ("y", room["depth_m"]),
            "west": ("x", 0.0),
            "east": ("x", room["width_m"]),
        }
        labelled = [_wall_rect(o, room) for o in spec["objects"] if o["anchor"] == "wall"]
        items = [d for d in spec.get("distractors", []) if d["anchor"] == "wall"]
        rects = [_wall_rect(d, room) for d in items]
        for k, (item, (wall, u0, u1, z0, z1)) in enumerate(zip(items, rects, strict=True)):
            axis, value = plane[wall]
            assert item["position_m"][0 if axis == "x" else 1] == pytest.approx(value, abs=1e-6)  # back on the wall
            assert item["yaw_deg"] == facing[wall]
            length = room["width_m"] if wall in ("south", "north") else room["depth_m"]
            assert 0.0 <= u0 and u1 <= length and 0.0 <= z0 and z1 <= room["height_m"]
            for window in room["windows"]:
                if window["wall"] == wall:
                    w0, w1 = window["center_m"] - window["width_m"] / 2, window["center_m"] + window["width_m"] / 2
                    s0, s1 = window["sill_m"], window["sill_m"] + window["height_m"]
                    assert not (u0 < w1 and w0 < u1 and z0 < s1 and s0 < z1), "over a window"
            for other in labelled + rects[:k] + rects[k + 1 :]:
                if other[0] == wall:
                    assert not (u0 < other[2] and other[1] < u1 and z0 < other[4] and other[3] < z1), "overlap"
            checked += 1
    assert checked >= 30


def test_distractors_near_the_camera_or_around_a_bulb_are_dropped():
    record = {"kind": "box", "anchor": "floor", "yaw_deg": 0.0, "size_m": [0.4, 0.4, 0.4]}
    camera = {"position_m": [1.0, 1.0, 1.2]}
    near = {**record, "position_m": [1.0, 1.3, 0.0]}  # right below the eye, but its top is 0.8 m down: kept
    around = {**record, "position_m": [1.0, 1.0, 0.9]}  # the eye is inside it
    far = {**record, "position_m": [3.0, 3.0, 0.0]}
    bulb = {**record, "position_m": [3.0, 1.0, 0.0]}  # holds a point light (a panel at its height does not count)
    # A picture 0.3 m beside the eye (the camera keeps that far from walls) is only a picture beside the camera.
    picture = {
        "kind": "picture_frame",
        "anchor": "wall",
        "yaw_deg": 270.0,
        "size_m": [0.5, 0.03, 0.4],
        "position_m": [0.7, 1.0, 1.0],
        "wall": "west",
    }
    lights = [{"kind": "point", "position_m": [3.0, 1.0, 0.3]}, {"kind": "panel", "center_m": [1.0, 1.3, 0.2]}]
    kept = distractors.clear_of_camera_and_lights([near, around, far, bulb, picture], camera, lights)
    assert kept == [near, far, picture]


# ---------------------------------------------------------------------------------------------------------------------
# Geometry
# ---------------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", sorted(distractors.KINDS))
def test_each_kind_builds_inside_its_footprint_box(kind):
    rng = np.random.default_rng(7)
    for _ in range(5):
        item = distractors.sample_distractor(kind, rng)
        item.update(position_m=[0.0, 0.0, 0.0], yaw_deg=0.0)
        parts = distractors.build_distractor_parts(item)
        assert {p.name for p in parts} == set(item["materials"])
        vertices = np.vstack([p.mesh.vertices for p in parts])
        w, d, h = item["size_m"]
        y0, y1 = (0.0, d) if item["anchor"] == "wall" else (-d / 2, d / 2)
        # A seat cushion leans back and sinks into the seat by up to its thickness.
        z0 = -item["params"]["thickness_m"] if kind == "cushion" else 0.0
        lo, hi = vertices.min(axis=0), vertices.max(axis=0)
        assert lo[0] >= -w / 2 - 1e-6 and hi[0] <= w / 2 + 1e-6
        assert lo[1] >= y0 - 1e-6 and hi[1] <= y1 + 1e-6
        assert lo[2] >= z0 - 1e-6 and hi[2] <= h + 1e-6
        # The box is tight: the mesh reaches each side of it within 1 cm (stacks and cushions within 3 cm).
        slack = 0.03 if kind in ("book_stack", "cushion") else 0.01
        assert hi[0] - lo[0] >= w - slack and hi[2] >= h - slack
        for part in parts:
            assert part.mesh.is_volume or kind in ("table_lamp",), part.name  # closed solids (lamp shades are open)


def test_a_rug_wears_one_whole_rug_texture_edge_to_edge():
    rng = np.random.default_rng(3)
    rug = distractors.sample_distractor("rug", rng)
    rug.update(position_m=[2.0, 1.5, 0.0], yaw_deg=30.0, anchor="floor")
    material = {**rug["materials"]["pile"], "texture": appearance.texture_record("rug", 0, 1.0)}
    top = [p for p in distractors.distractor_world_parts(rug)][0].mesh
    frame = distractors.texture_frame(rug, material)
    vertices, faces, uv = appearance.box_uv(top.vertices, top.faces, material["texture"]["tile_size_m"], frame)
    normals = np.cross(vertices[faces[:, 1]] - vertices[faces[:, 0]], vertices[faces[:, 2]] - vertices[faces[:, 0]])
    up = uv[faces[normals[:, 2] > 0].reshape(-1)]
    assert up.min(axis=0) == pytest.approx([0.0, 0.0], abs=1e-9)
    assert up.max(axis=0) == pytest.approx([1.0, 1.0], abs=1e-9)


# ---------------------------------------------------------------------------------------------------------------------
# Rendering: distractors are background to the labels, and they hide what is behind them
# ---------------------------------------------------------------------------------------------------------------------

VARIANT = "llvm_ad_rgb" if "llvm_ad_rgb" in backend.available_variants() else "scalar_rgb"


def test_distractors_never_get_labels_but_show_in_the_frame():
    from render.frame import render_frame
    from render.scene import build_scene

    spec = make_spec(_budget(distractor_count=[10, 10], texture_probability=0.0), LIVING, 4)
    assert len(spec["distractors"]) >= 5
    result = render_frame(spec, variant=VARIANT)
    ids = {o["instance_id"] for o in spec["objects"]}
    assert [i["instance_id"] for i in result.labels["instances"]] == [o["instance_id"] for o in spec["objects"]]
    assert set(np.unique(result.instance_ids).tolist()) <= ids | {0}
    built = build_scene(spec)
    names = [name for name in built.shape_instance if name.startswith("d")]
    assert len(names) >= len(spec["distractors"]) and all(built.shape_instance[n] == 0 for n in names)
    assert set(built.instance_triangles) == ids  # no amodal geometry for them either
    # They are there: the same frame without them has a different depth image.
    bare = render_frame({k: v for k, v in spec.items() if k != "distractors"}, variant=VARIANT)
    assert (np.abs(bare.depth_m - result.depth_m) > 1e-3).sum() > 0


def _box_record(centre: np.ndarray, side_m: float) -> dict:
    material = assets.sample_material("cardboard", np.random.default_rng(0))
    return {
        "kind": "box",
        "anchor": "floor",
        "position_m": [float(centre[0]), float(centre[1]), float(centre[2] - side_m / 2)],
        "yaw_deg": 0.0,
        "size_m": [side_m] * 3,
        "params": {"width_m": side_m, "depth_m": side_m, "height_m": side_m, "lid_height_m": 0.0},
        "materials": {"body": material},
    }


def _projected_box(record: dict, R: np.ndarray, t: np.ndarray, K: np.ndarray) -> Polygon:
    """Silhouette of the box: the convex hull (shapely) of its 8 corners projected with OpenCV ``projectPoints``."""
    lo, hi = distractors.distractor_bounds_m(record)
    corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
    rvec, _ = cv2.Rodrigues(np.asarray(R, dtype=np.float64))
    points, _ = cv2.projectPoints(corners, rvec, np.asarray(t, dtype=np.float64), np.asarray(K, dtype=np.float64), None)
    return shapely.MultiPoint(points.reshape(-1, 2)).convex_hull


def test_an_object_behind_a_distractor_box_loses_exactly_the_covered_pixels():
    from render.frame import render_frame

    spec = make_spec(_budget(distractor_count=[0, 0], texture_probability=0.0), {"ottoman": 1}, 2)
    bare = render_frame(spec, variant=VARIANT)
    K, R, t = (np.asarray(bare.labels["camera"][k], dtype=float) for k in ("K", "R", "t"))
    before = bare.labels["instances"][0]
    mask_before = bare.instance_ids == 1
    assert before["visible_fraction"] > 0.9 and mask_before.sum() > 100

    # Pixel centres (integer + 0.5) of the frame, for the independent coverage count.
    cols, rows = np.meshgrid(np.arange(W) + 0.5, np.arange(H) + 0.5)
    eye = np.asarray(spec["camera"]["position_m"], dtype=float)
    lo, hi = (np.asarray(v) for v in layout.object_world_bounds(spec["objects"][0]))
    target = (lo + hi) / 2
    right = R[0]  # camera x axis in world coordinates
    chosen = None
    for offset in np.linspace(0.0, 0.6, 13):
        centre = eye + 0.45 * (target - eye) + offset * right * np.linalg.norm(target - eye) * 0.2
        record = _box_record(centre, 0.12 * np.linalg.norm(target - eye))
        silhouette = _projected_box(record, R, t, K)
        covered = shapely.contains_xy(silhouette, cols, rows)
        share = (covered & mask_before).sum() / mask_before.sum()
        if 0.25 < share < 0.75:
            chosen = record, silhouette, covered
            break
    assert chosen is not None
    record, silhouette, covered = chosen
    occluded = render_frame({**spec, "distractors": [record]}, variant=VARIANT)
    after = occluded.labels["instances"][0]
    mask_after = occluded.instance_ids == 1

    expected = mask_before & ~covered
    # Pixels whose centre lies within half a pixel of the silhouette's outline may go either way.
    edge = shapely.distance(silhouette.exterior, shapely.points(cols, rows)) < 0.5
    assert not (mask_after & ~mask_before).any()
    assert not ((mask_after != expected) & ~edge).any()
    assert after["alone_px"] == before["alone_px"]  # the object's own geometry did not change
    tolerance = (edge & mask_before).sum() / before["alone_px"]
    assert after["visible_fraction"] == pytest.approx(expected.sum() / before["alone_px"], abs=tolerance + 1e-6)
    assert after["visible_fraction"] < before["visible_fraction"] - 0.2
