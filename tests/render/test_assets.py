"""Procedural assets: handbook dimensions measured on the geometry, footprints, variants, materials, rooms."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
import trimesh

from render import assets, dressing

# Independent copy of the handbook values the geometry is measured against
# (not read from assets.HANDBOOK_RANGES, so a typo there shows up here).
PANERO = "Panero & Zelnik, Human Dimension & Interior Space (1979)"
NEUFERT = "Neufert, Architects' Data, 4th ed."
HANDBOOK_M = {
    # Seat height 16–19 in, Panero & Zelnik 1979 (from memory).
    ("chair", "seat"): (0.40, 0.48),
    # Lounge seating seat height 15–18 in, Panero & Zelnik 1979 (from memory).
    ("armchair", "seat"): (0.38, 0.45),
    ("sofa", "seat"): (0.38, 0.46),
    # Dining table height 28–30 in, Panero & Zelnik 1979 (from memory).
    ("dining_table", "top"): (0.71, 0.76),
    # Coffee table height 14–18 in, Panero & Zelnik 1979 (from memory).
    ("coffee_table", "top"): (0.35, 0.46),
    # Side tables level with sofa arms and mattress tops (common practice).
    ("side_table", "top"): (0.45, 0.65),
    # Sleeping surface 0.40–0.60 m, boxsprings to 0.65 m, Neufert (from memory).
    ("bed", "mattress_top"): (0.40, 0.65),
    # Bookshelves within reach, Neufert (from memory).
    ("bookshelf", "height"): (0.80, 2.10),
    # Floor lamps 1.5–1.85 m (common practice).
    ("floor_lamp", "height"): (1.50, 1.85),
    # Wall clocks 25–50 cm, centre at 1.5–1.9 m (common practice).
    ("wall_clock", "diameter"): (0.25, 0.50),
    ("wall_clock", "centre_height"): (1.50, 1.90),
    # Footstools at lounge seat height 14–18 in, Panero & Zelnik 1979 (from memory).
    ("ottoman", "height"): (0.35, 0.46),
}
MM = 0.002  # measurement tolerance: 2 mm, well under the handbook ranges' widths

SEEDS_PER_VARIANT = 6
EXPECTED_CLASSES = {
    "chair",
    "armchair",
    "sofa",
    "dining_table",
    "coffee_table",
    "side_table",
    "ottoman",
    "wall_clock",
    "floor_lamp",
    "bookshelf",
    "potted_plant",
    "bed",
}


def _specs_by_variant(class_name: str, per_variant: int = SEEDS_PER_VARIANT) -> dict[str, list[dict]]:
    out: dict[str, list[dict]] = {v: [] for v in assets.CLASSES[class_name].variants}
    seed = 0
    while any(len(v) < per_variant for v in out.values()):
        spec = assets.sample_asset(class_name, np.random.default_rng(seed))
        if len(out[spec["variant"]]) < per_variant:
            out[spec["variant"]].append(spec)
        seed += 1
        assert seed < 5000, "some variant is never drawn"
    return out


ALL_SPECS = [(c, v, s) for c in sorted(assets.CLASSES) for v, specs in _specs_by_variant(c).items() for s in specs]


def _merged(parts: list[assets.Part]) -> trimesh.Trimesh:
    return trimesh.util.concatenate([p.mesh for p in parts])


def _top_z_at(mesh: trimesh.Trimesh, x: float, y: float) -> float:
    """Height of the highest surface above (x, y): a ray cast straight down, like a tape measure."""
    locations, _, _ = mesh.ray.intersects_location([[x, y, 5.0]], [[0.0, 0.0, -1.0]])
    assert len(locations), f"nothing under ({x:.3f}, {y:.3f})"
    return float(locations[:, 2].max())


def test_library_has_the_twelve_classes_with_several_variants():
    assert EXPECTED_CLASSES <= set(assets.CLASSES)
    for name, asset_class in assets.CLASSES.items():
        assert asset_class.name == name
        assert asset_class.placement in ("floor", "wall", "surface_or_floor")
        assert len(asset_class.variants) >= 3, name
        assert asset_class.ranges, name


def test_every_range_names_its_source():
    for class_name, ranges in assets.HANDBOOK_RANGES.items():
        for name, r in ranges.items():
            assert r.low <= r.high, (class_name, name)
            assert r.source, (class_name, name)
            if name.endswith("_m"):
                assert 0.0 < r.low and r.high < 3.0, (class_name, name)  # metres, not millimetres


@pytest.mark.parametrize(
    "class_name,variant,spec",
    ALL_SPECS,
    ids=[f"{c}-{v}-{i % SEEDS_PER_VARIANT}" for i, (c, v, _) in enumerate(ALL_SPECS)],
)
def test_asset_geometry(class_name, variant, spec):
    ranges = assets.CLASSES[class_name].ranges
    # Every sampled dimension lies inside its published range.
    for name, value in spec["params"].items():
        if name in ranges:
            assert ranges[name].contains(value), (name, value, ranges[name])
    parts = assets.build_asset_parts(spec)
    assert parts and all(isinstance(p, assets.Part) and len(p.mesh.faces) for p in parts)
    mesh = _merged(parts)
    assert len(mesh.faces) < 3000  # frames render in about a second
    w, d = spec["footprint_m"]
    h = spec["height_m"]
    low, high = mesh.bounds
    # All parts fit the declared footprint and height (local frame conventions of the render README).
    if spec["placement"] == "wall":
        box_low, box_high = np.array([-w / 2, 0.0, 0.0]), np.array([w / 2, d, h])
    else:
        box_low, box_high = np.array([-w / 2, -d / 2, 0.0]), np.array([w / 2, d / 2, h])
    assert np.all(low >= box_low - 1e-6) and np.all(high <= box_high + 1e-6), (low, high, box_low, box_high)
    # ... and fill it: the declared box is not padded (foliage is random within its spread).
    fill = (high - low) / (box_high - box_low)
    assert fill[2] > 0.999
    assert np.all(fill[:2] > (0.3 if class_name == "potted_plant" else 0.7)), fill
    for part in parts:
        m = part.material
        assert m["kind"] in ("diffuse", "plastic", "varnish", "metal")
        assert len(m["rgb"]) == 3 and all(0.0 <= c <= 1.0 for c in m["rgb"])
        assert 0.0 <= m["roughness"] <= 1.0

    # Handbook dimensions measured on the geometry itself.
    p = spec["params"]
    if class_name in ("chair", "armchair", "sofa"):
        seat_z = _top_z_at(
            mesh,
            0.05 if class_name != "sofa" else 0.1 * (w - 2 * p.get("arm_width_m", 0)),
            d / 2 - 0.1 if class_name == "sofa" else d / 4,
        )
        lo, hi = HANDBOOK_M[(class_name, "seat")]
        assert lo - MM <= seat_z <= hi + MM, seat_z
    if class_name in ("dining_table", "coffee_table", "side_table"):
        lo, hi = HANDBOOK_M[(class_name, "top")]
        assert lo - MM <= _top_z_at(mesh, 0.0, 0.0) <= hi + MM
    if class_name == "bed":
        mattress = next(part.mesh for part in parts if part.name == "mattress")
        lo, hi = HANDBOOK_M[("bed", "mattress_top")]
        assert lo - MM <= mattress.bounds[1][2] <= hi + MM
    if class_name in ("bookshelf", "floor_lamp", "ottoman"):
        lo, hi = HANDBOOK_M[(class_name, "height")]
        assert lo - MM <= high[2] <= hi + MM
    if class_name == "wall_clock":
        lo, hi = HANDBOOK_M[("wall_clock", "diameter")]
        assert lo - MM <= high[0] - low[0] <= hi + MM
        lo, hi = HANDBOOK_M[("wall_clock", "centre_height")]
        assert lo - MM <= spec["mount_height_m"] + (high[2] - low[2]) / 2 <= hi + MM
        assert low[1] == pytest.approx(0.0, abs=1e-9)  # back on the wall plane y = 0
    # Support surfaces lie inside the footprint, and a pot set there stands on real geometry at that height.
    for surface in spec["support_surfaces"]:
        (cx, cy), (sw, sd), sz = surface["center_m"], surface["size_m"], surface["height_m"]
        assert abs(cx) + sw / 2 <= w / 2 + 1e-6 and abs(cy) + sd / 2 <= d / 2 + 1e-6
        for dx, dy in itertools.product((-0.45, 0.0, 0.45), repeat=2):
            assert _top_z_at(mesh, cx + dx * sw, cy + dy * sd) == pytest.approx(sz, abs=MM)


def test_variants_are_geometrically_different():
    """Compare surface-point occupancy on a 6×6×6 grid over the bounding box, variant against variant."""

    def descriptor(spec: dict) -> np.ndarray:
        mesh = _merged(assets.build_asset_parts(spec))
        points, _ = trimesh.sample.sample_surface(mesh, 3000, seed=0)
        low, high = mesh.bounds
        cells = np.clip(((points - low) / (high - low + 1e-12) * 6).astype(int), 0, 5)
        grid = np.zeros((6, 6, 6))
        np.add.at(grid, tuple(cells.T), 1.0)
        return grid / grid.sum()

    for class_name in assets.CLASSES:
        first = {v: specs[0] for v, specs in _specs_by_variant(class_name, 1).items()}
        grids = {v: descriptor(s) for v, s in first.items()}
        for a, b in itertools.combinations(grids, 2):
            # Half the L1 distance = share of surface that sits in different cells.
            distance = 0.5 * np.abs(grids[a] - grids[b]).sum()
            assert distance > 0.15, (class_name, a, b, distance)


def test_sampling_is_seeded_json_and_rounded():
    for class_name in assets.CLASSES:
        one = assets.sample_asset(class_name, np.random.default_rng(42))
        two = assets.sample_asset(class_name, np.random.default_rng(42))
        text = json.dumps(one, sort_keys=True)
        assert text == json.dumps(two, sort_keys=True)
        assert json.loads(text) == one
        assert one["asset_id"] == f"{class_name}/{one['variant']}"
        for value in one["params"].values():
            assert round(value, 6) == value
        assert set(one["materials"]) == {p.name for p in assets.build_asset_parts(one)}


def test_build_is_deterministic_from_the_spec_alone():
    for class_name in assets.CLASSES:
        spec = assets.sample_asset(class_name, np.random.default_rng(3))
        again = json.loads(json.dumps(spec))  # what a worker on another machine receives
        for a, b in zip(assets.build_asset_parts(spec), assets.build_asset_parts(again), strict=True):
            assert a.name == b.name
            np.testing.assert_array_equal(a.mesh.vertices, b.mesh.vertices)
            np.testing.assert_array_equal(a.mesh.faces, b.mesh.faces)


def test_unknown_class_lists_the_known_ones():
    with pytest.raises(ValueError, match=r"unknown asset class 'unicorn' \(known: armchair, bed, bookshelf"):
        assets.sample_asset("unicorn", np.random.default_rng(0))


def test_materials_are_plausible_per_family():
    rng = np.random.default_rng(0)
    for _ in range(200):
        wood = assets.sample_material("wood", rng)
        assert wood["kind"] == "varnish"
        r, g, b = wood["rgb"]
        assert r >= g >= b * 0.9  # wood tones: warm, red channel highest
        assert assets.sample_material("fabric", rng)["kind"] == "diffuse"
        assert assets.sample_material("metal", rng)["kind"] == "metal"


def test_srgb_decoding_matches_colour_science():
    colour = pytest.importorskip("colour")
    values = np.linspace(0.0, 1.0, 21)
    # Reference: colour-science's IEC 61966-2-1 sRGB EOTF.
    np.testing.assert_allclose(assets.srgb_to_linear(values), colour.models.eotf_sRGB(values), atol=1e-12)


def test_user_asset_spec_wraps_a_mesh(tmp_path):
    path = tmp_path / "vase_cm.obj"
    trimesh.creation.cylinder(radius=10.0, height=30.0, sections=16).export(path)
    rng = np.random.default_rng(1)
    spec = assets.user_asset_spec(path, "vase", "surface", rng)
    assert spec["class_name"] == "vase" and spec["variant"] == "user" and spec["placement"] == "surface"
    assert spec["footprint_m"] == pytest.approx([0.2, 0.2]) and spec["height_m"] == pytest.approx(0.3)
    json.dumps(spec)
    mesh = _merged(assets.build_asset_parts(spec))
    np.testing.assert_allclose(mesh.bounds, [[-0.1, -0.1, 0.0], [0.1, 0.1, 0.3]], atol=1e-6)
    wall = assets.user_asset_spec(path, "sign", "wall", rng)
    wall_mesh = _merged(assets.build_asset_parts(wall))
    assert wall_mesh.bounds[0][1] == pytest.approx(0.0, abs=1e-9)  # back on y = 0
    assert 0.3 <= wall["mount_height_m"] <= 1.8
    with pytest.raises(ValueError, match="unknown placement"):
        assets.user_asset_spec(path, "vase", "ceiling", rng)


ROOM = {
    "width_m": 4.0,
    "depth_m": 3.0,
    "height_m": 2.5,
    "materials": {
        k: {"kind": "diffuse", "rgb": [0.5, 0.5, 0.5], "roughness": 1.0} for k in ("floor", "wall", "ceiling")
    },
    "windows": [
        {"wall": "south", "center_m": 1.5, "sill_m": 0.9, "width_m": 1.2, "height_m": 1.2},
        {"wall": "east", "center_m": 1.0, "sill_m": 0.8, "width_m": 0.8, "height_m": 1.0},
    ],
}


def _hits(mesh: trimesh.Trimesh, origin, direction) -> int:
    return len(mesh.ray.intersects_location([origin], [direction])[0])


def test_room_shell_has_window_openings():
    parts = {p.name: p for p in dressing.room_parts(ROOM)}
    assert set(parts) == {"floor", "ceiling", "wall_south", "wall_north", "wall_west", "wall_east"}
    south, east = parts["wall_south"].mesh, parts["wall_east"].mesh
    centre = [2.0, 1.5, 1.2]
    # Through the south window (x 0.9–2.1, z 0.9–2.1) a ray leaves the room; beside or under it, it hits the wall.
    assert _hits(south, [1.5, 1.5, 1.5], [0, -1, 0]) == 0
    assert _hits(south, [0.5, 1.5, 1.5], [0, -1, 0]) > 0
    assert _hits(south, [1.5, 1.5, 0.5], [0, -1, 0]) > 0
    assert _hits(south, [1.5, 1.5, 2.3], [0, -1, 0]) > 0
    assert _hits(east, [3.0, 1.0, 1.3], [1, 0, 0]) == 0
    assert _hits(east, [3.0, 2.5, 1.3], [1, 0, 0]) > 0
    # Closed elsewhere: every other direction from the centre hits some wall, floor or ceiling.
    shell = _merged(list(parts.values()))
    for direction in ([0, 1, 0], [-1, 0, 0], [0, 0, 1], [0, 0, -1], [1, 1, 0.2], [-1, -1, -0.3]):
        assert _hits(shell, centre, direction) > 0, direction
    # Interior faces sit on the room's planes.
    assert parts["floor"].mesh.bounds[1][2] == pytest.approx(0.0)
    assert parts["ceiling"].mesh.bounds[0][2] == pytest.approx(2.5)
    assert parts["wall_north"].mesh.bounds[0][1] == pytest.approx(3.0)
    assert parts["wall_west"].mesh.bounds[1][0] == pytest.approx(0.0)
