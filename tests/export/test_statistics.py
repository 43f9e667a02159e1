"""datasets.statistics: the accumulator against an independent recount, the COCO size limits, camera distances.

Expected values are recounted here from the same synthetic annotations with plain loops and numpy.histogram /
numpy.histogram2d, never with the module's own binning. COCO limits (32², 96² px² on the mask area): COCO
detection evaluation, https://cocodataset.org/#detection-eval (from memory); pycocotools ``COCOeval.Params``.
"""

from __future__ import annotations

import json
import math
import random

import numpy as np
import pytest

from datasets.statistics import DatasetStatistics, StatInstance, camera_distances, size_class

CLASSES = ("chair", "sofa", "wall_clock", "lamp")
WIDTH_PX, HEIGHT_PX = 640, 480
FRACTION_EDGES = np.array([i / 10 for i in range(11)])
DISTANCE_EDGES_M = np.array([i * 0.5 for i in range(21)])
CENTRE_X_EDGES = np.array([i / 16 for i in range(17)])
CENTRE_Y_EDGES = np.array([i / 12 for i in range(13)])
BOX_SIDE_EDGES_PX = np.array([0, 8, 16, 24, 32, 48, 64, 96, 128, 192, 256, 384, 512], dtype=float)
# Values on bin edges on purpose, next to random ones.
EDGE_FRACTIONS = (0.0, 0.1, 0.3, 0.7, 0.9, 1.0)
EDGE_AREAS = (0, 1, 63, 64, 1023, 1024, 9215, 9216, 262143, 262144, 300000)
EDGE_DISTANCES = (0.0, 0.5, 2.5, 9.5, 9.999, 10.0, 12.0)


def synthetic_images(seed: int = 7, count: int = 240) -> list[list[StatInstance]]:
    rng = random.Random(seed)
    images = []
    for _ in range(count):
        instances = []
        for _ in range(rng.choice([0, 0, 1, 2, 3, 4, 6, 9])):
            w, h = rng.uniform(0, 200), rng.uniform(0, 160)
            x, y = rng.uniform(0, WIDTH_PX - w), rng.uniform(0, HEIGHT_PX - h)
            if rng.random() < 0.05:  # boxes touching the right or bottom edge: centre on the last column / row
                x, w, y, h = WIDTH_PX - 2.0, 2.0, HEIGHT_PX - 2.0, 2.0
            instances.append(
                StatInstance(
                    category=rng.choice(CLASSES[:3]) if rng.random() < 0.9 else CLASSES[3],
                    bbox=[x, y, w, h],
                    area_px=rng.choice(EDGE_AREAS) if rng.random() < 0.3 else rng.randrange(0, 40000),
                    visible_fraction=rng.choice(EDGE_FRACTIONS) if rng.random() < 0.3 else rng.random(),
                    truncation_fraction=rng.choice(EDGE_FRACTIONS) if rng.random() < 0.3 else rng.random(),
                    occlusion_fraction=rng.random(),
                    distance_m=None
                    if rng.random() < 0.1
                    else (rng.choice(EDGE_DISTANCES) if rng.random() < 0.3 else rng.uniform(0, 14)),
                )
            )
        images.append(instances)
    return images


def accumulate(images) -> dict:
    stats = DatasetStatistics(class_names=CLASSES)
    for instances in images:
        stats.add_image(width_px=WIDTH_PX, height_px=HEIGHT_PX, instances=instances)
    return stats.as_json()


def of_class(images, name):
    return [inst for instances in images for inst in instances if inst.category == name]


def test_statistics_agree_with_a_recount_of_the_annotations():
    images = synthetic_images()
    out = accumulate(images)
    assert out["classes"] == list(CLASSES)
    assert out["images"] == len(images)
    assert out["instances"] == sum(len(i) for i in images)
    assert out["image_sizes_px"] == [{"width_px": WIDTH_PX, "height_px": HEIGHT_PX, "images": len(images)}]
    assert out["visible_fraction"]["edges"] == FRACTION_EDGES.tolist()
    assert out["camera_distance"]["edges"] == DISTANCE_EDGES_M.tolist()
    assert out["box_side"]["edges"] == BOX_SIDE_EDGES_PX.tolist()

    for name in CLASSES:
        mine = of_class(images, name)
        assert out["per_class"][name] == {
            "instances": len(mine),
            "images": sum(1 for instances in images if any(i.category == name for i in instances)),
        }
        small = sum(1 for i in mine if i.area_px < 32 * 32)
        large = sum(1 for i in mine if i.area_px >= 96 * 96)
        assert out["size_classes"]["counts"][name] == [small, len(mine) - small - large, large]
        side = np.sqrt([i.area_px for i in mine])
        expected_side, _ = np.histogram(side, bins=np.append(BOX_SIDE_EDGES_PX, np.inf))
        assert out["box_side"]["counts"][name] == expected_side.tolist()
        for key in ("visible_fraction", "truncation_fraction", "occlusion_fraction"):
            expected, _ = np.histogram([getattr(i, key) for i in mine], bins=FRACTION_EDGES)
            assert out[key]["counts"][name] == expected.tolist(), (name, key)
        known = [i.distance_m for i in mine if i.distance_m is not None]
        expected_distance, _ = np.histogram(known, bins=np.append(DISTANCE_EDGES_M, np.inf))
        assert out["camera_distance"]["counts"][name] == expected_distance.tolist()
        assert out["camera_distance"]["unknown"][name] == len(mine) - len(known)
        centre_x = [(i.bbox[0] + i.bbox[2] / 2) / WIDTH_PX for i in mine]
        centre_y = [(i.bbox[1] + i.bbox[3] / 2) / HEIGHT_PX for i in mine]
        grid, _, _ = np.histogram2d(centre_y, centre_x, bins=[CENTRE_Y_EDGES, CENTRE_X_EDGES])
        assert out["box_centres"]["counts"][name] == grid.astype(int).tolist()

    for key in ("size_classes", "box_side", "visible_fraction", "truncation_fraction", "camera_distance"):
        counts = out[key]["counts"]
        assert out[key]["total"] == [sum(col) for col in zip(*(counts[n] for n in CLASSES), strict=True)], key
    assert np.array_equal(
        np.array(out["box_centres"]["total"]), sum(np.array(out["box_centres"]["counts"][n]) for n in CLASSES)
    )
    per_image = np.bincount([len(i) for i in images])
    assert out["instances_per_image"]["counts"] == per_image.tolist()
    assert out["instances_per_image"]["values"] == list(range(len(per_image)))


def test_coco_size_class_boundaries_are_exact():
    assert [size_class(a) for a in (0, 32**2 - 1, 32**2, 96**2 - 1, 96**2, 10**9)] == [
        "small",
        "small",
        "medium",
        "medium",
        "large",
        "large",
    ]
    stats = DatasetStatistics(class_names=["chair"])
    areas = (32**2 - 1, 32**2, 96**2 - 1, 96**2)
    stats.add_image(
        width_px=WIDTH_PX,
        height_px=HEIGHT_PX,
        instances=[StatInstance("chair", [0, 0, 10, 10], area, 1.0, 0.0, 0.0, 1.0) for area in areas],
    )
    out = stats.as_json()
    assert out["size_classes"]["counts"]["chair"] == [1, 2, 1]
    assert out["size_classes"]["ranges_px2"] == [[0, 1024], [1024, 9216], [9216, None]]
    # √area bins nest in the size classes: 1023 in [24, 32), 1024 in [32, 48), 9215 in [64, 96), 9216 in [96, 128).
    side = out["box_side"]["counts"]["chair"]
    edges = out["box_side"]["edges"]
    assert [edges[i] for i, n in enumerate(side) if n] == [24, 32, 64, 96]


def test_co_occurrence_is_symmetric_and_its_diagonal_counts_images_holding_the_class():
    images = synthetic_images(seed=11)
    matrix = np.array(accumulate(images)["co_occurrence"]["counts"])
    assert matrix.dtype.kind == "i" and np.array_equal(matrix, matrix.T)
    for i, a in enumerate(CLASSES):
        for j, b in enumerate(CLASSES):
            both = sum(1 for inst in images if {a, b} <= {x.category for x in inst})
            assert matrix[i, j] == both, (a, b)
    assert np.diag(matrix).tolist() == [
        sum(1 for inst in images if name in {x.category for x in inst}) for name in CLASSES
    ]


def _walk_counts(value, path=""):
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _walk_counts(v, f"{path}.{k}")
    elif isinstance(value, list):
        for k, v in enumerate(value):
            yield from _walk_counts(v, f"{path}[{k}]")
    else:
        yield path, value


def test_json_is_serialisable_with_int_counts_and_independent_of_image_order():
    images = synthetic_images(seed=3)
    out = accumulate(images)
    text = json.dumps(out, allow_nan=False)
    assert json.loads(text) == out
    for path, value in _walk_counts(out):
        if ".counts" in path or ".total" in path or ".unknown" in path or path in (".images", ".instances"):
            assert type(value) is int, path
    shuffled = list(images)
    random.Random(5).shuffle(shuffled)
    assert accumulate(shuffled) == out
    assert list(out)[:4] == ["format", "format_version", "units", "classes"]


def test_empty_images_count_and_bad_input_is_refused():
    stats = DatasetStatistics(class_names=CLASSES)
    stats.add_image(width_px=64, height_px=48, instances=[])
    out = stats.as_json()
    assert out["images"] == 1 and out["instances"] == 0
    assert out["instances_per_image"] == {
        "quantity": out["instances_per_image"]["quantity"],
        "values": [0],
        "counts": [1],
    }
    assert out["co_occurrence"]["counts"] == [[0] * 4 for _ in range(4)]
    json.dumps(DatasetStatistics(class_names=[]).as_json())
    with pytest.raises(ValueError, match="unknown category"):
        stats.add_image(width_px=64, height_px=48, instances=[StatInstance("bed", [0, 0, 1, 1], 1, 1, 0, 0)])
    assert stats.images == 1  # the refused image is not counted
    with pytest.raises(ValueError, match="unique"):
        DatasetStatistics(class_names=["chair", "chair"])
    with pytest.raises(ValueError):
        StatInstance("chair", [0, 0, 1], 1, 1, 0, 0)
    with pytest.raises(ValueError):
        StatInstance("chair", [0, 0, 1, 1], 1, math.nan, 0, 0)
    with pytest.raises(ValueError):
        StatInstance("chair", [0, 0, 1, 1], 1, 1, 0, 0, distance_m=-1.0)
    with pytest.raises(ValueError):
        stats.add_image(width_px=0, height_px=48, instances=[])


def _independent_centre(obj) -> np.ndarray:
    """Centre of the world box of the yawed footprint rectangle (render/README.md: local origin at the footprint's
    centre on the base; wall items: back on local y = 0, facing +y), computed from the four corners."""
    w, d = obj["footprint_m"]
    y0, y1 = (0.0, d) if obj["placement"] == "wall" else (-d / 2, d / 2)
    corners = np.array([[-w / 2, y0], [w / 2, y0], [w / 2, y1], [-w / 2, y1]])
    yaw = np.radians(obj["yaw_deg"])
    rotation = np.array([[np.cos(yaw), -np.sin(yaw)], [np.sin(yaw), np.cos(yaw)]])
    world = corners @ rotation.T + np.asarray(obj["position_m"][:2])
    low, high = world.min(axis=0), world.max(axis=0)
    return np.array([*(low + high) / 2, obj["position_m"][2] + obj["height_m"] / 2])


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_camera_distances_of_a_real_spec_agree_with_numpy(seed):
    from render.budget import DEFAULT_BUDGET
    from render.cli import default_composition
    from render.layout import object_world_bounds
    from render.spec import make_spec, spec_from_json, spec_to_json

    spec = spec_from_json(spec_to_json(make_spec(DEFAULT_BUDGET, default_composition(), seed)))  # as scene.json
    distances = camera_distances(spec)
    camera = np.asarray(spec["camera"]["position_m"], dtype=float)
    assert list(distances) == sorted(int(o["instance_id"]) for o in spec["objects"])
    assert any(o["placement"] == "wall" for o in spec["objects"])  # the wall item's offset is covered
    for obj in spec["objects"]:
        expected = np.linalg.norm(_independent_centre(obj) - camera)
        assert distances[obj["instance_id"]] == pytest.approx(expected, abs=1e-9)
        low, high = object_world_bounds(obj)  # the render core's own box (what the camera framing aims at)
        assert distances[obj["instance_id"]] == pytest.approx(np.linalg.norm((low + high) / 2 - camera), abs=1e-9)
        assert 0.1 < distances[obj["instance_id"]] < 20


def test_camera_distances_without_a_camera_or_with_broken_objects():
    assert camera_distances({}) == {}
    assert camera_distances({"camera": {"position_m": [0, 0]}, "objects": []}) == {}
    scene = {
        "camera": {"position_m": [0.0, 0.0, 1.0]},
        "objects": [
            {"instance_id": 2, "position_m": [3.0, 4.0, 0.0], "yaw_deg": 0, "footprint_m": [1, 1], "height_m": 2.0},
            {"instance_id": 1, "position_m": [1.0, 0.0]},  # broken: left out
        ],
    }
    assert camera_distances(scene) == {2: pytest.approx(5.0)}
