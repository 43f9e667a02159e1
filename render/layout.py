"""Rooms and collision-free furniture placement.

:func:`sample_room` draws a room (size, finishes, windows) from the budget;
:func:`place_objects` puts asset specs into it by bounded rejection sampling,
in one of two modes (:data:`LAYOUT_MODES`, drawn per layout by
:func:`choose_layout_mode` with the budget's ``room.free_placement_probability``):

``"free"`` — domain randomization, the furniture stands anywhere:

- floor items get a uniform yaw on [0°, 360°) and a uniform position; sofas,
  beds and bookshelves are often pushed back to a wall instead, facing the room;
- surface items (``placement == "surface"``) go on a support surface of an
  already placed table or bookshelf when one fits, else on the floor;
- wall items hang on a wall at their mount height, clear of windows and of
  tall furniture standing against that wall.

``"home"`` — arranged like a home (:data:`HOME_ROLES`; every relation falls back
to the next, the last being a free spot at a wall-aligned yaw):

- sofas, beds, bookshelves and floor plants stand back to a wall
  (:data:`WALL_GAP_M` off it), facing into the room;
- dining tables stand wall-aligned with a zone kept free for chairs; chairs go
  round them facing the table (:data:`DINING_CHAIR_GAP_M`, one place per
  :data:`DINING_PLACE_WIDTH_M` of edge), or face a coffee table;
- coffee tables stand in front of a sofa (else an armchair), armchairs and
  ottomans face the coffee table or the sofa; side tables and floor lamps stand
  beside a sofa, armchair or bed;
- surface items prefer a table or shelf top; wall items as in ``"free"``.

Each placed object records how it was placed in ``arrangement``: ``"free"``,
``"against_wall"``, ``"wall"``, ``"on:<id>"``, ``"around_table:<id>"``,
``"in_front_of:<id>"``, ``"facing:<id>"`` or ``"beside:<id>"`` (``<id>`` is the
related object's ``instance_id``).

In both modes a zone in front of every door of ``room.get("doors", [])``
(the door's width plus :data:`DOOR_SIDE_MARGIN_M` each side, :data:`DOOR_CLEARANCE_DEPTH_M`
into the room, up to the door head) is kept free of furniture and wall items.

Footprints are oriented rectangles; two objects collide when their
rectangles, grown by half the clearance each, overlap in plan *and* their
height intervals overlap (so a clock may hang above a low sofa). Placement
never drops an object: a composition that cannot be placed raises
:class:`LayoutError` with the class, its count and the reason.

Random stream (the layout stream of :mod:`render.spec`), in order:
:func:`sample_room`; the asset specs; one uniform draw in
:func:`choose_layout_mode` (always taken, whatever the probability, so changing
the probability flips modes without shifting later draws); then the draws of
:func:`place_objects`, object by object in placement order. A layout is a pure
function of the stream: same seed, same layout.

:class:`ClutterPlacer` applies the same rules to extra, unlabelled items placed
afterwards (:mod:`render.distractors`): the objects stay where they
are, and an item that does not fit is skipped instead of raising.

World frame and yaw follow ``render/README.md``: the room spans
x ∈ [0, width_m], y ∈ [0, depth_m]; yaw is counter-clockwise about +z and an
asset's front is its local +y.

References
----------
Neufert, Architects' Data, 4th ed. (furniture clearances, from memory); Panero &
Zelnik, Human Dimension and Interior Space (1979) (seating distances, from memory).
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from shapely.geometry import Polygon

from render import assets
from render.dressing import (
    CURTAIN_OFFSET_M,
    WALLS,
    curtain_panels,
    sample_dressing,
    wall_fixtures,
    wall_length_m,
)

# Yaw that turns an asset's front (local +y) to face into the room from each wall.
WALL_FACING_YAW_DEG: dict[str, float] = {"south": 0.0, "north": 180.0, "west": 270.0, "east": 90.0}

# How often these classes stand back to a wall rather than free in the room
# (common practice: beds and bookcases almost always do, sofas often float).
AGAINST_WALL_PROBABILITY: dict[str, float] = {"bed": 0.85, "bookshelf": 0.9, "sofa": 0.6}

# Home arrangement (mode "home"). Distances are gaps between footprint edges; any gap is at least the
# clearance below, which already keeps the rectangles apart.
LAYOUT_MODES: tuple[str, ...] = ("free", "home")
# Sofa front to coffee-table edge: 0.35–0.45 m leaves knee room and keeps the top within reach
# (Neufert, Architects' Data; Panero & Zelnik 1979: 14–18 in; from memory).
COFFEE_TABLE_GAP_M = (0.35, 0.50)
# Dining chairs: the chair front stands this far from the table edge (pulled out a little; a chair pushed
# under the top would overlap the table's footprint), one place per 0.6 m of edge (Neufert, from memory).
DINING_CHAIR_GAP_M = (0.06, 0.20)
DINING_PLACE_WIDTH_M = 0.6
# Zone behind a dining table's edge to sit down and get up: about 0.75 m (Neufert, from memory); the table
# first looks for a spot with this much free floor round it.
DINING_ZONE_M = 0.75
# Armchairs and chairs round a coffee table: their front 0.3–0.6 m from its edge (common practice).
LOUNGE_GAP_M = (0.30, 0.60)
# An armchair facing a sofa across the room with no coffee table: 1.0–2.0 m between fronts (common practice).
FACING_SOFA_GAP_M = (1.0, 2.0)
# An ottoman used as a footstool: 0.1–0.35 m in front of the seat (common practice).
FOOTSTOOL_GAP_M = (0.10, 0.35)
# Side tables and floor lamps beside a seat or bed: 6–15 cm from its side (common practice: within arm's reach).
BESIDE_GAP_M = (0.06, 0.15)
# Yaw scatter of things people move (chairs pulled out, armchairs turned), degrees (common practice).
CHAIR_YAW_JITTER_DEG = 4.0
ARMCHAIR_YAW_JITTER_DEG = 10.0
RELATION_TRIES = 24  # tries per relation (slot or host) before the next fallback
# Doors: keep free a rectangle the door's width (plus a margin each side for the frame) by this depth into
# the room, up to the door head (common practice: a 0.8–0.9 m leaf swings through about that depth).
DOOR_CLEARANCE_DEPTH_M = 0.8
DOOR_SIDE_MARGIN_M = 0.05
# A floor item whose footprint comes this close to a wall must not stand in front of a window below its top.
WINDOW_NEAR_WALL_M = 0.3

# Roles in a home arrangement, in placement order (hosts before the things arranged round them).
HOME_ROLES: dict[str, str] = {
    "bed": "against_wall",
    "sofa": "against_wall",
    "bookshelf": "against_wall",
    "dining_table": "dining_table",
    "coffee_table": "coffee_table",
    "armchair": "lounge_seat",
    "chair": "chair",
    "ottoman": "footstool",
    "side_table": "beside_seat",
    "floor_lamp": "beside_seat",
    "potted_plant": "against_wall",
}
_ROLE_ORDER: tuple[str, ...] = (
    "against_wall",
    "dining_table",
    "coffee_table",
    "lounge_seat",
    "chair",
    "footstool",
    "beside_seat",
    "other",
)
# Classes that count as seats for side tables and floor lamps, in order of preference.
SEAT_CLASSES: tuple[str, ...] = ("sofa", "armchair", "bed")

DEFAULT_CLEARANCE_M = 0.05  # gap kept between any two footprints; also hides tiny rounding overlaps
WALL_GAP_M = 0.02  # free items keep this far from the walls; back-to-wall items stand this far off
DEFAULT_MAX_TRIES = 400
YAW_TRIES = 40  # positions tried per drawn yaw before a new yaw is drawn
SURFACE_TRIES = 60
CEILING_GAP_M = 0.05

# Window sizes (common practice; Neufert, Architects' Data 4th ed. gives sills
# of about 0.85–0.9 m in living rooms, from memory).
WINDOW_WIDTH_M = (0.6, 2.0)
WINDOW_HEIGHT_M = (0.9, 1.6)
WINDOW_SILL_M = (0.6, 1.1)
WINDOW_LINTEL_GAP_M = 0.2  # wall left above the window head (common practice)
WINDOW_CORNER_GAP_M = 0.3  # wall left between a window and a room corner (common practice)
SECOND_WINDOW_PROBABILITY = 0.25


class LayoutError(ValueError):
    """A composition cannot be placed in a room; the message names the class, the count and the reason."""


# ---------------------------------------------------------------------------
# Rooms
# ---------------------------------------------------------------------------


def _sample_window(room: dict[str, Any], wall: str, rng: np.random.Generator) -> dict[str, Any] | None:
    length, height = wall_length_m(room, wall), room["height_m"]
    max_width = min(WINDOW_WIDTH_M[1], length - 2 * WINDOW_CORNER_GAP_M)
    if max_width < WINDOW_WIDTH_M[0]:
        return None
    width = float(rng.uniform(WINDOW_WIDTH_M[0], max_width))
    sill = float(rng.uniform(*WINDOW_SILL_M))
    max_height = min(WINDOW_HEIGHT_M[1], height - WINDOW_LINTEL_GAP_M - sill)
    if max_height < WINDOW_HEIGHT_M[0]:
        # Low ceiling: lower the sill rather than drop the window.
        sill = max(WINDOW_SILL_M[0], height - WINDOW_LINTEL_GAP_M - WINDOW_HEIGHT_M[0])
        max_height = min(WINDOW_HEIGHT_M[1], height - WINDOW_LINTEL_GAP_M - sill)
        if max_height < WINDOW_HEIGHT_M[0]:
            return None
    window_height = float(rng.uniform(WINDOW_HEIGHT_M[0], max_height))
    center = float(rng.uniform(WINDOW_CORNER_GAP_M + width / 2, length - WINDOW_CORNER_GAP_M - width / 2))
    return {
        "wall": wall,
        "center_m": round(center, 6),
        "sill_m": round(sill, 6),
        "width_m": round(width, 6),
        "height_m": round(window_height, 6),
    }


def sample_room(budget: dict[str, Any], rng: np.random.Generator) -> dict[str, Any]:
    """Draw a room from ``budget["room"]``: size, windows, then its dressing (:mod:`render.dressing`).

    Returns ``{"width_m", "depth_m", "height_m", "windows": [{"wall", "center_m", "sill_m", "width_m",
    "height_m"}], "room_type", "floor_finish", "materials": {"floor", "wall", "ceiling", …}, "doors",
    "skirting", "window_frames", "curtains"}``. ``center_m`` runs along the wall from its lower-coordinate
    end (x for south/north, y for west/east).
    """
    section = budget["room"]
    room: dict[str, Any] = {
        "width_m": round(float(rng.uniform(*section["width_m"])), 6),
        "depth_m": round(float(rng.uniform(*section["depth_m"])), 6),
        "height_m": round(float(rng.uniform(*section["height_m"])), 6),
    }
    windows = []
    if rng.random() < section["window_probability"]:
        walls = list(WALLS)
        first = walls.pop(int(rng.integers(len(walls))))
        window = _sample_window(room, first, rng)
        if window:
            windows.append(window)
        if rng.random() < SECOND_WINDOW_PROBABILITY:
            second = _sample_window(room, walls[int(rng.integers(len(walls)))], rng)
            if second:
                windows.append(second)
    room["windows"] = windows
    sample_dressing(room, budget, rng)
    return room


# ---------------------------------------------------------------------------
# Geometry of placed objects
# ---------------------------------------------------------------------------


def _local_rect(spec: dict[str, Any]) -> tuple[float, float, float, float]:
    """(centre x, centre y, half width, half depth) of the footprint in the asset's local frame."""
    w, d = spec["footprint_m"]
    if spec["placement"] == "wall":
        return 0.0, d / 2, w / 2, d / 2  # back on y = 0
    return 0.0, 0.0, w / 2, d / 2


def _corners(spec: dict[str, Any], x: float, y: float, yaw_deg: float, grow_m: float = 0.0) -> np.ndarray:
    cx, cy, hw, hd = _local_rect(spec)
    hw, hd = hw + grow_m, hd + grow_m
    c, s = math.cos(math.radians(yaw_deg)), math.sin(math.radians(yaw_deg))
    local = np.array([[cx - hw, cy - hd], [cx + hw, cy - hd], [cx + hw, cy + hd], [cx - hw, cy + hd]])
    return np.column_stack([x + c * local[:, 0] - s * local[:, 1], y + s * local[:, 0] + c * local[:, 1]])


def footprint_polygon(obj: dict[str, Any]) -> Polygon:
    """The object's footprint rectangle in world coordinates (no clearance)."""
    x, y = obj["position_m"][0], obj["position_m"][1]
    return Polygon(_corners(obj, x, y, obj["yaw_deg"]))


def object_world_bounds(obj: dict[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Axis-aligned world bounds (min_xyz, max_xyz) of the object's footprint box."""
    x, y, z = obj["position_m"]
    corners = _corners(obj, x, y, obj["yaw_deg"])
    low = np.array([corners[:, 0].min(), corners[:, 1].min(), z])
    high = np.array([corners[:, 0].max(), corners[:, 1].max(), z + obj["height_m"]])
    return low, high


def object_transform(obj: dict[str, Any]) -> np.ndarray:
    """4×4 local-to-world matrix: yaw about +z, then translation to position_m."""
    c, s = math.cos(math.radians(obj["yaw_deg"])), math.sin(math.radians(obj["yaw_deg"]))
    matrix = np.eye(4)
    matrix[:2, :2] = [[c, -s], [s, c]]
    matrix[:3, 3] = obj["position_m"]
    return matrix


def object_world_parts(obj: dict[str, Any]) -> list[assets.Part]:
    """The object's meshes in world coordinates (yaw, then translation)."""
    matrix = object_transform(obj)
    parts = assets.build_asset_parts(obj)
    for part in parts:
        part.mesh.apply_transform(matrix)
    return parts


# ---------------------------------------------------------------------------
# Placement
# ---------------------------------------------------------------------------


@dataclass
class _Placed:
    index: int
    spec: dict[str, Any]
    x: float
    y: float
    z: float
    yaw_deg: float
    anchor: str  # "floor" | "against_wall" | "wall" | "surface"
    support_index: int | None
    # Collision rectangle: centre, unit axes, half extents grown by half the clearance.
    cx: float = 0.0
    cy: float = 0.0
    ux: float = 1.0
    uy: float = 0.0
    hw: float = 0.0
    hd: float = 0.0
    radius: float = 0.0
    z0: float = 0.0
    z1: float = 0.0
    wall: str | None = None
    # How it was placed (the ``arrangement`` record): a relation kind and the related object's index.
    relation: str = "free"
    related_index: int | None = None

    def prepare(self, grow_m: float) -> _Placed:
        lcx, lcy, hw, hd = _local_rect(self.spec)
        c, s = math.cos(math.radians(self.yaw_deg)), math.sin(math.radians(self.yaw_deg))
        self.cx, self.cy = self.x + c * lcx - s * lcy, self.y + s * lcx + c * lcy
        self.ux, self.uy = c, s
        self.hw, self.hd = hw + grow_m, hd + grow_m
        self.radius = math.hypot(self.hw, self.hd)
        self.z0, self.z1 = self.z, self.z + self.spec["height_m"]
        return self


def _overlap(a: _Placed, b: _Placed) -> bool:
    """Oriented boxes overlap in plan (separating axis test) and in height."""
    if a.z0 >= b.z1 - 1e-9 or b.z0 >= a.z1 - 1e-9:
        return False
    dx, dy = b.cx - a.cx, b.cy - a.cy
    if dx * dx + dy * dy >= (a.radius + b.radius) ** 2:
        return False
    for ax, ay in ((a.ux, a.uy), (-a.uy, a.ux), (b.ux, b.uy), (-b.uy, b.ux)):
        ra = a.hw * abs(a.ux * ax + a.uy * ay) + a.hd * abs(-a.uy * ax + a.ux * ay)
        rb = b.hw * abs(b.ux * ax + b.uy * ay) + b.hd * abs(-b.uy * ax + b.ux * ay)
        if abs(dx * ax + dy * ay) >= ra + rb:
            return False
    return True


# A last check on a collision-free candidate (extra items use it: a box must not half-stand on a rug).
_Accept = Callable[[_Placed], bool]


class _Failure(Exception):
    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


def _yaw(rng: np.random.Generator) -> float:
    return round(float(rng.uniform(0.0, 360.0)), 6) % 360.0


def _summary(specs: list[dict[str, Any]]) -> str:
    counts = Counter(s["class_name"] for s in specs)
    return ", ".join(f"{name} ×{n}" for name, n in counts.most_common())


def _wall_point(room: dict[str, Any], wall: str, along_m: float, offset_m: float) -> tuple[float, float]:
    """World (x, y) of a point `along_m` along a wall and `offset_m` into the room."""
    if wall == "south":
        return along_m, offset_m
    if wall == "north":
        return along_m, room["depth_m"] - offset_m
    if wall == "west":
        return offset_m, along_m
    return room["width_m"] - offset_m, along_m


def _blocks_window(
    room: dict[str, Any], wall: str, u0: float, u1: float, z0: float, z1: float, margin_m: float = 0.05
) -> bool:
    """Whether the wall rectangle u0..u1 × z0..z1 meets a window, a door or a curtain (with ``margin_m``)."""
    taken = [
        (w["center_m"] - w["width_m"] / 2, w["center_m"] + w["width_m"] / 2, w["sill_m"], w["sill_m"] + w["height_m"])
        for w in room.get("windows", [])
        if w["wall"] == wall
    ]
    for a0, a1, b0, b1 in [*taken, *wall_fixtures(room, wall)]:
        if u0 < a1 + margin_m and a0 - margin_m < u1 and z0 < b1 + margin_m and b0 - margin_m < z1:
            return True
    return False


def door_clearance_zones(room: dict[str, Any]) -> list[_Placed]:
    """Boxes kept free in front of the room's doors, and where its curtains hang. Doors: ``room.get("doors", [])``, each ``{"wall", "center_m",
    "width_m", "height_m"}`` (``center_m`` along the wall as for windows; an optional ``architrave_m``).

    Each box is the door's width plus :data:`DOOR_SIDE_MARGIN_M` (or the architrave, if wider) each side, :data:`DOOR_CLEARANCE_DEPTH_M`
    into the room (less in a shallower room), from the floor to the top of the casing (m). Raises
    :class:`LayoutError` for a door record that is not such a dict.
    """
    zones = []
    for k, door in enumerate(room.get("doors") or []):
        try:
            wall = str(door["wall"])
            center, width, height = (float(door[key]) for key in ("center_m", "width_m", "height_m"))
        except (KeyError, TypeError, ValueError) as exc:
            raise LayoutError(f"door {k + 1}: expected {{wall, center_m, width_m, height_m}}, got {door!r}") from exc
        if wall not in WALLS or not all(math.isfinite(v) for v in (center, width, height)) or width <= 0 or height <= 0:
            raise LayoutError(
                f"door {k + 1}: wall must be one of {', '.join(WALLS)} and its sizes positive, got {door!r}"
            )
        across = wall_length_m(room, "south" if wall in ("west", "east") else "west")
        depth = min(DOOR_CLEARANCE_DEPTH_M, across)
        # The architrave (door casing), when the door has one, is part of the door: nothing covers it either.
        margin = max(DOOR_SIDE_MARGIN_M, float(door.get("architrave_m") or 0.0))
        spec = {"footprint_m": [width + 2 * margin, depth], "height_m": height + margin, "placement": "floor"}
        x, y = _wall_point(room, wall, center, depth / 2)
        zones.append(
            _Placed(-1 - k, spec, x, y, 0.0, WALL_FACING_YAW_DEG[wall], "door_zone", None, wall=wall).prepare(0.0)
        )
    # Curtains that hang below a metre: their folds, from the wall to the front of the pleats, up to the rod.
    for curtain in room.get("curtains") or []:
        if float(curtain["bottom_m"]) >= 1.0:
            continue
        depth = CURTAIN_OFFSET_M + float(curtain["fold_depth_m"]) + 0.01
        for a, b in curtain_panels(curtain):
            spec = {"footprint_m": [b - a, depth], "height_m": float(curtain["rod_z_m"]), "placement": "floor"}
            x, y = _wall_point(room, curtain["wall"], (a + b) / 2, depth / 2)
            zones.append(
                _Placed(
                    -1000 - len(zones),
                    spec,
                    x,
                    y,
                    0.0,
                    WALL_FACING_YAW_DEG[curtain["wall"]],
                    "curtain_zone",
                    None,
                    wall=curtain["wall"],
                ).prepare(0.0)
            )
    return zones


class _Placer:
    def __init__(
        self, room: dict[str, Any], rng: np.random.Generator, clearance_m: float, max_tries: int, mode: str = "free"
    ) -> None:
        self.room = room
        self.mode = mode
        self.rng = rng
        self.width = float(room["width_m"])
        self.depth = float(room["depth_m"])
        self.height = float(room["height_m"])
        self.grow = clearance_m / 2
        self.max_tries = max_tries
        self.placed: list[_Placed] = []
        self.keep_clear = door_clearance_zones(room)

    def floor_cover_fraction(self) -> float:
        area = sum(
            p.spec["footprint_m"][0] * p.spec["footprint_m"][1]
            for p in self.placed
            if p.anchor in ("floor", "against_wall")
        )
        return area / (self.width * self.depth)

    def free(self, candidate: _Placed, ignore: int | None = None) -> bool:
        candidate.prepare(self.grow)
        if any(_overlap(candidate, zone) for zone in self.keep_clear):
            return False
        return not any(_overlap(candidate, other) for other in self.placed if other.index != ignore)

    def try_floor(
        self, index: int, spec: dict[str, Any], tries: int, accept: _Accept | None = None, *, aligned: bool = False
    ) -> _Placed | None:
        """A free floor spot at a uniform yaw, or (``aligned``) a yaw square to the walls (0, 90, 180, 270°)."""
        hw, hd = spec["footprint_m"][0] / 2, spec["footprint_m"][1] / 2
        yaw = 0.0
        x_range = y_range = (0.0, -1.0)
        for attempt in range(tries):
            if attempt % YAW_TRIES == 0 or x_range[0] > x_range[1] or y_range[0] > y_range[1]:
                # One yaw for a batch of positions: the yaw of a placed item stays uniform
                # unless a whole batch fails, which only happens in crowded rooms.
                yaw = 90.0 * int(self.rng.integers(4)) if aligned else _yaw(self.rng)
                c, s = abs(math.cos(math.radians(yaw))), abs(math.sin(math.radians(yaw)))
                ex, ey = c * hw + s * hd, s * hw + c * hd
                x_range = (ex + WALL_GAP_M, self.width - ex - WALL_GAP_M)
                y_range = (ey + WALL_GAP_M, self.depth - ey - WALL_GAP_M)
                if x_range[0] > x_range[1] or y_range[0] > y_range[1]:
                    continue
            x = round(float(self.rng.uniform(*x_range)), 6)
            y = round(float(self.rng.uniform(*y_range)), 6)
            candidate = _Placed(index, spec, x, y, 0.0, yaw, "floor", None)
            if self.free(candidate) and (accept is None or accept(candidate)):
                return candidate
        return None

    def try_against_wall(
        self, index: int, spec: dict[str, Any], tries: int, accept: _Accept | None = None
    ) -> _Placed | None:
        w, d, h = spec["footprint_m"][0], spec["footprint_m"][1], spec["height_m"]
        walls = [
            wall
            for wall in WALLS
            if wall_length_m(self.room, wall) >= w + 2 * WALL_GAP_M
            and (wall_length_m(self.room, "south" if wall in ("west", "east") else "west") >= d + 2 * WALL_GAP_M)
        ]
        if not walls:
            return None
        for _ in range(tries):
            wall = walls[int(self.rng.integers(len(walls)))]
            length = wall_length_m(self.room, wall)
            along = round(float(self.rng.uniform(w / 2 + WALL_GAP_M, length - w / 2 - WALL_GAP_M)), 6)
            if _blocks_window(self.room, wall, along - w / 2, along + w / 2, 0.0, h):
                continue
            x, y = _wall_point(self.room, wall, along, d / 2 + WALL_GAP_M)
            candidate = _Placed(
                index, spec, round(x, 6), round(y, 6), 0.0, WALL_FACING_YAW_DEG[wall], "against_wall", None, wall=wall
            )
            if self.free(candidate) and (accept is None or accept(candidate)):
                return candidate
        return None

    def try_surface(self, index: int, spec: dict[str, Any], accept: _Accept | None = None) -> _Placed | None:
        w, d, h = spec["footprint_m"][0], spec["footprint_m"][1], spec["height_m"]
        supports = [
            (p, s)
            for p in self.placed
            if p.anchor != "surface" and p.spec["placement"] != "wall"
            for s in p.spec.get("support_surfaces", [])
            if min(s["size_m"]) >= min(w, d) and p.z + s["height_m"] + h <= self.height - CEILING_GAP_M
        ]
        if not supports:
            return None
        for _ in range(SURFACE_TRIES):
            host, surface = supports[int(self.rng.integers(len(supports)))]
            relative_yaw = _yaw(self.rng)
            c, s = abs(math.cos(math.radians(relative_yaw))), abs(math.sin(math.radians(relative_yaw)))
            ex, ey = c * w / 2 + s * d / 2, s * w / 2 + c * d / 2
            room_x, room_y = surface["size_m"][0] / 2 - ex, surface["size_m"][1] / 2 - ey
            if room_x < 0 or room_y < 0:
                continue
            lx = surface["center_m"][0] + float(self.rng.uniform(-room_x, room_x))
            ly = surface["center_m"][1] + float(self.rng.uniform(-room_y, room_y))
            hc, hs = math.cos(math.radians(host.yaw_deg)), math.sin(math.radians(host.yaw_deg))
            x = round(host.x + hc * lx - hs * ly, 6)
            y = round(host.y + hs * lx + hc * ly, 6)
            yaw = round((host.yaw_deg + relative_yaw) % 360.0, 6) % 360.0
            z = round(host.z + surface["height_m"], 6)
            candidate = _Placed(index, spec, x, y, z, yaw, "surface", host.index)
            # The host is excluded: the item stands on it (a tray top is slightly recessed).
            if (
                self.free(candidate, ignore=host.index)
                and self._inside_support(candidate, host, surface)
                and (accept is None or accept(candidate))
            ):
                return candidate
        return None

    @staticmethod
    def _inside_support(candidate: _Placed, host: _Placed, surface: dict[str, Any]) -> bool:
        # Re-check after rounding: the footprint must lie inside the support rectangle.
        corners = _corners(candidate.spec, candidate.x, candidate.y, candidate.yaw_deg)
        hc, hs = math.cos(math.radians(host.yaw_deg)), math.sin(math.radians(host.yaw_deg))
        dx, dy = corners[:, 0] - host.x, corners[:, 1] - host.y
        lx, ly = hc * dx + hs * dy - surface["center_m"][0], -hs * dx + hc * dy - surface["center_m"][1]
        return bool(
            np.all(np.abs(lx) <= surface["size_m"][0] / 2 + 1e-6)
            and np.all(np.abs(ly) <= surface["size_m"][1] / 2 + 1e-6)
        )

    def try_wall(self, index: int, spec: dict[str, Any], tries: int, accept: _Accept | None = None) -> _Placed | None:
        w, h = spec["footprint_m"][0], spec["height_m"]
        mount = float(spec.get("mount_height_m", 1.5 - h / 2))
        # A low ceiling lowers the item rather than pushing it through the ceiling.
        mount = round(max(0.0, min(mount, self.height - CEILING_GAP_M - h)), 6)
        walls = [wall for wall in WALLS if wall_length_m(self.room, wall) >= w + 0.1]
        if not walls:
            return None
        for _ in range(tries):
            wall = walls[int(self.rng.integers(len(walls)))]
            along = round(float(self.rng.uniform(w / 2 + 0.05, wall_length_m(self.room, wall) - w / 2 - 0.05)), 6)
            if _blocks_window(self.room, wall, along - w / 2, along + w / 2, mount, mount + h):
                continue
            x, y = _wall_point(self.room, wall, along, 0.0)
            candidate = _Placed(
                index, spec, round(x, 6), round(y, 6), mount, WALL_FACING_YAW_DEG[wall], "wall", None, wall=wall
            )
            if self.free(candidate) and (accept is None or accept(candidate)):
                return candidate
        return None

    def place(self, index: int, spec: dict[str, Any], label: str) -> None:
        placement = spec["placement"]
        result: _Placed | None = None
        if self.mode == "home":
            result = self._place_home(index, spec)
        elif placement == "wall":
            result = self.try_wall(index, spec, self.max_tries)
        else:
            if placement == "surface":
                result = self.try_surface(index, spec)
            if result is None and self.rng.random() < AGAINST_WALL_PROBABILITY.get(spec["class_name"], 0.0):
                result = self.try_against_wall(index, spec, self.max_tries // 2, self._clear_of_windows)
            if result is None:
                result = self.try_floor(index, spec, self.max_tries)
        if result is None:
            where = "on any wall" if placement == "wall" else "collision-free"
            doors = (
                f", {len(self.keep_clear)} zone(s) in front of doors and curtains kept free" if self.keep_clear else ""
            )
            raise _Failure(
                f"cannot place {label} in a {self.width:.1f} × {self.depth:.1f} m room: no {where} spot after "
                f"{self.max_tries} tries (floor {100 * self.floor_cover_fraction():.0f}% covered{doors})"
            )
        self.placed.append(result)

    # -- home arrangement -------------------------------------------------------------------------------

    def _place_home(self, index: int, spec: dict[str, Any]) -> _Placed | None:
        """Try the class's relations in order of preference, then a free spot (wall-aligned yaw, then any)."""
        placement = spec["placement"]
        if placement == "wall":
            return self.try_wall(index, spec, self.max_tries)
        tries = self.max_tries
        result: _Placed | None = None
        if placement == "surface":
            # Surface items prefer a top: twice the free draws before they give up on one.
            result = self.try_surface(index, spec) or self.try_surface(index, spec)
            role = "against_wall"
        else:
            role = HOME_ROLES.get(spec["class_name"], "other")
        if result is None:
            result = self._by_role(index, spec, role)
        if result is None:
            # A free spot square to the walls, not in front of a window; then, crowded, any free spot.
            result = self.try_floor(index, spec, tries // 2, aligned=True, accept=self._clear_of_windows)
        if result is None:
            result = self.try_floor(index, spec, tries // 2)
        return result

    def _by_role(self, index: int, spec: dict[str, Any], role: str) -> _Placed | None:
        classes = {p.index: p.spec["class_name"] for p in self.placed if p.anchor in ("floor", "against_wall")}
        of = {name: [p for p in self.placed if classes.get(p.index) == name] for name in set(classes.values())}
        if role == "against_wall":
            return self.try_against_wall(index, spec, self.max_tries // 2, self._clear_of_windows)
        if role == "dining_table":
            # First a spot with the chair zone free all round, then any aligned spot.
            return self.try_floor(
                index,
                spec,
                self.max_tries // 2,
                aligned=True,
                accept=lambda c: self._clear_of_windows(c) and self._zone_free(c, DINING_ZONE_M),
            )
        if role == "coffee_table":
            for host in of.get("sofa", []) + of.get("armchair", []):
                found = self._in_front_of(index, spec, host, COFFEE_TABLE_GAP_M)
                if found:
                    return found
            return None
        if role in ("lounge_seat", "chair"):
            if role == "chair":
                for table in of.get("dining_table", []):
                    found = self._round_table(
                        index,
                        spec,
                        table,
                        _dining_slots(table.spec),
                        DINING_CHAIR_GAP_M,
                        CHAIR_YAW_JITTER_DEG,
                        "around_table",
                    )
                    if found:
                        return found
            jitter = ARMCHAIR_YAW_JITTER_DEG if role == "lounge_seat" else CHAIR_YAW_JITTER_DEG
            for table in of.get("coffee_table", []):
                found = self._round_table(index, spec, table, self._lounge_slots(table), LOUNGE_GAP_M, jitter, "facing")
                if found:
                    return found
            if role == "lounge_seat":
                for sofa in of.get("sofa", []):
                    found = self._in_front_of(
                        index, spec, sofa, FACING_SOFA_GAP_M, turn_deg=180.0, jitter_deg=jitter, relation="facing"
                    )
                    if found:
                        return found
            return self.try_against_wall(index, spec, self.max_tries // 4, self._clear_of_windows)
        if role == "footstool":
            for host in of.get("armchair", []) + of.get("sofa", []):
                found = self._in_front_of(index, spec, host, FOOTSTOOL_GAP_M)
                if found:
                    return found
            for table in of.get("coffee_table", []):
                found = self._round_table(index, spec, table, self._lounge_slots(table), FOOTSTOOL_GAP_M, 0.0, "facing")
                if found:
                    return found
            return None
        if role == "beside_seat":
            seats = [p for name in SEAT_CLASSES for p in of.get(name, [])]
            for k in self.rng.permutation(len(seats)) if seats else ():
                found = self._beside(index, spec, seats[int(k)])
                if found:
                    return found
            return self.try_against_wall(index, spec, self.max_tries // 4, self._clear_of_windows)
        return None

    def _inside_room(self, candidate: _Placed, grow_m: float = 0.0) -> bool:
        corners = _corners(candidate.spec, candidate.x, candidate.y, candidate.yaw_deg, grow_m)
        gap = WALL_GAP_M - 1e-9 if grow_m == 0.0 else -1e-9
        return bool(
            np.all(corners[:, 0] >= gap)
            and np.all(corners[:, 0] <= self.width - gap)
            and np.all(corners[:, 1] >= gap)
            and np.all(corners[:, 1] <= self.depth - gap)
        )

    def _clear_of_windows(self, candidate: _Placed) -> bool:
        # try_floor keeps free items off the walls; arranged items can end up against one (a lamp beside a
        # sofa that stands at a wall), so check the windows of every wall they come near.
        corners = _corners(candidate.spec, candidate.x, candidate.y, candidate.yaw_deg)
        lo, hi = corners.min(axis=0), corners.max(axis=0)
        near = {"south": lo[1], "north": self.depth - hi[1], "west": lo[0], "east": self.width - hi[0]}
        for wall, gap in near.items():
            if gap <= WINDOW_NEAR_WALL_M:
                u0, u1 = (lo[0], hi[0]) if wall in ("south", "north") else (lo[1], hi[1])
                if _blocks_window(self.room, wall, float(u0), float(u1), 0.0, candidate.spec["height_m"]):
                    return False
        return True

    def _zone_free(self, candidate: _Placed, zone_m: float) -> bool:
        """The candidate grown by ``zone_m`` (m) on every side stays inside the room and clear of everything."""
        grown = _Placed(
            candidate.index, candidate.spec, candidate.x, candidate.y, 0.0, candidate.yaw_deg, "floor", None
        )
        if not self._inside_room(grown, zone_m):
            return False
        grown.prepare(self.grow + zone_m)
        return not any(_overlap(grown, other) for other in [*self.keep_clear, *self.placed])

    def _relative(
        self,
        index: int,
        spec: dict[str, Any],
        host: _Placed,
        local_x_m: float,
        local_y_m: float,
        relative_yaw_deg: float,
        relation: str,
    ) -> _Placed | None:
        """The item at (local_x_m, local_y_m) in the host's frame, turned relative_yaw_deg from the host, if free."""
        c, s = math.cos(math.radians(host.yaw_deg)), math.sin(math.radians(host.yaw_deg))
        x = round(host.x + c * local_x_m - s * local_y_m, 6)
        y = round(host.y + s * local_x_m + c * local_y_m, 6)
        yaw = round((host.yaw_deg + relative_yaw_deg) % 360.0, 6) % 360.0
        candidate = _Placed(index, spec, x, y, 0.0, yaw, "floor", None, relation=relation, related_index=host.index)
        if self._inside_room(candidate) and self._clear_of_windows(candidate) and self.free(candidate):
            return candidate
        return None

    def _in_front_of(
        self,
        index: int,
        spec: dict[str, Any],
        host: _Placed,
        gap_m: tuple[float, float],
        *,
        turn_deg: float = 0.0,
        jitter_deg: float = 0.0,
        relation: str = "in_front_of",
    ) -> _Placed | None:
        """Centred in front of the host (its local +y), ``gap_m`` from its front edge; facing the host's way
        turned by ``turn_deg`` (180: facing the host)."""
        host_hd = host.spec["footprint_m"][1] / 2
        turned = abs(math.sin(math.radians(turn_deg))) > 0.5
        item_hd = spec["footprint_m"][0 if turned else 1] / 2
        sideways_m = max(0.0, (host.spec["footprint_m"][0] - spec["footprint_m"][0]) / 4)
        for _ in range(RELATION_TRIES):
            gap = float(self.rng.uniform(*gap_m))
            lx = float(self.rng.uniform(-sideways_m, sideways_m))
            yaw = turn_deg + (float(self.rng.uniform(-jitter_deg, jitter_deg)) if jitter_deg else 0.0)
            found = self._relative(index, spec, host, lx, host_hd + gap + item_hd, yaw, relation)
            if found:
                return found
        return None

    def _beside(self, index: int, spec: dict[str, Any], seat: _Placed) -> _Placed | None:
        """Beside a seat's arm (a bed's head end), aligned with it, its back near the seat's back."""
        seat_hw, seat_hd = seat.spec["footprint_m"][0] / 2, seat.spec["footprint_m"][1] / 2
        item_hw, item_hd = spec["footprint_m"][0] / 2, spec["footprint_m"][1] / 2
        back = -seat_hd + item_hd
        # A night stand stands at the head of a bed; beside a sofa anywhere from its back to its front.
        front = back + 0.1 if seat.spec["class_name"] == "bed" else max(back, seat_hd - item_hd)
        for _ in range(RELATION_TRIES):
            side = 1.0 if self.rng.random() < 0.5 else -1.0
            gap = float(self.rng.uniform(*BESIDE_GAP_M))
            ly = float(self.rng.uniform(back, front))
            found = self._relative(index, spec, seat, side * (seat_hw + gap + item_hw), ly, 0.0, "beside")
            if found:
                return found
        return None

    def _lounge_slots(self, table: _Placed) -> list[tuple[str, float]]:
        """Sides of a coffee table a seat may face it from: both ends, and the far side from the sofa it serves."""
        sides = ["+x", "-x", "+y"]
        if table.relation != "in_front_of":
            sides.append("-y")
        return [(side, 0.0) for side in sides]

    def _round_table(
        self,
        index: int,
        spec: dict[str, Any],
        table: _Placed,
        slots: list[tuple[str, float]],
        gap_m: tuple[float, float],
        jitter_deg: float,
        relation: str,
    ) -> _Placed | None:
        """A seat at one of the table's places (side, offset along it), its front ``gap_m`` from the edge,
        facing the table."""
        t_hw, t_hd = table.spec["footprint_m"][0] / 2, table.spec["footprint_m"][1] / 2
        item_hd = spec["footprint_m"][1] / 2
        order: np.ndarray | list[int] = self.rng.permutation(len(slots)) if slots else []
        per_slot = max(2, RELATION_TRIES // max(1, len(slots)))
        for k in order:
            side, along = slots[int(k)]
            for _ in range(per_slot):
                distance = float(self.rng.uniform(*gap_m)) + item_hd
                jitter = float(self.rng.uniform(-jitter_deg, jitter_deg)) if jitter_deg else 0.0
                # The seat's front (local +y) turned to the table: yaw relative to the table per side.
                lx, ly, yaw = {
                    "-y": (along, -(t_hd + distance), 0.0),
                    "+y": (along, t_hd + distance, 180.0),
                    "+x": (t_hw + distance, along, 90.0),
                    "-x": (-(t_hw + distance), along, 270.0),
                }[side]
                found = self._relative(index, spec, table, lx, ly, yaw + jitter, relation)
                if found:
                    return found
        return None


def _dining_slots(table_spec: dict[str, Any]) -> list[tuple[str, float]]:
    """Places at a dining table (side, offset along the side in m): one per :data:`DINING_PLACE_WIDTH_M` of each
    long side and one at each end; a round table has one per side of its square footprint."""
    w, d = table_spec["footprint_m"]
    if str(table_spec.get("variant", "")).startswith("round"):
        return [("+y", 0.0), ("-y", 0.0), ("+x", 0.0), ("-x", 0.0)]
    slots: list[tuple[str, float]] = []
    for sides, length in ((("+y", "-y"), w), (("+x", "-x"), d)):
        n = max(1, int(length // DINING_PLACE_WIDTH_M))
        for side in sides:
            slots += [(side, -length / 2 + (k + 0.5) * length / n) for k in range(n)]
    return slots


def _order(asset_specs: list[dict[str, Any]]) -> list[int]:
    """Placement order: floor items largest first, then surface items, then wall items.

    Large items first is the classic greedy heuristic for packing; surface
    items need their tables placed, wall items must see what stands below.
    """

    def key(i: int) -> tuple[int, float, int]:
        spec = asset_specs[i]
        rank = {"floor": 0, "surface": 1, "wall": 2}[spec["placement"]]
        return rank, -spec["footprint_m"][0] * spec["footprint_m"][1], i

    return sorted(range(len(asset_specs)), key=key)


def _order_home(asset_specs: list[dict[str, Any]]) -> list[int]:
    """Placement order of a home arrangement: floor items by role (:data:`HOME_ROLES`: what others are arranged
    round comes first), largest first within a role; then surface items, then wall items."""

    def key(i: int) -> tuple[int, int, float, int]:
        spec = asset_specs[i]
        rank = {"floor": 0, "surface": 1, "wall": 2}[spec["placement"]]
        role = _ROLE_ORDER.index(HOME_ROLES.get(spec["class_name"], "other")) if rank == 0 else 0
        return rank, role, -spec["footprint_m"][0] * spec["footprint_m"][1], i

    return sorted(range(len(asset_specs)), key=key)


def choose_layout_mode(free_placement_probability: float, rng: np.random.Generator) -> str:
    """``"free"`` with ``free_placement_probability``, else ``"home"`` (:data:`LAYOUT_MODES`).

    Always takes exactly one uniform draw from ``rng``, whatever the probability, so the
    draws after it do not depend on it. Raises :class:`LayoutError` for a probability outside [0, 1].
    """
    p = float(free_placement_probability)
    if not 0.0 <= p <= 1.0:
        raise LayoutError(f"free placement probability must be within 0–1, got {free_placement_probability!r}")
    return "free" if rng.random() < p else "home"


def arrangement_of(obj: dict[str, Any]) -> tuple[str, int | None]:
    """(relation, related instance id) of a placed object's ``arrangement`` record, e.g. ("beside", 3)."""
    relation, _, related = str(obj.get("arrangement", "free")).partition(":")
    return relation, int(related) if related else None


def _check_composition(
    room: dict[str, Any], asset_specs: list[dict[str, Any]], max_objects_per_m2: float | None
) -> None:
    width, depth = float(room["width_m"]), float(room["depth_m"])
    area = width * depth
    size = f"{width:.1f} × {depth:.1f} m room"
    if max_objects_per_m2 is not None and len(asset_specs) > max_objects_per_m2 * area + 1e-9:
        allowed = int(math.floor(max_objects_per_m2 * area + 1e-9))
        raise LayoutError(
            f"cannot place {len(asset_specs)} objects ({_summary(asset_specs)}) in a {size}: the density limit "
            f"of {max_objects_per_m2:g} objects per m² allows {allowed}"
        )
    for spec in asset_specs:
        if spec.get("placement") not in ("floor", "wall", "surface"):
            raise LayoutError(f"cannot place {spec.get('class_name')}: unknown placement {spec.get('placement')!r}")
        w, d = spec["footprint_m"]
        if spec["placement"] == "wall":
            if w + 0.1 > max(width, depth) or spec["height_m"] > float(room["height_m"]) - CEILING_GAP_M:
                raise LayoutError(
                    f"cannot place {spec['class_name']} ({w:.2f} m wide): larger than any wall of the {size}"
                )
            continue
        fits = any(a + 2 * WALL_GAP_M <= width and b + 2 * WALL_GAP_M <= depth for a, b in ((w, d), (d, w)))
        if not fits or spec["height_m"] > float(room["height_m"]) - CEILING_GAP_M:
            raise LayoutError(
                f"cannot place {spec['class_name']} ({w:.2f} × {d:.2f} × {spec['height_m']:.2f} m): "
                f"larger than the {size} × {float(room['height_m']):.1f} m"
            )
    floor_specs = [s for s in asset_specs if s["placement"] == "floor"]
    need = sum(s["footprint_m"][0] * s["footprint_m"][1] for s in floor_specs)
    if need > area:
        raise LayoutError(
            f"cannot place {_summary(floor_specs)} in a {size}: their footprints need {need:.1f} m² "
            f"but the floor has {area:.1f} m²"
        )


def place_objects(
    room: dict[str, Any],
    asset_specs: list[dict[str, Any]],
    rng: np.random.Generator,
    *,
    max_objects_per_m2: float | None = None,
    clearance_m: float = DEFAULT_CLEARANCE_M,
    max_tries: int = DEFAULT_MAX_TRIES,
    restarts: int = 3,
    mode: str = "free",
) -> list[dict[str, Any]]:
    """Place every asset spec in the room without collisions; return the objects in input order.

    Each object is its asset spec plus ``instance_id`` (1-based, input order),
    ``position_m`` [x, y, z] (the local origin in the world), ``yaw_deg`` in
    [0, 360), ``support_instance_id`` (the host's id for items standing on a
    surface, else None), ``anchor`` ("floor", "against_wall", "wall" or
    "surface": what holds it) and ``arrangement`` (how it was placed: "free",
    "against_wall", "wall", "on:<id>", "around_table:<id>", "in_front_of:<id>",
    "facing:<id>" or "beside:<id>", see the module docstring). Wall items also
    get the ``mount_height_m`` actually used.

    ``mode`` is "free" (uniform positions and yaws) or "home" (arranged like a
    home); :func:`choose_layout_mode` draws it from the budget. The door
    clearance zones of ``room.get("doors", [])`` are kept free in both.

    ``max_objects_per_m2`` is the budget's density limit (``budget["room"]
    ["max_objects_per_m2"]``); None means no limit. A failed greedy pass is
    restarted up to ``restarts`` times with fresh draws before giving up.

    Raises
    ------
    LayoutError
        Naming the class, its count and the reason (density limit, too large,
        floor area, or no collision-free spot after ``max_tries`` tries).
    """
    if mode not in LAYOUT_MODES:
        raise LayoutError(f"unknown layout mode {mode!r} (known: {', '.join(LAYOUT_MODES)})")
    _check_composition(room, asset_specs, max_objects_per_m2)
    door_clearance_zones(room)  # a malformed door is refused before any draw
    totals = Counter(s["class_name"] for s in asset_specs)
    labels: dict[int, str] = {}
    seen: Counter[str] = Counter()
    for i, spec in enumerate(asset_specs):
        seen[spec["class_name"]] += 1
        labels[i] = f"{spec['class_name']} #{seen[spec['class_name']]} of {totals[spec['class_name']]}"
    order = _order_home(asset_specs) if mode == "home" else _order(asset_specs)
    failure: _Failure | None = None
    for _ in range(max(1, restarts)):
        placer = _Placer(room, rng, clearance_m, max_tries, mode)
        try:
            for i in order:
                placer.place(i, asset_specs[i], labels[i])
        except _Failure as exc:
            failure = exc
            continue
        by_index = {p.index: p for p in placer.placed}
        objects = []
        for i, spec in enumerate(asset_specs):
            p = by_index[i]
            obj = dict(spec)
            obj["instance_id"] = i + 1
            obj["position_m"] = [round(p.x, 6), round(p.y, 6), round(p.z, 6)]
            obj["yaw_deg"] = round(p.yaw_deg, 6)
            obj["support_instance_id"] = None if p.support_index is None else p.support_index + 1
            obj["anchor"] = p.anchor
            if p.related_index is not None:
                obj["arrangement"] = f"{p.relation}:{p.related_index + 1}"
            elif p.support_index is not None:
                obj["arrangement"] = f"on:{p.support_index + 1}"
            else:
                obj["arrangement"] = p.anchor if p.anchor in ("wall", "against_wall") else "free"
            if p.anchor == "wall":
                obj["wall"] = p.wall
                obj["mount_height_m"] = round(p.z, 6)
            objects.append(obj)
        return objects
    assert failure is not None
    raise LayoutError(failure.message)


# ---------------------------------------------------------------------------
# Extra items among placed objects (unlabelled clutter)
# ---------------------------------------------------------------------------

CLUTTER_FLOOR_TRIES = 80
CLUTTER_WALL_TRIES = 40


class ClutterPlacer:
    """Places extra items among objects already placed by :func:`place_objects`, which never move.

    Same rules as :func:`place_objects` (clearance, wall gap, support surfaces inside the host's top,
    wall items clear of windows), but an item that does not fit is skipped: each method returns None
    instead of raising. Every item placed is remembered, so later items avoid it.

    An item is a dict with ``footprint_m`` [w, d] and ``height_m`` (wall items also
    ``mount_height_m``), in the asset frame of ``render/README.md``. Each method returns
    ``{"position_m", "yaw_deg", "anchor", "support_instance_id"}`` (wall items also ``"wall"``).
    ``accept`` (optional) is a last check on a collision-free candidate's footprint polygon and
    base height (m); it returns the base height to use, or None to refuse the spot.
    """

    def __init__(
        self,
        room: dict[str, Any],
        objects: list[dict[str, Any]],
        rng: np.random.Generator,
        *,
        clearance_m: float = DEFAULT_CLEARANCE_M,
    ) -> None:
        self._placer = _Placer(room, rng, clearance_m, DEFAULT_MAX_TRIES)
        self._instance_ids: list[int | None] = []
        by_instance = {int(obj["instance_id"]): i for i, obj in enumerate(objects)}
        for i, obj in enumerate(objects):
            x, y, z = (float(v) for v in obj["position_m"])
            support = obj.get("support_instance_id")
            placed = _Placed(
                i,
                obj,
                x,
                y,
                z,
                float(obj["yaw_deg"]),
                str(obj.get("anchor", "floor")),
                None if support is None else by_instance.get(int(support)),
                wall=obj.get("wall"),
            )
            self._placer.placed.append(placed.prepare(self._placer.grow))
            self._instance_ids.append(int(obj["instance_id"]))

    def _item(self, item: dict[str, Any], placement: str) -> dict[str, Any]:
        return {
            "footprint_m": [float(v) for v in item["footprint_m"]],
            "height_m": float(item["height_m"]),
            "placement": placement,
            "support_surfaces": [],
            **({"mount_height_m": float(item["mount_height_m"])} if "mount_height_m" in item else {}),
        }

    def _wrap(self, accept: Callable[[Polygon, float], float | None] | None) -> tuple[_Accept | None, dict]:
        chosen: dict[str, float] = {}
        if accept is None:
            return None, chosen

        def check(candidate: _Placed) -> bool:
            z = accept(Polygon(_corners(candidate.spec, candidate.x, candidate.y, candidate.yaw_deg)), candidate.z)
            if z is None:
                return False
            chosen["z"] = float(z)
            return True

        return check, chosen

    def _commit(self, placed: _Placed | None, chosen: dict[str, float]) -> dict[str, Any] | None:
        if placed is None:
            return None
        if "z" in chosen:
            placed.z = round(chosen["z"], 6)
        placed.prepare(self._placer.grow)
        self._placer.placed.append(placed)
        self._instance_ids.append(None)
        host = None if placed.support_index is None else self._instance_ids[placed.support_index]
        out: dict[str, Any] = {
            "position_m": [round(placed.x, 6), round(placed.y, 6), round(placed.z, 6)],
            "yaw_deg": round(placed.yaw_deg, 6),
            "anchor": placed.anchor,
            "support_instance_id": host,
        }
        if placed.wall is not None:
            out["wall"] = placed.wall
        return out

    def floor(
        self,
        item: dict[str, Any],
        *,
        against_wall_probability: float = 0.0,
        tries: int = CLUTTER_FLOOR_TRIES,
        accept: Callable[[Polygon, float], float | None] | None = None,
    ) -> dict[str, Any] | None:
        """Stand the item on the floor: back to a wall with ``against_wall_probability``, else anywhere free."""
        spec = self._item(item, "floor")
        index = len(self._placer.placed)
        check, chosen = self._wrap(accept)
        placed = None
        if self._placer.rng.random() < against_wall_probability:
            placed = self._placer.try_against_wall(index, spec, tries // 2, check)
        if placed is None:
            placed = self._placer.try_floor(index, spec, tries, check)
        return self._commit(placed, chosen)

    def surface(
        self, item: dict[str, Any], *, accept: Callable[[Polygon, float], float | None] | None = None
    ) -> dict[str, Any] | None:
        """Stand the item on a support surface (table top, shelf top, tray) of an object, inside its rectangle."""
        spec = self._item(item, "surface")
        check, chosen = self._wrap(accept)
        return self._commit(self._placer.try_surface(len(self._placer.placed), spec, check), chosen)

    def wall(
        self,
        item: dict[str, Any],
        *,
        tries: int = CLUTTER_WALL_TRIES,
        accept: Callable[[Polygon, float], float | None] | None = None,
    ) -> dict[str, Any] | None:
        """Hang the item on a wall at its ``mount_height_m``, clear of windows and of whatever stands there."""
        spec = self._item(item, "wall")
        check, chosen = self._wrap(accept)
        return self._commit(self._placer.try_wall(len(self._placer.placed), spec, tries, check), chosen)
