"""Rooms and placement, checked with shapely (footprint overlap) and scipy (yaw statistics, rotations)."""

from __future__ import annotations

import itertools
import json
import time

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation
from shapely.geometry import Polygon, box

from render import assets, dressing, layout
from render.budget import normalize_budget

COMPOSITIONS = {
    "living": ["sofa", "coffee_table", "armchair", "potted_plant", "wall_clock"],
    "dining": ["dining_table", "chair", "chair", "potted_plant", "wall_clock"],
    "bedroom": ["bed", "side_table", "potted_plant", "floor_lamp", "wall_clock"],
    "study": ["bookshelf", "chair", "side_table", "potted_plant", "ottoman"],
    "lounge": ["armchair", "armchair", "ottoman", "floor_lamp", "side_table"],
}
BIG_COMPOSITION = [
    "sofa",
    "coffee_table",
    "armchair",
    "floor_lamp",
    "potted_plant",
    "wall_clock",
    "side_table",
    "bookshelf",
]
LAYOUTS_PER_COMPOSITION = 100  # 5 × 100 = 500 seeded layouts
CLEARANCE_M = layout.DEFAULT_CLEARANCE_M


def _layout(budget: dict, composition: list[str], seed: int) -> tuple[dict, list[dict]]:
    rng = np.random.default_rng([seed, 2024])
    room = layout.sample_room(budget, rng)
    specs = [assets.sample_asset(name, rng) for name in composition]
    objects = layout.place_objects(room, specs, rng, max_objects_per_m2=budget["room"]["max_objects_per_m2"])
    return room, objects


@pytest.fixture(scope="module")
def layouts() -> list[tuple[dict, list[dict]]]:
    budget = normalize_budget()
    out = []
    for k, composition in enumerate(COMPOSITIONS.values()):
        for seed in range(LAYOUTS_PER_COMPOSITION):
            out.append(_layout(budget, composition, 1000 * k + seed))
    return out


def _z_range(obj: dict) -> tuple[float, float]:
    return obj["position_m"][2], obj["position_m"][2] + obj["height_m"]


def _support_polygon(host: dict, surface: dict) -> Polygon:
    (cx, cy), (w, d) = surface["center_m"], surface["size_m"]
    yaw = np.radians(host["yaw_deg"])
    c, s = np.cos(yaw), np.sin(yaw)
    local = np.array(
        [[cx - w / 2, cy - d / 2], [cx + w / 2, cy - d / 2], [cx + w / 2, cy + d / 2], [cx - w / 2, cy + d / 2]]
    )
    x, y = host["position_m"][:2]
    return Polygon(np.column_stack([x + c * local[:, 0] - s * local[:, 1], y + s * local[:, 0] + c * local[:, 1]]))


def test_500_layouts_are_collision_free_and_inside_their_rooms(layouts):
    assert len(layouts) == 500
    surface_count = wall_count = 0
    for room, objects in layouts:
        room_box = box(0.0, 0.0, room["width_m"], room["depth_m"])
        by_id = {o["instance_id"]: o for o in objects}
        polygons = {o["instance_id"]: layout.footprint_polygon(o) for o in objects}
        for obj in objects:
            # Inside the room in plan (shapely containment) and under the ceiling.
            assert room_box.buffer(1e-6).contains(polygons[obj["instance_id"]]), obj["asset_id"]
            assert _z_range(obj)[1] <= room["height_m"] + 1e-9
        for a, b in itertools.combinations(objects, 2):
            pa, pb = polygons[a["instance_id"]], polygons[b["instance_id"]]
            floor_pair = a["anchor"] in ("floor", "against_wall") and b["anchor"] in ("floor", "against_wall")
            if floor_pair:
                # Reference: shapely distance between the two footprint rectangles.
                assert pa.distance(pb) >= CLEARANCE_M - 1e-6, (a["asset_id"], b["asset_id"])
            elif b.get("support_instance_id") != a["instance_id"] and a.get("support_instance_id") != b["instance_id"]:
                # Objects at different heights may share plan area (a clock above a sofa), never space.
                (a0, a1), (b0, b1) = _z_range(a), _z_range(b)
                if a0 < b1 - 1e-9 and b0 < a1 - 1e-9:
                    assert pa.intersection(pb).area < 1e-9, (a["asset_id"], b["asset_id"])
        for obj in objects:
            if obj["placement"] == "wall":
                wall_count += 1
                assert obj["anchor"] == "wall"
                low, high = layout.object_world_bounds(obj)
                touches = {
                    "south": low[1],
                    "north": room["depth_m"] - high[1],
                    "west": low[0],
                    "east": room["width_m"] - high[0],
                }
                assert touches[obj["wall"]] == pytest.approx(0.0, abs=1e-6)  # back flat on the wall
                assert obj["position_m"][2] == pytest.approx(obj["mount_height_m"])
                centre_z = obj["mount_height_m"] + obj["height_m"] / 2
                assert 1.5 - 1e-6 <= centre_z <= 1.9 + 1e-6  # common practice: eye level or just above
                for window in room["windows"]:
                    if window["wall"] != obj["wall"]:
                        continue
                    along = (low[0], high[0]) if obj["wall"] in ("south", "north") else (low[1], high[1])
                    w0, w1 = window["center_m"] - window["width_m"] / 2, window["center_m"] + window["width_m"] / 2
                    s0, s1 = window["sill_m"], window["sill_m"] + window["height_m"]
                    overlap_plan = along[0] < w1 and w0 < along[1]
                    overlap_height = low[2] < s1 and s0 < high[2]
                    assert not (overlap_plan and overlap_height), "wall item over a window"
            if obj["support_instance_id"] is not None:
                surface_count += 1
                host = by_id[obj["support_instance_id"]]
                assert obj["anchor"] == "surface" and host["support_surfaces"]
                fits = [
                    s
                    for s in host["support_surfaces"]
                    if _support_polygon(host, s).buffer(1e-5).contains(polygons[obj["instance_id"]])
                    and obj["position_m"][2] == pytest.approx(host["position_m"][2] + s["height_m"], abs=1e-6)
                ]
                assert fits, "surface item not inside its support rectangle at its height"
            else:
                assert obj["anchor"] != "surface"
    assert wall_count >= 300 and surface_count >= 50  # the checks above actually ran


def test_objects_keep_input_order_and_one_based_ids(layouts):
    for (_, objects), composition in zip(
        layouts, [c for c in COMPOSITIONS.values() for _ in range(LAYOUTS_PER_COMPOSITION)], strict=True
    ):
        assert [o["class_name"] for o in objects] == composition
        assert [o["instance_id"] for o in objects] == list(range(1, len(composition) + 1))
        json.dumps(objects)


def _free_yaws(layouts) -> np.ndarray:
    return np.array([o["yaw_deg"] for _, objects in layouts for o in objects if o["anchor"] == "floor"])


def test_free_standing_yaw_is_uniform(layouts):
    yaws = _free_yaws(layouts)
    assert len(yaws) > 1000 and np.all((yaws >= 0.0) & (yaws < 360.0))
    # Reference: scipy's one-sample Kolmogorov–Smirnov test against U[0, 360).
    assert stats.kstest(yaws, stats.uniform(loc=0.0, scale=360.0).cdf).pvalue > 0.01


def test_the_yaw_check_can_fail(layouts):
    yaws = _free_yaws(layouts)
    # Deliberate biases the same check must catch: snapping a third of the items to the room axes,
    # and a sampler that favours small angles.
    snapped = yaws.copy()
    snapped[::3] = np.round(snapped[::3] / 90.0) * 90.0 % 360.0
    skewed = 360.0 * (yaws / 360.0) ** 1.3
    for biased in (snapped, skewed):
        assert stats.kstest(biased, stats.uniform(loc=0.0, scale=360.0).cdf).pvalue < 1e-4


def test_back_to_wall_items_face_into_the_room(layouts):
    seen = 0
    for room, objects in layouts:
        for obj in objects:
            if obj["anchor"] != "against_wall":
                continue
            seen += 1
            front = Rotation.from_euler("z", obj["yaw_deg"], degrees=True).apply([0.0, 1.0, 0.0])
            toward_centre = np.array([room["width_m"] / 2, room["depth_m"] / 2, 0.0]) - obj["position_m"]
            assert front @ toward_centre > 0
            low, high = layout.object_world_bounds(obj)
            gaps = [low[0], low[1], room["width_m"] - high[0], room["depth_m"] - high[1]]
            assert min(gaps) == pytest.approx(layout.WALL_GAP_M, abs=1e-5)
    assert seen > 100


def test_impossible_composition_names_class_and_reason():
    room = {"width_m": 3.0, "depth_m": 3.0, "height_m": 2.5, "windows": []}
    rng = np.random.default_rng(0)
    beds = [assets.sample_asset("bed", rng) for _ in range(12)]
    with pytest.raises(layout.LayoutError, match=r"12 objects \(bed ×12\) in a 3\.0 × 3\.0 m room: the density"):
        layout.place_objects(room, beds, rng, max_objects_per_m2=0.6)
    with pytest.raises(layout.LayoutError, match=r"bed ×12 in a 3\.0 × 3\.0 m room: their footprints need"):
        layout.place_objects(room, beds, rng)
    # Three beds pass the area check (about 8 m² of 9 m²) but cannot fit side by side or end to end.
    narrow = []
    for bed in beds[:3]:
        narrow.append({**bed, "footprint_m": [1.3, 2.1], "height_m": 1.0})
    with pytest.raises(
        layout.LayoutError,
        match=r"cannot place bed #\d of 3 in a 3\.0 × 3\.0 m room: no "
        r"collision-free spot after 400 tries \(floor \d+% covered\)",
    ):
        layout.place_objects(room, narrow, rng)
    assert issubclass(layout.LayoutError, ValueError)


def test_object_larger_than_the_room_is_refused():
    room = {"width_m": 2.0, "depth_m": 2.0, "height_m": 2.4, "windows": []}
    bed = {**assets.sample_asset("bed", np.random.default_rng(1)), "footprint_m": [1.6, 2.2]}
    with pytest.raises(layout.LayoutError, match=r"cannot place bed .*larger than the 2\.0 × 2\.0 m room"):
        layout.place_objects(room, [bed], np.random.default_rng(0))


def test_layouts_are_reproducible():
    budget = normalize_budget()
    one = json.dumps(_layout(budget, BIG_COMPOSITION[:5], 7), sort_keys=True)
    two = json.dumps(_layout(budget, BIG_COMPOSITION[:5], 7), sort_keys=True)
    assert one == two


def test_layout_sampling_is_fast():
    budget = normalize_budget({"room": {"width_m": [4.0, 6.0], "depth_m": [4.0, 6.0]}})
    timings = []
    for seed in range(200):
        rng = np.random.default_rng(seed)
        room = layout.sample_room(budget, rng)
        specs = [assets.sample_asset(name, rng) for name in BIG_COMPOSITION]
        start = time.perf_counter()
        objects = layout.place_objects(room, specs, rng, max_objects_per_m2=budget["room"]["max_objects_per_m2"])
        timings.append(time.perf_counter() - start)
        assert len(objects) == len(BIG_COMPOSITION)
    assert np.median(timings) < 0.020  # runs for every frame and in the planner's benchmark


def test_world_transform_matches_scipy_rotation():
    spec = assets.sample_asset("chair", np.random.default_rng(5))
    obj = {**spec, "position_m": [1.0, 2.0, 0.0], "yaw_deg": 123.0, "instance_id": 1, "support_instance_id": None}
    matrix = layout.object_transform(obj)
    # Reference: scipy's rotation about +z (counter-clockwise, right-handed).
    np.testing.assert_allclose(matrix[:3, :3], Rotation.from_euler("z", 123.0, degrees=True).as_matrix(), atol=1e-12)
    parts = layout.object_world_parts(obj)
    low, high = layout.object_world_bounds(obj)
    for part in parts:
        assert np.all(part.mesh.bounds[0] >= low - 1e-6) and np.all(part.mesh.bounds[1] <= high + 1e-6)
    local = assets.build_asset_parts(spec)
    np.testing.assert_allclose(
        parts[0].mesh.vertices,
        Rotation.from_euler("z", 123.0, degrees=True).apply(local[0].mesh.vertices) + [1.0, 2.0, 0.0],
        atol=1e-9,
    )
    assert layout.footprint_polygon(obj).area == pytest.approx(spec["footprint_m"][0] * spec["footprint_m"][1])


def test_sample_room_follows_the_budget():
    budget = normalize_budget()
    section = budget["room"]
    rooms = [layout.sample_room(budget, np.random.default_rng(seed)) for seed in range(1000)]
    with_window = 0
    for room in rooms:
        for key in ("width_m", "depth_m", "height_m"):
            assert section[key][0] <= room[key] <= section[key][1]
        assert room["floor_finish"] in ("wood", "tile", "carpet", "concrete")
        assert {m["kind"] for m in room["materials"].values()} <= {"diffuse", "plastic", "varnish", "metal"}
        with_window += bool(room["windows"])
        for window in room["windows"]:
            length = layout.wall_length_m(room, window["wall"])
            assert window["center_m"] - window["width_m"] / 2 >= layout.WINDOW_CORNER_GAP_M - 1e-6
            assert window["center_m"] + window["width_m"] / 2 <= length - layout.WINDOW_CORNER_GAP_M + 1e-6
            assert window["sill_m"] + window["height_m"] <= room["height_m"] - layout.WINDOW_LINTEL_GAP_M + 1e-6
            # Window sizes: 0.6–2.0 m wide, 0.9–1.6 m tall, sills 0.6–1.1 m (common practice).
            assert 0.6 - 1e-6 <= window["width_m"] <= 2.0 + 1e-6 and 0.9 - 1e-6 <= window["height_m"] <= 1.6 + 1e-6
        json.dumps(room)
    # Reference: scipy's exact binomial test of the budget's window probability.
    assert stats.binomtest(with_window, len(rooms), section["window_probability"]).pvalue > 0.001
    assert {r["floor_finish"] for r in rooms} == {"wood", "tile", "carpet", "concrete"}
    dressing.room_parts(rooms[0])  # a sampled room builds
