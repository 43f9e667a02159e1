"""Procedural asset library: parametric furniture generators, handbook ranges, materials, room shells.

Every class is a small family of parametric generators (its variants) whose
dimensions are drawn from published ergonomic ranges, listed once in
:data:`HANDBOOK_RANGES` with the source beside each range. Sampling and
building are split so the scene spec stays plain JSON:

- :func:`sample_asset` draws a variant, its dimensions and its materials and
  returns a JSON asset spec (no geometry);
- :func:`build_asset_parts` turns a spec back into triangle meshes,
  deterministically and without a random generator, so any worker can
  rebuild the same geometry from the spec alone.

Local frame (see ``render/README.md``): metres, z up, origin at the
centre of the footprint on the base, front towards local +y. Wall items put
their back on the plane y = 0, face +y, origin at the bottom centre of the back.

References
----------
- J. Panero, M. Zelnik, *Human Dimension & Interior Space*, Whitney, 1979.
- E. & P. Neufert, *Architects' Data*, 4th ed., Wiley-Blackwell, 2012.
- IEC 61966-2-1:1999, sRGB transfer function (palette colours below are sRGB, stored linear).
"""

from __future__ import annotations

import itertools
import math
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import trimesh
from scipy.spatial import ConvexHull

from render import meshes, srgb
from render.user_materials import look_material, mitsuba_uv, texture_record
from render.user_models import load_model_cached

# ---------------------------------------------------------------------------
# Handbook ranges
# ---------------------------------------------------------------------------

PANERO = "Panero & Zelnik, Human Dimension & Interior Space (1979)"
NEUFERT = "Neufert, Architects' Data, 4th ed. (2012)"


@dataclass(frozen=True)
class DimensionRange:
    """A sampled dimension in metres (or degrees / a count where the name says so), with its source."""

    low: float
    high: float
    source: str

    def contains(self, value: float, tolerance: float = 1e-6) -> bool:
        return self.low - tolerance <= value <= self.high + tolerance


R = DimensionRange

# One table for every class; the sampler draws only from here and the tests
# check generated geometry against independent copies of the key values.
HANDBOOK_RANGES: dict[str, dict[str, DimensionRange]] = {
    "chair": {
        "seat_height_m": R(0.40, 0.48, f"{PANERO}: seat height 16–19 in (from memory)"),
        "seat_width_m": R(0.42, 0.50, f"{PANERO}: seat width ≥ 17 in for dining chairs (from memory)"),
        "seat_depth_m": R(0.38, 0.46, f"{PANERO}: seat depth 15–18 in (from memory)"),
        "overall_height_m": R(0.76, 1.00, f"{NEUFERT}: dining chair height 0.8–1.0 m (from memory)"),
        "seat_thickness_m": R(0.02, 0.06, "solid seat boards to thin cushions (common practice)"),
        "leg_thickness_m": R(0.025, 0.045, "chair legs 25–45 mm (common practice)"),
    },
    "armchair": {
        "width_m": R(0.70, 0.95, f"{PANERO}: lounge chair width 28–37 in (from memory)"),
        "depth_m": R(0.75, 0.95, f"{PANERO}: lounge chair depth 30–37 in (from memory)"),
        "seat_height_m": R(0.38, 0.45, f"{PANERO}: lounge seat height 15–18 in (from memory)"),
        "overall_height_m": R(0.75, 1.10, f"{NEUFERT}: easy chair height, wingbacks to 1.1 m (from memory)"),
        "arm_height_m": R(0.55, 0.68, f"{PANERO}: armrest 7–10 in above the seat (from memory)"),
        "arm_width_m": R(0.08, 0.20, "upholstered arms 8–20 cm wide (common practice)"),
        "back_thickness_m": R(0.12, 0.22, "upholstered back frame (common practice)"),
        "leg_height_m": R(0.05, 0.15, "visible legs under upholstery (common practice)"),
        "cushion_thickness_m": R(0.10, 0.16, "seat cushions 10–16 cm (common practice)"),
    },
    "sofa": {
        "width_m": R(1.50, 2.40, f"{NEUFERT}: two-seat 1.5–1.9 m, three-seat 1.9–2.4 m (from memory)"),
        "depth_m": R(0.80, 1.00, f"{NEUFERT}: sofa depth 0.8–1.0 m (from memory)"),
        "seat_height_m": R(0.38, 0.46, f"{PANERO}: lounge seat height 15–18 in (from memory)"),
        "seat_depth_m": R(0.50, 0.60, f"{PANERO}: lounge seat depth 20–24 in (from memory)"),
        "overall_height_m": R(0.75, 0.95, f"{NEUFERT}: sofa back height 0.75–0.95 m (from memory)"),
        "arm_height_m": R(0.55, 0.68, f"{PANERO}: armrest 7–10 in above the seat (from memory)"),
        "arm_width_m": R(0.10, 0.25, "upholstered arms 10–25 cm wide (common practice)"),
        "leg_height_m": R(0.05, 0.15, "visible legs under upholstery (common practice)"),
        "cushion_thickness_m": R(0.10, 0.16, "seat cushions 10–16 cm (common practice)"),
    },
    "dining_table": {
        "top_height_m": R(0.71, 0.76, f"{PANERO}: dining table height 28–30 in (from memory)"),
        "length_m": R(1.20, 2.00, f"{NEUFERT}: 0.6 m of edge per place, 4–6 places (from memory)"),
        "width_m": R(0.80, 1.00, f"{NEUFERT}: dining table width 0.8–1.0 m (from memory)"),
        "diameter_m": R(0.90, 1.30, f"{NEUFERT}: round tables for 4–6 (from memory)"),
        "top_thickness_m": R(0.025, 0.05, "solid or veneered tops 25–50 mm (common practice)"),
        "leg_thickness_m": R(0.05, 0.08, "table legs 50–80 mm (common practice)"),
    },
    "coffee_table": {
        "top_height_m": R(0.35, 0.46, f"{PANERO}: coffee table height 14–18 in (from memory)"),
        "length_m": R(0.80, 1.30, "coffee tables 0.8–1.3 m long, about 2/3 of the sofa (common practice)"),
        "width_m": R(0.45, 0.75, "coffee tables 0.45–0.75 m deep (common practice)"),
        "diameter_m": R(0.60, 1.00, "round coffee tables 0.6–1.0 m (common practice)"),
        "top_thickness_m": R(0.02, 0.05, "tops 20–50 mm (common practice)"),
        "leg_thickness_m": R(0.03, 0.06, "legs 30–60 mm (common practice)"),
    },
    "side_table": {
        "top_height_m": R(0.45, 0.65, "within a few cm of the sofa arm or mattress top (common practice)"),
        "top_width_m": R(0.35, 0.60, "side tables and night stands 35–60 cm (common practice)"),
        "top_thickness_m": R(0.018, 0.04, "tops 18–40 mm (common practice)"),
        "leg_thickness_m": R(0.025, 0.05, "legs 25–50 mm (common practice)"),
    },
    "ottoman": {
        "height_m": R(0.35, 0.46, f"{PANERO}: footstool at lounge seat height 14–18 in (from memory)"),
        "width_m": R(0.40, 1.20, "footstools 0.4 m to benches 1.2 m (common practice)"),
        "depth_m": R(0.40, 0.70, "footstools and benches 0.4–0.7 m deep (common practice)"),
        "diameter_m": R(0.40, 0.70, "round poufs 0.4–0.7 m (common practice)"),
    },
    "wall_clock": {
        "diameter_m": R(0.25, 0.50, "wall clocks 25–50 cm across (common practice)"),
        "depth_m": R(0.03, 0.06, "case depth 3–6 cm (common practice)"),
        "centre_height_m": R(1.50, 1.90, "centre at or just above standing eye level, 1.5–1.9 m (common practice)"),
        "hour_hand_deg": R(0.0, 360.0, "any time of day"),
        "minute_hand_deg": R(0.0, 360.0, "any time of day"),
    },
    "floor_lamp": {
        "height_m": R(1.50, 1.85, "floor lamps 1.5–1.85 m tall (common practice)"),
        "shade_diameter_m": R(0.30, 0.50, "shades 30–50 cm (common practice)"),
        "shade_height_m": R(0.18, 0.35, "shades 18–35 cm tall (common practice)"),
        "base_diameter_m": R(0.25, 0.35, "weighted bases 25–35 cm (common practice)"),
        "tripod_spread_m": R(0.40, 0.60, "tripod leg circle 40–60 cm (common practice)"),
    },
    "bookshelf": {
        "height_m": R(0.80, 2.10, f"{NEUFERT}: top shelf within reach, ≤ 2.1 m (from memory)"),
        "width_m": R(0.60, 1.20, "carcass modules 0.6–1.2 m; shelves sag past ~0.9 m unsupported (common practice)"),
        "depth_m": R(0.25, 0.40, f"{NEUFERT}: book shelves 0.25–0.30 m, large formats 0.35–0.40 m (from memory)"),
        "shelf_spacing_m": R(
            0.25, 0.40, f"{NEUFERT}: clear height 0.25 m for normal books, 0.35–0.40 m folio (from memory)"
        ),
        "board_thickness_m": R(0.018, 0.03, "18–30 mm boards (common practice)"),
    },
    "potted_plant": {
        "height_m": R(0.30, 1.20, "tabletop plants 0.3 m to floor plants 1.2 m (common practice)"),
        "pot_diameter_m": R(0.12, 0.40, "nursery pot sizes 12–40 cm (common practice)"),
        "pot_height_m": R(0.12, 0.40, "pots about as tall as wide (common practice)"),
        "spread_m": R(0.20, 0.80, "foliage spread (common practice)"),
    },
    "bed": {
        "mattress_width_m": R(0.90, 1.80, "European mattress widths 90, 120, 140, 160, 180 cm (common practice)"),
        "mattress_length_m": R(1.90, 2.10, f"{NEUFERT}: bed length 1.9–2.1 m (from memory)"),
        "mattress_top_height_m": R(
            0.40, 0.65, f"{NEUFERT}: sleeping surface 0.40–0.60 m, boxsprings to 0.65 (from memory)"
        ),
        "mattress_thickness_m": R(0.15, 0.30, "mattresses 15–30 cm (common practice)"),
        "frame_margin_m": R(0.02, 0.08, "frame overhang around the mattress (common practice)"),
        "headboard_height_m": R(0.90, 1.30, "headboards 0.9–1.3 m above the floor (common practice)"),
        "headboard_thickness_m": R(0.04, 0.10, "panel headboards 4–10 cm (common practice)"),
        "leg_height_m": R(0.08, 0.25, "visible bed legs (common practice)"),
        "poster_height_m": R(1.80, 2.10, "four-poster posts 1.8–2.1 m (common practice)"),
    },
}

# ---------------------------------------------------------------------------
# Materials
# ---------------------------------------------------------------------------


def srgb_to_linear(rgb: tuple[float, float, float] | np.ndarray) -> np.ndarray:
    """sRGB-encoded colour (0..1) to linear RGB in float64; IEC 61966-2-1 (``render.srgb.decode``)."""
    return srgb.decode(np.asarray(rgb, dtype=np.float64))


@dataclass(frozen=True)
class MaterialFamily:
    kind: str  # "diffuse" | "plastic" | "varnish" | "metal"
    palette_srgb: tuple[tuple[float, float, float], ...]
    roughness: tuple[float, float]


# Palettes are eyeballed sRGB swatches of real finishes; per-instance jitter
# keeps two oak chairs from being identical.
FAMILIES: dict[str, MaterialFamily] = {
    "wood": MaterialFamily(
        "varnish",
        (
            (0.86, 0.74, 0.56),
            (0.78, 0.62, 0.42),
            (0.70, 0.50, 0.32),
            (0.56, 0.38, 0.24),
            (0.42, 0.28, 0.18),
            (0.32, 0.20, 0.13),
            (0.62, 0.32, 0.20),
            (0.20, 0.15, 0.12),
        ),
        (0.15, 0.45),
    ),
    "painted": MaterialFamily(
        "plastic",
        (
            (0.92, 0.92, 0.90),
            (0.12, 0.12, 0.13),
            (0.55, 0.60, 0.58),
            (0.30, 0.40, 0.52),
            (0.70, 0.30, 0.25),
            (0.85, 0.72, 0.40),
            (0.40, 0.50, 0.38),
            (0.75, 0.70, 0.62),
        ),
        (0.25, 0.55),
    ),
    "fabric": MaterialFamily(
        "diffuse",
        (
            (0.60, 0.60, 0.58),
            (0.35, 0.35, 0.36),
            (0.78, 0.72, 0.62),
            (0.20, 0.26, 0.42),
            (0.18, 0.40, 0.42),
            (0.78, 0.60, 0.22),
            (0.62, 0.32, 0.22),
            (0.40, 0.45, 0.28),
            (0.75, 0.55, 0.55),
            (0.16, 0.16, 0.17),
            (0.88, 0.85, 0.78),
            (0.48, 0.16, 0.20),
            (0.20, 0.34, 0.24),
        ),
        (1.0, 1.0),
    ),
    "leather": MaterialFamily(
        "plastic",
        (
            (0.36, 0.22, 0.14),
            (0.62, 0.42, 0.26),
            (0.10, 0.09, 0.09),
            (0.52, 0.28, 0.16),
            (0.80, 0.72, 0.60),
        ),
        (0.35, 0.60),
    ),
    "metal": MaterialFamily(
        "metal",
        (
            (0.80, 0.80, 0.80),
            (0.66, 0.66, 0.68),
            (0.86, 0.72, 0.45),
            (0.10, 0.10, 0.10),
            (0.85, 0.58, 0.45),
            (0.45, 0.45, 0.47),
        ),
        (0.08, 0.40),
    ),
    "plastic": MaterialFamily(
        "plastic",
        (
            (0.94, 0.94, 0.92),
            (0.10, 0.10, 0.10),
            (0.80, 0.18, 0.15),
            (0.95, 0.78, 0.20),
            (0.20, 0.40, 0.70),
            (0.35, 0.62, 0.40),
            (0.60, 0.62, 0.64),
            (0.95, 0.55, 0.20),
        ),
        (0.10, 0.40),
    ),
    "ceramic": MaterialFamily(
        "plastic",
        (
            (0.94, 0.93, 0.90),
            (0.12, 0.12, 0.12),
            (0.56, 0.58, 0.60),
            (0.30, 0.45, 0.55),
            (0.45, 0.58, 0.45),
            (0.85, 0.80, 0.70),
        ),
        (0.05, 0.30),
    ),
    "terracotta": MaterialFamily("diffuse", ((0.74, 0.42, 0.30), (0.66, 0.36, 0.24), (0.80, 0.52, 0.38)), (1.0, 1.0)),
    "concrete": MaterialFamily("diffuse", ((0.62, 0.62, 0.60), (0.50, 0.50, 0.49), (0.72, 0.70, 0.66)), (1.0, 1.0)),
    "foliage": MaterialFamily(
        "diffuse",
        (
            (0.22, 0.42, 0.18),
            (0.30, 0.50, 0.22),
            (0.16, 0.32, 0.16),
            (0.40, 0.55, 0.25),
            (0.25, 0.45, 0.35),
        ),
        (1.0, 1.0),
    ),
    "soil": MaterialFamily("diffuse", ((0.30, 0.22, 0.16), (0.22, 0.16, 0.12)), (1.0, 1.0)),
    "bark": MaterialFamily("diffuse", ((0.40, 0.30, 0.22), (0.30, 0.24, 0.18)), (1.0, 1.0)),
    "paper": MaterialFamily("diffuse", ((0.95, 0.94, 0.90), (0.92, 0.88, 0.78), (0.15, 0.15, 0.16)), (1.0, 1.0)),
    "bedding": MaterialFamily(
        "diffuse",
        (
            (0.95, 0.95, 0.94),
            (0.88, 0.86, 0.80),
            (0.70, 0.72, 0.74),
            (0.45, 0.52, 0.62),
            (0.82, 0.70, 0.64),
            (0.55, 0.60, 0.50),
        ),
        (1.0, 1.0),
    ),
    "lampshade": MaterialFamily("diffuse", ((0.95, 0.93, 0.86), (0.90, 0.86, 0.76), (0.80, 0.80, 0.80)), (1.0, 1.0)),
    "book": MaterialFamily(
        "diffuse",
        (
            (0.70, 0.12, 0.12),
            (0.12, 0.22, 0.45),
            (0.15, 0.35, 0.20),
            (0.90, 0.85, 0.70),
            (0.10, 0.10, 0.10),
            (0.85, 0.60, 0.15),
            (0.45, 0.25, 0.40),
            (0.50, 0.50, 0.50),
        ),
        (1.0, 1.0),
    ),
    # Room finishes (used by layout.sample_room).
    "floor_wood": MaterialFamily(
        "varnish",
        (
            (0.80, 0.66, 0.48),
            (0.70, 0.52, 0.34),
            (0.55, 0.38, 0.25),
            (0.40, 0.27, 0.18),
            (0.86, 0.80, 0.70),
        ),
        (0.20, 0.50),
    ),
    "floor_tile": MaterialFamily(
        "plastic",
        (
            (0.85, 0.84, 0.80),
            (0.65, 0.64, 0.62),
            (0.78, 0.70, 0.60),
            (0.70, 0.45, 0.33),
            (0.30, 0.31, 0.33),
        ),
        (0.05, 0.30),
    ),
    "carpet": MaterialFamily(
        "diffuse",
        (
            (0.55, 0.52, 0.48),
            (0.35, 0.36, 0.38),
            (0.70, 0.64, 0.55),
            (0.30, 0.35, 0.45),
            (0.50, 0.40, 0.35),
        ),
        (1.0, 1.0),
    ),
    "wall_paint": MaterialFamily(
        "diffuse",
        (
            (0.93, 0.92, 0.88),
            (0.95, 0.93, 0.86),
            (0.85, 0.85, 0.84),
            (0.78, 0.82, 0.75),
            (0.76, 0.83, 0.88),
            (0.90, 0.84, 0.72),
            (0.93, 0.88, 0.70),
            (0.70, 0.62, 0.58),
        ),
        (1.0, 1.0),
    ),
    "ceiling_paint": MaterialFamily("diffuse", ((0.95, 0.95, 0.94), (0.93, 0.92, 0.90)), (1.0, 1.0)),
    # Unlabelled clutter (render.distractors).
    "rug": MaterialFamily(
        "diffuse",
        (
            (0.55, 0.18, 0.15),
            (0.20, 0.25, 0.42),
            (0.85, 0.80, 0.68),
            (0.45, 0.45, 0.44),
            (0.70, 0.45, 0.30),
            (0.62, 0.66, 0.55),
        ),
        (1.0, 1.0),
    ),
    "cardboard": MaterialFamily("diffuse", ((0.72, 0.56, 0.38), (0.66, 0.50, 0.34), (0.80, 0.70, 0.55)), (1.0, 1.0)),
    "page_edges": MaterialFamily("diffuse", ((0.95, 0.94, 0.90), (0.92, 0.88, 0.78), (0.88, 0.84, 0.72)), (1.0, 1.0)),
    "artwork": MaterialFamily(
        "diffuse",
        (
            (0.80, 0.35, 0.25),
            (0.25, 0.40, 0.60),
            (0.90, 0.80, 0.40),
            (0.30, 0.50, 0.35),
            (0.15, 0.15, 0.20),
            (0.85, 0.85, 0.82),
        ),
        (1.0, 1.0),
    ),
    # Silvered glass: a near-white conductor with almost no roughness.
    "mirror": MaterialFamily("metal", ((0.92, 0.92, 0.92), (0.88, 0.89, 0.90)), (0.0, 0.04)),
}

# Linear albedo above ~0.95 does not occur in paints or fabrics and makes
# path tracing converge slowly; below 0.005 nothing is that black either.
_ALBEDO_MIN, _ALBEDO_MAX = 0.005, 0.95


def sample_material(family_name: str, rng: np.random.Generator) -> dict[str, Any]:
    """A material dict from a family: palette colour with brightness and tint jitter, linear RGB."""
    family = FAMILIES[family_name]
    base = srgb_to_linear(family.palette_srgb[int(rng.integers(len(family.palette_srgb)))])
    rgb = base * rng.uniform(0.85, 1.15) * rng.uniform(0.95, 1.05, size=3)
    rgb = np.clip(rgb, _ALBEDO_MIN, _ALBEDO_MAX)
    low, high = family.roughness
    roughness = low if low == high else float(rng.uniform(low, high))
    return {
        "kind": family.kind,
        "rgb": [round(float(v), 6) for v in rgb],
        "roughness": round(roughness, 6),
        "family": family_name,
    }


# ---------------------------------------------------------------------------
# Geometry helpers (all in the asset's local frame, metres)
# ---------------------------------------------------------------------------

SECTIONS = 16  # cylinder segments: round enough at 640×480, cheap to trace
SECTIONS_FINE = 24  # large round tops, where 16 facets would show


def _mesh(vertices: np.ndarray, faces: np.ndarray) -> trimesh.Trimesh:
    # process=False everywhere: trimesh's merge/repair pass costs more than building the parts.
    return trimesh.Trimesh(vertices=vertices, faces=faces, process=False)


_UNIT_BOX = trimesh.creation.box(bounds=[[0.0, 0.0, 0.0], [1.0, 1.0, 1.0]])
_UNIT_BOX_VERTICES = np.asarray(_UNIT_BOX.vertices, dtype=np.float64)
_UNIT_BOX_FACES = np.asarray(_UNIT_BOX.faces, dtype=np.int64)
_ICOSPHERE = trimesh.creation.icosphere(subdivisions=1)  # 80 faces: a leafy blob, not a ball bearing
_ICOSPHERE_VERTICES = np.asarray(_ICOSPHERE.vertices, dtype=np.float64)
_ICOSPHERE_FACES = np.asarray(_ICOSPHERE.faces, dtype=np.int64)


def _concatenate(group: list[trimesh.Trimesh]) -> trimesh.Trimesh:
    offsets = np.cumsum([0] + [len(m.vertices) for m in group[:-1]])
    vertices = np.vstack([m.vertices for m in group])
    faces = np.vstack([np.asarray(m.faces) + offset for m, offset in zip(group, offsets, strict=True)])
    return _mesh(vertices, faces)


def _box(x0: float, x1: float, y0: float, y1: float, z0: float, z1: float) -> trimesh.Trimesh:
    low = np.array([x0, y0, z0])
    return _mesh(low + _UNIT_BOX_VERTICES * (np.array([x1, y1, z1]) - low), _UNIT_BOX_FACES)


def _signed_volume(vertices: np.ndarray, faces: np.ndarray) -> float:
    v0, v1, v2 = vertices[faces[:, 0]], vertices[faces[:, 1]], vertices[faces[:, 2]]
    return float(np.einsum("ij,ij->i", v0, np.cross(v1, v2)).sum() / 6.0)


def _lathe(
    profile_rz: list[tuple[float, float]], cx: float = 0.0, cy: float = 0.0, sections: int = SECTIONS
) -> trimesh.Trimesh:
    """Solid of revolution about a vertical axis through (cx, cy); profile points are (radius, z).

    A profile that starts and ends on the axis gives a closed solid; a closed
    loop (last point equal to the first) gives a ring such as a lampshade.
    """
    profile = [(float(r), float(z)) for r, z in profile_rz]
    closed_loop = len(profile) > 2 and profile[0] == profile[-1]
    if closed_loop:
        profile = profile[:-1]
    angles = np.linspace(0.0, 2.0 * math.pi, sections, endpoint=False)
    cos, sin = np.cos(angles), np.sin(angles)
    vertices: list[np.ndarray] = []
    rings: list[np.ndarray] = []  # vertex indices of each profile point: one on the axis, else a ring
    count = 0
    for r, z in profile:
        if r <= 1e-12:
            vertices.append(np.array([[cx, cy, z]]))
            rings.append(np.full(sections, count))
            count += 1
        else:
            vertices.append(np.column_stack([cx + r * cos, cy + r * sin, np.full(sections, z)]))
            rings.append(np.arange(count, count + sections))
            count += sections
    pairs = list(itertools.pairwise(range(len(profile))))
    if closed_loop:
        pairs.append((len(profile) - 1, 0))
    faces = []
    nxt = np.roll(np.arange(sections), -1)
    for i, j in pairs:
        a, b = rings[i], rings[j]
        tri1 = np.column_stack([a, a[nxt], b[nxt]])
        tri2 = np.column_stack([a, b[nxt], b])
        for tri in (tri1, tri2):
            keep = (tri[:, 0] != tri[:, 1]) & (tri[:, 1] != tri[:, 2]) & (tri[:, 0] != tri[:, 2])
            faces.append(tri[keep])
    vertex_array = np.vstack(vertices)
    face_array = np.vstack(faces)
    if _signed_volume(vertex_array, face_array) < 0:  # profile walked the other way round
        face_array = face_array[:, ::-1]
    return _mesh(vertex_array, face_array)


def _cylinder_z(cx: float, cy: float, z0: float, z1: float, radius: float, sections: int = SECTIONS) -> trimesh.Trimesh:
    return _lathe([(0.0, z0), (radius, z0), (radius, z1), (0.0, z1)], cx, cy, sections)


def _frustum_z(
    cx: float, cy: float, z0: float, z1: float, r0: float, r1: float, sections: int = SECTIONS
) -> trimesh.Trimesh:
    return _lathe([(0.0, z0), (r0, z0), (r1, z1), (0.0, z1)], cx, cy, sections)


def _along(mesh: trimesh.Trimesh, p0: tuple[float, float, float], p1: tuple[float, float, float]) -> trimesh.Trimesh:
    """Turn a mesh built along +z from the origin so that +z runs from p0 towards p1."""
    start, end = np.asarray(p0, dtype=np.float64), np.asarray(p1, dtype=np.float64)
    direction = (end - start) / np.linalg.norm(end - start)
    rotation = trimesh.geometry.align_vectors([0.0, 0.0, 1.0], direction)
    rotation[:3, 3] = start
    mesh.apply_transform(rotation)
    return mesh


def _tube(
    p0: tuple[float, float, float], p1: tuple[float, float, float], radius: float, sections: int = 10
) -> trimesh.Trimesh:
    length = float(np.linalg.norm(np.subtract(p1, p0)))
    return _along(_cylinder_z(0.0, 0.0, 0.0, length, radius, sections), p0, p1)


def _hull(points: np.ndarray) -> trimesh.Trimesh:
    """Convex hull as a closed, outward-facing mesh.

    Straight from Qhull: trimesh.convex.convex_hull also repairs and merges,
    which costs ~4 ms a call and hulls are most of our parts.
    """
    pts = np.asarray(points, dtype=np.float64)
    hull = ConvexHull(pts)
    used, faces = np.unique(hull.simplices, return_inverse=True)
    faces = faces.reshape(-1, 3)
    vertices = pts[used]
    normals = np.cross(vertices[faces[:, 1]] - vertices[faces[:, 0]], vertices[faces[:, 2]] - vertices[faces[:, 0]])
    # Qhull's facet equations point outward; flip the triangles that wind the other way.
    inward = np.einsum("ij,ij->i", normals, hull.equations[:, :3]) < 0
    faces[inward] = faces[inward][:, ::-1]
    return trimesh.Trimesh(vertices=vertices, faces=faces, process=False)


def _tapered_box(cx: float, cy: float, z0: float, z1: float, half_bottom: float, half_top: float) -> trimesh.Trimesh:
    points = [
        (cx + sx * h, cy + sy * h, z)
        for z, h in ((z0, half_bottom), (z1, half_top))
        for sx in (-1, 1)
        for sy in (-1, 1)
    ]
    return _hull(np.array(points))


# Public names of the geometry helpers, for generators outside this module (distractors, dressing).
box_mesh = _box
lathe_mesh = _lathe
cylinder_mesh = _cylinder_z
frustum_mesh = _frustum_z


def _rounded_rect_xy(half_w: float, half_d: float, radius: float, arc_segments: int = 3) -> list[tuple[float, float]]:
    radius = max(0.0, min(radius, half_w, half_d))
    points = []
    for sx, sy, start in ((1, 1, 0.0), (-1, 1, 90.0), (-1, -1, 180.0), (1, -1, 270.0)):
        cx, cy = sx * (half_w - radius), sy * (half_d - radius)
        for k in range(arc_segments + 1):
            angle = math.radians(start + 90.0 * k / arc_segments)
            points.append((cx + radius * math.cos(angle), cy + radius * math.sin(angle)))
    return points


def _loft(rings: list[np.ndarray]) -> trimesh.Trimesh:
    """Closed solid through stacked rings of equal point count (bottom to top), capped by fans."""
    n = len(rings[0])
    vertices = np.vstack(rings + [rings[0].mean(axis=0, keepdims=True), rings[-1].mean(axis=0, keepdims=True)])
    idx = np.arange(n)
    nxt = np.roll(idx, -1)
    faces = []
    for k in range(len(rings) - 1):
        a, b = idx + k * n, idx + (k + 1) * n
        faces += [np.column_stack([a, a[nxt], b[nxt]]), np.column_stack([a, b[nxt], b])]
    bottom, top = len(rings) * n, len(rings) * n + 1
    last = (len(rings) - 1) * n
    faces += [
        np.column_stack([np.full(n, bottom), idx[nxt], idx]),
        np.column_stack([np.full(n, top), last + idx, last + idx[nxt]]),
    ]
    face_array = np.vstack(faces)
    if _signed_volume(vertices, face_array) < 0:
        face_array = face_array[:, ::-1]
    return _mesh(vertices, face_array)


def _cushion(
    x0: float, x1: float, y0: float, y1: float, z0: float, z1: float, corner_m: float = 0.04, bevel_m: float = 0.015
) -> trimesh.Trimesh:
    """Upholstered block: rounded corners in plan and a bevel on the top and bottom edges."""
    half_w, half_d, cx, cy = (x1 - x0) / 2, (y1 - y0) / 2, (x0 + x1) / 2, (y0 + y1) / 2
    bevel = max(0.0, min(bevel_m, (z1 - z0) / 3, half_w / 3, half_d / 3))
    rings = []
    for z, inset in ((z0, bevel), (z0 + bevel, 0.0), (z1 - bevel, 0.0), (z1, bevel)):
        outline = np.array(_rounded_rect_xy(half_w - inset, half_d - inset, corner_m - inset))
        rings.append(np.column_stack([cx + outline[:, 0], cy + outline[:, 1], np.full(len(outline), z)]))
    return _loft(rings)


cushion_mesh = _cushion


def _ellipsoid(center: tuple[float, float, float], radii: tuple[float, float, float]) -> trimesh.Trimesh:
    return _mesh(_ICOSPHERE_VERTICES * np.asarray(radii) + np.asarray(center), _ICOSPHERE_FACES)


def _disc_y(
    cx: float, cz: float, y0: float, y1: float, radius: float, sections: int = SECTIONS_FINE
) -> trimesh.Trimesh:
    """A disc (short cylinder) whose axis is the local y axis: clock faces."""
    return _tube((cx, y0, cz), (cx, y1, cz), radius, sections)


def concatenate_meshes(group: list[trimesh.Trimesh]) -> trimesh.Trimesh:
    """One mesh from several (no merging of vertices)."""
    return _concatenate(group)


def _rotate_about_y(mesh: trimesh.Trimesh, angle_deg: float, center: tuple[float, float, float]) -> trimesh.Trimesh:
    mesh.apply_transform(trimesh.transformations.rotation_matrix(math.radians(angle_deg), [0, 1, 0], center))
    return mesh


def _legs(
    kind: str, xs: tuple[float, ...], ys: tuple[float, ...], z1: float, thickness: float
) -> list[trimesh.Trimesh]:
    """Legs centred at every (x, y) in xs × ys, from the floor to z1."""
    out = []
    half = thickness / 2
    for x in xs:
        for y in ys:
            if kind == "square":
                out.append(_box(x - half, x + half, y - half, y + half, 0.0, z1))
            elif kind == "round":
                out.append(_cylinder_z(x, y, 0.0, z1, half, sections=12))
            elif kind == "tapered_round":
                out.append(_frustum_z(x, y, 0.0, z1, half * 0.55, half, sections=12))
            elif kind == "tapered_square":
                out.append(_tapered_box(x, y, 0.0, z1, half * 0.6, half))
            else:
                raise ValueError(f"unknown leg kind {kind!r}")
    return out


# ---------------------------------------------------------------------------
# Classes: samplers and builders
# ---------------------------------------------------------------------------

PartList = list[tuple[str, trimesh.Trimesh]]  # (material slot, mesh)


@dataclass
class _Sampled:
    params: dict[str, float]
    footprint_m: tuple[float, float]
    height_m: float
    slots: dict[str, tuple[str, ...]]  # material slot -> allowed families
    support_surfaces: list[dict[str, Any]] = field(default_factory=list)
    extra: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class AssetClass:
    """A furniture class: its placement rule, variants and handbook dimension ranges."""

    name: str
    placement: str  # "floor" | "wall" | "surface_or_floor"
    variants: tuple[str, ...]
    ranges: dict[str, DimensionRange]
    sampler: Callable[[str, np.random.Generator], _Sampled] = field(repr=False, compare=False)
    builder: Callable[[str, dict[str, float], dict[str, Any]], PartList] = field(repr=False, compare=False)


def _draw(rng: np.random.Generator, class_name: str, name: str) -> float:
    r = HANDBOOK_RANGES[class_name][name]
    return round(float(rng.uniform(r.low, r.high)), 6)


def _support(cx: float, cy: float, w: float, d: float, z: float) -> dict[str, Any]:
    return {"center_m": [round(cx, 6), round(cy, 6)], "size_m": [round(w, 6), round(d, 6)], "height_m": round(z, 6)}


# --- chair -----------------------------------------------------------------


def _sample_chair(variant: str, rng: np.random.Generator) -> _Sampled:
    names = ("seat_height_m", "seat_width_m", "seat_depth_m", "overall_height_m", "seat_thickness_m", "leg_thickness_m")
    p = {n: _draw(rng, "chair", n) for n in names}
    slots_by_variant: dict[str, dict[str, tuple[str, ...]]] = {
        "slat_back": {"frame": ("wood", "painted"), "seat": ("wood", "fabric", "leather")},
        "panel_back": {"legs": ("wood", "metal"), "upholstery": ("fabric", "leather")},
        "sled_base": {"frame": ("metal",), "shell": ("plastic", "wood", "painted")},
        "pedestal": {"base": ("metal", "plastic", "painted"), "seat": ("fabric", "leather", "plastic")},
    }
    slots = slots_by_variant[variant]
    if variant == "slat_back":
        p["slat_count"] = float(rng.integers(2, 5))
    return _Sampled(p, (p["seat_width_m"], p["seat_depth_m"]), p["overall_height_m"], slots)


def _build_chair(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    w, d, sh, h = p["seat_width_m"], p["seat_depth_m"], p["seat_height_m"], p["overall_height_m"]
    st, lt = p["seat_thickness_m"], p["leg_thickness_m"]
    hw, hd = w / 2, d / 2
    parts: PartList = []
    if variant == "slat_back":
        xs, ys = (-hw + lt / 2, hw - lt / 2), (-hd + lt / 2, hd - lt / 2)
        parts += [("frame", m) for m in _legs("square", xs, ys[1:], sh - st, lt)]
        parts += [("frame", m) for m in _legs("square", xs, ys[:1], h, lt)]  # rear legs run up as back posts
        rail = 0.06
        parts.append(("frame", _box(-hw + lt, hw - lt, hd - lt, hd, sh - st - rail, sh - st)))
        parts.append(("frame", _box(-hw + lt, hw - lt, -hd, -hd + lt, sh - st - rail, sh - st)))
        parts.append(("seat", _box(-hw, hw, -hd, hd, sh - st, sh)))
        count = int(p["slat_count"])
        slat_h = 0.05
        z_low, z_high = sh + 0.15, h
        for k in range(count):
            top = z_high - k * (z_high - z_low) / max(count, 1)
            parts.append(("frame", _box(-hw + lt, hw - lt, -hd, -hd + lt * 0.6, top - slat_h, top)))
    elif variant == "panel_back":
        xs, ys = (-hw + lt / 2, hw - lt / 2), (-hd + lt / 2, hd - lt / 2)
        parts += [("legs", m) for m in _legs("tapered_round", xs, ys, sh - st, lt)]
        parts.append(("upholstery", _cushion(-hw, hw, -hd, hd, sh - st, sh, corner_m=0.03, bevel_m=0.008)))
        parts.append(
            ("upholstery", _cushion(-hw + 0.01, hw - 0.01, -hd, -hd + 0.05, sh - 0.01, h, corner_m=0.03, bevel_m=0.01))
        )
    elif variant == "sled_base":
        r = 0.011
        deck = sh - st
        for sx in (-1, 1):
            x = sx * (hw - r - 0.01)
            parts.append(("frame", _tube((x, -hd + 0.02, r), (x, hd - 0.02, r), r)))
            parts.append(("frame", _tube((x, hd - 0.02 - r, r), (x, hd - 0.02 - r, deck), r)))
            parts.append(("frame", _tube((x, -hd + 0.02 + r, r), (x, -hd + 0.02 + r, deck), r)))
            parts.append(("frame", _tube((x, -hd + 0.03, deck - r), (x, hd - 0.03, deck - r), r)))
        for y in (-hd + 0.06, hd - 0.06):
            parts.append(("frame", _tube((-hw + 0.02, y, deck - r), (hw - 0.02, y, deck - r), r)))
        parts.append(("shell", _cushion(-hw, hw, -hd, hd, deck, sh, corner_m=0.06, bevel_m=0.005)))
        parts.append(("shell", _cushion(-hw + 0.02, hw - 0.02, -hd, -hd + 0.02, sh, h, corner_m=0.06, bevel_m=0.004)))
    elif variant == "pedestal":
        radius = min(hw, hd)
        parts.append(
            (
                "base",
                _lathe(
                    [(0.0, 0.0), (radius, 0.0), (radius, 0.008), (radius * 0.3, 0.03), (0.0, 0.03)],
                    sections=SECTIONS_FINE,
                ),
            )
        )
        parts.append(("base", _cylinder_z(0.0, 0.0, 0.03, sh - st, 0.03)))
        parts.append(("seat", _cushion(-hw, hw, -hd, hd, sh - st, sh, corner_m=min(hw, hd) * 0.8, bevel_m=0.01)))
        parts.append(
            ("seat", _cushion(-hw + 0.02, hw - 0.02, -hd, -hd + 0.04, sh - 0.01, h, corner_m=0.08, bevel_m=0.01))
        )
    return parts


# --- armchair and sofa (shared upholstered body) ---------------------------


def _sample_upholstered(class_name: str, variant: str, rng: np.random.Generator) -> _Sampled:
    common = ("width_m", "depth_m", "seat_height_m", "overall_height_m", "leg_height_m", "cushion_thickness_m")
    p = {n: _draw(rng, class_name, n) for n in common}
    armless = variant in ("slipper", "armless")
    if not armless:
        p["arm_width_m"] = _draw(rng, class_name, "arm_width_m")
        if variant != "tuxedo":
            p["arm_height_m"] = _draw(rng, class_name, "arm_height_m")
    if class_name == "sofa":
        p["seat_depth_m"] = _draw(rng, "sofa", "seat_depth_m")
        # The back takes what the seat leaves of the depth; keep it 0.15 m at least (a frame plus a cushion).
        back = min(max(p["depth_m"] - p["seat_depth_m"], 0.15), 0.45)
        p["depth_m"] = round(min(max(p["seat_depth_m"] + back, 0.80), 1.00), 6)
        p["back_thickness_m"] = round(p["depth_m"] - p["seat_depth_m"], 6)
        p["cushion_count"] = 2.0 if p["width_m"] < 1.9 else 3.0
    else:
        p["back_thickness_m"] = _draw(rng, "armchair", "back_thickness_m")
    if armless and class_name == "armchair":
        # A slipper chair has no arms to widen it; keep it chair-wide.
        p["width_m"] = round(min(p["width_m"], 0.75), 6)
    upholstery = ("fabric", "fabric", "leather")  # fabric twice: most upholstery is cloth
    slots: dict[str, tuple[str, ...]] = {
        "body": upholstery,
        "cushions": ("fabric",) if variant != "tuxedo" else upholstery,
        "legs": ("wood", "metal"),
    }
    if variant == "rolled_arm" and class_name == "sofa":
        slots.pop("legs")  # skirted to the floor
    return _Sampled(p, (p["width_m"], p["depth_m"]), p["overall_height_m"], slots)


def _back_cushion(p: dict[str, float]) -> tuple[float, float]:
    """(thickness, top z) of the back cushions of an upholstered seat; thickness 0 when the back is too low for any."""
    top = min(p["overall_height_m"] - 0.02, p["seat_height_m"] + 0.42)
    if top - p["seat_height_m"] <= 0.12:
        return 0.0, top
    return min(0.14, (p["depth_m"] - p["back_thickness_m"]) * 0.3), top


def seat_area(asset_spec: dict[str, Any]) -> dict[str, Any] | None:
    """The free seat of a procedural sofa or armchair, in its local frame: ``{"center_m": [x, y], "size_m":
    [w, d], "height_m", "back_top_m"}`` — between the arms, from the front of the back cushions to the front
    edge, on top of the seat cushions; ``back_top_m`` is the height of the back (cushions or frame) above the
    floor. None for other classes and for uploaded meshes (their seat is unknown)."""
    if asset_spec.get("class_name") not in ("sofa", "armchair") or asset_spec.get("variant") == "user":
        return None
    p = asset_spec["params"]
    hw, hd, aw = p["width_m"] / 2, p["depth_m"] / 2, p.get("arm_width_m", 0.0)
    cushion_m, cushion_top_m = _back_cushion(p)
    back = -hd + p["back_thickness_m"] + cushion_m
    area = _support(0.0, (back + hd) / 2, 2 * (hw - aw), hd - back, p["seat_height_m"])
    area["back_top_m"] = round(cushion_top_m if cushion_m > 0 else p["overall_height_m"], 6)
    return area


def _build_upholstered(class_name: str, variant: str, p: dict[str, float]) -> PartList:
    w, d, sh, h = p["width_m"], p["depth_m"], p["seat_height_m"], p["overall_height_m"]
    lh, ct, bt = p["leg_height_m"], p["cushion_thickness_m"], p["back_thickness_m"]
    hw, hd = w / 2, d / 2
    aw = p.get("arm_width_m", 0.0)
    ah = p.get("arm_height_m", h)
    skirted = class_name == "sofa" and variant == "rolled_arm"
    base_z = 0.0 if skirted else lh
    parts: PartList = []
    if not skirted:
        leg_kind = {
            "track_arm": "square",
            "rolled_arm": "tapered_round",
            "slipper": "tapered_round",
            "wingback": "tapered_square",
            "armless": "round",
            "tuxedo": "square",
        }[variant]
        leg_t = 0.045
        xs: tuple[float, ...] = (-hw + leg_t / 2 + 0.01, hw - leg_t / 2 - 0.01)
        if class_name == "sofa" and w > 1.8:
            xs = (xs[0], 0.0, xs[1])  # long frames get a middle pair, as real sofas do
        parts += [
            ("legs", m) for m in _legs(leg_kind, xs, (-hd + leg_t / 2 + 0.01, hd - leg_t / 2 - 0.01), lh + 0.005, leg_t)
        ]
    deck_top = sh - ct
    parts.append(
        ("body", _cushion(-hw + aw * 0.5, hw - aw * 0.5, -hd, hd, base_z, deck_top, corner_m=0.02, bevel_m=0.01))
    )
    parts.append(
        ("body", _cushion(-hw + aw * 0.5, hw - aw * 0.5, -hd, -hd + bt, base_z, h, corner_m=0.03, bevel_m=0.02))
    )
    if aw > 0:
        for sx in (-1, 1):
            x0, x1 = sorted((sx * hw, sx * (hw - aw)))
            if variant == "rolled_arm":
                radius = aw / 2
                parts.append(
                    ("body", _cushion(x0, x1, -hd, hd - 0.02, base_z, ah - radius, corner_m=0.02, bevel_m=0.01))
                )
                xc = (x0 + x1) / 2
                parts.append(("body", _tube((xc, -hd, ah - radius), (xc, hd, ah - radius), radius, sections=16)))
            else:
                parts.append(("body", _cushion(x0, x1, -hd, hd, base_z, ah, corner_m=0.03, bevel_m=0.02)))
            if variant == "wingback":
                xw0, xw1 = sorted((sx * hw, sx * (hw - aw * 0.7)))
                parts.append(
                    ("body", _cushion(xw0, xw1, -hd, -hd + 0.3 * d, ah - 0.05, h - 0.06, corner_m=0.05, bevel_m=0.02))
                )
    inner0, inner1 = -hw + aw, hw - aw
    count = int(p.get("cushion_count", 1.0))
    step = (inner1 - inner0) / count
    back_cushion_t, top = _back_cushion(p)
    for k in range(count):
        x0, x1 = inner0 + k * step, inner0 + (k + 1) * step
        parts.append(("cushions", _cushion(x0, x1, -hd + bt, hd, deck_top, sh, corner_m=0.05, bevel_m=0.025)))
        if back_cushion_t > 0:
            parts.append(
                (
                    "cushions",
                    _cushion(x0, x1, -hd + bt, -hd + bt + back_cushion_t, sh, top, corner_m=0.05, bevel_m=0.03),
                )
            )
    return parts


# --- tables ----------------------------------------------------------------

_ROUND_TABLE_VARIANTS = frozenset({"round_pedestal", "round_four_leg", "round_three_leg", "drum"})


def _sample_table(class_name: str, variant: str, rng: np.random.Generator) -> _Sampled:
    p = {
        "top_height_m": _draw(rng, class_name, "top_height_m"),
        "top_thickness_m": _draw(rng, class_name, "top_thickness_m"),
        "leg_thickness_m": _draw(rng, class_name, "leg_thickness_m"),
    }
    round_top = variant in _ROUND_TABLE_VARIANTS
    if class_name == "side_table":
        p["top_width_m"] = _draw(rng, class_name, "top_width_m")
        w = d = p["top_width_m"]
    elif round_top:
        p["diameter_m"] = _draw(rng, class_name, "diameter_m")
        w = d = p["diameter_m"]
    else:
        p["length_m"] = _draw(rng, class_name, "length_m")
        p["width_m"] = _draw(rng, class_name, "width_m")
        w, d = p["length_m"], p["width_m"]
    if round_top:
        # The largest square inside the round top: pots set there cannot hang over the edge.
        support = _support(0.0, 0.0, w / math.sqrt(2) - 0.02, d / math.sqrt(2) - 0.02, p["top_height_m"])
    else:
        support = _support(0.0, 0.0, w - 0.04, d - 0.04, p["top_height_m"])
    top_families = ("wood", "painted", "plastic") if class_name != "dining_table" else ("wood", "wood", "painted")
    slots: dict[str, tuple[str, ...]] = {"top": top_families, "base": ("wood", "metal", "painted")}
    if variant == "drawer_cube":
        slots["handle"] = ("metal",)
    return _Sampled(p, (w, d), p["top_height_m"], slots, [support])


def _build_table(class_name: str, variant: str, p: dict[str, float]) -> PartList:
    th, tt, lt = p["top_height_m"], p["top_thickness_m"], p["leg_thickness_m"]
    if "top_width_m" in p:
        w = d = p["top_width_m"]
    elif "diameter_m" in p:
        w = d = p["diameter_m"]
    else:
        w, d = p["length_m"], p["width_m"]
    hw, hd = w / 2, d / 2
    under = th - tt
    parts: PartList = []
    if variant in _ROUND_TABLE_VARIANTS:
        parts.append(("top", _cylinder_z(0.0, 0.0, under, th, hw, sections=SECTIONS_FINE)))
    else:
        parts.append(("top", _box(-hw, hw, -hd, hd, under, th)))
    inset = lt / 2 + 0.03
    if variant in ("rect_four_leg", "square_four_leg"):
        kind = (
            "tapered_square"
            if class_name == "dining_table"
            else ("round" if class_name == "coffee_table" else "tapered_round")
        )
        xs, ys = (-hw + inset, hw - inset), (-hd + inset, hd - inset)
        parts += [("base", m) for m in _legs(kind, xs, ys, under, lt)]
        apron = min(0.08, under * 0.2)
        parts.append(
            ("base", _box(-hw + inset, hw - inset, -hd + inset - lt / 4, -hd + inset + lt / 4, under - apron, under))
        )
        parts.append(
            ("base", _box(-hw + inset, hw - inset, hd - inset - lt / 4, hd - inset + lt / 4, under - apron, under))
        )
    elif variant == "round_pedestal":
        column_r = max(lt, 0.04)
        parts.append(
            (
                "base",
                _lathe(
                    [
                        (0.0, 0.0),
                        (hw * 0.55, 0.0),
                        (hw * 0.55, 0.02),
                        (column_r * 1.4, 0.06),
                        (column_r, 0.12),
                        (column_r * 0.8, under * 0.6),
                        (column_r * 1.2, under),
                        (0.0, under),
                    ],
                    sections=SECTIONS,
                ),
            )
        )
    elif variant == "round_four_leg":
        offset = hw * 0.5
        parts += [("base", m) for m in _legs("tapered_round", (-offset, offset), (-offset, offset), under, lt)]
        parts.append(("base", _cylinder_z(0.0, 0.0, under - 0.05, under, offset + lt / 2, sections=SECTIONS)))
    elif variant == "round_three_leg":
        spread = hw * 0.6
        for k in range(3):
            angle = math.radians(90 + 120 * k)
            parts.append(
                (
                    "base",
                    _frustum_z(
                        spread * math.cos(angle), spread * math.sin(angle), 0.0, under, lt * 0.3, lt / 2, sections=12
                    ),
                )
            )
        parts.append(("base", _cylinder_z(0.0, 0.0, under - 0.04, under, spread + lt / 2, sections=SECTIONS)))
    elif variant == "trestle":
        for sx in (-1, 1):
            x = sx * (hw - 0.15)
            parts.append(("base", _box(x - lt / 2, x + lt / 2, -hd * 0.3, hd * 0.3, 0.05, under)))
            parts.append(("base", _box(x - lt * 0.7, x + lt * 0.7, -hd * 0.85, hd * 0.85, 0.0, 0.05)))
            parts.append(("base", _box(x - lt * 0.7, x + lt * 0.7, -hd * 0.8, hd * 0.8, under - 0.04, under)))
        parts.append(("base", _box(-hw + 0.15, hw - 0.15, -0.025, 0.025, 0.25, 0.33)))
    elif variant == "lower_shelf":
        for sx in (-1, 1):
            x0, x1 = sorted((sx * (hw - 0.02), sx * (hw - 0.02 - lt)))
            parts.append(("base", _box(x0, x1, -hd + 0.02, hd - 0.02, 0.0, under)))
        parts.append(("top", _box(-hw + 0.02 + lt, hw - 0.02 - lt, -hd + 0.03, hd - 0.03, 0.08, 0.08 + tt)))
    elif variant == "drum":
        parts.append(("base", _cylinder_z(0.0, 0.0, 0.0, under, hw * 0.92, sections=SECTIONS_FINE)))
    elif variant == "c_frame":
        r = 0.012
        # Base plate and post sit at the back, the top cantilevers forward: it slides under a sofa.
        parts.append(("base", _box(-hw * 0.8, hw * 0.8, -hd, hd * 0.6, 0.0, 0.012)))
        parts.append(("base", _tube((0.0, -hd + r + 0.01, 0.012), (0.0, -hd + r + 0.01, under), r)))
        parts.append(("base", _box(-hw * 0.3, hw * 0.3, -hd + 0.005, -hd + 0.035, under - 0.03, under)))
    elif variant == "drawer_cube":
        parts.append(("base", _box(-hw + 0.01, hw - 0.01, -hd + 0.01, hd - 0.02, 0.04, under)))
        parts += [("base", m) for m in _legs("square", (-hw + 0.03, hw - 0.03), (-hd + 0.03, hd - 0.04), 0.04, 0.03)]
        drawer_z0 = under - min(0.18, (under - 0.04) * 0.45)
        parts.append(("top", _box(-hw + 0.025, hw - 0.025, hd - 0.02, hd - 0.005, drawer_z0, under - 0.015)))
        parts.append(
            (
                "handle",
                _box(-0.04, 0.04, hd - 0.005, hd, (drawer_z0 + under) / 2 - 0.008, (drawer_z0 + under) / 2 + 0.008),
            )
        )
    return parts


# --- ottoman ---------------------------------------------------------------


def _sample_ottoman(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {"height_m": _draw(rng, "ottoman", "height_m")}
    if variant == "round_pouf":
        p["diameter_m"] = _draw(rng, "ottoman", "diameter_m")
        w = d = p["diameter_m"]
    else:
        p["width_m"] = _draw(rng, "ottoman", "width_m")
        p["depth_m"] = _draw(rng, "ottoman", "depth_m")
        if variant == "bench":
            p["width_m"] = round(max(p["width_m"], 0.8), 6)  # a bench seats two
        w, d = p["width_m"], p["depth_m"]
    slots: dict[str, tuple[str, ...]] = {"upholstery": ("fabric", "leather")}
    if variant in ("bench", "box"):
        slots["legs"] = ("wood", "metal")
    if variant == "tray_top":
        slots["tray"] = ("wood", "painted")
    supports = []
    if variant == "tray_top":
        supports = [_support(0.0, 0.0, w - 0.1, d - 0.1, p["height_m"] - 0.015)]
    return _Sampled(p, (w, d), p["height_m"], slots, supports)


def _build_ottoman(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    h = p["height_m"]
    parts: PartList = []
    if variant == "round_pouf":
        r = p["diameter_m"] / 2
        profile = [(0.0, 0.0), (r * 0.82, 0.0)]
        for k in range(1, 8):
            t = k / 8
            profile.append((r * (0.82 + 0.18 * math.sin(math.pi * t)), h * t))
        profile += [(r * 0.82, h), (0.0, h)]
        parts.append(("upholstery", _lathe(profile, sections=SECTIONS_FINE)))
        return parts
    hw, hd = p["width_m"] / 2, p["depth_m"] / 2
    if variant == "box":
        parts += [("legs", m) for m in _legs("square", (-hw + 0.04, hw - 0.04), (-hd + 0.04, hd - 0.04), 0.05, 0.04)]
        parts.append(("upholstery", _cushion(-hw, hw, -hd, hd, 0.05, h, corner_m=0.04, bevel_m=0.025)))
    elif variant == "bench":
        parts += [
            ("legs", m)
            for m in _legs("tapered_round", (-hw + 0.05, hw - 0.05), (-hd + 0.05, hd - 0.05), h - 0.07, 0.045)
        ]
        parts.append(("legs", _box(-hw + 0.03, hw - 0.03, -hd + 0.03, hd - 0.03, h - 0.1, h - 0.07)))
        parts.append(("upholstery", _cushion(-hw, hw, -hd, hd, h - 0.07, h, corner_m=0.03, bevel_m=0.02)))
    elif variant == "tray_top":
        parts.append(("upholstery", _cushion(-hw, hw, -hd, hd, 0.0, h - 0.03, corner_m=0.06, bevel_m=0.03)))
        parts.append(("tray", _box(-hw + 0.05, hw - 0.05, -hd + 0.05, hd - 0.05, h - 0.035, h - 0.015)))
        for sx in (-1, 1):
            x0, x1 = sorted((sx * (hw - 0.05), sx * (hw - 0.065)))
            parts.append(("tray", _box(x0, x1, -hd + 0.05, hd - 0.05, h - 0.035, h)))
        for sy in (-1, 1):
            y0, y1 = sorted((sy * (hd - 0.05), sy * (hd - 0.065)))
            parts.append(("tray", _box(-hw + 0.05, hw - 0.05, y0, y1, h - 0.035, h)))
    return parts


# --- wall clock ------------------------------------------------------------


def _sample_clock(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {n: _draw(rng, "wall_clock", n) for n in ("diameter_m", "depth_m", "centre_height_m")}
    minutes = float(rng.uniform(0.0, 720.0))  # a uniformly random time on a 12-hour dial
    p["minute_hand_deg"] = round((minutes % 60.0) * 6.0, 6)
    p["hour_hand_deg"] = round(minutes * 0.5, 6)
    size = p["diameter_m"]
    slots = {"case": ("wood", "metal", "plastic", "painted"), "face": ("paper",), "hands": ("painted", "metal")}
    extra = {"mount_height_m": round(p["centre_height_m"] - size / 2, 6)}
    return _Sampled(p, (size, p["depth_m"]), size, slots, [], extra)


def _build_clock(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    size, depth = p["diameter_m"], p["depth_m"]
    r = size / 2
    cz = r
    face_y = depth * 0.6
    parts: PartList = []
    if variant == "square_frame":
        frame = size * 0.08
        parts.append(("case", _box(-r, r, 0.0, depth * 0.5, 0.0, size)))
        for x0, x1, z0, z1 in (
            (-r, r, 0.0, frame),
            (-r, r, size - frame, size),
            (-r, -r + frame, 0.0, size),
            (r - frame, r, 0.0, size),
        ):
            parts.append(("case", _box(x0, x1, 0.0, depth, z0, z1)))
        parts.append(("face", _box(-r + frame, r - frame, depth * 0.5, face_y, frame, size - frame)))
        dial_r = r - frame
    elif variant == "octagon":
        parts.append(("case", _disc_y(0.0, cz, 0.0, depth * 0.5, r, sections=8)))
        parts.append(("face", _disc_y(0.0, cz, depth * 0.5, face_y, r * 0.8)))
        dial_r = r * 0.8
    elif variant == "minimal_ticks":
        parts.append(("case", _disc_y(0.0, cz, 0.0, depth * 0.5, r)))
        parts.append(("face", _disc_y(0.0, cz, depth * 0.5, face_y, r * 0.98)))
        dial_r = r * 0.98
        for k in range(12):
            length = 0.12 * r if k % 3 == 0 else 0.07 * r
            tick = _box(-0.006, 0.006, face_y, face_y + 0.003, cz + dial_r * 0.9 - length, cz + dial_r * 0.9)
            parts.append(("hands", _rotate_about_y(tick, -30.0 * k, (0.0, 0.0, cz))))
    else:  # round_rim
        rim = max(0.012, size * 0.05)
        parts.append(("case", _lathe_y_ring(cz, 0.0, depth, r, r - rim)))
        parts.append(("face", _disc_y(0.0, cz, 0.0, face_y, r - rim + 0.001)))
        dial_r = r - rim
    hand_y0 = min(face_y, depth - 0.008)
    for name, length, width, y0, y1 in (
        ("hour_hand_deg", 0.5, 0.03, hand_y0, hand_y0 + 0.003),
        ("minute_hand_deg", 0.8, 0.018, hand_y0 + 0.003, hand_y0 + 0.006),
    ):
        hand = _box(-width * dial_r, width * dial_r, y0, y1, cz - 0.1 * dial_r, cz + length * dial_r)
        # Clockwise as seen from the front (+y): a negative turn about +y.
        parts.append(("hands", _rotate_about_y(hand, -p[name], (0.0, 0.0, cz))))
    parts.append(("hands", _disc_y(0.0, cz, hand_y0, hand_y0 + 0.008, 0.04 * dial_r + 0.004, sections=10)))
    return parts


def _lathe_y_ring(cz: float, y0: float, y1: float, r_out: float, r_in: float) -> trimesh.Trimesh:
    """An annulus (bezel) with its axis along y, centred at (0, cz)."""
    ring = _lathe([(r_in, 0.0), (r_out, 0.0), (r_out, y1 - y0), (r_in, y1 - y0), (r_in, 0.0)], sections=SECTIONS_FINE)
    return _along(ring, (0.0, y0, cz), (0.0, y1, cz))


# --- floor lamp ------------------------------------------------------------


def _sample_lamp(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {n: _draw(rng, "floor_lamp", n) for n in ("height_m", "shade_diameter_m", "shade_height_m", "base_diameter_m")}
    if variant == "tripod":
        p["tripod_spread_m"] = _draw(rng, "floor_lamp", "tripod_spread_m")
        p.pop("base_diameter_m")
        ground = p["tripod_spread_m"]
    else:
        ground = p["base_diameter_m"]
    if variant == "uplighter":
        p["shade_height_m"] = round(min(p["shade_height_m"], 0.2), 6)
    width = max(ground, p["shade_diameter_m"])
    slots: dict[str, tuple[str, ...]] = {
        "base": ("metal", "wood", "painted"),
        "shade": ("lampshade",) if variant != "uplighter" else ("metal", "painted", "lampshade"),
    }
    anchor_z = p["height_m"] - p["shade_height_m"] * (0.3 if variant == "uplighter" else 0.5)
    # Where the lights module may put a bulb: inside the shade, which is an open tube.
    extra = {"light_anchor_m": [0.0, 0.0, round(anchor_z, 6)]}
    return _Sampled(p, (width, width), p["height_m"], slots, [], extra)


def shade_tube_mesh(z0: float, z1: float, r0: float, r1: float, wall: float = 0.004) -> trimesh.Trimesh:
    """An open-ended lamp shade about the z axis, radius r0 at z0 to r1 at z1, with a ``wall`` thick rim (m)."""
    return _shade_tube(z0, z1, r0, r1, wall)


def _shade_tube(z0: float, z1: float, r0: float, r1: float, wall: float = 0.004) -> trimesh.Trimesh:
    # A closed ring profile revolved: an open-ended tube, so a bulb inside lights the room.
    return _lathe([(r0, z0), (r1, z1), (r1 - wall, z1), (r0 - wall, z0), (r0, z0)], sections=SECTIONS_FINE)


def _build_lamp(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    h, sd, sh = p["height_m"], p["shade_diameter_m"], p["shade_height_m"]
    sr = sd / 2
    parts: PartList = []
    pole_r = 0.012
    if variant == "tripod":
        spread = p["tripod_spread_m"] / 2
        apex = h - sh - 0.05
        r = 0.014
        for k in range(3):
            angle = math.radians(90 + 120 * k)
            foot = (spread * 0.98 * math.cos(angle), (spread - 1.3 * r) * math.sin(angle), r)
            parts.append(("base", _tube(foot, (0.0, 0.0, apex), r)))
            # A flat rubber foot: the slanted tube alone would end just above the floor.
            parts.append(("base", _cylinder_z(foot[0], foot[1], 0.0, 2 * r, 1.2 * r, sections=10)))
        parts.append(("base", _cylinder_z(0.0, 0.0, apex - 0.03, h - sh * 0.5, pole_r)))
    else:
        br = p["base_diameter_m"] / 2
        parts.append(
            (
                "base",
                _lathe([(0.0, 0.0), (br, 0.0), (br, 0.015), (br * 0.6, 0.03), (0.0, 0.03)], sections=SECTIONS_FINE),
            )
        )
        pole_top = h - sh if variant == "uplighter" else h - sh * 0.5
        parts.append(("base", _cylinder_z(0.0, 0.0, 0.03, pole_top, pole_r)))
    if variant == "cone_shade":
        parts.append(("shade", _shade_tube(h - sh, h, sr, sr * 0.6)))
    elif variant == "uplighter":
        parts.append(
            (
                "shade",
                _lathe(
                    [
                        (0.0, h - sh),
                        (0.05, h - sh),
                        (sr, h),
                        (sr - 0.006, h),
                        (0.045, h - sh + 0.006),
                        (0.0, h - sh + 0.006),
                    ],
                    sections=SECTIONS_FINE,
                ),
            )
        )
    else:  # drum_shade, tripod
        parts.append(("shade", _shade_tube(h - sh, h, sr, sr)))
    return parts


# --- bookshelf -------------------------------------------------------------

_PLINTH_M = 0.06
_LADDER_RAIL_M = 0.035


def _ladder_shelves(p: dict[str, float]) -> list[tuple[float, float]]:
    """(board top z, board front y) of a leaning ladder shelf: the rails run from the front foot to the wall top."""
    h, d, count = p["height_m"], p["depth_m"], int(p["shelf_count"])
    highest = 0.8 * h  # above that the shelves behind the rails would be too shallow to hold anything
    out = []
    for k in range(count + 1):
        z = 0.15 + k * (highest - 0.15) / max(count, 1)
        rail_y = d / 2 - d * (z / h)
        out.append((z, rail_y))
    return out


def _sample_bookshelf(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {
        n: _draw(rng, "bookshelf", n)
        for n in ("height_m", "width_m", "depth_m", "shelf_spacing_m", "board_thickness_m")
    }
    t = p["board_thickness_m"]
    # Compartments between the bottom board and the top board at the chosen clear spacing.
    usable = p["height_m"] - _PLINTH_M - 2 * t
    p["shelf_count"] = float(max(1, int((usable + t) // (p["shelf_spacing_m"] + t))))
    slots: dict[str, tuple[str, ...]] = {"carcass": ("wood", "painted", "wood")}
    if variant == "back_panel_books":
        slots.update({"books_a": ("book",), "books_b": ("book",), "books_c": ("book",)})
    if variant == "ladder":
        z, front = _ladder_shelves(p)[-1]
        back = -p["depth_m"] / 2 + 0.01
        supports = [_support(0.0, (back + front) / 2, p["width_m"] - 2 * _LADDER_RAIL_M - 0.02, front - back, z)]
    else:
        supports = [_support(0.0, 0.0, p["width_m"] - 0.02, p["depth_m"] - 0.02, p["height_m"])]
    extra = {"detail_seed": int(rng.integers(0, 2**31 - 1))}
    return _Sampled(p, (p["width_m"], p["depth_m"]), p["height_m"], slots, supports, extra)


def _build_bookshelf(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    h, w, d, t = p["height_m"], p["width_m"], p["depth_m"], p["board_thickness_m"]
    hw, hd = w / 2, d / 2
    count = int(p["shelf_count"])
    parts: PartList = []
    if variant == "ladder":
        # Two rails lean back against the wall; the shelves sit behind them, deeper towards the floor.
        rail = _LADDER_RAIL_M
        for sx in (-1, 1):
            x0, x1 = sorted((sx * hw, sx * (hw - rail)))
            points = [[x, y, z] for x in (x0, x1) for y, z in ((hd - rail, 0.0), (hd, 0.0), (-hd, h), (-hd + rail, h))]
            parts.append(("carcass", _hull(np.array(points))))
        for z, front in _ladder_shelves(p):
            parts.append(("carcass", _box(-hw + rail, hw - rail, -hd + 0.01, front, z - t, z)))
        return parts
    parts.append(("carcass", _box(-hw, -hw + t, -hd, hd, 0.0, h)))
    parts.append(("carcass", _box(hw - t, hw, -hd, hd, 0.0, h)))
    parts.append(("carcass", _box(-hw + t, hw - t, -hd, hd, h - t, h)))
    parts.append(("carcass", _box(-hw + t, hw - t, -hd + 0.02, hd - 0.02, 0.0, _PLINTH_M)))
    if variant in ("back_panel_books", "cube_grid"):
        parts.append(("carcass", _box(-hw + t, hw - t, -hd, -hd + 0.006, _PLINTH_M, h - t)))
    inner_bottom, inner_top = _PLINTH_M + t, h - t
    pitch = (inner_top - inner_bottom + t) / count  # board-to-board distance, one board per compartment
    floors = [inner_bottom + k * pitch for k in range(count)]  # what each compartment's books stand on
    for z in floors:
        parts.append(("carcass", _box(-hw + t, hw - t, -hd, hd, z - t, z)))
    if variant == "cube_grid":
        columns = max(2, round((w - 2 * t) / 0.35))
        for k in range(1, columns):
            x = -hw + t + k * (w - 2 * t) / columns
            parts.append(("carcass", _box(x - t / 2, x + t / 2, -hd, hd, inner_bottom, inner_top)))
    if variant == "back_panel_books":
        rng = np.random.default_rng(int(spec.get("detail_seed", 0)))  # seed stored in the spec: rebuilds match
        slot_names = ("books_a", "books_b", "books_c")
        clear = pitch - t
        for z in floors:
            x = -hw + t + 0.01
            end = -hw + t + (w - 2 * t) * rng.uniform(0.5, 0.97)
            while True:
                thickness = rng.uniform(0.018, 0.05)
                if x + thickness > end:
                    break
                book_h = clear * rng.uniform(0.6, 0.92)
                book_d = (d - 0.03) * rng.uniform(0.65, 0.95)
                parts.append(
                    (
                        slot_names[int(rng.integers(3))],
                        _box(x, x + thickness, -hd + 0.01, -hd + 0.01 + book_d, z, z + book_h),
                    )
                )
                x += thickness + 0.001
    return parts


# --- potted plant ----------------------------------------------------------


def _sample_plant(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {n: _draw(rng, "potted_plant", n) for n in ("height_m", "pot_diameter_m", "pot_height_m", "spread_m")}
    if variant == "tree":
        p["height_m"] = round(max(p["height_m"], 0.8), 6)
    if variant == "cactus":
        p["spread_m"] = round(min(p["spread_m"], 0.45), 6)
    # Pots are no taller than half the plant, and the foliage is at least as wide as the pot's rim.
    p["pot_height_m"] = round(min(p["pot_height_m"], p["height_m"] * 0.5), 6)
    p["pot_diameter_m"] = round(min(p["pot_diameter_m"], p["spread_m"]), 6)
    p["pot_bottom_ratio"] = round(float(rng.uniform(0.65, 1.0)), 6)
    width = max(p["spread_m"], p["pot_diameter_m"])
    slots = {"pot": ("terracotta", "ceramic", "concrete", "plastic"), "soil": ("soil",), "foliage": ("foliage",)}
    if variant == "tree":
        slots["trunk"] = ("bark",)
    extra = {"detail_seed": int(rng.integers(0, 2**31 - 1))}
    return _Sampled(p, (width, width), p["height_m"], slots, [], extra)


def _build_plant(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    h, pd, ph, spread = p["height_m"], p["pot_diameter_m"], p["pot_height_m"], p["spread_m"]
    rt = pd / 2
    rb = rt * p["pot_bottom_ratio"]
    rim, soil_depth = min(0.012, rt * 0.15), 0.025
    rng = np.random.default_rng(int(spec.get("detail_seed", 0)))
    parts: PartList = [
        (
            "pot",
            _lathe(
                [(0.0, 0.0), (rb, 0.0), (rt, ph), (rt - rim, ph), (rt - rim, ph - soil_depth), (0.0, ph - soil_depth)],
                sections=SECTIONS,
            ),
        ),
        ("soil", _cylinder_z(0.0, 0.0, ph - soil_depth, ph - soil_depth + 0.005, rt - rim, sections=SECTIONS)),
    ]
    half = spread / 2
    if variant == "bush":
        blob = min(half, (h - ph) / 2) * 0.6
        parts.append(("foliage", _ellipsoid((0.0, 0.0, h - blob), (blob, blob, blob))))
        for _ in range(int(rng.integers(5, 9))):
            rr = blob * rng.uniform(0.6, 1.0)
            radius = rng.uniform(0.0, max(half - rr, 0.0))
            angle = rng.uniform(0.0, 2 * math.pi)
            z = rng.uniform(ph + rr * 0.85, max(h - rr, ph + rr * 0.85))
            parts.append(
                ("foliage", _ellipsoid((radius * math.cos(angle), radius * math.sin(angle), z), (rr, rr, rr * 0.85)))
            )
    elif variant == "spiky":
        for k in range(int(rng.integers(8, 14))):
            angle = rng.uniform(0.0, 2 * math.pi)
            lean = rng.uniform(0.2, 1.0) * (half - 0.02)
            tip_z = h if k == 0 else rng.uniform(ph + (h - ph) * 0.5, h)
            ca, sa = math.cos(angle), math.sin(angle)
            nx, ny = -sa, ca  # across the blade
            base = (ca * rt * 0.2, sa * rt * 0.2)
            mid = (ca * lean * 0.55, sa * lean * 0.55)
            points = []
            for (bx, by), z, half_w in ((base, ph - soil_depth, 0.012), (mid, ph + (tip_z - ph) * 0.5, 0.025)):
                for s in (-1, 1):
                    points.append((bx + s * nx * half_w, by + s * ny * half_w, z))
                    points.append((bx + s * nx * half_w * 0.5 - ca * 0.003, by + s * ny * half_w * 0.5 - sa * 0.003, z))
            points.append((ca * lean, sa * lean, tip_z))
            parts.append(("foliage", _hull(np.array(points))))
    elif variant == "cactus":
        r = min(rt * 0.55, half * 0.35)
        column = [(0.0, ph - soil_depth), (r, ph - soil_depth)]
        column += [(r * math.cos(a), h - r + r * math.sin(a)) for a in np.linspace(0.0, math.pi / 2, 5)[1:]]
        parts.append(("foliage", _lathe(column, sections=12)))
        for k in range(int(rng.integers(0, 3))):
            side = 1 if k == 0 else -1
            ar = r * 0.6
            arm_x = side * min(half - ar, r + ar * 2.2)
            z0 = ph + (h - ph) * rng.uniform(0.3, 0.5)
            z1 = min(h - 0.02, z0 + (h - z0) * rng.uniform(0.4, 0.8))
            parts.append(("foliage", _tube((0.0, 0.0, z0), (arm_x, 0.0, z0), ar, sections=10)))
            arm = [(0.0, z0 - ar), (ar, z0 - ar)] + [
                (ar * math.cos(a), z1 - ar + ar * math.sin(a)) for a in np.linspace(0.0, math.pi / 2, 4)[1:]
            ]
            parts.append(("foliage", _lathe(arm, cx=arm_x, sections=10)))
    else:  # tree
        crown_r = min(half, (h - ph) * 0.3)
        trunk_top = h - crown_r
        parts.append(("trunk", _frustum_z(0.0, 0.0, ph - soil_depth, trunk_top, 0.02, 0.012, sections=8)))
        parts.append(("foliage", _ellipsoid((0.0, 0.0, h - crown_r), (crown_r, crown_r, crown_r))))
        for _ in range(int(rng.integers(2, 5))):
            rr = crown_r * rng.uniform(0.5, 0.75)
            radius = rng.uniform(0.0, max(half - rr, 0.0))
            angle = rng.uniform(0.0, 2 * math.pi)
            z = rng.uniform(max(ph + rr, trunk_top - crown_r * 0.8), h - rr)
            parts.append(("foliage", _ellipsoid((radius * math.cos(angle), radius * math.sin(angle), z), (rr, rr, rr))))
    return parts


# --- bed -------------------------------------------------------------------

_MATTRESS_WIDTHS_M = (0.90, 1.20, 1.40, 1.60, 1.80)


def _sample_bed(variant: str, rng: np.random.Generator) -> _Sampled:
    p = {
        n: _draw(rng, "bed", n)
        for n in (
            "mattress_length_m",
            "mattress_top_height_m",
            "mattress_thickness_m",
            "frame_margin_m",
            "leg_height_m",
        )
    }
    p["mattress_width_m"] = float(rng.choice(_MATTRESS_WIDTHS_M))
    # The frame below the mattress needs a few cm, so the mattress cannot sit higher than its legs allow.
    p["mattress_thickness_m"] = round(min(p["mattress_thickness_m"], p["mattress_top_height_m"] - 0.15), 6)
    p["leg_height_m"] = round(min(p["leg_height_m"], p["mattress_top_height_m"] - p["mattress_thickness_m"] - 0.05), 6)
    headboard = variant != "platform"
    if headboard:
        p["headboard_height_m"] = _draw(rng, "bed", "headboard_height_m")
        p["headboard_thickness_m"] = _draw(rng, "bed", "headboard_thickness_m")
    if variant == "four_poster":
        p["poster_height_m"] = _draw(rng, "bed", "poster_height_m")
    mw, ml, m = p["mattress_width_m"], p["mattress_length_m"], p["frame_margin_m"]
    w = mw + 2 * m
    d = ml + 2 * m + p.get("headboard_thickness_m", 0.0) + (0.04 if variant == "footboard" else 0.0)
    pillow_top = p["mattress_top_height_m"] + 0.13
    h = max(pillow_top, p.get("headboard_height_m", 0.0), p.get("poster_height_m", 0.0))
    slots = {
        "frame": ("wood", "painted", "fabric"),
        "mattress": ("bedding",),
        "bedding": ("bedding", "fabric"),
        "pillows": ("bedding",),
    }
    return _Sampled(p, (round(w, 6), round(d, 6)), round(h, 6), slots)


def _build_bed(variant: str, p: dict[str, float], spec: dict[str, Any]) -> PartList:
    mw, ml = p["mattress_width_m"], p["mattress_length_m"]
    mt, mth = p["mattress_top_height_m"], p["mattress_thickness_m"]
    m, lh = p["frame_margin_m"], p["leg_height_m"]
    hbt = p.get("headboard_thickness_m", 0.0)
    fbt = 0.04 if variant == "footboard" else 0.0
    w = mw + 2 * m
    d = ml + 2 * m + hbt + fbt
    hw, hd = w / 2, d / 2
    head = -hd + hbt  # where the frame starts behind the headboard
    foot = hd - fbt
    mattress_y0, mattress_y1 = head + m, foot - m
    deck = mt - mth
    parts: PartList = []
    if variant == "platform":
        parts.append(("frame", _box(-hw + 0.06, hw - 0.06, head + 0.06, foot - 0.06, 0.0, 0.08)))
        parts.append(("frame", _box(-hw, hw, head, foot, 0.08, deck)))
    else:
        parts += [
            ("frame", m_)
            for m_ in _legs("square", (-hw + 0.03, hw - 0.03), (head + 0.03, foot - 0.03), lh + 0.01, 0.06)
        ]
        parts.append(("frame", _box(-hw, hw, head, foot, lh, deck)))
        hb_top = p["headboard_height_m"]
        parts.append(
            (
                "frame",
                _cushion(
                    -hw, hw, -hd, head, 0.0 if variant != "four_poster" else lh, hb_top, corner_m=0.02, bevel_m=0.01
                ),
            )
        )
    if variant == "footboard":
        parts.append(("frame", _box(-hw, hw, foot, hd, 0.0, min(mt + 0.2, p["headboard_height_m"]))))
    if variant == "four_poster":
        top = p["poster_height_m"]
        post = 0.07
        for x in (-hw, hw - post):
            for y in (-hd, hd - post):
                parts.append(("frame", _box(x, x + post, y, y + post, 0.0, top)))
            parts.append(("frame", _box(x, x + post, -hd, hd, top - 0.05, top)))
        for y in (-hd, hd - post):
            parts.append(("frame", _box(-hw, hw, y, y + post, top - 0.05, top)))
    parts.append(
        ("mattress", _cushion(-mw / 2, mw / 2, mattress_y0, mattress_y1, deck, mt, corner_m=0.05, bevel_m=0.03))
    )
    # The duvet covers the foot two thirds and hangs a little over the sides.
    overhang = min(0.015, m)
    parts.append(
        (
            "bedding",
            _cushion(
                -mw / 2 - overhang,
                mw / 2 + overhang,
                mattress_y0 + ml * 0.33,
                mattress_y1 + overhang,
                mt - 0.1,
                mt + 0.04,
                corner_m=0.04,
                bevel_m=0.02,
            ),
        )
    )
    pillows = 2 if mw >= 1.2 else 1
    pillow_w = min(0.65, mw / pillows - 0.06)
    for k in range(pillows):
        cx = -mw / 2 + (k + 0.5) * mw / pillows
        parts.append(
            (
                "pillows",
                _cushion(
                    cx - pillow_w / 2,
                    cx + pillow_w / 2,
                    mattress_y0 + 0.05,
                    mattress_y0 + 0.45,
                    mt,
                    mt + 0.13,
                    corner_m=0.06,
                    bevel_m=0.04,
                ),
            )
        )
    return parts


# ---------------------------------------------------------------------------
# Registry
# ---------------------------------------------------------------------------


def _table_class(name: str, variants: tuple[str, ...]) -> AssetClass:
    return AssetClass(
        name,
        "floor",
        variants,
        HANDBOOK_RANGES[name],
        lambda v, rng: _sample_table(name, v, rng),
        lambda v, p, spec: _build_table(name, v, p),
    )


def _upholstered_class(name: str, variants: tuple[str, ...]) -> AssetClass:
    return AssetClass(
        name,
        "floor",
        variants,
        HANDBOOK_RANGES[name],
        lambda v, rng: _sample_upholstered(name, v, rng),
        lambda v, p, spec: _build_upholstered(name, v, p),
    )


CLASSES: dict[str, AssetClass] = {
    "chair": AssetClass(
        "chair",
        "floor",
        ("slat_back", "panel_back", "sled_base", "pedestal"),
        HANDBOOK_RANGES["chair"],
        _sample_chair,
        _build_chair,
    ),
    "armchair": _upholstered_class("armchair", ("track_arm", "rolled_arm", "slipper", "wingback")),
    "sofa": _upholstered_class("sofa", ("track_arm", "rolled_arm", "armless", "tuxedo")),
    "dining_table": _table_class("dining_table", ("rect_four_leg", "round_pedestal", "trestle", "round_four_leg")),
    "coffee_table": _table_class("coffee_table", ("rect_four_leg", "round_three_leg", "lower_shelf", "drum")),
    "side_table": _table_class("side_table", ("square_four_leg", "round_pedestal", "c_frame", "drawer_cube")),
    "ottoman": AssetClass(
        "ottoman",
        "floor",
        ("box", "round_pouf", "bench", "tray_top"),
        HANDBOOK_RANGES["ottoman"],
        _sample_ottoman,
        _build_ottoman,
    ),
    "wall_clock": AssetClass(
        "wall_clock",
        "wall",
        ("round_rim", "square_frame", "minimal_ticks", "octagon"),
        HANDBOOK_RANGES["wall_clock"],
        _sample_clock,
        _build_clock,
    ),
    "floor_lamp": AssetClass(
        "floor_lamp",
        "floor",
        ("drum_shade", "cone_shade", "tripod", "uplighter"),
        HANDBOOK_RANGES["floor_lamp"],
        _sample_lamp,
        _build_lamp,
    ),
    "bookshelf": AssetClass(
        "bookshelf",
        "floor",
        ("open_frame", "back_panel_books", "cube_grid", "ladder"),
        HANDBOOK_RANGES["bookshelf"],
        _sample_bookshelf,
        _build_bookshelf,
    ),
    "potted_plant": AssetClass(
        "potted_plant",
        "surface_or_floor",
        ("bush", "spiky", "cactus", "tree"),
        HANDBOOK_RANGES["potted_plant"],
        _sample_plant,
        _build_plant,
    ),
    "bed": AssetClass(
        "bed",
        "floor",
        ("headboard_panel", "platform", "four_poster", "footboard"),
        HANDBOOK_RANGES["bed"],
        _sample_bed,
        _build_bed,
    ),
}

# Plants taller than this go on the floor: a 1.2 m tree on a table reads as a mistake.
MAX_SURFACE_PLANT_HEIGHT_M = 0.7


def sample_asset(class_name: str, rng: np.random.Generator) -> dict[str, Any]:
    """Draw a variant, its handbook dimensions and its materials; return a JSON asset spec.

    Raises ``ValueError`` naming the known classes for an unknown class.
    """
    asset_class = CLASSES.get(class_name)
    if asset_class is None:
        raise ValueError(f"unknown asset class {class_name!r} (known: {', '.join(sorted(CLASSES))})")
    variant = asset_class.variants[int(rng.integers(len(asset_class.variants)))]
    sampled = asset_class.sampler(variant, rng)
    materials = {
        slot: sample_material(families[int(rng.integers(len(families)))], rng)
        for slot, families in sampled.slots.items()
    }
    if asset_class.placement == "wall":
        placement = "wall"
    elif asset_class.placement == "surface_or_floor":
        placement = "surface" if sampled.height_m <= MAX_SURFACE_PLANT_HEIGHT_M else "floor"
    else:
        placement = "floor"
    spec: dict[str, Any] = {
        "class_name": class_name,
        "asset_id": f"{class_name}/{variant}",
        "variant": variant,
        "params": {k: round(float(v), 6) for k, v in sampled.params.items()},
        "materials": materials,
        "placement": placement,
        "footprint_m": [round(float(sampled.footprint_m[0]), 6), round(float(sampled.footprint_m[1]), 6)],
        "height_m": round(float(sampled.height_m), 6),
        "support_surfaces": sampled.support_surfaces,
    }
    spec.update(sampled.extra)
    return spec


@dataclass
class Part:
    """One material's worth of an asset's geometry."""

    name: str
    mesh: trimesh.Trimesh
    material: dict[str, Any]


def build_asset_parts(asset_spec: dict[str, Any]) -> list[Part]:
    """Rebuild an asset's meshes (local frame) from its spec; one Part per material slot.

    Deterministic: the same spec always gives the same vertices (detail such as
    book sizes comes from the ``detail_seed`` stored in the spec).
    """
    if asset_spec.get("variant") == "user":
        return _build_user_parts(asset_spec)
    class_name = asset_spec["class_name"]
    asset_class = CLASSES.get(class_name)
    if asset_class is None:
        raise ValueError(f"unknown asset class {class_name!r} (known: {', '.join(sorted(CLASSES))})")
    variant = asset_spec["variant"]
    if variant not in asset_class.variants:
        raise ValueError(f"unknown variant {variant!r} of {class_name} (known: {', '.join(asset_class.variants)})")
    pieces = asset_class.builder(variant, asset_spec["params"], asset_spec)
    grouped: dict[str, list[trimesh.Trimesh]] = {}
    for slot, mesh in pieces:
        grouped.setdefault(slot, []).append(mesh)
    parts = []
    for slot, group in grouped.items():
        mesh = group[0] if len(group) == 1 else _concatenate(group)
        parts.append(Part(slot, mesh, dict(asset_spec["materials"][slot])))
    return parts


# ---------------------------------------------------------------------------
# User assets
# ---------------------------------------------------------------------------

USER_PLACEMENTS = ("floor", "wall", "surface")
#: "keep": the model's own materials, one part per material (render.user_materials); "randomize": one
#: part with a random material, as for a mesh without materials.
USER_LOOKS = ("keep", "randomize")


def _load_user_model(path: str, unit: str, up_axis: str, front: str | None) -> meshes.UserModel:
    return load_model_cached(path, unit=unit, up_axis=up_axis, front=front)


def user_asset_spec(
    mesh_path: str | os.PathLike[str],
    class_name: str,
    placement: str,
    rng: np.random.Generator,
    *,
    unit: str = "auto",
    up_axis: str = "z",
    front: str | None = None,
    look: str = "randomize",
) -> dict[str, Any]:
    """Wrap a user model (see :func:`render.meshes.load_user_model`) as an asset spec.

    ``placement`` is "floor", "wall" (the model's back, its local -y side, goes on the wall and its front, the
    file's ``front`` direction, faces the room) or "surface" (on a table top when one fits, else the floor).
    ``look`` "keep" gives one material slot per model part (``part0``, ``part1``, …) from the file's materials
    (:func:`render.user_materials.look_material`); "randomize" one random ``body`` material.
    The spec records ``front`` and ``look`` only when they differ from the defaults, so older specs keep their bytes.
    Raises ``MeshError`` for a bad file and ``ValueError`` for a bad placement or look.
    """
    if placement not in USER_PLACEMENTS:
        raise ValueError(f"unknown placement {placement!r} (known: {', '.join(USER_PLACEMENTS)})")
    if look not in USER_LOOKS:
        raise ValueError(f"unknown look {look!r} (known: {', '.join(USER_LOOKS)})")
    if not class_name or not isinstance(class_name, str):
        raise ValueError("a user asset needs a class name")
    path = str(Path(mesh_path).resolve())
    model = _load_user_model(path, unit, up_axis, front)
    mesh = model.mesh()
    extent = mesh.bounds[1] - mesh.bounds[0]
    if look == "keep":
        materials = {
            f"part{k}": look_material(
                part.look,
                texture_record=texture_record(mesh_path=path, unit=unit, up_axis=up_axis, front=front, part=k)
                if part.uv is not None
                else None,
            )
            for k, part in enumerate(model.parts)
        }
    else:
        materials = {
            "body": sample_material(("plastic", "painted", "wood", "metal", "fabric")[int(rng.integers(5))], rng)
        }
    spec: dict[str, Any] = {
        "class_name": class_name,
        "asset_id": f"user/{Path(path).stem}",
        "variant": "user",
        "params": {
            "width_m": round(float(extent[0]), 6),
            "depth_m": round(float(extent[1]), 6),
            "height_m": round(float(extent[2]), 6),
        },
        "materials": materials,
        "placement": placement,
        "footprint_m": [round(float(extent[0]), 6), round(float(extent[1]), 6)],
        "height_m": round(float(extent[2]), 6),
        "support_surfaces": [],
        "mesh_path": path,
        "unit": unit,
        "up_axis": up_axis,
    }
    if front:
        spec["front"] = front
    if look != "randomize":
        spec["look"] = look
    if placement == "wall":
        # Centre between 1.2 and 1.8 m (common practice for hung objects), never below 0.3 m.
        spec["mount_height_m"] = round(max(0.3, float(rng.uniform(1.2, 1.8)) - float(extent[2]) / 2), 6)
    return spec


def _build_user_parts(spec: dict[str, Any]) -> list[Part]:
    model = _load_user_model(
        spec["mesh_path"], spec.get("unit", "auto"), spec.get("up_axis", "z"), spec.get("front") or None
    )
    # Back onto the plane y = 0 for wall items (their front, +y, faces the room).
    shift = [0.0, -float(model.mesh().bounds[0][1]), 0.0] if spec["placement"] == "wall" else None
    if spec.get("look", "randomize") != "keep":
        mesh = model.mesh()
        if shift is not None:
            mesh.apply_translation(shift)
        return [Part("body", mesh, dict(spec["materials"]["body"]))]
    parts = []
    for k, user_part in enumerate(model.parts):
        mesh = user_part.mesh.copy()
        if shift is not None:
            mesh.apply_translation(shift)
        material = dict(spec["materials"][f"part{k}"])
        if material.get("user_texture") and user_part.uv is not None:
            # Per-vertex texture coordinates ride along in the in-memory material (never in the JSON spec); the
            # scene hands them to the mesh (render.scene.build_scene).
            material["uv"] = mitsuba_uv(user_part.uv)
        parts.append(Part(f"part{k}", mesh, material))
    return parts
