"""Labels from the instance-id image: visible and amodal boxes, visibility, occlusion, truncation, RLE.

Pure numpy / pycocotools; no Mitsuba, no Django.

Counting rule. Every pixel count here samples the pixel centre (integer + 0.5), the rule the
label pass follows when its sampler is ``stratified`` with one sample and ``jitter = False``
(see :mod:`render.camera`): a pixel belongs to a triangle when its centre lies inside it,
with half-open spans (``left <= x < right`` on each pixel-centre row, ``top <= y < bottom``) so
triangles sharing an edge never count a pixel twice or leave a gap.

"Object alone" counts are exact scanline coverage counts of the object's projected triangles
(clipped against the near plane ``z > NEAR_CLIP_M``) with no occluders: for every pixel-centre
row the spans of all triangles are merged (union), so overlapping front and back faces are not
double-counted. The in-frame count restricts rows to ``[0, H)`` and spans to ``[0, W)``; the
unbounded count rasterizes on a canvas over the projection's own bounding box (see
:func:`coverage_px`). When the projection is huge (an object brushing the lens), the unbounded
count uses an s-times coarser lattice and multiplies by s²; the in-frame count stays exact.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from pycocotools import mask as mask_utils

from .camera import NEAR_CLIP_M
from .reasons import box_reason, visible_fraction_reason
from .rounding import round_floats

#: Largest canvas (pixels) and most (triangle, row) pairs for an exact unbounded count.
MAX_CANVAS_PX = 4_000_000
MAX_SPAN_PAIRS = 300_000
#: Pixel coordinates are clipped to ± this (far beyond any frame) to keep integer arithmetic safe.
_COORD_LIMIT = float(2**36)


# ---------------------------------------------------------------------------------------------------------------------
# RLE helpers (COCO)
# ---------------------------------------------------------------------------------------------------------------------


def mask_to_rle(mask: np.ndarray) -> dict[str, Any]:
    """COCO run-length encoding of a boolean (H, W) mask, ``counts`` as an ASCII str (JSON-able).

    References
    ----------
    COCO data format, "segmentation" RLE (cocodataset.org/#format-data); ``pycocotools.mask.encode``.
    """
    mask = np.asarray(mask)
    # A bool mask that is already column-major (see instance_labels) is encoded without a copy.
    mask = mask.view(np.uint8) if mask.dtype == np.bool_ else mask.astype(np.uint8)
    rle = mask_utils.encode(np.asfortranarray(mask))
    return {"size": [int(rle["size"][0]), int(rle["size"][1])], "counts": rle["counts"].decode("ascii")}


def _as_pycocotools(rle: dict[str, Any]) -> dict[str, Any]:
    counts = rle["counts"]
    return {"size": list(rle["size"]), "counts": counts.encode("ascii") if isinstance(counts, str) else counts}


def rle_area(rle: dict[str, Any]) -> int:
    """Pixel area of a COCO RLE (``pycocotools.mask.area``)."""
    return int(mask_utils.area(_as_pycocotools(rle)))


def rle_to_bbox(rle: dict[str, Any]) -> list[float]:
    """COCO ``[x, y, w, h]`` (pixels) of a COCO RLE (``pycocotools.mask.toBbox``)."""
    return [float(v) for v in mask_utils.toBbox(_as_pycocotools(rle))]


def mask_bbox(mask: np.ndarray) -> list[float] | None:
    """COCO ``[x, y, w, h]`` of a boolean mask (w = last column − first column + 1), None if empty.

    Same convention as ``pycocotools.mask.toBbox``: the box spans whole pixels.
    """
    rows = np.flatnonzero(mask.any(axis=1))
    if not len(rows):
        return None
    cols = np.flatnonzero(mask.any(axis=0))
    return [float(cols[0]), float(rows[0]), float(cols[-1] - cols[0] + 1), float(rows[-1] - rows[0] + 1)]


# ---------------------------------------------------------------------------------------------------------------------
# Projection with near-plane clipping
# ---------------------------------------------------------------------------------------------------------------------


def project_triangles(
    triangles_world: np.ndarray, R: np.ndarray, t: np.ndarray, K: np.ndarray, *, near_m: float = NEAR_CLIP_M
) -> np.ndarray:
    """Project world triangles to pixels after clipping them against the plane camera z = ``near_m``.

    A triangle with one vertex behind the plane becomes two triangles (a quad), one with two
    vertices behind becomes a smaller triangle, one with all three behind is dropped (Sutherland–
    Hodgman clipping against one plane).

    Parameters
    ----------
    triangles_world : numpy.ndarray, shape (N, 3, 3)
        Triangles in world coordinates (m).
    R, t, K : numpy.ndarray
        OpenCV extrinsics and intrinsics (see :mod:`render.camera`).
    near_m : float
        Near-plane distance (m).

    Returns
    -------
    numpy.ndarray, shape (M, 3, 2)
        Triangles in pixel coordinates (pixel centres at integer + 0.5), not clipped to the frame.

    References
    ----------
    Sutherland & Hodgman, "Reentrant polygon clipping", *Comm. ACM* 17(1), 1974; pinhole
    projection as in :func:`render.camera.project_points`.
    """
    tri = np.asarray(triangles_world, dtype=float).reshape(-1, 3, 3)
    cam = tri @ np.asarray(R, dtype=float).T + np.asarray(t, dtype=float)
    front = cam[..., 2] > near_m
    n_front = front.sum(axis=1)
    pieces = [cam[n_front == 3]]

    def cut(a: np.ndarray, b: np.ndarray) -> np.ndarray:  # point on segment a→b at z = near
        s = (near_m - a[:, 2]) / (b[:, 2] - a[:, 2])
        return a + s[:, None] * (b - a)

    for count in (1, 2):
        sel = n_front == count
        if not sel.any():
            continue
        sub, fr = cam[sel], front[sel]
        # Rotate each triangle so that the odd vertex (the lone front one, or the lone back one) is first;
        # cyclic rotation keeps the winding.
        odd = np.argmax(fr if count == 1 else ~fr, axis=1)
        order = (odd[:, None] + np.arange(3)[None, :]) % 3
        v = np.take_along_axis(sub, order[:, :, None], axis=1)
        a, b, c = v[:, 0], v[:, 1], v[:, 2]
        if count == 1:  # a in front: triangle a, ab, ac
            pieces.append(np.stack([a, cut(a, b), cut(a, c)], axis=1))
        else:  # a behind, b and c in front: quad ab, b, c, ca
            ab, ca = cut(b, a), cut(c, a)
            pieces.append(np.stack([ab, b, c], axis=1))
            pieces.append(np.stack([ab, c, ca], axis=1))
    clipped = np.concatenate(pieces, axis=0)
    z = np.maximum(clipped[..., 2], near_m * 0.5)
    u = K[0, 0] * clipped[..., 0] / z + K[0, 1] * clipped[..., 1] / z + K[0, 2]
    v = K[1, 1] * clipped[..., 1] / z + K[1, 2]
    return np.stack([u, v], axis=-1)


# ---------------------------------------------------------------------------------------------------------------------
# Scanline coverage
# ---------------------------------------------------------------------------------------------------------------------


def _halves(tri_px: np.ndarray) -> tuple[np.ndarray, ...]:
    """Split y-sorted triangles into upper and lower halves bounded by one left and one right edge.

    Returns per half: first row, end row (pixel-centre rows ``[first, end)``), and for the left and
    right edges the x at the centre of the first row and dx/dy. Spans on a row are ``[ceil(xl − ½),
    ceil(xr − ½))``: the pixels whose centre satisfies ``xl <= x < xr``.
    """
    order = np.argsort(tri_px[..., 1], axis=1, kind="stable")
    v = np.clip(np.take_along_axis(tri_px, order[:, :, None], axis=1), -_COORD_LIMIT, _COORD_LIMIT)
    x0, y0, x1, y1, x2, y2 = v[:, 0, 0], v[:, 0, 1], v[:, 1, 0], v[:, 1, 1], v[:, 2, 0], v[:, 2, 1]

    def slope(xa, ya, xb, yb):
        dy = yb - ya
        return np.where(dy > 0, (xb - xa) / np.where(dy > 0, dy, 1.0), 0.0)

    s02, s01, s12 = slope(x0, y0, x2, y2), slope(x0, y0, x1, y1), slope(x1, y1, x2, y2)
    r0, r1, r2 = (np.ceil(y - 0.5) for y in (y0, y1, y2))
    # x of each edge at the centre of the half's first row
    long_up = x0 + (r0 + 0.5 - y0) * s02
    long_low = x0 + (r1 + 0.5 - y0) * s02
    short_up = x0 + (r0 + 0.5 - y0) * s01
    short_low = x1 + (r1 + 0.5 - y1) * s12
    short_is_left = x1 < x0 + (y1 - y0) * s02  # the middle vertex lies left of the long edge
    first = np.concatenate([r0, r1]).astype(np.int64)
    end = np.concatenate([r1, r2]).astype(np.int64)
    left_x = np.concatenate([np.where(short_is_left, short_up, long_up), np.where(short_is_left, short_low, long_low)])
    left_s = np.concatenate([np.where(short_is_left, s01, s02), np.where(short_is_left, s12, s02)])
    right_x = np.concatenate([np.where(short_is_left, long_up, short_up), np.where(short_is_left, long_low, short_low)])
    right_s = np.concatenate([np.where(short_is_left, s02, s01), np.where(short_is_left, s02, s12)])
    return first, end, left_x, left_s, right_x, right_s


def _coverage(halves: tuple[np.ndarray, ...], row_lo: int, row_hi: int, col_lo: int, col_hi: int) -> np.ndarray:
    """Boolean coverage of rows ``[row_lo, row_hi)`` × columns ``[col_lo, col_hi)`` (union of all halves)."""
    first, end, left_x, left_s, right_x, right_s = halves
    n_rows, n_cols = max(row_hi - row_lo, 0), max(col_hi - col_lo, 0)
    if n_rows == 0 or n_cols == 0:
        return np.zeros((n_rows, n_cols), dtype=bool)
    skip = np.maximum(row_lo - first, 0)  # rows cut off above the window
    counts = np.maximum(np.minimum(end, row_hi) - (first + skip), 0)
    total = int(counts.sum())
    if total == 0:
        return np.zeros((n_rows, n_cols), dtype=bool)
    starts = np.cumsum(counts) - counts
    local = (np.arange(total) - np.repeat(starts - skip, counts)).astype(float)  # rows below the half's first
    row_offset = np.repeat((first - row_lo) * (n_cols + 1), counts) + (local.astype(np.int64) * (n_cols + 1))
    a = np.ceil(np.repeat(left_x, counts) + local * np.repeat(left_s, counts) - 0.5)
    b = np.ceil(np.repeat(right_x, counts) + local * np.repeat(right_s, counts) - 0.5)
    a = np.clip(a, col_lo, col_hi).astype(np.int64) - col_lo
    b = np.clip(b, col_lo, col_hi).astype(np.int64) - col_lo
    keep = b > a
    size = n_rows * (n_cols + 1)
    starts_idx, ends_idx = row_offset[keep] + a[keep], row_offset[keep] + b[keep]
    diff = np.bincount(starts_idx, minlength=size) - np.bincount(ends_idx, minlength=size)
    return np.cumsum(diff.reshape(n_rows, n_cols + 1), axis=1)[:, :n_cols] > 0


def rasterize_triangles(triangles_px: np.ndarray, width_px: int, height_px: int) -> np.ndarray:
    """Boolean (H, W) mask of pixels whose centre lies in any of the triangles (union, any winding).

    Scanline fill with half-open spans; the union comes from a per-row difference array (+1 at a
    span's start, −1 at its end, covered where the running sum is positive).

    References
    ----------
    Scanline polygon fill (Foley, van Dam et al., *Computer Graphics: Principles and Practice*,
    2nd ed., §3.6, from memory).
    """
    tri = np.asarray(triangles_px, dtype=float).reshape(-1, 3, 2)
    if not len(tri):
        return np.zeros((height_px, width_px), dtype=bool)
    return _coverage(_halves(tri), 0, height_px, 0, width_px)


def coverage_px(triangles_px: np.ndarray, width_px: int, height_px: int) -> tuple[int, float]:
    """Pixel-centre coverage of projected triangles: ``(in_frame_px, unbounded_px)``.

    The union is rasterized on a canvas covering the projection's own bounding box, so pixels
    outside the frame are counted without an image-sized margin. ``in_frame_px`` is always exact;
    ``unbounded_px`` is exact unless the canvas would exceed :data:`MAX_CANVAS_PX` cells or
    :data:`MAX_SPAN_PAIRS` triangle-row pairs (an object brushing the lens), in which case it is
    counted on a lattice s times coarser and scaled by s² (an estimate, never below ``in_frame_px``).
    """
    tri = np.asarray(triangles_px, dtype=float).reshape(-1, 3, 2)
    if not len(tri):
        return 0, 0.0
    tri = np.clip(tri, -_COORD_LIMIT, _COORD_LIMIT)
    lo, hi = tri.reshape(-1, 2).min(axis=0), tri.reshape(-1, 2).max(axis=0)
    col_lo, row_lo = (int(v) for v in np.ceil(lo - 0.5))
    col_hi, row_hi = (int(v) for v in np.ceil(hi - 0.5))
    halves = _halves(tri)
    cells = float(row_hi - row_lo) * float(col_hi - col_lo)
    pairs = float(np.maximum(halves[1] - halves[0], 0).sum())
    if cells <= MAX_CANVAS_PX and pairs <= MAX_SPAN_PAIRS:
        mask = _coverage(halves, row_lo, row_hi, col_lo, col_hi)
        window = mask[max(0, -row_lo) : max(0, height_px - row_lo), max(0, -col_lo) : max(0, width_px - col_lo)]
        return int(window.sum()), float(mask.sum())
    in_frame = int(_coverage(halves, 0, height_px, 0, width_px).sum())
    step = math.ceil(max(math.sqrt(cells / MAX_CANVAS_PX), pairs / MAX_SPAN_PAIRS, 1.0))
    coarse = tri / step
    lo, hi = lo / step, hi / step
    coarse_mask = _coverage(
        _halves(coarse), math.ceil(lo[1] - 0.5), math.ceil(hi[1] - 0.5), math.ceil(lo[0] - 0.5), math.ceil(hi[0] - 0.5)
    )
    return in_frame, max(float(coarse_mask.sum()) * step * step, float(in_frame))


# ---------------------------------------------------------------------------------------------------------------------
# Instance labels
# ---------------------------------------------------------------------------------------------------------------------


ACCEPTANCE_KEYS = ("min_visible_fraction", "min_box_px", "min_contrast")


def thresholds_for_class(
    class_name: str, thresholds: Mapping[str, Any], class_thresholds: Mapping[str, Mapping[str, Any]] | None = None
) -> dict[str, float]:
    """The acceptance thresholds of one class: the budget's, overridden by ``thresholds["per_class"]``, then by
    ``class_thresholds``. Missing thresholds are 0 (nothing rejected on them)."""
    merged = {k: v for k, v in thresholds.items() if k in ACCEPTANCE_KEYS}
    for overrides in (thresholds.get("per_class") or {}, class_thresholds or {}):
        merged.update(overrides.get(class_name, {}))
    return {key: float(merged.get(key, 0.0)) for key in ACCEPTANCE_KEYS}


def instance_labels(
    instance_image: np.ndarray,
    objects: list[dict[str, Any]],
    triangles_world: Mapping[int, np.ndarray],
    R: np.ndarray,
    t: np.ndarray,
    K: np.ndarray,
    thresholds: Mapping[str, Any],
    *,
    class_thresholds: Mapping[str, Mapping[str, Any]] | None = None,
    near_m: float = NEAR_CLIP_M,
) -> list[dict[str, Any]]:
    """Per-instance labels for one frame.

    Parameters
    ----------
    instance_image : numpy.ndarray, uint16, shape (H, W)
        Label-pass ids: 0 background, else ``instance_id`` (pixel-centre sampled).
    objects : list of dict
        Placed objects (``instance_id``, ``class_name``, ``asset_id``).
    triangles_world : mapping of int to numpy.ndarray (N, 3, 3)
        World triangles of each instance, keyed by ``instance_id`` (missing: treated as no geometry).
    R, t, K : numpy.ndarray
        Camera of the frame (OpenCV convention).
    thresholds : mapping
        ``min_visible_fraction`` and ``min_box_px``; an optional ``per_class`` mapping
        ``{class_name: {field: value}}`` overrides them per class.
    class_thresholds : mapping, optional
        More per-class overrides (win over ``thresholds["per_class"]``).
    near_m : float
        Near plane for the amodal projection (Mitsuba's default near clip).

    Returns
    -------
    list of dict, in the order of ``objects``
        ``instance_id``, ``class_name``, ``asset_id``;
        ``bbox`` — visible box ``[x, y, w, h]`` (pixels, COCO, from the mask; None if not visible);
        ``amodal_bbox`` — ``[x, y, w, h]`` of the whole near-clipped projection, not clipped to the
        frame (continuous pixel coordinates; None if nothing is in front of the camera);
        ``mask_area_px``; ``alone_in_frame_px`` and ``alone_px`` — the object's pixel-centre
        coverage without occluders, in frame and on the unbounded image plane;
        ``visible_fraction`` = mask_area / alone_px; ``occlusion_fraction`` =
        1 − mask_area / alone_in_frame_px; ``truncation_fraction`` = 1 − alone_in_frame_px / alone_px;
        ``segmentation`` (COCO RLE, counts as str); ``accepted``; ``reject_reasons``.
        Fractions are clamped to [0, 1]; floats rounded to 6 decimals.

    References
    ----------
    COCO data format (bbox xywh, RLE segmentation); amodal boxes as in Zhu et al., "Semantic
    Amodal Segmentation", CVPR 2017; truncation/occlusion as in the KITTI object benchmark
    (Geiger et al., CVPR 2012), here measured as pixel fractions.
    """
    image = np.asarray(instance_image)
    height_px, width_px = image.shape
    image_t = np.ascontiguousarray(image.T)  # masks as column-major views: what pycocotools encodes
    results = []
    for obj in objects:
        instance_id = int(obj["instance_id"])
        mask = (image_t == instance_id).T
        bbox = mask_bbox(mask)
        area = int(np.count_nonzero(mask)) if bbox is not None else 0
        tris = triangles_world.get(instance_id)
        projected = project_triangles(tris, R, t, K, near_m=near_m) if tris is not None else np.zeros((0, 3, 2))
        if len(projected):
            lo, hi = projected.reshape(-1, 2).min(axis=0), projected.reshape(-1, 2).max(axis=0)
            amodal = [
                round_floats(lo[0]),
                round_floats(lo[1]),
                round_floats(hi[0] - lo[0]),
                round_floats(hi[1] - lo[1]),
            ]
        else:
            amodal = None
        in_frame_px, alone_px = coverage_px(projected, width_px, height_px)
        # The label pass and our rasterizer agree up to pixels whose centre sits on an edge; never let
        # the visible area exceed the object-alone area.
        outside_px = alone_px - in_frame_px
        in_frame_px = max(in_frame_px, area)
        alone_px = in_frame_px + outside_px
        visible_fraction = area / alone_px if alone_px > 0 else 0.0
        occlusion = 1.0 - area / in_frame_px if in_frame_px > 0 else 0.0
        truncation = 1.0 - in_frame_px / alone_px if alone_px > 0 else 1.0

        rule = thresholds_for_class(obj.get("class_name", ""), thresholds, class_thresholds)
        min_visible, min_box = rule["min_visible_fraction"], rule["min_box_px"]
        reasons = []
        if bbox is None or area == 0:  # no bbox means no pixel (area 0)
            reasons.append("not visible")
        else:
            for reason in (
                visible_fraction_reason(visible_fraction, min_visible_fraction=min_visible),
                box_reason(min(bbox[2], bbox[3]), min_box_px=min_box),
            ):
                if reason:
                    reasons.append(reason)
        results.append(
            {
                "instance_id": instance_id,
                "class_name": obj.get("class_name"),
                "asset_id": obj.get("asset_id"),
                "bbox": bbox,
                "amodal_bbox": amodal,
                "mask_area_px": area,
                "alone_in_frame_px": int(in_frame_px),
                "alone_px": round_floats(alone_px),
                "visible_fraction": round_floats(min(max(visible_fraction, 0.0), 1.0)),
                "occlusion_fraction": round_floats(min(max(occlusion, 0.0), 1.0)),
                "truncation_fraction": round_floats(min(max(truncation, 0.0), 1.0)),
                "segmentation": mask_to_rle(mask),
                "accepted": not reasons,
                "reject_reasons": reasons,
            }
        )
    return results
