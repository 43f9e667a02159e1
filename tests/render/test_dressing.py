"""Dressed rooms: room types, doors, skirting, window frames, curtains and window glass."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import integrate
from shapely.geometry import Polygon

from render import dressing, layout
from render.budget import BudgetError, normalize_budget
from render.dressing import WALL_THICKNESS_M, room_parts


def _rooms(count: int, budget: dict | None = None) -> list[dict]:
    normalized = normalize_budget(budget)
    return [layout.sample_room(normalized, np.random.default_rng(seed)) for seed in range(count)]


def _door_span(door: dict) -> tuple[float, float]:
    half = door["width_m"] / 2 + door["architrave_m"]
    return door["center_m"] - half, door["center_m"] + half


def test_doors_fit_their_walls_clear_of_windows_corners_and_each_other():
    rooms = _rooms(400, {"room": {"door_count": [2, 2], "window_probability": 1.0}})
    with_door = 0
    for room in rooms:
        with_door += bool(room["doors"])
        for door in room["doors"]:
            u0, u1 = _door_span(door)
            length = layout.wall_length_m(room, door["wall"])
            assert dressing.DOOR_OPENING_GAP_M - 1e-6 <= u0 and u1 <= length - dressing.DOOR_OPENING_GAP_M + 1e-6
            # Interior door leaves 0.76–0.90 m × 1.98–2.10 m (Neufert, Architects' Data, from memory); a low
            # ceiling may shorten the leaf, never below 1.8 m.
            assert 0.76 - 1e-6 <= door["width_m"] <= 0.90 + 1e-6
            assert 1.8 <= door["height_m"] <= 2.10 + 1e-6
            assert door["height_m"] + door["architrave_m"] <= room["height_m"] - dressing.DOOR_HEAD_GAP_M + 1e-6
            for window in room["windows"]:
                if window["wall"] == door["wall"]:
                    w0, w1 = window["center_m"] - window["width_m"] / 2, window["center_m"] + window["width_m"] / 2
                    assert (
                        u1 + dressing.DOOR_OPENING_GAP_M <= w0 + 1e-6 or w1 + dressing.DOOR_OPENING_GAP_M <= u0 + 1e-6
                    )
        spans = sorted((d["wall"], *_door_span(d)) for d in room["doors"])
        for (wall_a, _, a1), (wall_b, b0, _) in zip(spans, spans[1:], strict=False):
            assert wall_a != wall_b or a1 <= b0 + 1e-6
    assert with_door == len(rooms)  # every default-sized room has room for a door


def test_door_count_and_curtains_follow_the_budget():
    assert all(not room["doors"] for room in _rooms(50, {"room": {"door_count": [0, 0]}}))
    assert all(
        not room["curtains"] for room in _rooms(50, {"room": {"curtain_probability": 0.0, "window_probability": 1.0}})
    )
    # With every window curtained at probability 1 × the bedroom's 0.9: scipy's exact binomial test.
    from scipy import stats

    rooms = _rooms(400, {"room": {"room_types": ["bedroom"], "window_probability": 1.0}})
    windows = sum(len(r["windows"]) for r in rooms)
    curtains = sum(len(r["curtains"]) for r in rooms)
    assert stats.binomtest(curtains, windows, dressing.ROOM_TYPES["bedroom"].curtain_probability).pvalue > 0.001


def test_room_types_are_a_budget_axis_with_their_own_finishes():
    rooms = _rooms(600)
    assert {r["room_type"] for r in rooms} == set(dressing.ROOM_TYPES)
    offices = _rooms(300, {"room": {"room_types": ["office"]}})
    assert {r["room_type"] for r in offices} == {"office"}
    # Offices are carpeted more often than dining rooms, which are tiled more often (the table's weights).
    dining = _rooms(300, {"room": {"room_types": ["dining_room"]}})
    share = lambda rooms, finish: sum(r["floor_finish"] == finish for r in rooms) / len(rooms)  # noqa: E731
    assert share(offices, "carpet") > share(dining, "carpet") + 0.2
    assert share(dining, "tile") > share(offices, "tile") + 0.1
    assert {r["floor_finish"] for r in rooms} == set(dressing.FLOOR_FINISHES)


@pytest.mark.parametrize(
    "value, message",
    [
        (["kitchen"], "unknown 'kitchen'"),
        ([], "choose at least one"),
        ("bedroom", "expected a list"),
    ],
)
def test_room_types_refuse_bad_input(value, message):
    with pytest.raises(BudgetError, match=message):
        normalize_budget({"room": {"room_types": value}})


def test_room_types_keep_their_canonical_order():
    assert normalize_budget({"room": {"room_types": ["office", "bedroom", "office"]}})["room"]["room_types"] == [
        "bedroom",
        "office",
    ]


def test_dressing_is_deterministic_and_plain_json():
    budget = normalize_budget()
    a = layout.sample_room(budget, np.random.default_rng(7))
    b = layout.sample_room(budget, np.random.default_rng(7))
    assert json.dumps(a, sort_keys=True) == json.dumps(b, sort_keys=True)


def test_dressing_geometry_stays_on_the_walls_and_out_of_furniture_space():
    """Skirting boards are thinner than the gap furniture keeps from a wall; everything lies within the room's
    shell; skirting stops at doors."""
    for room in _rooms(60, {"room": {"window_probability": 1.0}}):
        parts = {p.name: p for p in room_parts(room)}
        assert "skirting" in parts
        assert room["skirting"]["depth_m"] < layout.WALL_GAP_M
        t = WALL_THICKNESS_M
        for name, part in parts.items():
            if name.startswith(("floor", "ceiling", "wall_")):
                continue
            low, high = part.mesh.bounds
            assert low[0] >= -t - 1e-6 and low[1] >= -t - 1e-6 and low[2] >= -1e-6
            assert high[0] <= room["width_m"] + t + 1e-6 and high[1] <= room["depth_m"] + t + 1e-6
            assert high[2] <= room["height_m"] + 1e-6
        skirting = parts["skirting"].mesh
        centres = skirting.triangles_center
        for door in room["doors"]:
            u0, u1 = _door_span(door)
            inner = dressing.wall_to_world(
                room, door["wall"], np.array([[u0 + 0.01, 0.005, 0.03], [u1 - 0.01, 0.005, 0.03]])
            )
            lo, hi = inner.min(axis=0), inner.max(axis=0)
            inside = np.all((centres >= lo - 1e-6) & (centres <= hi + 1e-6), axis=1)
            assert not inside.any(), "skirting runs across a door"


def test_wall_items_never_hang_on_doors_or_curtains():
    room = {
        "width_m": 4.0,
        "depth_m": 4.0,
        "height_m": 2.6,
        "windows": [],
        "doors": [
            {
                "wall": "south",
                "center_m": 1.0,
                "width_m": 0.8,
                "height_m": 2.0,
                "architrave_m": 0.07,
                "handle_height_m": 1.0,
                "panelled": False,
                "hinge_left": True,
            }
        ],
        "curtains": [],
    }
    assert layout._blocks_window(room, "south", 0.8, 1.2, 1.4, 1.6)  # a picture over the door
    assert not layout._blocks_window(room, "south", 2.2, 2.6, 1.4, 1.6)
    assert not layout._blocks_window(room, "north", 0.8, 1.2, 1.4, 1.6)


def _zone_polygon(zone) -> Polygon:
    ux, uy, vx, vy = zone.ux, zone.uy, -zone.uy, zone.ux
    return Polygon(
        [
            (zone.cx + su * zone.hw * ux + sv * zone.hd * vx, zone.cy + su * zone.hw * uy + sv * zone.hd * vy)
            for su, sv in ((-1, -1), (1, -1), (1, 1), (-1, 1))
        ]
    )


def test_clearance_zones_lie_in_front_of_doors_and_under_curtains():
    room = {
        "width_m": 4.0,
        "depth_m": 5.0,
        "height_m": 2.6,
        "windows": [],
        "doors": [{"wall": "east", "center_m": 2.0, "width_m": 0.8, "height_m": 2.0, "architrave_m": 0.07}],
        "curtains": [
            {
                "wall": "south",
                "rod_start_m": 1.0,
                "rod_end_m": 3.0,
                "panel_m": 0.4,
                "bottom_m": 0.01,
                "rod_z_m": 2.3,
                "sides": ["left", "right"],
                "fold_depth_m": 0.03,
            }
        ],
    }
    door, left, right = (_zone_polygon(z) for z in layout.door_clearance_zones(room))
    x0, y0, x1, y1 = door.bounds
    assert (x1 - x0, y0, y1) == pytest.approx((0.8, 2.0 - 0.47, 2.0 + 0.47))  # 0.8 m of free floor (common practice)
    assert x1 == pytest.approx(4.0)
    assert left.bounds == pytest.approx((1.0, 0.0, 1.4, dressing.CURTAIN_OFFSET_M + 0.03 + 0.01))
    assert right.bounds == pytest.approx((2.6, 0.0, 3.0, dressing.CURTAIN_OFFSET_M + 0.03 + 0.01))
    short = {**room, "curtains": [{**room["curtains"][0], "bottom_m": 1.2}]}
    assert len(layout.door_clearance_zones(short)) == 1  # sill-length curtains hang above the furniture


def test_placed_objects_keep_door_fronts_and_curtains_free():
    from render.spec import make_spec

    checked = curtained = 0
    for seed in range(40):
        spec = make_spec(
            {"room": {"door_count": [2, 2], "window_probability": 1.0}},
            {"sofa": 1, "bookshelf": 1, "armchair": 1, "chair": 2},
            seed,
        )
        zones = [_zone_polygon(z) for z in layout.door_clearance_zones(spec["room"])]
        curtained += len(zones) > len(spec["room"]["doors"])
        for obj in spec["objects"]:
            if obj["anchor"] in ("wall", "surface"):
                continue
            footprint = layout.footprint_polygon(obj)
            for zone in zones:
                assert footprint.intersection(zone).area < 1e-6, (seed, obj["class_name"])
                checked += 1
    assert checked > 100 and curtained > 5


# ---------------------------------------------------------------------------------------------------------------------
# Window glass
# ---------------------------------------------------------------------------------------------------------------------


def test_thin_glass_transmittance_matches_fresnel_and_the_handbook_value():
    """At normal incidence one face reflects r = ((n − 1)/(n + 1))² = 0.04 and a pane 2r/(1 + r) = 0.077, so
    T = 0.923 (Hecht, Optics, §4.6); at every angle our formula equals the one built on Mitsuba's own Fresnel
    term (``mi.fresnel``, the term its ``thindielectric`` BSDF uses)."""
    from render.backend import init_renderer
    from render.scene import thin_glass_transmittance

    assert float(thin_glass_transmittance(1.0)) == pytest.approx(1 - 2 * 0.04 / 1.04, abs=1e-9)
    init_renderer(variant="scalar_rgb")
    import mitsuba as mi

    for cos_theta in (1.0, 0.9, 0.7, 0.5, 0.3, 0.1):
        r = float(mi.fresnel(cos_theta, 1.5)[0])
        expected = 1.0 - (r + (1 - r) ** 2 * r / (1 - r * r))
        assert float(thin_glass_transmittance(cos_theta)) == pytest.approx(expected, abs=1e-5)


def test_diffuse_glass_transmittance_is_the_cosine_weighted_mean():
    from render.scene import diffuse_glass_transmittance, thin_glass_transmittance

    # Reference: scipy's adaptive quadrature of 2 ∫ T(μ) μ dμ.
    expected, _ = integrate.quad(lambda mu: 2.0 * float(thin_glass_transmittance(mu)) * mu, 0.0, 1.0)
    assert diffuse_glass_transmittance() == pytest.approx(expected, rel=1e-6)
    assert 0.8 < expected < 0.9


def test_the_budgets_choices_name_what_the_render_core_has():
    """The budget lists its choices itself (it imports no geometry); they must be the room types dressing knows
    and the texture families the generators make."""
    from render import budget
    from render.textures import FAMILIES

    assert set(budget.ROOM_TYPES) == set(dressing.ROOM_TYPES)
    assert set(budget.TEXTURE_FAMILIES) == set(FAMILIES)
    assert normalize_budget()["room"]["room_types"] == list(budget.ROOM_TYPES)
