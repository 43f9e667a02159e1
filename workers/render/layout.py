"""Rooms and collision-free furniture placement.

:func:`sample_room` draws a room (size, finishes, windows) from the budget;
:func:`place_objects` puts asset specs into it by bounded rejection sampling:

- floor items get a uniform yaw on [0°, 360°) and a uniform position; sofas,
  beds and bookshelves are often pushed back to a wall instead, facing the room;
- surface items (``placement == "surface"``) go on a support surface of an
  already placed table or bookshelf when one fits, else on the floor;
- wall items hang on a wall at their mount height, clear of windows and of
  tall furniture standing against that wall.

Footprints are oriented rectangles; two objects collide when their
rectangles, grown by half the clearance each, overlap in plan *and* their
height intervals overlap (so a clock may hang above a low sofa). Placement
never drops an object: a composition that cannot be placed raises
:class:`LayoutError` with the class, its count and the reason.

:class:`ClutterPlacer` applies the same rules to extra, unlabelled items placed
afterwards (:mod:`workers.render.distractors`): the objects stay where they
are, and an item that does not fit is skipped instead of raising.

World frame and yaw follow ``workers/render/README.md``: the room spans
x ∈ [0, width_m], y ∈ [0, depth_m]; yaw is counter-clockwise about +z and an
asset's front is its local +y.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from shapely.geometry import Polygon

from workers.render import assets

WALLS: tuple[str, ...] = ("south", "north", "west", "east")
# Yaw that turns an asset's front (local +y) to face into the room from each wall.
WALL_FACING_YAW_DEG: dict[str, float] = {"south": 0.0, "north": 180.0, "west": 270.0, "east": 90.0}
FLOOR_FINISHES: dict[str, str] = {"wood": "floor_wood", "tile": "floor_tile", "carpet": "carpet"}

# How often these classes stand back to a wall rather than free in the room
# (common practice: beds and bookcases almost always do, sofas often float).
AGAINST_WALL_PROBABILITY: dict[str, float] = {"bed": 0.85, "bookshelf": 0.9, "sofa": 0.6}

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

def wall_length_m(room: dict[str, Any], wall: str) -> float:
    return float(room["width_m"] if wall in ("south", "north") else room["depth_m"])


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
    return {"wall": wall, "center_m": round(center, 6), "sill_m": round(sill, 6), "width_m": round(width, 6),
            "height_m": round(window_height, 6)}


def sample_room(budget: dict[str, Any], rng: np.random.Generator) -> dict[str, Any]:
    """Draw a room from ``budget["room"]``: size, floor/wall/ceiling finishes and windows.

    Returns ``{"width_m", "depth_m", "height_m", "floor_finish", "materials":
    {"floor", "wall", "ceiling"}, "windows": [{"wall", "center_m", "sill_m",
    "width_m", "height_m"}]}``. ``center_m`` runs along the wall from its
    lower-coordinate end (x for south/north, y for west/east).
    """
    section = budget["room"]
    room: dict[str, Any] = {
        "width_m": round(float(rng.uniform(*section["width_m"])), 6),
        "depth_m": round(float(rng.uniform(*section["depth_m"])), 6),
        "height_m": round(float(rng.uniform(*section["height_m"])), 6),
    }
    finish = list(FLOOR_FINISHES)[int(rng.integers(len(FLOOR_FINISHES)))]
    room["floor_finish"] = finish
    wall_material = assets.sample_material("wall_paint", rng)
    if rng.random() < 0.3:
        # Eggshell paint has a soft sheen (common practice for living rooms).
        wall_material = {**wall_material, "kind": "plastic", "roughness": round(float(rng.uniform(0.5, 0.8)), 6)}
    room["materials"] = {
        "floor": assets.sample_material(FLOOR_FINISHES[finish], rng),
        "wall": wall_material,
        "ceiling": assets.sample_material("ceiling_paint", rng),
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


def _blocks_window(room: dict[str, Any], wall: str, u0: float, u1: float, z0: float, z1: float,
                   margin_m: float = 0.05) -> bool:
    for window in room.get("windows", []):
        if window["wall"] != wall:
            continue
        w0 = window["center_m"] - window["width_m"] / 2 - margin_m
        w1 = window["center_m"] + window["width_m"] / 2 + margin_m
        s0, s1 = window["sill_m"] - margin_m, window["sill_m"] + window["height_m"] + margin_m
        if u0 < w1 and w0 < u1 and z0 < s1 and s0 < z1:
            return True
    return False


class _Placer:
    def __init__(self, room: dict[str, Any], rng: np.random.Generator, clearance_m: float, max_tries: int) -> None:
        self.room = room
        self.rng = rng
        self.width = float(room["width_m"])
        self.depth = float(room["depth_m"])
        self.height = float(room["height_m"])
        self.grow = clearance_m / 2
        self.max_tries = max_tries
        self.placed: list[_Placed] = []

    def floor_cover_fraction(self) -> float:
        area = sum(p.spec["footprint_m"][0] * p.spec["footprint_m"][1] for p in self.placed
                   if p.anchor in ("floor", "against_wall"))
        return area / (self.width * self.depth)

    def free(self, candidate: _Placed, ignore: int | None = None) -> bool:
        candidate.prepare(self.grow)
        return not any(_overlap(candidate, other) for other in self.placed if other.index != ignore)

    def try_floor(self, index: int, spec: dict[str, Any], tries: int, accept: _Accept | None = None) -> _Placed | None:
        hw, hd = spec["footprint_m"][0] / 2, spec["footprint_m"][1] / 2
        yaw = 0.0
        x_range = y_range = (0.0, -1.0)
        for attempt in range(tries):
            if attempt % YAW_TRIES == 0 or x_range[0] > x_range[1] or y_range[0] > y_range[1]:
                # One yaw for a batch of positions: the yaw of a placed item stays uniform
                # unless a whole batch fails, which only happens in crowded rooms.
                yaw = _yaw(self.rng)
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

    def try_against_wall(self, index: int, spec: dict[str, Any], tries: int,
                         accept: _Accept | None = None) -> _Placed | None:
        w, d, h = spec["footprint_m"][0], spec["footprint_m"][1], spec["height_m"]
        walls = [wall for wall in WALLS if wall_length_m(self.room, wall) >= w + 2 * WALL_GAP_M
                 and (wall_length_m(self.room, "south" if wall in ("west", "east") else "west") >= d + 2 * WALL_GAP_M)]
        if not walls:
            return None
        for _ in range(tries):
            wall = walls[int(self.rng.integers(len(walls)))]
            length = wall_length_m(self.room, wall)
            along = round(float(self.rng.uniform(w / 2 + WALL_GAP_M, length - w / 2 - WALL_GAP_M)), 6)
            if _blocks_window(self.room, wall, along - w / 2, along + w / 2, 0.0, h):
                continue
            x, y = _wall_point(self.room, wall, along, d / 2 + WALL_GAP_M)
            candidate = _Placed(index, spec, round(x, 6), round(y, 6), 0.0, WALL_FACING_YAW_DEG[wall],
                                "against_wall", None, wall=wall)
            if self.free(candidate) and (accept is None or accept(candidate)):
                return candidate
        return None

    def try_surface(self, index: int, spec: dict[str, Any], accept: _Accept | None = None) -> _Placed | None:
        w, d, h = spec["footprint_m"][0], spec["footprint_m"][1], spec["height_m"]
        supports = [(p, s) for p in self.placed if p.anchor != "surface" and p.spec["placement"] != "wall"
                    for s in p.spec.get("support_surfaces", [])
                    if min(s["size_m"]) >= min(w, d) and p.z + s["height_m"] + h <= self.height - CEILING_GAP_M]
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
            if self.free(candidate, ignore=host.index) and self._inside_support(candidate, host, surface) and (
                    accept is None or accept(candidate)):
                return candidate
        return None

    @staticmethod
    def _inside_support(candidate: _Placed, host: _Placed, surface: dict[str, Any]) -> bool:
        # Re-check after rounding: the footprint must lie inside the support rectangle.
        corners = _corners(candidate.spec, candidate.x, candidate.y, candidate.yaw_deg)
        hc, hs = math.cos(math.radians(host.yaw_deg)), math.sin(math.radians(host.yaw_deg))
        dx, dy = corners[:, 0] - host.x, corners[:, 1] - host.y
        lx, ly = hc * dx + hs * dy - surface["center_m"][0], -hs * dx + hc * dy - surface["center_m"][1]
        return bool(np.all(np.abs(lx) <= surface["size_m"][0] / 2 + 1e-6)
                    and np.all(np.abs(ly) <= surface["size_m"][1] / 2 + 1e-6))

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
            candidate = _Placed(index, spec, round(x, 6), round(y, 6), mount, WALL_FACING_YAW_DEG[wall], "wall",
                                None, wall=wall)
            if self.free(candidate) and (accept is None or accept(candidate)):
                return candidate
        return None

    def place(self, index: int, spec: dict[str, Any], label: str) -> None:
        placement = spec["placement"]
        result: _Placed | None = None
        if placement == "wall":
            result = self.try_wall(index, spec, self.max_tries)
        else:
            if placement == "surface":
                result = self.try_surface(index, spec)
            if result is None and self.rng.random() < AGAINST_WALL_PROBABILITY.get(spec["class_name"], 0.0):
                result = self.try_against_wall(index, spec, self.max_tries // 2)
            if result is None:
                result = self.try_floor(index, spec, self.max_tries)
        if result is None:
            where = "on any wall" if placement == "wall" else "collision-free"
            raise _Failure(
                f"cannot place {label} in a {self.width:.1f} × {self.depth:.1f} m room: no {where} spot after "
                f"{self.max_tries} tries (floor {100 * self.floor_cover_fraction():.0f}% covered)"
            )
        self.placed.append(result)


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


def _check_composition(room: dict[str, Any], asset_specs: list[dict[str, Any]],
                       max_objects_per_m2: float | None) -> None:
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
                raise LayoutError(f"cannot place {spec['class_name']} ({w:.2f} m wide): larger than any wall "
                                  f"of the {size}")
            continue
        fits = any(a + 2 * WALL_GAP_M <= width and b + 2 * WALL_GAP_M <= depth for a, b in ((w, d), (d, w)))
        if not fits or spec["height_m"] > float(room["height_m"]) - CEILING_GAP_M:
            raise LayoutError(f"cannot place {spec['class_name']} ({w:.2f} × {d:.2f} × {spec['height_m']:.2f} m): "
                              f"larger than the {size} × {float(room['height_m']):.1f} m")
    floor_specs = [s for s in asset_specs if s["placement"] == "floor"]
    need = sum(s["footprint_m"][0] * s["footprint_m"][1] for s in floor_specs)
    if need > area:
        raise LayoutError(
            f"cannot place {_summary(floor_specs)} in a {size}: their footprints need {need:.1f} m² "
            f"but the floor has {area:.1f} m²"
        )


def place_objects(room: dict[str, Any], asset_specs: list[dict[str, Any]], rng: np.random.Generator, *,
                  max_objects_per_m2: float | None = None, clearance_m: float = DEFAULT_CLEARANCE_M,
                  max_tries: int = DEFAULT_MAX_TRIES, restarts: int = 3) -> list[dict[str, Any]]:
    """Place every asset spec in the room without collisions; return the objects in input order.

    Each object is its asset spec plus ``instance_id`` (1-based, input order),
    ``position_m`` [x, y, z] (the local origin in the world), ``yaw_deg`` in
    [0, 360), ``support_instance_id`` (the host's id for items standing on a
    surface, else None) and ``anchor`` ("floor", "against_wall", "wall" or
    "surface"). Wall items also get the ``mount_height_m`` actually used.

    ``max_objects_per_m2`` is the budget's density limit (``budget["room"]
    ["max_objects_per_m2"]``); None means no limit. A failed greedy pass is
    restarted up to ``restarts`` times with fresh draws before giving up.

    Raises
    ------
    LayoutError
        Naming the class, its count and the reason (density limit, too large,
        floor area, or no collision-free spot after ``max_tries`` tries).
    """
    _check_composition(room, asset_specs, max_objects_per_m2)
    totals = Counter(s["class_name"] for s in asset_specs)
    labels: dict[int, str] = {}
    seen: Counter[str] = Counter()
    for i, spec in enumerate(asset_specs):
        seen[spec["class_name"]] += 1
        labels[i] = f"{spec['class_name']} #{seen[spec['class_name']]} of {totals[spec['class_name']]}"
    order = _order(asset_specs)
    failure: _Failure | None = None
    for _ in range(max(1, restarts)):
        placer = _Placer(room, rng, clearance_m, max_tries)
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
    ``mount_height_m``), in the asset frame of ``workers/render/README.md``. Each method returns
    ``{"position_m", "yaw_deg", "anchor", "support_instance_id"}`` (wall items also ``"wall"``).
    ``accept`` (optional) is a last check on a collision-free candidate's footprint polygon and
    base height (m); it returns the base height to use, or None to refuse the spot.
    """

    def __init__(self, room: dict[str, Any], objects: list[dict[str, Any]], rng: np.random.Generator, *,
                 clearance_m: float = DEFAULT_CLEARANCE_M) -> None:
        self._placer = _Placer(room, rng, clearance_m, DEFAULT_MAX_TRIES)
        self._instance_ids: list[int | None] = []
        by_instance = {int(obj["instance_id"]): i for i, obj in enumerate(objects)}
        for i, obj in enumerate(objects):
            x, y, z = (float(v) for v in obj["position_m"])
            support = obj.get("support_instance_id")
            placed = _Placed(i, obj, x, y, z, float(obj["yaw_deg"]), str(obj.get("anchor", "floor")),
                             None if support is None else by_instance.get(int(support)), wall=obj.get("wall"))
            self._placer.placed.append(placed.prepare(self._placer.grow))
            self._instance_ids.append(int(obj["instance_id"]))

    def _item(self, item: dict[str, Any], placement: str) -> dict[str, Any]:
        return {"footprint_m": [float(v) for v in item["footprint_m"]], "height_m": float(item["height_m"]),
                "placement": placement, "support_surfaces": [],
                **({"mount_height_m": float(item["mount_height_m"])} if "mount_height_m" in item else {})}

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
        out: dict[str, Any] = {"position_m": [round(placed.x, 6), round(placed.y, 6), round(placed.z, 6)],
                               "yaw_deg": round(placed.yaw_deg, 6), "anchor": placed.anchor,
                               "support_instance_id": host}
        if placed.wall is not None:
            out["wall"] = placed.wall
        return out

    def floor(self, item: dict[str, Any], *, against_wall_probability: float = 0.0,
              tries: int = CLUTTER_FLOOR_TRIES,
              accept: Callable[[Polygon, float], float | None] | None = None) -> dict[str, Any] | None:
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

    def surface(self, item: dict[str, Any], *,
                accept: Callable[[Polygon, float], float | None] | None = None) -> dict[str, Any] | None:
        """Stand the item on a support surface (table top, shelf top, tray) of an object, inside its rectangle."""
        spec = self._item(item, "surface")
        check, chosen = self._wrap(accept)
        return self._commit(self._placer.try_surface(len(self._placer.placed), spec, check), chosen)

    def wall(self, item: dict[str, Any], *, tries: int = CLUTTER_WALL_TRIES,
             accept: Callable[[Polygon, float], float | None] | None = None) -> dict[str, Any] | None:
        """Hang the item on a wall at its ``mount_height_m``, clear of windows and of whatever stands there."""
        spec = self._item(item, "wall")
        check, chosen = self._wrap(accept)
        return self._commit(self._placer.try_wall(len(self._placer.placed), spec, tries, check), chosen)
