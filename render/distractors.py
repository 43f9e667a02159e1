"""Unlabelled clutter (distractors): books, vases, bowls, boxes, cushions, picture frames, mirrors, rugs, table lamps.

Distractors are things a home holds besides the labelled classes. They are rendered like any
other surface — they hide parts of labelled objects, cast shadows and show in mirrors — but their
shapes are named ``"d{k}_p{j}"`` (:mod:`render.scene`), so the label pass counts them as
background and they never appear in the labels.

- :func:`sample_distractors` (at spec time, on its own random stream keyed by the layout, see
  :mod:`render.spec`) draws the budget's ``appearance.distractor_count`` items and places
  them *after* the labelled objects, which never move: rugs on the floor under or near furniture,
  boxes, floor vases and floor cushions on the free floor (collision-free, inside the room),
  books, vases, bowls, small boxes and table lamps on the tops of tables, shelves and trays
  (inside the host's top, resting on it), cushions on sofa and armchair seats, picture frames and
  mirrors on the walls (clear of windows and wall-mounted items). An item that does not fit is
  skipped. Each kind and size is drawn from :data:`KINDS`.
- :func:`clear_of_camera_and_lights` drops the few that would stand where the camera is (the
  camera is sampled from the labelled objects only) or around a lamp bulb.
- :func:`build_distractor_parts` / :func:`distractor_world_parts` turn a record back into meshes,
  deterministically, like :func:`render.assets.build_asset_parts`.

A distractor record (plain JSON) is ``{"kind", "anchor", "position_m", "yaw_deg", "size_m" [w, d, h],
"params", "materials"}`` plus ``"support_instance_id"`` (the host of surface and seat items) and
``"wall"`` (wall items). Local frames follow ``render/README.md``: origin at the centre of
the footprint on the base, front towards +y; wall items have their back on the plane y = 0.

References
----------
Tobin et al., "Domain randomization for transferring deep neural networks from simulation to the
real world", IROS 2017; Tremblay et al., "Training deep networks with synthetic data: bridging the
reality gap by domain randomization", CVPR Workshops 2018 (random distractor objects around the
objects of interest).
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass
from typing import Any

import numpy as np
import trimesh
from shapely.geometry import Polygon

from render import assets, layout

from .appearance import yaw_frame

R = assets.DimensionRange

#: Placement rank: rugs first (floor items may stand on them), then floor, surface, seat and wall items.
ANCHORS: tuple[str, ...] = ("rug", "floor", "surface", "seat", "wall")


@dataclass(frozen=True)
class DistractorKind:
    """One kind of clutter: where it goes, how often, its size ranges and its material slots."""

    name: str
    anchor: str  # one of ANCHORS
    weight: float  # relative frequency among the kinds that fit the room
    ranges: dict[str, assets.DimensionRange]
    slots: dict[str, tuple[str, ...]]  # material slot -> allowed families (assets.FAMILIES)
    max_per_room: int | None = None


_BOOK = {
    "width_m": R(0.11, 0.25, "paperbacks 11 cm to art books 25 cm wide (from memory)"),
    "length_m": R(0.18, 0.32, "paperbacks 18 cm to art books 32 cm tall (from memory)"),
    "thickness_m": R(0.012, 0.05, "books 1.2–5 cm thick (from memory)"),
    "count": R(1, 4, "one book to a small stack (common practice)"),
}
_LAMP = {
    "height_m": R(0.30, 0.65, "table lamps 30–65 cm tall (from memory)"),
    "shade_diameter_m": R(0.20, 0.40, "shades 20–40 cm (from memory)"),
    "shade_height_m": R(0.14, 0.28, "shades 14–28 cm tall (from memory)"),
    "base_diameter_m": R(0.08, 0.18, "weighted bases 8–18 cm (from memory)"),
}

KINDS: dict[str, DistractorKind] = {
    "rug": DistractorKind(
        "rug",
        "rug",
        1.2,
        {
            "length_m": R(1.20, 3.00, "rugs 120 × 170 cm to 200 × 300 cm (from memory)"),
            "width_m": R(0.80, 2.00, "rugs 80 cm to 2 m wide (from memory)"),
            "thickness_m": R(0.006, 0.02, "flat weaves 6 mm to deep pile 20 mm (from memory)"),
        },
        {"pile": ("rug",)},
        max_per_room=1,
    ),
    "box": DistractorKind(
        "box",
        "floor",
        1.5,
        {
            "width_m": R(0.30, 0.60, "storage boxes and crates 30–60 cm (from memory)"),
            "depth_m": R(0.25, 0.45, "storage boxes 25–45 cm deep (from memory)"),
            "height_m": R(0.15, 0.45, "storage boxes 15–45 cm tall (from memory)"),
            "lid_height_m": R(0.02, 0.06, "lids 2–6 cm (common practice)"),
        },
        {"body": ("cardboard", "cardboard", "painted", "wood", "plastic")},
    ),
    "floor_vase": DistractorKind(
        "floor_vase",
        "floor",
        0.8,
        {
            "height_m": R(0.40, 0.80, "floor vases 40–80 cm tall (from memory)"),
            "diameter_m": R(0.18, 0.35, "floor vases 18–35 cm across (from memory)"),
        },
        {"body": ("ceramic", "terracotta", "concrete", "ceramic")},
    ),
    "floor_cushion": DistractorKind(
        "floor_cushion",
        "floor",
        0.6,
        {
            "side_m": R(0.45, 0.70, "floor cushions 45–70 cm square (from memory)"),
            "thickness_m": R(0.08, 0.18, "floor cushions 8–18 cm thick (from memory)"),
        },
        {"cover": ("fabric", "fabric", "leather")},
    ),
    "book_stack": DistractorKind(
        "book_stack",
        "surface",
        3.0,
        _BOOK,
        {
            "cover_0": ("book",),
            "cover_1": ("book",),
            "cover_2": ("book",),
            "cover_3": ("book",),
            "pages": ("page_edges",),
        },
    ),
    "vase": DistractorKind(
        "vase",
        "surface",
        2.0,
        {
            "height_m": R(0.15, 0.45, "table vases 15–45 cm tall (from memory)"),
            "diameter_m": R(0.08, 0.22, "table vases 8–22 cm across (from memory)"),
        },
        {"body": ("ceramic", "ceramic", "terracotta", "metal")},
    ),
    "bowl": DistractorKind(
        "bowl",
        "surface",
        1.5,
        {
            "diameter_m": R(0.14, 0.34, "cereal bowls 14 cm to fruit bowls 34 cm (from memory)"),
            "height_m": R(0.05, 0.12, "bowls 5–12 cm deep (from memory)"),
        },
        {"body": ("ceramic", "ceramic", "wood", "metal")},
    ),
    "small_box": DistractorKind(
        "small_box",
        "surface",
        1.0,
        {
            "width_m": R(0.08, 0.30, "trinket, tissue and shoe boxes 8–30 cm (from memory)"),
            "depth_m": R(0.06, 0.22, "8–22 cm deep (from memory)"),
            "height_m": R(0.04, 0.15, "4–15 cm tall (from memory)"),
            "lid_height_m": R(0.01, 0.03, "lids 1–3 cm (common practice)"),
        },
        {"body": ("wood", "painted", "leather", "cardboard")},
    ),
    "table_lamp": DistractorKind(
        "table_lamp",
        "surface",
        1.5,
        _LAMP,
        {"base": ("ceramic", "metal", "wood", "painted"), "shade": ("lampshade",)},
        max_per_room=2,
    ),
    "cushion": DistractorKind(
        "cushion",
        "seat",
        2.5,
        {
            "side_m": R(0.30, 0.50, "throw pillows 30 × 30 to 50 × 50 cm (from memory)"),
            "thickness_m": R(0.10, 0.18, "filled throw pillows 10–18 cm thick (from memory)"),
            "lean_deg": R(8.0, 20.0, "leaning back against the sofa back (common practice)"),
        },
        {"cover": ("fabric", "fabric", "leather")},
    ),
    "picture_frame": DistractorKind(
        "picture_frame",
        "wall",
        3.0,
        {
            "width_m": R(0.20, 1.00, "prints and photos 20 cm to 1 m wide (from memory)"),
            "height_m": R(0.20, 0.80, "20–80 cm tall (from memory)"),
            "depth_m": R(0.015, 0.04, "frame mouldings 1.5–4 cm deep (from memory)"),
            "border_m": R(0.015, 0.06, "mouldings 1.5–6 cm wide (from memory)"),
            "mat_m": R(0.02, 0.08, "mat (passe-partout) borders 2–8 cm (from memory)"),
            "centre_height_m": R(
                1.40, 1.65, "hung with the centre near eye level, about 1.45–1.55 m (common practice)"
            ),
        },
        {"frame": ("wood", "painted", "metal"), "mat": ("page_edges",), "picture": ("artwork",)},
    ),
    "mirror": DistractorKind(
        "mirror",
        "wall",
        0.8,
        {
            "width_m": R(0.40, 0.90, "wall mirrors 40–90 cm wide (from memory)"),
            "height_m": R(0.50, 1.20, "50 cm to 1.2 m tall (from memory)"),
            "depth_m": R(0.02, 0.04, "2–4 cm deep with the frame (from memory)"),
            "border_m": R(0.02, 0.07, "frames 2–7 cm wide (from memory)"),
            "centre_height_m": R(1.35, 1.60, "centre near eye level (common practice)"),
        },
        {"frame": ("wood", "painted", "metal"), "glass": ("mirror",)},
        max_per_room=1,
    ),
}

# Probabilities (common practice in furnished rooms): half the storage boxes and floor vases stand
# back to a wall, half the picture frames have a mat, half the boxes a lid.
AGAINST_WALL_PROBABILITY: dict[str, float] = {"box": 0.5, "floor_vase": 0.5, "floor_cushion": 0.0}
MAT_PROBABILITY = 0.5
LID_PROBABILITY = 0.5
# Rugs lie under the classes people gather round (common practice), aligned with them.
RUG_HOST_CLASSES = ("sofa", "coffee_table", "dining_table", "bed", "armchair")
RUG_PREFERRED_HOSTS = ("coffee_table", "sofa")
RUG_WALL_GAP_M = 0.1
RUG_TRIES = 24
SEAT_TRIES = 12
SEAT_GAP_M = 0.02
SEAT_BACK_MARGIN_M = 0.03
# A distractor nearer the camera than this (m) would fill the frame; one holding a lamp bulb would darken the room.
CAMERA_CLEARANCE_M = 0.5
LIGHT_CLEARANCE_M = 0.1
BOOK_YAW_JITTER_DEG = 8.0


def _draw(rng: np.random.Generator, kind: str, name: str) -> float:
    r = KINDS[kind].ranges[name]
    return round(float(rng.uniform(r.low, r.high)), 6)


# ---------------------------------------------------------------------------
# Sampling: kind, size, materials
# ---------------------------------------------------------------------------


def _rotated_extent(w: float, d: float, yaw_deg: float) -> tuple[float, float]:
    c, s = abs(math.cos(math.radians(yaw_deg))), abs(math.sin(math.radians(yaw_deg)))
    return c * w + s * d, s * w + c * d


def _sample_params(kind: str, rng: np.random.Generator) -> tuple[dict[str, Any], list[float]]:
    """Kind-specific parameters and the size [w, d, h] of the item's footprint box (m)."""
    p: dict[str, Any] = {}
    if kind == "rug":
        length, width = _draw(rng, kind, "length_m"), _draw(rng, kind, "width_m")
        p = {
            "length_m": max(length, width),
            "width_m": min(length, width),
            "thickness_m": _draw(rng, kind, "thickness_m"),
        }
        return p, [p["length_m"], p["width_m"], p["thickness_m"]]
    if kind in ("box", "small_box"):
        p = {n: _draw(rng, kind, n) for n in ("width_m", "depth_m", "height_m", "lid_height_m")}
        if rng.random() >= LID_PROBABILITY:
            p["lid_height_m"] = 0.0
        return p, [p["width_m"], p["depth_m"], p["height_m"]]
    if kind in ("vase", "floor_vase"):
        p = {
            "height_m": _draw(rng, kind, "height_m"),
            "diameter_m": _draw(rng, kind, "diameter_m"),
            "shape": float(rng.integers(4)),
        }  # cylinder, bulb, bottle, flared
        return p, [p["diameter_m"], p["diameter_m"], p["height_m"]]
    if kind == "bowl":
        p = {"diameter_m": _draw(rng, kind, "diameter_m"), "height_m": _draw(rng, kind, "height_m")}
        p["height_m"] = round(min(p["height_m"], 0.45 * p["diameter_m"]), 6)  # bowls are wider than deep
        return p, [p["diameter_m"], p["diameter_m"], p["height_m"]]
    if kind == "floor_cushion":
        p = {"side_m": _draw(rng, kind, "side_m"), "thickness_m": _draw(rng, kind, "thickness_m")}
        return p, [p["side_m"], p["side_m"], p["thickness_m"]]
    if kind == "cushion":
        p = {n: _draw(rng, kind, n) for n in ("side_m", "thickness_m", "lean_deg")}
        return p, _cushion_size(p)
    if kind == "book_stack":
        count = int(rng.integers(int(_BOOK["count"].low), int(_BOOK["count"].high) + 1))
        books = []
        for _ in range(count):
            books.append(
                [
                    _draw(rng, kind, "width_m"),
                    _draw(rng, kind, "length_m"),
                    _draw(rng, kind, "thickness_m"),
                    round(float(rng.uniform(-BOOK_YAW_JITTER_DEG, BOOK_YAW_JITTER_DEG)), 6),
                ]
            )
        books.sort(key=lambda b: -b[0] * b[1])  # the largest book at the bottom, as stacks are made
        books[0][3] = 0.0
        extents = [_rotated_extent(b[0], b[1], b[3]) for b in books]
        p = {"books": books}
        return p, [max(e[0] for e in extents), max(e[1] for e in extents), sum(b[2] for b in books)]
    if kind == "table_lamp":
        p = {n: _draw(rng, kind, n) for n in ("height_m", "shade_diameter_m", "shade_height_m", "base_diameter_m")}
        p["shade_height_m"] = round(min(p["shade_height_m"], 0.5 * p["height_m"]), 6)
        p["shade_top_ratio"] = round(float(rng.uniform(0.6, 1.0)), 6)  # drum to cone shades
        p["body"] = float(rng.integers(2))  # 0: disc base and stem, 1: jar body
        width = max(p["shade_diameter_m"], p["base_diameter_m"])
        return p, [width, width, p["height_m"]]
    if kind in ("picture_frame", "mirror"):
        names = ["width_m", "height_m", "depth_m", "border_m", "centre_height_m"]
        p = {n: _draw(rng, kind, n) for n in names}
        p["border_m"] = round(min(p["border_m"], 0.15 * min(p["width_m"], p["height_m"])), 6)
        if kind == "picture_frame":
            mat = _draw(rng, kind, "mat_m")
            p["mat_m"] = (
                round(min(mat, 0.15 * min(p["width_m"], p["height_m"])), 6) if rng.random() < MAT_PROBABILITY else 0.0
            )
        return p, [p["width_m"], p["depth_m"], p["height_m"]]
    raise ValueError(f"unknown distractor kind {kind!r} (known: {', '.join(KINDS)})")


def sample_distractor(kind: str, rng: np.random.Generator) -> dict[str, Any]:
    """An unplaced distractor record of one kind: size, parameters and materials (no position yet)."""
    spec = KINDS[kind]
    params, size = _sample_params(kind, rng)
    slots: dict[str, tuple[str, ...]] = dict(spec.slots)
    if kind == "book_stack":
        slots = {f"cover_{k}": ("book",) for k in range(len(params["books"]))}
        slots["pages"] = ("page_edges",)
    if kind == "picture_frame" and not params["mat_m"]:
        slots.pop("mat")
    materials = {
        slot: assets.sample_material(families[int(rng.integers(len(families)))], rng)
        for slot, families in slots.items()
    }
    return {
        "kind": kind,
        "anchor": spec.anchor,
        "size_m": [round(float(v), 6) for v in size],
        "params": params,
        "materials": materials,
    }


# ---------------------------------------------------------------------------
# Placement
# ---------------------------------------------------------------------------


def _yaw_matrix(yaw_deg: float) -> np.ndarray:
    c, s = math.cos(math.radians(yaw_deg)), math.sin(math.radians(yaw_deg))
    return np.array([[c, -s], [s, c]])


def _rect(cx: float, cy: float, w: float, d: float, yaw_deg: float) -> Polygon:
    local = np.array([[-w / 2, -d / 2], [w / 2, -d / 2], [w / 2, d / 2], [-w / 2, d / 2]])
    return Polygon(local @ _yaw_matrix(yaw_deg).T + [cx, cy])


def _place_rug(
    item: dict[str, Any], room: dict[str, Any], objects: list[dict[str, Any]], rng: np.random.Generator
) -> dict[str, Any] | None:
    """Centre a rug under or in front of a sofa, table, bed or armchair (aligned with it), else anywhere."""
    length, width = item["size_m"][0], item["size_m"][1]
    ranges = KINDS["rug"].ranges
    inner = Polygon(
        [
            (RUG_WALL_GAP_M, RUG_WALL_GAP_M),
            (room["width_m"] - RUG_WALL_GAP_M, RUG_WALL_GAP_M),
            (room["width_m"] - RUG_WALL_GAP_M, room["depth_m"] - RUG_WALL_GAP_M),
            (RUG_WALL_GAP_M, room["depth_m"] - RUG_WALL_GAP_M),
        ]
    )
    hosts = [obj for obj in objects if obj["class_name"] in RUG_HOST_CLASSES and obj.get("anchor") != "surface"]
    # A living room's rug lies under the coffee table or in front of the sofa (common practice); the other
    # hosts only when there is neither.
    hosts = [obj for obj in hosts if obj["class_name"] in RUG_PREFERRED_HOSTS] or hosts
    for attempt in range(RUG_TRIES):
        scale = 0.93 ** (
            attempt // 4
        )  # a rug too large for its spot shrinks (to the smallest size) rather than vanishes
        w, d = max(length * scale, ranges["length_m"].low), max(width * scale, ranges["width_m"].low)
        if hosts and attempt < RUG_TRIES - 4:
            host = hosts[int(rng.integers(len(hosts)))]
            hx, hy = float(host["position_m"][0]), float(host["position_m"][1])
            forward = 0.0
            if host["class_name"] in ("sofa", "armchair", "bed"):
                # In front of seats (front legs on the rug), under the foot end of beds.
                forward = float(rng.uniform(0.25, 0.6)) * (host["footprint_m"][1] / 2 + d / 2)
            local = np.array([float(rng.uniform(-0.15, 0.15)), forward + float(rng.uniform(-0.15, 0.15))])
            cx, cy = np.array([hx, hy]) + _yaw_matrix(host["yaw_deg"]) @ local
            yaw = float(host["yaw_deg"])
        else:
            cx = float(rng.uniform(0.0, room["width_m"]))
            cy = float(rng.uniform(0.0, room["depth_m"]))
            yaw = 90.0 * int(rng.integers(2))
        polygon = _rect(cx, cy, w, d, yaw)
        if inner.contains(polygon):
            return {
                "position_m": [round(float(cx), 6), round(float(cy), 6), 0.0],
                "yaw_deg": round(yaw % 360.0, 6),
                "anchor": "rug",
                "size_m": [round(w, 6), round(d, 6), item["size_m"][2]],
                "params": {**item["params"], "length_m": round(w, 6), "width_m": round(d, 6)},
            }
    return None


def _cushion_size(p: dict[str, Any]) -> list[float]:
    """Footprint box [w, d, h] (m) of a pillow of side s and thickness t leaning back by lean degrees."""
    s, t, lean = p["side_m"], p["thickness_m"], math.radians(p["lean_deg"])
    return [round(s, 6), round(t * math.cos(lean) + s * math.sin(lean), 6), round(s * math.cos(lean), 6)]


def _place_on_seat(
    item: dict[str, Any],
    objects: list[dict[str, Any]],
    taken: dict[int, list[tuple[float, float]]],
    rng: np.random.Generator,
) -> dict[str, Any] | None:
    """Stand a cushion on a sofa or armchair seat, its back against the back cushions, beside the others.

    A pillow taller than the back of its seat is made smaller (down to the smallest size of its
    range) so that it stays below the top of the back.
    """
    smallest = KINDS["cushion"].ranges["side_m"].low
    cos_lean = math.cos(math.radians(item["params"]["lean_deg"]))
    seats = []
    for obj in objects:
        area = assets.seat_area(obj)
        if area is None:
            continue
        side = min(item["params"]["side_m"], (area["back_top_m"] - SEAT_BACK_MARGIN_M - area["height_m"]) / cos_lean)
        params = {**item["params"], "side_m": round(side, 6)}
        size = _cushion_size(params)
        if side >= smallest and area["size_m"][0] >= size[0] + 2 * SEAT_GAP_M and area["size_m"][1] >= size[1]:
            seats.append((obj, area, params, size))
    if not seats:
        return None
    for _ in range(SEAT_TRIES):
        host, area, params, (w, d, _) = seats[int(rng.integers(len(seats)))]
        half_free = area["size_m"][0] / 2 - w / 2 - SEAT_GAP_M
        x = area["center_m"][0] + float(rng.uniform(-half_free, half_free))
        interval = (x - w / 2 - SEAT_GAP_M, x + w / 2 + SEAT_GAP_M)
        used = taken.setdefault(int(host["instance_id"]), [])
        if any(interval[0] < b and a < interval[1] for a, b in used):
            continue
        used.append(interval)
        back = area["center_m"][1] - area["size_m"][1] / 2
        local = np.array([x, back + d / 2 + 0.005])
        cx, cy = np.asarray(host["position_m"][:2], dtype=float) + _yaw_matrix(host["yaw_deg"]) @ local
        z = float(host["position_m"][2]) + area["height_m"]
        return {
            "position_m": [round(float(cx), 6), round(float(cy), 6), round(z, 6)],
            "yaw_deg": round(float(host["yaw_deg"]), 6),
            "anchor": "seat",
            "support_instance_id": int(host["instance_id"]),
            "size_m": _cushion_size(params),
            "params": params,
        }
    return None


def _feasible_anchors(objects: list[dict[str, Any]]) -> set[str]:
    anchors = {"rug", "floor", "wall"}
    if any(
        obj.get("support_surfaces") and obj.get("anchor") != "surface" and obj.get("placement") != "wall"
        for obj in objects
    ):
        anchors.add("surface")
    if any(assets.seat_area(obj) for obj in objects):
        anchors.add("seat")
    return anchors


def sample_distractors(
    room: dict[str, Any], objects: list[dict[str, Any]], appearance: dict[str, Any], rng: np.random.Generator
) -> list[dict[str, Any]]:
    """Draw and place the frame's distractors among the placed ``objects`` (which do not move).

    Parameters
    ----------
    room : dict
        The room of :func:`render.layout.sample_room`.
    objects : list of dict
        The labelled objects of :func:`render.layout.place_objects`.
    appearance : dict
        The budget's ``appearance`` section; ``distractor_count`` [low, high] is the number drawn
        (uniform integer). With high = 0 nothing is drawn from ``rng``.
    rng : numpy.random.Generator
        The distractor stream (its own, so that the labelled objects, lights and camera stay as they are).

    Returns
    -------
    list of dict
        Placed distractor records (see the module docstring), in placement order: rugs, floor,
        surface, seat, then wall items. Items that found no spot are left out.
    """
    low, high = (int(v) for v in appearance.get("distractor_count", (0, 0)))
    if high <= 0:
        return []
    count = int(rng.integers(low, high + 1))
    if count == 0:
        return []
    anchors = _feasible_anchors(objects)
    drawn_counts: Counter[str] = Counter()
    drawn: list[dict[str, Any]] = []
    for _ in range(count):
        kinds = [
            k
            for k in KINDS.values()
            if k.anchor in anchors and (k.max_per_room is None or drawn_counts[k.name] < k.max_per_room)
        ]
        weights = np.array([k.weight for k in kinds])
        kind = kinds[int(rng.choice(len(kinds), p=weights / weights.sum()))].name
        drawn_counts[kind] += 1
        drawn.append(sample_distractor(kind, rng))
    drawn.sort(key=lambda item: ANCHORS.index(item["anchor"]))  # stable: draw order within an anchor

    placer = layout.ClutterPlacer(room, objects, rng)
    rugs: list[tuple[Polygon, float]] = []

    def on_the_floor_or_a_rug(polygon: Polygon, z: float) -> float | None:
        # Lying on a rug lifts an item by its thickness; half on a rug would tilt it: refused.
        for rug, thickness in rugs:
            if rug.contains(polygon):
                return z + thickness
            if rug.intersection(polygon).area > 1e-9:
                return None
        return z

    placed: list[dict[str, Any]] = []
    seats_taken: dict[int, list[tuple[float, float]]] = {}
    for item in drawn:
        w, d, h = item["size_m"]
        anchor = item["anchor"]
        where: dict[str, Any] | None
        if anchor == "rug":
            where = _place_rug(item, room, objects, rng)
            if where is not None:
                item = {**item, "size_m": where.pop("size_m"), "params": where.pop("params")}
                rugs.append(
                    (
                        _rect(
                            where["position_m"][0],
                            where["position_m"][1],
                            item["size_m"][0],
                            item["size_m"][1],
                            where["yaw_deg"],
                        ),
                        item["size_m"][2],
                    )
                )
        elif anchor == "floor":
            where = placer.floor(
                {"footprint_m": [w, d], "height_m": h},
                against_wall_probability=AGAINST_WALL_PROBABILITY.get(item["kind"], 0.0),
                accept=on_the_floor_or_a_rug,
            )
        elif anchor == "surface":
            where = placer.surface({"footprint_m": [w, d], "height_m": h})
        elif anchor == "seat":
            where = _place_on_seat(item, objects, seats_taken, rng)
            if where is not None:
                item = {**item, "size_m": where.pop("size_m"), "params": where.pop("params")}
        else:
            mount = max(0.0, item["params"]["centre_height_m"] - h / 2)
            where = placer.wall({"footprint_m": [w, d], "height_m": h, "mount_height_m": mount})
        if where is None:
            continue
        record = {**item, **where}
        if record.get("support_instance_id") is None:
            record.pop("support_instance_id", None)
        # Rugs and items back to a wall stand on the floor too.
        record["anchor"] = "floor" if anchor in ("rug", "floor") else anchor
        placed.append(record)
    return placed


def distractor_bounds_m(distractor: dict[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Axis-aligned world bounds (min_xyz, max_xyz) of a placed distractor's footprint box."""
    w, d, h = (float(v) for v in distractor["size_m"])
    y0, y1 = (0.0, d) if distractor["anchor"] == "wall" else (-d / 2, d / 2)
    local = np.array([[-w / 2, y0], [w / 2, y0], [w / 2, y1], [-w / 2, y1]])
    corners = local @ _yaw_matrix(float(distractor["yaw_deg"])).T + np.asarray(distractor["position_m"][:2], float)
    z = float(distractor["position_m"][2])
    return (np.array([*corners.min(axis=0), z]), np.array([*corners.max(axis=0), z + h]))


def footprint_polygon(distractor: dict[str, Any]) -> Polygon:
    """The distractor's footprint rectangle in world coordinates (x, y)."""
    w, d, _ = (float(v) for v in distractor["size_m"])
    y0, y1 = (0.0, d) if distractor["anchor"] == "wall" else (-d / 2, d / 2)
    local = np.array([[-w / 2, y0], [w / 2, y0], [w / 2, y1], [-w / 2, y1]])
    return Polygon(
        local @ _yaw_matrix(float(distractor["yaw_deg"])).T + np.asarray(distractor["position_m"][:2], float)
    )


def clear_of_camera_and_lights(
    distractors: list[dict[str, Any]], camera: dict[str, Any], lights: list[dict[str, Any]]
) -> list[dict[str, Any]]:
    """The distractors that stand at least :data:`CAMERA_CLEARANCE_M` from the camera and hold no lamp bulb.

    The camera and the lights are sampled from the labelled objects alone, so a distractor may stand
    where the camera is or enclose a point or spot light; those few are dropped (no random draw). Wall
    items stay: they are a few centimetres deep and the camera keeps 0.3 m from the walls
    (``camera.WALL_MARGIN_M``), so one near the camera is only a picture beside or behind it.
    """
    eye = np.asarray(camera["position_m"], dtype=float)
    bulbs = [np.asarray(light["position_m"], dtype=float) for light in lights if light.get("kind") in ("point", "spot")]
    kept = []
    for distractor in distractors:
        lo, hi = distractor_bounds_m(distractor)
        if (
            distractor["anchor"] != "wall"
            and np.linalg.norm(np.maximum(np.maximum(lo - eye, eye - hi), 0.0)) < CAMERA_CLEARANCE_M
        ):
            continue
        if any(np.all(bulb > lo - LIGHT_CLEARANCE_M) and np.all(bulb < hi + LIGHT_CLEARANCE_M) for bulb in bulbs):
            continue
        kept.append(distractor)
    return kept


# ---------------------------------------------------------------------------
# Geometry
# ---------------------------------------------------------------------------

PartList = list[tuple[str, trimesh.Trimesh]]


def _transformed(mesh: trimesh.Trimesh, yaw_deg: float, offset: tuple[float, float, float]) -> trimesh.Trimesh:
    matrix = trimesh.transformations.rotation_matrix(math.radians(yaw_deg), [0.0, 0.0, 1.0])
    matrix[:3, 3] = offset
    mesh.apply_transform(matrix)
    return mesh


def _book_stack(p: dict[str, Any]) -> PartList:
    parts: PartList = []
    z = 0.0
    for k, (w, length, t, yaw) in enumerate(p["books"]):
        board, spine = min(0.003, t * 0.15), min(0.004, w * 0.05)
        hw, hl = w / 2, length / 2
        pieces = [
            (f"cover_{k}", assets.box_mesh(-hw, hw, -hl, hl, 0.0, board)),
            (f"cover_{k}", assets.box_mesh(-hw, hw, -hl, hl, t - board, t)),
            (f"cover_{k}", assets.box_mesh(-hw, -hw + spine, -hl, hl, board, t - board)),
            # The page block is set back 3 mm from the cover edges, as in a bound book.
            ("pages", assets.box_mesh(-hw + spine, hw - 0.003, -hl + 0.003, hl - 0.003, board, t - board)),
        ]
        parts += [(slot, _transformed(mesh, yaw, (0.0, 0.0, z))) for slot, mesh in pieces]
        z += t
    return parts


def _vase_profile(p: dict[str, Any]) -> list[tuple[float, float]]:
    """(radius, z) outline of a vase, from the axis at the foot to the axis at the bottom of its opening."""
    h, r = p["height_m"], p["diameter_m"] / 2
    wall = max(0.004, 0.08 * r)
    shape = int(p["shape"])
    if shape == 0:  # cylinder
        outer = [(0.9 * r, 0.0), (r, 0.015), (r, h)]
    elif shape == 1:  # bulb
        outer = [(0.6 * r, 0.0), (r, 0.35 * h), (0.9 * r, 0.6 * h), (0.45 * r, 0.85 * h), (0.5 * r, h)]
    elif shape == 2:  # bottle
        outer = [(0.85 * r, 0.0), (r, 0.1 * h), (r, 0.55 * h), (0.35 * r, 0.75 * h), (0.25 * r, 0.9 * h), (0.3 * r, h)]
    else:  # flared
        outer = [(0.5 * r, 0.0), (0.45 * r, 0.2 * h), (0.55 * r, 0.6 * h), (r, h)]
    rim = outer[-1][0]
    depth = min(0.15 * h, 0.06)
    return [(0.0, 0.0), *outer, (rim - wall, h), (max(rim - wall, 0.003) * 0.8, h - depth), (0.0, h - depth)]


def _bowl_profile(p: dict[str, Any]) -> list[tuple[float, float]]:
    h, r = p["height_m"], p["diameter_m"] / 2
    wall, bottom = max(0.004, 0.04 * r), max(0.008, 0.15 * h)
    fractions = (0.0, 0.15, 0.4, 0.7, 1.0)
    outer = [(r * (0.45 + 0.55 * math.sqrt(f)), f * h) for f in fractions]
    inner = [(rr - wall, z) for rr, z in reversed(outer) if z >= bottom]
    return [(0.0, 0.0), *outer, *inner, (outer[1][0] - wall, bottom), (0.0, bottom)]


def _frame_ring(w: float, h: float, depth: float, border: float) -> list[trimesh.Trimesh]:
    hw = w / 2
    return [
        assets.box_mesh(-hw, hw, 0.0, depth, 0.0, border),
        assets.box_mesh(-hw, hw, 0.0, depth, h - border, h),
        assets.box_mesh(-hw, -hw + border, 0.0, depth, border, h - border),
        assets.box_mesh(hw - border, hw, 0.0, depth, border, h - border),
    ]


def picture_rect_m(p: dict[str, Any]) -> tuple[float, float, float, float]:
    """(x0, x1, z0, z1) of a picture frame's picture (or a mirror's glass) in the item's local frame (m)."""
    inset = p["border_m"] + p.get("mat_m", 0.0)
    return -p["width_m"] / 2 + inset, p["width_m"] / 2 - inset, inset, p["height_m"] - inset


def _build(kind: str, p: dict[str, Any]) -> PartList:
    if kind == "rug":
        hw, hd = p["length_m"] / 2, p["width_m"] / 2
        return [("pile", assets.box_mesh(-hw, hw, -hd, hd, 0.0, p["thickness_m"]))]
    if kind in ("box", "small_box"):
        hw, hd, h, lid = p["width_m"] / 2, p["depth_m"] / 2, p["height_m"], p["lid_height_m"]
        if lid <= 0:
            return [("body", assets.box_mesh(-hw, hw, -hd, hd, 0.0, h))]
        inset = 0.003  # the lid overhangs the box by a few millimetres
        return [
            ("body", assets.box_mesh(-hw + inset, hw - inset, -hd + inset, hd - inset, 0.0, h - lid)),
            ("body", assets.box_mesh(-hw, hw, -hd, hd, h - lid, h)),
        ]
    if kind in ("vase", "floor_vase"):
        return [("body", assets.lathe_mesh(_vase_profile(p)))]
    if kind == "bowl":
        return [("body", assets.lathe_mesh(_bowl_profile(p), sections=assets.SECTIONS_FINE))]
    if kind == "floor_cushion":
        s, t = p["side_m"], p["thickness_m"]
        return [
            (
                "cover",
                assets.cushion_mesh(-s / 2, s / 2, -s / 2, s / 2, 0.0, t, corner_m=0.08, bevel_m=min(0.04, t / 3)),
            )
        ]
    if kind == "cushion":
        s, t, lean = p["side_m"], p["thickness_m"], math.radians(p["lean_deg"])
        depth = t * math.cos(lean) + s * math.sin(lean)
        pillow = assets.cushion_mesh(-s / 2, s / 2, -t / 2, t / 2, 0.0, s, corner_m=t / 2, bevel_m=min(0.05, t / 3))
        # Lean back about the front bottom edge (the back bottom edge sinks into the seat), then put that
        # edge at the front of the footprint.
        pillow.apply_transform(trimesh.transformations.rotation_matrix(lean, [1.0, 0.0, 0.0], [0.0, t / 2, 0.0]))
        pillow.apply_translation([0.0, depth / 2 - t / 2, 0.0])
        return [("cover", pillow)]
    if kind == "book_stack":
        return _book_stack(p)
    if kind == "table_lamp":
        h, sd, sh = p["height_m"], p["shade_diameter_m"], p["shade_height_m"]
        br = p["base_diameter_m"] / 2
        shade_bottom = h - sh
        parts: PartList = []
        if int(p["body"]) == 0:
            parts.append(
                (
                    "base",
                    assets.lathe_mesh(
                        [(0.0, 0.0), (br, 0.0), (br, 0.015), (br * 0.7, 0.025), (0.0, 0.025)],
                        sections=assets.SECTIONS_FINE,
                    ),
                )
            )
            parts.append(("base", assets.cylinder_mesh(0.0, 0.0, 0.025, h - 0.4 * sh, 0.01)))
        else:
            jar = max(0.05, 0.8 * shade_bottom)
            parts.append(
                (
                    "base",
                    assets.lathe_mesh(
                        [
                            (0.0, 0.0),
                            (0.7 * br, 0.0),
                            (br, 0.35 * jar),
                            (0.85 * br, 0.8 * jar),
                            (0.35 * br, jar),
                            (0.0, jar),
                        ]
                    ),
                )
            )
            parts.append(("base", assets.cylinder_mesh(0.0, 0.0, jar - 0.005, h - 0.4 * sh, 0.009)))
        parts.append(("shade", assets.shade_tube_mesh(shade_bottom, h, sd / 2, sd / 2 * p["shade_top_ratio"])))
        return parts
    if kind in ("picture_frame", "mirror"):
        w, h, depth, border = p["width_m"], p["height_m"], p["depth_m"], p["border_m"]
        parts = [("frame", mesh) for mesh in _frame_ring(w, h, depth, border)]
        hw = w / 2
        if kind == "mirror":
            parts.append(("glass", assets.box_mesh(-hw + border, hw - border, 0.0, 0.6 * depth, border, h - border)))
            return parts
        x0, x1, z0, z1 = picture_rect_m(p)
        if p.get("mat_m", 0.0) > 0:
            parts.append(("mat", assets.box_mesh(-hw + border, hw - border, 0.0, 0.5 * depth, border, h - border)))
            # Standing 2 mm proud of the mat: no coplanar faces to flicker between.
            parts.append(("picture", assets.box_mesh(x0, x1, 0.3 * depth, 0.5 * depth + 0.002, z0, z1)))
        else:
            parts.append(("picture", assets.box_mesh(x0, x1, 0.0, 0.5 * depth, z0, z1)))
        return parts
    raise ValueError(f"unknown distractor kind {kind!r} (known: {', '.join(KINDS)})")


def build_distractor_parts(distractor: dict[str, Any]) -> list[assets.Part]:
    """A distractor's meshes in its local frame, one :class:`render.assets.Part` per material slot."""
    grouped: dict[str, list[trimesh.Trimesh]] = {}
    for slot, mesh in _build(distractor["kind"], distractor["params"]):
        grouped.setdefault(slot, []).append(mesh)
    return [
        assets.Part(
            slot, group[0] if len(group) == 1 else assets.concatenate_meshes(group), dict(distractor["materials"][slot])
        )
        for slot, group in grouped.items()
    ]


def distractor_world_parts(distractor: dict[str, Any]) -> list[assets.Part]:
    """The distractor's meshes in world coordinates (yaw about +z, then translation to ``position_m``)."""
    matrix = layout.object_transform(distractor)
    parts = build_distractor_parts(distractor)
    for part in parts:
        part.mesh.apply_transform(matrix)
    return parts


def texture_frame(distractor: dict[str, Any], material: dict[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """(matrix, origin) for :func:`render.appearance.box_uv` on one of the distractor's materials.

    A rug and a picture wear their texture once, edge to edge (a rug texture is a whole rug with its
    border): their frame starts at the item's corner and is scaled so the item spans one tile. Every
    other material is projected in the item's own frame, like an object's.
    """
    rotation, origin = yaw_frame(distractor)
    family = material.get("family")
    texture = material.get("texture") or {}
    tile = float(texture.get("tile_size_m", 1.0))
    p = distractor["params"]
    if distractor["kind"] == "rug" and family == "rug":
        corner = np.array([-p["length_m"] / 2, -p["width_m"] / 2, 0.0])
        scale = np.diag([tile / p["length_m"], tile / p["width_m"], 1.0])
    elif distractor["kind"] == "picture_frame" and family == "artwork":
        x0, x1, z0, z1 = picture_rect_m(p)
        corner = np.array([x0, 0.0, z0])
        scale = np.diag([tile / (x1 - x0), 1.0, tile / (z1 - z0)])
    else:
        return rotation, origin
    return rotation @ scale, origin + rotation @ corner
