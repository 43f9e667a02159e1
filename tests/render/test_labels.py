"""Label checks against pycocotools, shapely, analytic areas and a Mitsuba 3 label pass."""

from __future__ import annotations

import time

import numpy as np
import pytest
import shapely
from pycocotools import mask as mask_utils

from render import camera, labels

WIDTH, HEIGHT = 64, 48
# A camera at the origin looking along +z with OpenCV axes = world axes, f = 100 px.
R0, T0 = np.eye(3), np.zeros(3)
K0 = np.array([[100.0, 0.0, WIDTH / 2], [0.0, 100.0, HEIGHT / 2], [0.0, 0.0, 1.0]])
DEPTH = 5.0


def _square_triangles(u0: float, v0: float, u1: float, v1: float, depth: float = DEPTH) -> np.ndarray:
    """World triangles of a square facing the camera R0, T0, K0 that projects onto [u0, u1] × [v0, v1] px."""
    x0, x1 = (u0 - K0[0, 2]) * depth / 100.0, (u1 - K0[0, 2]) * depth / 100.0
    y0, y1 = (v0 - K0[1, 2]) * depth / 100.0, (v1 - K0[1, 2]) * depth / 100.0
    a, b, c, d = [x0, y0, depth], [x1, y0, depth], [x1, y1, depth], [x0, y1, depth]
    return np.array([[a, b, c], [a, c, d]], dtype=float)


def _box_triangles(lo, hi) -> np.ndarray:
    """12 triangles of an axis-aligned box (closed mesh: front and back faces overlap in projection)."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    corner = [np.where(np.array([i, j, k]) == 0, lo, hi) for i in (0, 1) for j in (0, 1) for k in (0, 1)]
    quads = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
    return np.array([[corner[q[0]], corner[q[i]], corner[q[i + 1]]] for q in quads for i in (1, 2)])


OBJ = [
    {"instance_id": 7, "class_name": "chair", "asset_id": "chair-1"},
    {"instance_id": 9, "class_name": "table", "asset_id": "table-1"},
]
THRESHOLDS = {"min_visible_fraction": 0.25, "min_box_px": 16.0}


@pytest.mark.filterwarnings("ignore::DeprecationWarning")  # pycocotools.mask.decode under numpy 2
def test_boxes_and_areas_match_pycocotools():
    # Reference: pycocotools.mask.toBbox / area / decode on our RLE (COCO data format).
    rng = np.random.default_rng(0)
    image = np.zeros((HEIGHT, WIDTH), dtype=np.uint16)
    image[5:30, 3:20] = 1
    image[10:15, 8:12] = 0  # a hole
    image[0:48, 60:64] = 2  # touches the right, top and bottom edges
    image[40:48, 0:5] = 3  # bottom-left corner
    image[rng.random((HEIGHT, WIDTH)) < 0.02] = 4  # scattered pixels
    for instance_id in (1, 2, 3, 4):
        mask = image == instance_id
        rle = labels.mask_to_rle(mask)
        assert isinstance(rle["counts"], str)
        coco = {"size": rle["size"], "counts": rle["counts"].encode()}
        assert labels.mask_bbox(mask) == pytest.approx(mask_utils.toBbox(coco).tolist())
        assert labels.rle_to_bbox(rle) == pytest.approx(mask_utils.toBbox(coco).tolist())
        assert labels.rle_area(rle) == int(mask_utils.area(coco)) == int(mask.sum())
        np.testing.assert_array_equal(mask_utils.decode(coco).astype(bool), mask)


def test_rasterizer_matches_shapely_pixel_centres():
    # Reference: shapely union of the triangles, tested at every pixel centre (pixels whose centre is
    # within 1e-6 px of an edge are skipped: either answer is right).
    rng = np.random.default_rng(3)
    tris = rng.uniform(-10, 75, (40, 3, 2))
    tris[:20] = tris[:20, :1] + rng.uniform(-6, 6, (20, 3, 2))  # small ones too
    ours = labels.rasterize_triangles(tris, WIDTH, HEIGHT)
    union = shapely.union_all([shapely.Polygon(t) for t in tris])
    jj, ii = np.mgrid[0:HEIGHT, 0:WIDTH]
    xs, ys = ii.ravel() + 0.5, jj.ravel() + 0.5
    inside = shapely.contains_xy(union, xs, ys).reshape(HEIGHT, WIDTH)
    boundary = shapely.distance(union.boundary, shapely.points(xs, ys)).reshape(HEIGHT, WIDTH) < 1e-6
    assert (ours != inside)[~boundary].sum() == 0
    in_frame, unbounded = labels.coverage_px(tris, WIDTH, HEIGHT)
    assert in_frame == ours.sum()
    # the unbounded count approximates the union's area (pixel-centre sampling of a large region)
    assert unbounded == pytest.approx(union.area, rel=0.02)


def test_amodal_box_and_truncation_of_square_leaving_the_frame():
    # Analytic: a square covering columns 40..80 of a 64-px-wide frame has 16 of its 40 columns
    # outside → truncation 0.4; its amodal box extends beyond the frame.
    tris = {7: _square_triangles(40.0, 10.0, 80.0, 30.0)}
    image = np.zeros((HEIGHT, WIDTH), dtype=np.uint16)
    image[10:30, 40:64] = 7
    (label,) = labels.instance_labels(image, OBJ[:1], tris, R0, T0, K0, THRESHOLDS)
    assert label["amodal_bbox"] == pytest.approx([40.0, 10.0, 40.0, 20.0])
    assert label["bbox"] == [40.0, 10.0, 24.0, 20.0]
    assert label["alone_px"] == 800 and label["alone_in_frame_px"] == 480
    assert label["truncation_fraction"] == pytest.approx(0.4)
    assert label["occlusion_fraction"] == 0.0
    assert label["visible_fraction"] == pytest.approx(0.6)
    assert label["accepted"] and label["reject_reasons"] == []


def test_occluded_square_visible_fraction():
    # Analytic: a 20 × 20 px square with its right half hidden by a nearer one → visible 0.5, occlusion 0.5.
    tris = {7: _square_triangles(10.0, 10.0, 30.0, 30.0), 9: _square_triangles(20.0, 5.0, 45.0, 35.0, depth=3.0)}
    image = np.zeros((HEIGHT, WIDTH), dtype=np.uint16)
    image[10:30, 10:30] = 7
    image[5:35, 20:45] = 9
    chair, table = labels.instance_labels(image, OBJ, tris, R0, T0, K0, THRESHOLDS)
    assert chair["mask_area_px"] == 200 and chair["alone_px"] == 400
    assert chair["visible_fraction"] == pytest.approx(0.5) and chair["occlusion_fraction"] == pytest.approx(0.5)
    assert chair["truncation_fraction"] == 0.0
    assert chair["amodal_bbox"] == pytest.approx([10.0, 10.0, 20.0, 20.0])
    assert chair["bbox"] == [10.0, 10.0, 10.0, 20.0]
    assert chair["accepted"] is False and chair["reject_reasons"] == ["box 10 px < 16 px"]
    assert table["visible_fraction"] == 1.0 and table["accepted"]
    # per-class override relaxes the box rule for chairs only
    per_class = {**THRESHOLDS, "per_class": {"chair": {"min_box_px": 8}}}
    relaxed = labels.instance_labels(image, OBJ, tris, R0, T0, K0, per_class)
    assert relaxed[0]["accepted"] is True


def test_reject_reasons_and_invisible_instances():
    tris = {7: _square_triangles(10.0, 10.0, 30.0, 30.0), 9: _square_triangles(40.0, 10.0, 60.0, 30.0)}
    image = np.zeros((HEIGHT, WIDTH), dtype=np.uint16)
    image[10:14, 10:30] = 7  # 80 of 400 px visible
    chair, table = labels.instance_labels(image, OBJ, tris, R0, T0, K0, THRESHOLDS)
    assert chair["reject_reasons"] == ["visible_fraction 0.20 < 0.25", "box 4 px < 16 px"]
    assert table["accepted"] is False and table["reject_reasons"] == ["not visible"]
    assert table["bbox"] is None and table["mask_area_px"] == 0 and table["occlusion_fraction"] == 1.0
    assert labels.rle_area(table["segmentation"]) == 0


def test_near_plane_clipping_and_objects_behind_camera():
    # A square straddling the camera plane: only the part in front projects; all-behind gives no amodal box.
    behind = {7: _square_triangles(10, 10, 30, 30) * np.array([1, 1, -1])}
    (label,) = labels.instance_labels(np.zeros((HEIGHT, WIDTH), np.uint16), OBJ[:1], behind, R0, T0, K0, THRESHOLDS)
    assert label["amodal_bbox"] is None and label["truncation_fraction"] == 1.0 and label["visible_fraction"] == 0.0
    floor = np.array(
        [[[-1.0, 1.0, -2.0], [1.0, 1.0, -2.0], [1.0, 1.0, 2.0]], [[-1.0, 1.0, -2.0], [1.0, 1.0, 2.0], [-1.0, 1.0, 2.0]]]
    )
    projected = labels.project_triangles(floor, R0, T0, K0, near_m=0.5)
    z_free = np.asarray(projected)
    assert len(z_free) == 3  # one triangle with one vertex behind → quad (2), the other → 1 triangle
    assert z_free[..., 1].max() == pytest.approx(K0[1, 2] + 100.0 * 1.0 / 0.5)  # the cut edge at z = 0.5
    assert z_free[..., 1].min() == pytest.approx(K0[1, 2] + 100.0 * 1.0 / 2.0)


def test_labels_are_fast_and_deterministic():
    # Budget: ≲ 30 ms for 8 objects of ~2000 triangles at 640×480.
    rng = np.random.default_rng(0)
    spec = {
        "position_m": [0.5, 0.5, 1.5],
        "target_m": [3.0, 3.0, 0.5],
        "up": [0, 0, 1],
        "focal_length_mm": 24.0,
        "sensor_width_mm": 36.0,
    }
    R, t, K = camera.camera_matrices(spec, 640, 480)
    objects, tris = [], {}
    for i in range(8):
        centre = np.array([1.5 + 0.4 * i, 3.5 - 0.3 * i, 0.4])
        verts = rng.normal(size=(2000, 3, 3)) * 0.05 + centre + rng.normal(size=(2000, 1, 3)) * 0.25
        tris[i + 1] = verts
        objects.append({"instance_id": i + 1, "class_name": "thing", "asset_id": f"a{i}"})
    image = np.zeros((480, 640), dtype=np.uint16)
    for i in range(8):  # paint each object's own coverage, later ones on top (occluders)
        image[labels.rasterize_triangles(labels.project_triangles(tris[i + 1], R, t, K), 640, 480)] = i + 1
    first = labels.instance_labels(image, objects, tris, R, t, K, THRESHOLDS)
    start = time.perf_counter()
    for _ in range(5):
        again = labels.instance_labels(image, objects, tris, R, t, K, THRESHOLDS)
    elapsed = (time.perf_counter() - start) / 5
    assert again == first
    assert elapsed < 0.1, elapsed  # ≈ 20 ms unloaded; slack for busy CI machines
    assert first[-1]["occlusion_fraction"] == 0.0 and first[-1]["visible_fraction"] > 0


def test_mitsuba_label_pass_agrees_with_rasterizer():
    # Reference: a Mitsuba 3 render (aov depth, 1 centred sample per pixel) of a rotated box; its
    # coverage must equal our pixel-centre rasterization of the same triangles.
    mi = pytest.importorskip("mitsuba")
    mi.set_variant("scalar_rgb")
    width_px, height_px = 80, 60
    spec = {
        "position_m": [2.2, -1.4, 1.3],
        "target_m": [0.1, 0.2, 0.3],
        "up": [0, 0, 1],
        "focal_length_mm": 30.0,
        "sensor_width_mm": 36.0,
    }
    params = camera.mitsuba_sensor_params({**spec, "f_number": 4.0, "focus_distance_m": 2.0}, width_px, height_px)
    lo, hi = np.array([-0.5, -0.3, 0.0]), np.array([0.6, 0.5, 0.9])
    to_world = mi.ScalarTransform4f().translate(((lo + hi) / 2).tolist()).scale(((hi - lo) / 2).tolist())
    scene = mi.load_dict(
        {
            "type": "scene",
            "integrator": {"type": "aov", "aovs": "d:depth"},
            "sensor": {
                "type": "perspective",
                "fov": params["fov"],
                "fov_axis": params["fov_axis"],
                "to_world": mi.ScalarTransform4f().look_at(
                    origin=params["origin"], target=params["target"], up=params["up"]
                ),
                "sampler": {"type": "stratified", "sample_count": 1, "jitter": False},
                "film": {"type": "hdrfilm", "width": width_px, "height": height_px, "rfilter": {"type": "box"}},
            },
            "box": {"type": "cube", "to_world": to_world},
        }
    )
    covered_mi = np.array(mi.render(scene))[..., 0] > 0
    R, t, K = camera.camera_matrices(spec, width_px, height_px)
    ours = labels.rasterize_triangles(labels.project_triangles(_box_triangles(lo, hi), R, t, K), width_px, height_px)
    assert covered_mi.sum() > 300
    assert (covered_mi != ours).sum() == 0
