"""Furniture arranged like a home (layout mode "home"), door clearance zones and the free-placement share.

Geometry is checked with shapely (distances, containment, nearest points) and scipy (rotations), never with
the layout module's own helpers; statistics with scipy's exact binomial test.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation
from shapely.geometry import LineString, Point, Polygon, box
from shapely.ops import nearest_points

from render import assets, distractors, layout
from render.budget import BudgetError, normalize_budget
from render.spec import make_spec

COMPOSITIONS = {
    "living": ["sofa", "coffee_table", "armchair", "side_table", "floor_lamp", "potted_plant", "wall_clock"],
    "dining": ["dining_table", "chair", "chair", "chair", "chair", "potted_plant", "wall_clock"],
    "bedroom": ["bed", "side_table", "side_table", "floor_lamp", "bookshelf", "wall_clock"],
    "lounge": ["sofa", "coffee_table", "armchair", "ottoman", "bookshelf", "chair"],
}
SEEDS_PER_COMPOSITION = 60
# Rooms a little larger than the default so that every composition fits under the density limit.
ROOMY = {"room": {"width_m": [4.0, 6.0], "depth_m": [4.0, 6.0]}}
WALL_CLASSES = ("sofa", "bed", "bookshelf")

# Handbook and rule-of-thumb values the arrangement is checked against.
# Neufert, Architects' Data, 4th ed.: a diner needs about 0.6 m of table edge, and the seat zone behind a
# dining table's edge is about 0.75–0.8 m deep (from memory).
DINER_EDGE_M = 0.6
DINING_SEAT_ZONE_M = 0.8
# Neufert; Panero & Zelnik, Human Dimension and Interior Space (1979): 0.30–0.50 m between a sofa's front
# and the coffee table (knee room, within reach) (from memory).
SOFA_COFFEE_TABLE_M = (0.30, 0.50)
# A side table or floor lamp "beside" a seat is within a seated person's sideways reach: no more than
# about 0.3 m of floor between them (Panero & Zelnik 1979, seated side reach, from memory; common practice).
BESIDE_REACH_M = 0.30
# "Against the wall": furniture backs stand off the wall by a skirting board, a few cm (common practice).
AGAINST_WALL_MAX_GAP_M = 0.05
# A seat faces its table within this angle (common practice: chairs are pulled out a little askew).
FACING_TOLERANCE_DEG = 15.0
# Door approach: the leaf's width by about 0.8 m in front of it stays free (common practice; the brief's value).
DOOR_ZONE_DEPTH_M = 0.8


def _home_layout(
    composition: list[str], seed: int, budget: dict, room: dict | None = None, mode: str = "home"
) -> tuple[dict, list[dict]]:
    rng = np.random.default_rng([seed, 31])
    if room is None:
        room = layout.sample_room(budget, rng)
    specs = [assets.sample_asset(name, rng) for name in composition]
    objects = layout.place_objects(room, specs, rng, max_objects_per_m2=budget["room"]["max_objects_per_m2"], mode=mode)
    return room, objects


@pytest.fixture(scope="module")
def home_layouts() -> list[tuple[dict, list[dict]]]:
    budget = normalize_budget(ROOMY)
    out = []
    for k, composition in enumerate(COMPOSITIONS.values()):
        for seed in range(SEEDS_PER_COMPOSITION):
            try:
                out.append(_home_layout(composition, 1000 * k + seed, budget))
            except layout.LayoutError:
                continue  # a room too cramped for the composition: reported, counted below
    return out


def _front(obj: dict) -> np.ndarray:
    """Unit vector of the object's front (local +y) in the world plan (scipy rotation about +z)."""
    return Rotation.from_euler("z", obj["yaw_deg"], degrees=True).apply([0.0, 1.0, 0.0])[:2]


def _polygon(obj: dict) -> Polygon:
    """Footprint rectangle from the asset's size, yaw and position (scipy rotation, independent of layout.py)."""
    w, d = obj["footprint_m"]
    local = np.array([[-w / 2, -d / 2, 0.0], [w / 2, -d / 2, 0.0], [w / 2, d / 2, 0.0], [-w / 2, d / 2, 0.0]])
    world = Rotation.from_euler("z", obj["yaw_deg"], degrees=True).apply(local)[:, :2] + obj["position_m"][:2]
    return Polygon(world)


def _related(obj: dict, objects: list[dict]) -> tuple[str, dict | None]:
    relation, _, related = obj["arrangement"].partition(":")
    by_id = {o["instance_id"]: o for o in objects}
    return relation, by_id[int(related)] if related else None


def _angle_deg(u: np.ndarray, v: np.ndarray) -> float:
    cos = float(np.dot(u, v) / (np.linalg.norm(u) * np.linalg.norm(v)))
    return math.degrees(math.acos(max(-1.0, min(1.0, cos))))


def test_enough_layouts_and_every_object_records_its_arrangement(home_layouts):
    assert len(home_layouts) >= 0.9 * len(COMPOSITIONS) * SEEDS_PER_COMPOSITION
    known = {"free", "against_wall", "wall", "on", "around_table", "in_front_of", "facing", "beside"}
    for _, objects in home_layouts:
        for obj in objects:
            relation, other = _related(obj, objects)
            assert relation in known, obj["arrangement"]
            assert (other is None) == (relation in ("free", "against_wall", "wall"))
            if relation == "on":
                assert other["instance_id"] == obj["support_instance_id"]
        json.dumps(objects)


def test_wall_furniture_backs_onto_a_wall_within_a_few_cm_and_faces_the_room(home_layouts):
    seen = against = 0
    for room, objects in home_layouts:
        walls = {
            "south": LineString([(0, 0), (room["width_m"], 0)]),
            "north": LineString([(0, room["depth_m"]), (room["width_m"], room["depth_m"])]),
            "west": LineString([(0, 0), (0, room["depth_m"])]),
            "east": LineString([(room["width_m"], 0), (room["width_m"], room["depth_m"])]),
        }
        inward = {"south": (0, 1), "north": (0, -1), "west": (1, 0), "east": (-1, 0)}
        for obj in objects:
            if obj["class_name"] not in WALL_CLASSES:
                continue
            seen += 1
            if obj["arrangement"] != "against_wall":
                continue
            against += 1
            # The back edge (local y = -d/2) in the world, by scipy's rotation.
            w, d = obj["footprint_m"]
            ends = (
                Rotation.from_euler("z", obj["yaw_deg"], degrees=True).apply(
                    [[-w / 2, -d / 2, 0.0], [w / 2, -d / 2, 0.0]]
                )[:, :2]
                + obj["position_m"][:2]
            )
            back = LineString(ends)
            wall = min(walls, key=lambda name: walls[name].distance(back))
            # Parallel to the wall and a few cm off it: both back corners within the gap.
            assert all(walls[wall].distance(Point(p)) <= AGAINST_WALL_MAX_GAP_M + 1e-6 for p in ends), obj
            # Facing into the room: the front is the wall's inward normal (1° for rounding).
            assert _angle_deg(_front(obj), np.array(inward[wall], dtype=float)) < 1.0
    assert seen > 200
    # Beds, sofas and bookshelves stand against a wall unless no wall has room left (common practice).
    assert against >= 0.9 * seen


def test_dining_chairs_face_their_table_at_a_handbook_distance(home_layouts):
    chairs = 0
    by_table: dict[tuple[int, int], list[dict]] = {}
    for k, (_, objects) in enumerate(home_layouts):
        for obj in objects:
            relation, table = _related(obj, objects)
            if relation != "around_table":
                continue
            assert obj["class_name"] == "chair" and table["class_name"] == "dining_table"
            chairs += 1
            chair_poly, table_poly = _polygon(obj), _polygon(table)
            # Facing the table: the front points at the point of the table's footprint nearest to the chair's
            # centre (shapely), i.e. square to the table's edge.
            _, near_table = nearest_points(Point(obj["position_m"][:2]), table_poly)
            to_table = np.array([near_table.x - obj["position_m"][0], near_table.y - obj["position_m"][1]])
            assert _angle_deg(_front(obj), to_table) <= FACING_TOLERANCE_DEG, obj["arrangement"]
            # Pulled up to the table: its whole footprint within the handbook's seat zone of the edge.
            farthest = max(table_poly.distance(Point(p)) for p in chair_poly.exterior.coords)
            assert layout.DEFAULT_CLEARANCE_M - 1e-6 <= chair_poly.distance(table_poly)
            assert farthest <= DINING_SEAT_ZONE_M, farthest
            by_table.setdefault((k, table["instance_id"]), []).append(obj)
    assert chairs >= 150
    # One diner per 0.6 m of edge: chairs at one table are at least that far apart, centre to centre.
    for group in by_table.values():
        for a, b in itertools.combinations(group, 2):
            assert math.dist(a["position_m"][:2], b["position_m"][:2]) >= DINER_EDGE_M - 1e-6


def test_coffee_tables_stand_in_front_of_sofas_within_reach(home_layouts):
    fronted = with_sofa = 0
    for _, objects in home_layouts:
        sofas = [o for o in objects if o["class_name"] == "sofa"]
        for obj in objects:
            if obj["class_name"] != "coffee_table" or not sofas:
                continue
            with_sofa += 1
            relation, sofa = _related(obj, objects)
            if relation != "in_front_of" or sofa["class_name"] != "sofa":
                continue
            fronted += 1
            gap = _polygon(obj).distance(_polygon(sofa))
            assert SOFA_COFFEE_TABLE_M[0] - 1e-6 <= gap <= SOFA_COFFEE_TABLE_M[1] + 1e-6, gap
            # In front: on the sofa's front side, not beside or behind it.
            offset = np.array(obj["position_m"][:2]) - sofa["position_m"][:2]
            assert offset @ _front(sofa) > sofa["footprint_m"][1] / 2
    assert with_sofa > 80 and fronted >= 0.7 * with_sofa


def test_side_tables_and_floor_lamps_stand_beside_a_seat(home_layouts):
    beside = total = 0
    for _, objects in home_layouts:
        has_seat = any(o["class_name"] in ("sofa", "armchair", "bed") for o in objects)
        for obj in objects:
            if obj["class_name"] not in ("side_table", "floor_lamp") or not has_seat:
                continue
            total += 1
            relation, seat = _related(obj, objects)
            if relation != "beside":
                continue
            beside += 1
            assert seat["class_name"] in ("sofa", "armchair", "bed")
            assert _polygon(obj).distance(_polygon(seat)) <= BESIDE_REACH_M
            # Beside, not in front: its centre is off the seat's side, within the seat's depth.
            offset = np.array(obj["position_m"][:2]) - seat["position_m"][:2]
            sideways = abs(offset @ np.array([_front(seat)[1], -_front(seat)[0]]))
            assert sideways > seat["footprint_m"][0] / 2
            assert abs(offset @ _front(seat)) <= seat["footprint_m"][1] / 2 + 1e-6
    assert total > 200 and beside >= 0.6 * total


def test_home_layouts_are_collision_free_inside_the_room_and_clear_of_windows(home_layouts):
    for room, objects in home_layouts:
        room_box = box(0.0, 0.0, room["width_m"], room["depth_m"])
        floor = [o for o in objects if o["anchor"] in ("floor", "against_wall")]
        for obj in objects:
            assert room_box.buffer(1e-6).contains(
                _polygon(obj) if obj["anchor"] != "wall" else layout.footprint_polygon(obj)
            )
            assert obj["position_m"][2] + obj["height_m"] <= room["height_m"] + 1e-9
        for a, b in itertools.combinations(floor, 2):
            # Reference: shapely distance between the footprint rectangles.
            assert _polygon(a).distance(_polygon(b)) >= layout.DEFAULT_CLEARANCE_M - 1e-6
        for obj in floor:
            poly = _polygon(obj)
            for window in room["windows"]:
                u0, u1 = window["center_m"] - window["width_m"] / 2, window["center_m"] + window["width_m"] / 2
                strip = {
                    "south": box(u0, 0, u1, 0.1),
                    "north": box(u0, room["depth_m"] - 0.1, u1, room["depth_m"]),
                    "west": box(0, u0, 0.1, u1),
                    "east": box(room["width_m"] - 0.1, u0, room["width_m"], u1),
                }
                if obj["height_m"] > window["sill_m"]:
                    # Nothing taller than the sill stands in the 10 cm in front of a window.
                    assert not poly.intersects(strip[window["wall"]]), (obj["class_name"], window)


def test_same_seed_same_home_layout():
    budget = normalize_budget(ROOMY)
    one = json.dumps(_home_layout(COMPOSITIONS["living"], 5, budget), sort_keys=True)
    two = json.dumps(_home_layout(COMPOSITIONS["living"], 5, budget), sort_keys=True)
    assert one == two
    assert one != json.dumps(_home_layout(COMPOSITIONS["living"], 6, budget), sort_keys=True)


# As sample_room writes them, with the casing width (architrave_m).
DOOR = {"wall": "south", "center_m": 1.2, "width_m": 0.9, "height_m": 2.1, "architrave_m": 0.06}


def _room_with_door(door: dict | None) -> dict:
    return {"width_m": 3.6, "depth_m": 3.4, "height_m": 2.5, "windows": [], "doors": [door] if door else []}


def _door_zone(room: dict, door: dict) -> Polygon:
    u0, u1 = door["center_m"] - door["width_m"] / 2, door["center_m"] + door["width_m"] / 2
    assert door["wall"] == "south"
    return box(u0, 0.0, u1, DOOR_ZONE_DEPTH_M)


@pytest.mark.parametrize("mode", ["home", "free"])
def test_the_floor_in_front_of_a_door_stays_free(mode):
    budget = normalize_budget()
    composition = ["sofa", "bookshelf", "side_table", "floor_lamp", "chair", "wall_clock"]
    zone = _door_zone(_room_with_door(DOOR), DOOR)
    blocked_without_door = 0
    for seed in range(60):
        room, objects = _home_layout(composition, seed, budget, room=_room_with_door(DOOR), mode=mode)
        for obj in objects:
            if obj["anchor"] == "wall":
                # Wall items: not on the door's wall within its width below the head.
                if obj["wall"] == "south" and obj["mount_height_m"] < DOOR["height_m"]:
                    x0, x1 = (
                        obj["position_m"][0] - obj["footprint_m"][0] / 2,
                        obj["position_m"][0] + obj["footprint_m"][0] / 2,
                    )
                    assert x1 <= zone.bounds[0] or x0 >= zone.bounds[2], obj
                continue
            assert not _polygon(obj).intersects(zone), (seed, obj["class_name"], obj["arrangement"])
        # Unlabelled clutter placed afterwards keeps the zone free too (rugs lie flat and may).
        clutter = distractors.sample_distractors(
            room, objects, {"distractor_count": [10, 10]}, np.random.default_rng(seed)
        )
        for item in clutter:
            if item["anchor"] == "floor" and item["kind"] != "rug":
                assert not distractors.footprint_polygon(item).intersects(zone), item["kind"]
        # The same draws without the door: the check above is not vacuous.
        _, unguarded = _home_layout(composition, seed, budget, room=_room_with_door(None), mode=mode)
        blocked_without_door += any(_polygon(o).intersects(zone) for o in unguarded if o["anchor"] != "wall")
    assert blocked_without_door >= 10


def test_a_malformed_door_is_refused_with_its_reason():
    rng = np.random.default_rng(0)
    specs = [assets.sample_asset("side_table", rng)]
    for door in (
        {"wall": "up", "center_m": 1.0, "width_m": 0.9, "height_m": 2.0},
        {"wall": "south", "center_m": 1.0},
        {"wall": "south", "center_m": 1.0, "width_m": -1, "height_m": 2.0},
    ):
        state = rng.bit_generator.state
        with pytest.raises(layout.LayoutError, match=r"door 1: "):
            layout.place_objects(_room_with_door(door), specs, rng, mode="home")
        assert rng.bit_generator.state == state  # refused before any draw


def test_a_composition_that_does_not_fit_names_class_and_reason():
    rng = np.random.default_rng(3)
    room = _room_with_door(DOOR) | {"width_m": 2.6, "depth_m": 2.6}
    beds = [{**assets.sample_asset("bed", rng), "footprint_m": [1.6, 2.1]} for _ in range(2)]
    with pytest.raises(
        layout.LayoutError,
        match=r"cannot place bed #\d of 2 in a 2\.6 × 2\.6 m room: no "
        r"collision-free spot after 400 tries \(floor \d+% covered, "
        r"1 zone\(s\) in front of doors and curtains kept free\)",
    ):
        layout.place_objects(room, beds, rng, mode="home")
    with pytest.raises(layout.LayoutError, match="unknown layout mode 'tidy'"):
        layout.place_objects(room, beds[:1], rng, mode="tidy")


def _modes(probability: float, seeds: range) -> list[str]:
    budget = {"room": {"free_placement_probability": probability}, "appearance": {"distractor_count": [0, 0]}}
    return [make_spec(budget, {"side_table": 1}, seed)["layout_mode"] for seed in seeds]


def test_free_placement_share_follows_the_budget_probability():
    default = normalize_budget()["room"]["free_placement_probability"]
    assert 0.2 <= default <= 0.3
    modes = _modes(default, range(400))
    assert set(modes) == {"free", "home"}
    free = modes.count("free")
    # Reference: scipy's exact binomial test; the same data refute a share of 0.5.
    assert stats.binomtest(free, len(modes), default).pvalue > 0.001
    assert stats.binomtest(free, len(modes), 0.5).pvalue < 1e-6
    assert set(_modes(0.0, range(30))) == {"home"} and set(_modes(1.0, range(30))) == {"free"}


def test_layout_mode_draw_leaves_the_room_and_assets_unchanged():
    home = make_spec({"room": {"free_placement_probability": 0.0}}, {"sofa": 1, "side_table": 1}, 9)
    free = make_spec({"room": {"free_placement_probability": 1.0}}, {"sofa": 1, "side_table": 1}, 9)
    assert (home["layout_mode"], free["layout_mode"]) == ("home", "free")
    assert home["room"] == free["room"]
    strip = ("position_m", "yaw_deg", "anchor", "arrangement", "support_instance_id")
    assert [{k: v for k, v in o.items() if k not in strip} for o in home["objects"]] == [
        {k: v for k, v in o.items() if k not in strip} for o in free["objects"]
    ]


def test_free_placement_probability_is_validated():
    with pytest.raises(BudgetError, match=r"room\.free_placement_probability: 1\.5 is outside the allowed 0–1"):
        normalize_budget({"room": {"free_placement_probability": 1.5}})
    with pytest.raises(layout.LayoutError, match="within 0–1"):
        layout.choose_layout_mode(-0.1, np.random.default_rng(0))


def test_rugs_lie_under_the_coffee_table_or_in_front_of_the_sofa(home_layouts):
    rugs = hosted = 0
    for k, (room, objects) in enumerate(home_layouts):
        hosts = [o for o in objects if o["class_name"] in ("coffee_table", "sofa")]
        if not hosts:
            continue
        clutter = distractors.sample_distractors(
            room, objects, {"distractor_count": [12, 12]}, np.random.default_rng(k)
        )
        for rug in (d for d in clutter if d["kind"] == "rug"):
            rugs += 1
            area = distractors.footprint_polygon(rug)
            # Under the coffee table (its centre on the rug), or the floor just in front of the sofa
            # (a point 0.2 m ahead of its front edge) on the rug: the living-room rule (common practice).
            spots = [
                Point(o["position_m"][:2])
                if o["class_name"] == "coffee_table"
                else Point(np.array(o["position_m"][:2]) + (o["footprint_m"][1] / 2 + 0.2) * _front(o))
                for o in hosts
            ]
            hosted += any(area.contains(spot) for spot in spots)
    assert rugs >= 30 and hosted >= 0.8 * rugs, (hosted, rugs)
