"""Dressed rooms: room types with plausible finishes, skirting boards, doors, window frames and curtains.

A room is drawn by :func:`render.layout.sample_room` (size, windows); this module adds what
makes a box into a room, all of it unlabelled background:

- :func:`sample_dressing` (spec time, on the layout stream): the room type (``room.room_types`` in the
  budget) and, from its table :data:`ROOM_TYPES`, the floor finish, paint or wallpaper on the walls and
  how likely curtains are; then the doors, the skirting board, a frame for each window and the curtains.
  Everything is plain JSON in the spec's ``room``.
- :func:`dressing_parts` (scene build): triangle meshes of all of it, one part per material.

The glass of the windows is not geometry here: the window portal that carries the sky into the room
(:func:`render.scene.window_portal_entries`) is itself the pane (it transmits the sky times a thin pane's
mean transmittance and mirrors the rest), so the sky stays sampled directly. What the windows look out on is
:mod:`render.backdrop`.

Frame of reference on a wall: ``u`` runs along the wall from its lower-coordinate end, ``o`` is the
distance into the room from the wall's inner face (negative inside the wall), ``z`` is height.

References
----------
Door and window dimensions: Neufert, *Architects' Data*, 4th ed. (2012) — interior door leaves 0.76–0.88 m
wide and 1.98–2.10 m high; door handles 0.85–1.05 m above the floor (from memory). Skirting boards
6–15 cm high, 12–20 mm thick; architraves 5–9 cm wide; curtain rods 10–15 cm above the window head
and 10–20 cm past each side (common practice).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
import trimesh

from render import assets

WALLS: tuple[str, ...] = ("south", "north", "west", "east")
WALL_THICKNESS_M = 0.1  # behind the interior face; only its inner face is ever seen


#: Room types and the finishes they make plausible (common practice, not a survey): floor finish weights
#: (keys of :data:`FLOOR_FINISHES`), the share of wallpapered walls, and how likely a window has curtains.
@dataclass(frozen=True)
class RoomType:
    floor_weights: dict[str, float]
    wallpaper_probability: float
    curtain_probability: float


ROOM_TYPES: dict[str, RoomType] = {
    "living_room": RoomType({"wood": 0.50, "carpet": 0.20, "tile": 0.20, "concrete": 0.10}, 0.25, 0.8),
    "bedroom": RoomType({"wood": 0.45, "carpet": 0.45, "tile": 0.05, "concrete": 0.05}, 0.35, 0.9),
    "dining_room": RoomType({"wood": 0.55, "tile": 0.35, "carpet": 0.05, "concrete": 0.05}, 0.30, 0.6),
    "office": RoomType({"carpet": 0.45, "wood": 0.20, "tile": 0.15, "concrete": 0.20}, 0.05, 0.35),
}

#: Floor finish → material family (``render.assets.FAMILIES``).
FLOOR_FINISHES: dict[str, str] = {
    "wood": "floor_wood",
    "tile": "floor_tile",
    "carpet": "carpet",
    "concrete": "concrete",
}

DOOR_WIDTH_M = (0.76, 0.90)  # leaf width, Neufert (from memory)
DOOR_HEIGHT_M = (1.98, 2.10)  # leaf height, Neufert (from memory)
DOOR_HEAD_GAP_M = 0.12  # wall left between the architrave and the ceiling (common practice)
ARCHITRAVE_WIDTH_M = (0.05, 0.09)  # common practice
ARCHITRAVE_PROUD_M = 0.02  # how far the architrave stands off the wall
DOOR_PROUD_M = 0.012  # the leaf's face, in front of the wall (the wall stays solid behind a closed door)
HANDLE_HEIGHT_M = (0.90, 1.05)  # Neufert (from memory)
DOOR_OPENING_GAP_M = 0.15  # wall kept between a door's architrave and a window or a corner (common practice)
SKIRTING_HEIGHT_M = (0.06, 0.15)  # common practice
SKIRTING_DEPTH_M = (0.012, 0.018)  # 12–18 mm; furniture set back to a wall stands 20 mm off (layout.WALL_GAP_M)
WINDOW_FRAME_PROFILE_M = (0.045, 0.08)  # visible width of a frame member (common practice)
MULLION_MIN_WIDTH_M = 0.9  # openings at least this wide may be split by a mullion
CURTAIN_ROD_ABOVE_M = (0.08, 0.15)  # rod above the window head (common practice)
CURTAIN_ROD_PAST_M = (0.10, 0.25)  # rod past each side of the window (common practice)
CURTAIN_OFFSET_M = 0.10  # curtain plane in front of the wall
CURTAIN_PLEAT_M = (0.10, 0.16)  # pleat repeat
CURTAIN_DEPTH_M = (0.02, 0.04)  # pleat amplitude (half the fold depth)
CURTAIN_PANEL_M = (0.25, 0.50)  # width of one drawn-back panel


def _choice(weights: dict[str, float], rng: np.random.Generator) -> str:
    names = list(weights)
    p = np.array([weights[n] for n in names], dtype=float)
    return names[int(rng.choice(len(names), p=p / p.sum()))]


def wall_length_m(room: dict[str, Any], wall: str) -> float:
    return float(room["width_m"] if wall in ("south", "north") else room["depth_m"])


def _free_spans(
    room: dict[str, Any], wall: str, taken: list[tuple[float, float]], gap_m: float
) -> list[tuple[float, float]]:
    """Stretches of ``wall`` (u intervals) at least ``gap_m`` from its ends and from every taken interval."""
    spans = [(gap_m, wall_length_m(room, wall) - gap_m)]
    for a, b in sorted(taken):
        cut = []
        for s0, s1 in spans:
            if b + gap_m <= s0 or a - gap_m >= s1:
                cut.append((s0, s1))
                continue
            if a - gap_m > s0:
                cut.append((s0, a - gap_m))
            if b + gap_m < s1:
                cut.append((b + gap_m, s1))
        spans = cut
    return [(s0, s1) for s0, s1 in spans if s1 > s0]


def _opening_spans(room: dict[str, Any], wall: str) -> list[tuple[float, float]]:
    spans = [
        (w["center_m"] - w["width_m"] / 2, w["center_m"] + w["width_m"] / 2)
        for w in room.get("windows", [])
        if w["wall"] == wall
    ]
    spans += [_door_span(d) for d in room.get("doors", []) if d["wall"] == wall]
    return spans


def _door_span(door: dict[str, Any]) -> tuple[float, float]:
    """The u interval a door takes on its wall, architrave included (doors written by hand may have none)."""
    half = float(door["width_m"]) / 2 + float(door.get("architrave_m", 0.0))
    return float(door["center_m"]) - half, float(door["center_m"]) + half


def _sample_door(room: dict[str, Any], rng: np.random.Generator) -> dict[str, Any] | None:
    """One closed door on a wall, clear of windows, other doors and corners; None when no wall has room."""
    width = float(rng.uniform(*DOOR_WIDTH_M))
    architrave = float(rng.uniform(*ARCHITRAVE_WIDTH_M))
    height = min(float(rng.uniform(*DOOR_HEIGHT_M)), float(room["height_m"]) - DOOR_HEAD_GAP_M - architrave)
    handle_height = float(rng.uniform(*HANDLE_HEIGHT_M))
    panelled = bool(rng.random() < 0.5)
    hinge_left = bool(rng.random() < 0.5)
    draw_wall, draw_along = rng.random(2)
    if height < 1.8:
        return None  # a ceiling too low for a door: no door rather than a dwarf one
    walls = list(WALLS)
    start = int(draw_wall * len(walls))
    total = width + 2 * architrave
    for k in range(len(walls)):
        wall = walls[(start + k) % len(walls)]
        spans = [
            (s0, s1 - total)
            for s0, s1 in _free_spans(room, wall, _opening_spans(room, wall), DOOR_OPENING_GAP_M)
            if s1 - s0 >= total
        ]
        if not spans:
            continue
        lengths = np.array([s1 - s0 for s0, s1 in spans])
        position = draw_along * lengths.sum()
        ends = np.cumsum(lengths)
        index = min(int(np.searchsorted(ends, position, side="right")), len(spans) - 1)
        start_u = spans[index][0] + min(position - (ends[index] - lengths[index]), lengths[index])
        return {
            "wall": wall,
            "center_m": round(float(start_u + total / 2), 6),
            "width_m": round(width, 6),
            "height_m": round(height, 6),
            "architrave_m": round(architrave, 6),
            "handle_height_m": round(handle_height, 6),
            "panelled": panelled,
            "hinge_left": hinge_left,
        }
    return None


def _sample_window_frame(window: dict[str, Any], rng: np.random.Generator) -> dict[str, Any]:
    profile = float(rng.uniform(*WINDOW_FRAME_PROFILE_M))
    draw_mullion, draw_transom = rng.random(2)
    return {
        "profile_m": round(profile, 6),
        "mullion": bool(window["width_m"] >= MULLION_MIN_WIDTH_M and draw_mullion < 0.6),
        "transom": bool(window["height_m"] >= 1.2 and draw_transom < 0.3),
    }


def _sample_curtains(room: dict[str, Any], window: dict[str, Any], rng: np.random.Generator) -> dict[str, Any]:
    draws = rng.random(6)
    above = CURTAIN_ROD_ABOVE_M[0] + draws[0] * (CURTAIN_ROD_ABOVE_M[1] - CURTAIN_ROD_ABOVE_M[0])
    rod_z = min(window["sill_m"] + window["height_m"] + above, float(room["height_m"]) - 0.04)
    past = CURTAIN_ROD_PAST_M[0] + draws[1] * (CURTAIN_ROD_PAST_M[1] - CURTAIN_ROD_PAST_M[0])
    past = min(
        past,
        window["center_m"] - window["width_m"] / 2 - 0.02,
        wall_length_m(room, window["wall"]) - window["center_m"] - window["width_m"] / 2 - 0.02,
    )
    panel = CURTAIN_PANEL_M[0] + draws[2] * (CURTAIN_PANEL_M[1] - CURTAIN_PANEL_M[0])
    panel = min(panel, past + window["width_m"] / 2)
    floor_length = bool(draws[3] < 0.6)
    bottom = 0.01 if floor_length else max(0.05, window["sill_m"] - 0.08)
    return {
        "wall": window["wall"],
        "window_center_m": window["center_m"],
        "rod_z_m": round(rod_z, 6),
        "rod_start_m": round(window["center_m"] - window["width_m"] / 2 - past, 6),
        "rod_end_m": round(window["center_m"] + window["width_m"] / 2 + past, 6),
        "panel_m": round(panel, 6),
        "bottom_m": round(bottom, 6),
        "sides": ["left", "right"] if draws[4] < 0.75 else (["left"] if draws[5] < 0.5 else ["right"]),
        "pleat_m": round(CURTAIN_PLEAT_M[0] + draws[5] * (CURTAIN_PLEAT_M[1] - CURTAIN_PLEAT_M[0]), 6),
        "fold_depth_m": round(CURTAIN_DEPTH_M[0] + draws[0] * (CURTAIN_DEPTH_M[1] - CURTAIN_DEPTH_M[0]), 6),
    }


def curtain_panels(curtain: dict[str, Any]) -> list[tuple[float, float]]:
    """The u intervals covered by a curtain's drawn-back panels."""
    out = []
    for side in curtain["sides"]:
        if side == "left":
            out.append((curtain["rod_start_m"], curtain["rod_start_m"] + curtain["panel_m"]))
        else:
            out.append((curtain["rod_end_m"] - curtain["panel_m"], curtain["rod_end_m"]))
    return out


def sample_dressing(room: dict[str, Any], budget: dict[str, Any], rng: np.random.Generator) -> None:
    """Room type, finishes, doors, skirting, window frames and curtains of ``room``, in place.

    ``room`` has its size and windows; ``budget`` is the whole normalized budget (``room.room_types``,
    ``room.door_count``, ``room.curtain_probability``). Adds ``room_type``, ``floor_finish``,
    ``materials`` (floor, wall, ceiling, skirting, door, architrave, handle, window_frame, curtain),
    ``doors``, ``skirting``, ``window_frames`` (one per window) and ``curtains``.
    """
    section = budget["room"]
    kinds = list(section["room_types"])
    room_type = kinds[int(rng.integers(len(kinds)))]
    recipe = ROOM_TYPES[room_type]
    room["room_type"] = room_type
    finish = _choice(recipe.floor_weights, rng)
    room["floor_finish"] = finish
    wallpaper = bool(rng.random() < recipe.wallpaper_probability)
    wall_material = assets.sample_material("wall_paint", rng)
    if wallpaper:
        wall_material = {**wall_material, "family": "wallpaper"}
    elif rng.random() < 0.3:
        # Eggshell paint has a soft sheen (common practice for living rooms).
        wall_material = {**wall_material, "kind": "plastic", "roughness": round(float(rng.uniform(0.5, 0.8)), 6)}
    trim = assets.sample_material("painted", rng) if rng.random() < 0.7 else assets.sample_material("wood", rng)
    if trim["family"] == "painted" and rng.random() < 0.7:
        # Most skirting and architraves are painted white (common practice).
        trim = {**trim, "rgb": [round(float(v), 6) for v in rng.uniform(0.72, 0.86) * np.ones(3)]}
    door = assets.sample_material("wood", rng) if rng.random() < 0.5 else trim
    frame_family = _choice({"painted": 0.6, "wood": 0.25, "metal": 0.15}, rng)
    window_frame = assets.sample_material(frame_family, rng)
    if frame_family == "painted":
        window_frame = {**window_frame, "rgb": [0.8, 0.8, 0.78]}  # white uPVC or painted timber (common practice)
    room["materials"] = {
        "floor": assets.sample_material(FLOOR_FINISHES[finish], rng),
        "wall": wall_material,
        "ceiling": assets.sample_material("ceiling_paint", rng),
        "skirting": trim,
        "architrave": trim,
        "door": door,
        "handle": assets.sample_material("metal", rng),
        "window_frame": window_frame,
        "curtain": assets.sample_material("fabric", rng),
    }
    low, high = (int(v) for v in section["door_count"])
    doors: list[dict[str, Any]] = []
    room["doors"] = doors
    for _ in range(int(rng.integers(low, high + 1))):
        door_spec = _sample_door(room, rng)
        if door_spec is not None:
            doors.append(door_spec)
    room["skirting"] = {
        "height_m": round(float(rng.uniform(*SKIRTING_HEIGHT_M)), 6),
        "depth_m": round(float(rng.uniform(*SKIRTING_DEPTH_M)), 6),
    }
    room["window_frames"] = [_sample_window_frame(w, rng) for w in room.get("windows", [])]
    curtains = []
    probability = recipe.curtain_probability * float(section["curtain_probability"])
    for window in room.get("windows", []):
        draw = rng.random()
        curtain = _sample_curtains(room, window, rng)
        if draw < probability:
            curtains.append(curtain)
    room["curtains"] = curtains


# ---------------------------------------------------------------------------
# Geometry
# ---------------------------------------------------------------------------


def _wall_box(
    room: dict[str, Any], wall: str, u0: float, u1: float, o0: float, o1: float, z0: float, z1: float
) -> trimesh.Trimesh:
    """An axis-aligned box given in wall coordinates (u along, o into the room, z up), in world metres."""
    corners = wall_to_world(room, wall, np.array([[u0, o0, z0], [u1, o1, z1]], dtype=np.float64))
    low, high = corners.min(axis=0), corners.max(axis=0)
    return assets.box_mesh(low[0], high[0], low[1], high[1], low[2], high[2])


def wall_to_world(room: dict[str, Any], wall: str, uoz: np.ndarray) -> np.ndarray:
    """Points (…, 3) in wall coordinates (u, o, z) → world (x, y, z)."""
    u, o, z = uoz[..., 0], uoz[..., 1], uoz[..., 2]
    width, depth = float(room["width_m"]), float(room["depth_m"])
    if wall == "south":
        xy = (u, o)
    elif wall == "north":
        xy = (u, depth - o)
    elif wall == "west":
        xy = (o, u)
    elif wall == "east":
        xy = (width - o, u)
    else:
        raise ValueError(f"unknown wall {wall!r}")
    return np.stack([xy[0], xy[1], z], axis=-1)


def _skirting(room: dict[str, Any]) -> list[trimesh.Trimesh]:
    skirting = room.get("skirting")
    if not skirting:
        return []
    height, depth = float(skirting["height_m"]), float(skirting["depth_m"])
    boxes = []
    for wall in WALLS:
        length = wall_length_m(room, wall)
        # South and north boards run corner to corner; west and east stop at their faces, so no two boxes overlap.
        start, end = (0.0, length) if wall in ("south", "north") else (depth, length - depth)
        doors = [_door_span(d) for d in room.get("doors", []) if d["wall"] == wall]
        spans = [(start, end)]
        for a, b in doors:
            spans = [
                piece
                for s0, s1 in spans
                for piece in ((s0, min(s1, a)), (max(s0, b), s1))
                if piece[1] - piece[0] > 1e-4
            ]
        boxes += [_wall_box(room, wall, s0, s1, 0.0, depth, 0.0, height) for s0, s1 in spans]
    return boxes


def _door(room: dict[str, Any], door: dict[str, Any]) -> dict[str, list[trimesh.Trimesh]]:
    wall, c, w, h = door["wall"], float(door["center_m"]), float(door["width_m"]), float(door["height_m"])
    a = float(door.get("architrave_m", 0.0))
    leaf = [_wall_box(room, wall, c - w / 2, c + w / 2, 0.0, DOOR_PROUD_M, 0.0, h)]
    if door.get("panelled"):
        inset, rail = 0.11, 0.012
        mid = h * 0.52
        for z0, z1 in ((0.16, mid - 0.06), (mid + 0.06, h - 0.14)):
            leaf.append(
                _wall_box(room, wall, c - w / 2 + inset, c + w / 2 - inset, DOOR_PROUD_M, DOOR_PROUD_M + rail, z0, z1)
            )
    architrave = [
        _wall_box(room, wall, c - w / 2 - a, c - w / 2, 0.0, ARCHITRAVE_PROUD_M, 0.0, h + a),
        _wall_box(room, wall, c + w / 2, c + w / 2 + a, 0.0, ARCHITRAVE_PROUD_M, 0.0, h + a),
        _wall_box(room, wall, c - w / 2, c + w / 2, 0.0, ARCHITRAVE_PROUD_M, h, h + a),
    ]
    # Lever handle on the side away from the hinges: a rose, a neck and a lever pointing to the hinges.
    side = 1.0 if door.get("hinge_left") else -1.0
    hu, hz = c + side * (w / 2 - 0.065), float(door["handle_height_m"])
    handle = [
        _wall_box(room, wall, hu - 0.025, hu + 0.025, DOOR_PROUD_M, DOOR_PROUD_M + 0.01, hz - 0.025, hz + 0.025),
        _wall_box(room, wall, hu - 0.008, hu + 0.008, DOOR_PROUD_M + 0.01, DOOR_PROUD_M + 0.06, hz - 0.008, hz + 0.008),
        _wall_box(
            room,
            wall,
            min(hu, hu - side * 0.12),
            max(hu, hu - side * 0.12),
            DOOR_PROUD_M + 0.05,
            DOOR_PROUD_M + 0.066,
            hz - 0.009,
            hz + 0.009,
        ),
    ]
    return {"door": leaf, "architrave": architrave, "handle": handle}


def _window_frame(room: dict[str, Any], window: dict[str, Any], frame: dict[str, Any]) -> list[trimesh.Trimesh]:
    wall, c, w = window["wall"], float(window["center_m"]), float(window["width_m"])
    s, h, p = float(window["sill_m"]), float(window["height_m"]), float(frame["profile_m"])
    t = WALL_THICKNESS_M
    o0, o1 = -0.75 * t, -0.35 * t  # the frame sits in the middle of the reveal
    u0, u1, z0, z1 = c - w / 2, c + w / 2, s, s + h
    boxes = [
        _wall_box(room, wall, u0, u0 + p, o0, o1, z0, z1),
        _wall_box(room, wall, u1 - p, u1, o0, o1, z0, z1),
        _wall_box(room, wall, u0 + p, u1 - p, o0, o1, z1 - p, z1),
        _wall_box(room, wall, u0 + p, u1 - p, o0, o1, z0, z0 + p),
        # The inner window board, flush with the wall, covers the reveal below the frame.
        _wall_box(room, wall, u0, u1, o1, 0.0, z0, z0 + 0.02),
    ]
    if frame.get("mullion"):
        boxes.append(_wall_box(room, wall, c - p * 0.4, c + p * 0.4, o0, o1, z0 + p, z1 - p))
    if frame.get("transom"):
        zt = z0 + 0.68 * h
        boxes.append(_wall_box(room, wall, u0 + p, u1 - p, o0, o1, zt - p * 0.4, zt + p * 0.4))
    return boxes


def _pleated_panel(
    room: dict[str, Any], wall: str, u0: float, u1: float, z0: float, z1: float, pleat_m: float, fold_m: float
) -> trimesh.Trimesh:
    """A hanging curtain panel: a vertical sheet folded along u, o = CURTAIN_OFFSET_M + fold·sin(2πu/pleat)."""
    columns = max(8, int(np.ceil((u1 - u0) / pleat_m * 8)))
    u = np.linspace(u0, u1, columns + 1)
    o = CURTAIN_OFFSET_M + fold_m * np.sin(2 * np.pi * (u - u0) / pleat_m)
    bottom = np.stack([u, o, np.full_like(u, z0)], axis=-1)
    top = np.stack([u, o, np.full_like(u, z1)], axis=-1)
    vertices = wall_to_world(room, wall, np.concatenate([bottom, top]))
    n = columns + 1
    i = np.arange(columns)
    faces = np.concatenate([np.stack([i, i + 1, n + i + 1], axis=1), np.stack([i, n + i + 1, n + i], axis=1)])
    return trimesh.Trimesh(vertices=vertices, faces=faces, process=False)


def _curtain(room: dict[str, Any], curtain: dict[str, Any]) -> dict[str, list[trimesh.Trimesh]]:
    wall, rod_z = curtain["wall"], float(curtain["rod_z_m"])
    panels = [
        _pleated_panel(
            room,
            wall,
            a,
            b,
            float(curtain["bottom_m"]),
            rod_z - 0.02,
            float(curtain["pleat_m"]),
            float(curtain["fold_depth_m"]),
        )
        for a, b in curtain_panels(curtain)
    ]
    rod = _wall_box(
        room,
        wall,
        float(curtain["rod_start_m"]) - 0.02,
        float(curtain["rod_end_m"]) + 0.02,
        CURTAIN_OFFSET_M - 0.01,
        CURTAIN_OFFSET_M + 0.01,
        rod_z - 0.01,
        rod_z + 0.01,
    )
    brackets = [
        _wall_box(room, wall, u - 0.01, u + 0.01, 0.0, CURTAIN_OFFSET_M, rod_z - 0.01, rod_z + 0.01)
        for u in (float(curtain["rod_start_m"]) + 0.03, float(curtain["rod_end_m"]) - 0.03)
    ]
    return {"curtain": panels, "handle": [rod, *brackets]}


def dressing_parts(room: dict[str, Any]) -> list[tuple[str, trimesh.Trimesh, dict[str, Any]]]:
    """(name, mesh, material) per material slot of the room's dressing, in world metres; empty for a bare room
    (specs written before rooms were dressed)."""
    materials = room.get("materials", {})
    groups: dict[str, list[trimesh.Trimesh]] = {"skirting": _skirting(room)}
    for door in room.get("doors", []):
        for slot, meshes in _door(room, door).items():
            groups.setdefault(slot, []).extend(meshes)
    for window, frame in zip(room.get("windows", []), room.get("window_frames", []), strict=False):
        groups.setdefault("window_frame", []).extend(_window_frame(room, window, frame))
    for curtain in room.get("curtains", []):
        for slot, meshes in _curtain(room, curtain).items():
            groups.setdefault(slot, []).extend(meshes)
    out = []
    for slot, meshes in groups.items():
        if meshes and slot in materials:
            # trimesh annotates concatenate() as returning Geometry; a list of Trimesh concatenates to a Trimesh.
            out.append((slot, cast(trimesh.Trimesh, trimesh.util.concatenate(meshes)), dict(materials[slot])))
    return out


def wall_fixtures(room: dict[str, Any], wall: str) -> list[tuple[float, float, float, float]]:
    """(u0, u1, z0, z1) on ``wall`` where nothing may hang: doors with their architraves, curtain panels and rods."""
    out = []
    for door in room.get("doors", []):
        if door["wall"] == wall:
            u0, u1 = _door_span(door)
            out.append((u0, u1, 0.0, float(door["height_m"]) + float(door.get("architrave_m", 0.0))))
    for curtain in room.get("curtains", []):
        if curtain["wall"] == wall:
            out.append(
                (
                    curtain["rod_start_m"] - 0.02,
                    curtain["rod_end_m"] + 0.02,
                    curtain["bottom_m"],
                    curtain["rod_z_m"] + 0.02,
                )
            )
    return out


# ---------------------------------------------------------------------------
# Room shell: floor, ceiling and walls with their window openings
# ---------------------------------------------------------------------------


def _wall_boxes(room: dict[str, Any], wall: str) -> list[trimesh.Trimesh]:
    """Boxes making up one wall with its window openings cut out, in world coordinates.

    The wall is cut on a grid at every opening edge and each column is merged
    into as few boxes as its openings allow: rectangles around each hole.
    """
    length, height, t = wall_length_m(room, wall), room["height_m"], WALL_THICKNESS_M
    openings = [
        (w["center_m"] - w["width_m"] / 2, w["center_m"] + w["width_m"] / 2, w["sill_m"], w["sill_m"] + w["height_m"])
        for w in room.get("windows", [])
        if w["wall"] == wall
    ]
    # The wall runs past both corners by its thickness so the corners are closed.
    us = sorted({-t, length + t, *(v for o in openings for v in o[:2])})
    zs = sorted({0.0, height, *(v for o in openings for v in o[2:])})
    rects = []
    for u0, u1 in itertools.pairwise(us):
        um = (u0 + u1) / 2
        run_start = None
        for z0, z1 in itertools.pairwise(zs):
            zm = (z0 + z1) / 2
            solid = not any(o[0] < um < o[1] and o[2] < zm < o[3] for o in openings)
            if solid and run_start is None:
                run_start = z0
            if not solid and run_start is not None:
                rects.append((u0, u1, run_start, z0))
                run_start = None
        if run_start is not None:
            rects.append((u0, u1, run_start, height))
    return [_wall_box(room, wall, u0, u1, -t, 0.0, z0, z1) for u0, u1, z0, z1 in rects]


def room_parts(room: dict[str, Any]) -> list[assets.Part]:
    """Floor, ceiling and four walls (thick boxes outside the interior), window openings cut out.

    World frame: the interior is x ∈ [0, width_m], y ∈ [0, depth_m], z ∈ [0, height_m].
    """
    width, depth, height, t = room["width_m"], room["depth_m"], room["height_m"], WALL_THICKNESS_M
    materials = room["materials"]
    parts = [
        assets.Part("floor", assets.box_mesh(-t, width + t, -t, depth + t, -t, 0.0), dict(materials["floor"])),
        assets.Part(
            "ceiling", assets.box_mesh(-t, width + t, -t, depth + t, height, height + t), dict(materials["ceiling"])
        ),
    ]
    for wall in WALLS:
        boxes = _wall_boxes(room, wall)
        mesh = boxes[0] if len(boxes) == 1 else assets.concatenate_meshes(boxes)
        parts.append(assets.Part(f"wall_{wall}", mesh, dict(materials["wall"])))
    parts += [assets.Part(name, mesh, material) for name, mesh, material in dressing_parts(room)]
    return parts
