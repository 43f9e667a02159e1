"""Dataset statistics (pure: no Django, no database): an accumulator fed one image at a time.

:class:`DatasetStatistics` counts what a trainer wants to know about a detection dataset before training on it —
box sizes with the COCO small / medium / large limits, visible, occluded and truncated fractions per class,
instances per image, which classes share images, where box centres fall in the image, and how far the objects
were from the camera — into fixed histograms, so its memory does not grow with the number of images (an export of
a million frames feeds it frame by frame). :meth:`DatasetStatistics.as_json` gives every histogram with its edges
and units spelled out, counts as ints.

:func:`camera_distances` reads a frame's scene spec (``scene.json``, :func:`render.spec.make_spec`) for the
distance from the camera centre to each labelled object's centre, keyed by the instance id the labels use.

Units: pixels (px) and px² for boxes and areas, image-normalised coordinates (0–1) for box centres, metres (m)
for distances; fractions are shares in [0, 1].

References
----------
COCO detection evaluation, https://cocodataset.org/#detection-eval (from memory): "small" objects have an area
below 32² px, "medium" between 32² and 96², "large" above 96²; the area is the ``area`` field of the annotation,
which for segmented objects is the mask area, not the box area. pycocotools' ``COCOeval`` (``Params.areaRng``:
``[0², 32²]``, ``[32², 96²]``, ``[96², 1e5²]``) tests ``area < lo or area > hi`` for "outside", so its ranges are
closed at both ends and an area of exactly 32² or 96² px² counts in two of them; a histogram needs a partition,
so here the ranges are half open: small ``[0, 32²)``, medium ``[32², 96²)``, large ``[96², ∞)``. Mask areas are
whole pixels, so only the two boundary values themselves are affected.
"""

from __future__ import annotations

import math
from bisect import bisect_right
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

FORMAT = "evenframe.dataset_statistics"
FORMAT_VERSION = 1

#: COCO area limits (px², mask area): small < 32², medium 32² to < 96², large ≥ 96² (see the module references).
COCO_SMALL_MAX_AREA_PX = 32**2
COCO_MEDIUM_MAX_AREA_PX = 96**2
SIZE_CLASSES: tuple[str, ...] = ("small", "medium", "large")
_SIZE_CLASS_INDEX = {name: i for i, name in enumerate(SIZE_CLASSES)}

#: Box size histogram: edges of √(mask area) in px (the side of a square of the same area); the COCO limits 32
#: and 96 are edges, so the bins nest in the size classes. A last, open bin holds √area ≥ 512 px.
BOX_SIDE_EDGES_PX: tuple[int, ...] = (0, 8, 16, 24, 32, 48, 64, 96, 128, 192, 256, 384, 512)
_BOX_AREA_EDGES_PX2: tuple[int, ...] = tuple(e * e for e in BOX_SIDE_EDGES_PX)

#: Fraction histograms: 10 bins of width 0.1 on [0, 1]; bin i holds edges[i] ≤ f < edges[i + 1], the last bin
#: also f = 1 (as numpy.histogram does).
FRACTION_BINS = 10
FRACTION_EDGES: tuple[float, ...] = tuple(i / FRACTION_BINS for i in range(FRACTION_BINS + 1))

#: Camera distance histogram: 0.5 m bins on [0, 10) m, then one overflow bin for ≥ 10 m.
DISTANCE_BIN_M = 0.5
DISTANCE_MAX_M = 10.0
DISTANCE_EDGES_M: tuple[float, ...] = tuple(i * DISTANCE_BIN_M for i in range(int(DISTANCE_MAX_M / DISTANCE_BIN_M) + 1))

#: Box-centre heatmap: 16 columns × 12 rows over the image (4:3 cells on a 4:3 image).
CENTRE_GRID_COLUMNS = 16
CENTRE_GRID_ROWS = 12
CENTRE_X_EDGES: tuple[float, ...] = tuple(i / CENTRE_GRID_COLUMNS for i in range(CENTRE_GRID_COLUMNS + 1))
CENTRE_Y_EDGES: tuple[float, ...] = tuple(i / CENTRE_GRID_ROWS for i in range(CENTRE_GRID_ROWS + 1))


@dataclass(frozen=True)
class StatInstance:
    """One labelled object of an image, as the statistics need it.

    Attributes
    ----------
    category : str
        Class name (one of the accumulator's ``class_names``).
    bbox : sequence of 4 floats
        COCO ``[x, y, w, h]`` of the visible pixels, px, origin at the image's top-left corner, y down.
    area_px : int
        Mask area, px² (whole pixels): the COCO ``area`` field.
    visible_fraction, truncation_fraction, occlusion_fraction : float
        Shares in [0, 1] (render core, :mod:`render.labels`): visible pixels over the object's whole projection;
        the part of the projection outside the image; the part inside the image hidden by other things.
    distance_m : float or None
        Camera centre to the object's centre, m (:func:`camera_distances`); None when unknown.
    """

    category: str
    bbox: Sequence[float]
    area_px: int
    visible_fraction: float
    truncation_fraction: float
    occlusion_fraction: float
    distance_m: float | None = None

    def __post_init__(self) -> None:
        isfinite = math.isfinite
        try:
            x, y, w, h = (float(v) for v in self.bbox)
        except (TypeError, ValueError):
            raise ValueError(f"bbox must be 4 numbers [x, y, w, h], got {self.bbox!r}") from None
        if not (isfinite(x) and isfinite(y) and isfinite(w) and isfinite(h)) or w < 0 or h < 0:
            raise ValueError(f"bbox must be 4 finite numbers [x, y, w ≥ 0, h ≥ 0], got {list(self.bbox)!r}")
        if int(self.area_px) < 0:
            raise ValueError(f"area_px must not be negative, got {self.area_px!r}")
        if not (
            isfinite(self.visible_fraction) and isfinite(self.truncation_fraction) and isfinite(self.occlusion_fraction)
        ):
            raise ValueError(
                "fractions must be finite numbers, got "
                f"{self.visible_fraction!r}, {self.truncation_fraction!r}, {self.occlusion_fraction!r}"
            )
        if self.distance_m is not None and not (isfinite(self.distance_m) and self.distance_m >= 0):
            raise ValueError(f"distance_m must be a finite number ≥ 0 or None, got {self.distance_m!r}")


def size_class(area_px: int) -> str:
    """COCO size class of a mask area (px²): "small" below 32², "medium" below 96², else "large"."""
    if area_px < COCO_SMALL_MAX_AREA_PX:
        return "small"
    if area_px < COCO_MEDIUM_MAX_AREA_PX:
        return "medium"
    return "large"


def _bin(edges: Sequence[float], value: float) -> int:
    """Bin of ``value`` on ``edges`` (edges[i] ≤ v < edges[i + 1]; the last bin closed), clipped into range."""
    if value <= edges[0]:
        return 0
    if value >= edges[-1]:
        return len(edges) - 2
    return bisect_right(edges, value) - 1


def _box_side_bin(area_px: int) -> int:
    """Bin of √area on :data:`BOX_SIDE_EDGES_PX` (the last index is the open bin ≥ 512 px), in exact integers."""
    return bisect_right(_BOX_AREA_EDGES_PX2, int(area_px)) - 1


def _distance_bin(distance_m: float) -> int:
    """Bin on :data:`DISTANCE_EDGES_M`; the last index (one past the edges' bins) is the overflow, ≥ 10 m."""
    if distance_m >= DISTANCE_EDGES_M[-1]:
        return len(DISTANCE_EDGES_M) - 1
    return bisect_right(DISTANCE_EDGES_M, distance_m) - 1


def _zeros(n: int) -> list[int]:
    return [0] * n


class DatasetStatistics:
    """Statistics of a detection dataset, accumulated one image at a time in fixed-size histograms.

    Parameters
    ----------
    class_names : sequence of str
        Every class an instance may have, in the order the output lists them (rows and columns of the
        co-occurrence matrix). Unique.

    Notes
    -----
    Memory is O(K² + K·bins) for K classes plus one int per observed instances-per-image value, never per image
    or instance. Feeding the same images in any order gives the same :meth:`as_json`.
    """

    def __init__(self, *, class_names: Sequence[str]) -> None:
        names = [str(n) for n in class_names]
        if len(set(names)) != len(names):
            raise ValueError(f"class_names must be unique, got {names!r}")
        self.class_names: tuple[str, ...] = tuple(names)
        self._index = {name: i for i, name in enumerate(names)}
        k = len(names)
        self.images = 0
        self.instances = 0
        self._instances = _zeros(k)
        self._images_with = _zeros(k)
        self._size_classes = [_zeros(len(SIZE_CLASSES)) for _ in range(k)]
        self._box_side = [_zeros(len(BOX_SIDE_EDGES_PX)) for _ in range(k)]  # last: the open bin ≥ 512 px
        self._fractions = {
            key: [_zeros(FRACTION_BINS) for _ in range(k)]
            for key in ("visible_fraction", "occlusion_fraction", "truncation_fraction")
        }
        self._per_image: list[int] = []
        self._co_occurrence = [_zeros(k) for _ in range(k)]
        self._centres = [[_zeros(CENTRE_GRID_COLUMNS) for _ in range(CENTRE_GRID_ROWS)] for _ in range(k)]
        self._distance = [_zeros(len(DISTANCE_EDGES_M)) for _ in range(k)]  # last: the overflow bin ≥ 10 m
        self._distance_unknown = _zeros(k)
        self._sizes_px: dict[tuple[int, int], int] = {}

    def add_image(self, *, width_px: int, height_px: int, instances: Sequence[StatInstance]) -> None:
        """Count one image (px) and its instances; an image without instances counts too (0 per image).

        Raises
        ------
        ValueError
            A non-positive image size, or an instance whose category is not one of ``class_names`` (nothing of
            the image is counted then).
        """
        width_px, height_px = int(width_px), int(height_px)
        if width_px <= 0 or height_px <= 0:
            raise ValueError(f"image size must be positive, got {width_px}×{height_px} px")
        indices = []
        for inst in instances:
            if inst.category not in self._index:
                raise ValueError(f"unknown category {inst.category!r} (known: {', '.join(self.class_names)})")
            indices.append(self._index[inst.category])
        self.images += 1
        self.instances += len(indices)
        self._sizes_px[(width_px, height_px)] = self._sizes_px.get((width_px, height_px), 0) + 1
        if len(self._per_image) <= len(indices):
            self._per_image.extend(_zeros(len(indices) + 1 - len(self._per_image)))
        self._per_image[len(indices)] += 1
        present = sorted(set(indices))
        for i in present:
            self._images_with[i] += 1
            row = self._co_occurrence[i]
            for j in present:
                row[j] += 1
        for i, inst in zip(indices, instances, strict=True):
            self._instances[i] += 1
            area = int(inst.area_px)
            self._size_classes[i][_SIZE_CLASS_INDEX[size_class(area)]] += 1
            self._box_side[i][_box_side_bin(area)] += 1
            fractions = self._fractions
            fractions["visible_fraction"][i][_bin(FRACTION_EDGES, float(inst.visible_fraction))] += 1
            fractions["occlusion_fraction"][i][_bin(FRACTION_EDGES, float(inst.occlusion_fraction))] += 1
            fractions["truncation_fraction"][i][_bin(FRACTION_EDGES, float(inst.truncation_fraction))] += 1
            x, y, w, h = (float(v) for v in inst.bbox)
            column = _bin(CENTRE_X_EDGES, (x + w / 2) / width_px)
            row_index = _bin(CENTRE_Y_EDGES, (y + h / 2) / height_px)
            self._centres[i][row_index][column] += 1
            if inst.distance_m is None:
                self._distance_unknown[i] += 1
            else:
                self._distance[i][_distance_bin(float(inst.distance_m))] += 1

    def _per_class(self, rows: Sequence[Any]) -> dict[str, Any]:
        return {name: rows[i] for i, name in enumerate(self.class_names)}

    @staticmethod
    def _sum(rows: Sequence[Sequence[int]]) -> list[int]:
        return [sum(column) for column in zip(*rows, strict=True)] if rows else []

    def as_json(self) -> dict[str, Any]:
        """Everything counted, JSON-able: explicit edges and units, counts as ints, a fixed key order.

        Per-class histograms are ``{class name: [counts]}`` in ``classes`` order, and each has a ``total`` over
        the classes. Bin ``i`` of an ``edges`` list holds ``edges[i] ≤ value < edges[i + 1]``; the last bin of a
        fraction or centre histogram also holds the upper edge. Values outside a closed range are clipped into it.
        """
        k = len(self.class_names)
        fraction_meaning = {
            "visible_fraction": "visible pixels ÷ pixels of the object's whole projection (in and outside the image)",
            "occlusion_fraction": "share of the object's in-image projection hidden by other things",
            "truncation_fraction": "share of the object's projection outside the image",
        }
        fractions = {
            key: {
                "unit": "fraction (0–1)",
                "meaning": fraction_meaning[key],
                "edges": list(FRACTION_EDGES),
                "counts": self._per_class(self._fractions[key]),
                "total": self._sum(self._fractions[key]),
            }
            for key in ("visible_fraction", "occlusion_fraction", "truncation_fraction")
        }
        centre_total = [
            [sum(self._centres[c][r][col] for c in range(k)) for col in range(CENTRE_GRID_COLUMNS)]
            for r in range(CENTRE_GRID_ROWS)
        ]
        return {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "units": {
                "area": "px² (mask area: whole pixels)",
                "box_side": "px (√ of the mask area)",
                "box_centre": "image-normalised: x ÷ image width, y ÷ image height, origin top-left, y down",
                "fractions": "shares in [0, 1]",
                "distance": "m (camera centre to the object's centre)",
            },
            "classes": list(self.class_names),
            "images": self.images,
            "instances": self.instances,
            "image_sizes_px": [
                {"width_px": w, "height_px": h, "images": n} for (w, h), n in sorted(self._sizes_px.items())
            ],
            "per_class": {
                name: {"instances": self._instances[i], "images": self._images_with[i]}
                for i, name in enumerate(self.class_names)
            },
            "size_classes": {
                "quantity": "mask area (the COCO annotation's area field)",
                "unit": "px²",
                "names": list(SIZE_CLASSES),
                "ranges_px2": [
                    [0, COCO_SMALL_MAX_AREA_PX],
                    [COCO_SMALL_MAX_AREA_PX, COCO_MEDIUM_MAX_AREA_PX],
                    [COCO_MEDIUM_MAX_AREA_PX, None],
                ],
                "rule": "lo ≤ area < hi (None: no upper limit); COCO detection evaluation's small / medium / large",
                "counts": self._per_class(self._size_classes),
                "total": self._sum(self._size_classes),
            },
            "box_side": {
                "quantity": "√(mask area), the side of a square of the same area",
                "unit": "px",
                "edges": list(BOX_SIDE_EDGES_PX),
                "overflow": f"the last count is √area ≥ {BOX_SIDE_EDGES_PX[-1]} px",
                "counts": self._per_class(self._box_side),
                "total": self._sum(self._box_side),
            },
            **fractions,
            "instances_per_image": {
                "quantity": "instances in an image (all classes)",
                "values": list(range(len(self._per_image))),
                "counts": list(self._per_image),
            },
            "co_occurrence": {
                "quantity": "images holding both classes (row, column); the diagonal: images holding the class",
                "classes": list(self.class_names),
                "counts": [list(row) for row in self._co_occurrence],
            },
            "box_centres": {
                "quantity": "box centres ((x + w/2) ÷ width, (y + h/2) ÷ height) on a grid; row 0 is the top",
                "unit": "image-normalised",
                "columns": CENTRE_GRID_COLUMNS,
                "rows": CENTRE_GRID_ROWS,
                "x_edges": list(CENTRE_X_EDGES),
                "y_edges": list(CENTRE_Y_EDGES),
                "counts": self._per_class(self._centres),
                "total": centre_total,
            },
            "camera_distance": {
                "quantity": "distance from the camera centre to the object's centre (centre of its world box)",
                "unit": "m",
                "edges": list(DISTANCE_EDGES_M),
                "overflow": f"the last count is distance ≥ {DISTANCE_EDGES_M[-1]:g} m",
                "counts": self._per_class(self._distance),
                "total": self._sum(self._distance),
                "unknown": self._per_class(self._distance_unknown),
            },
        }


def object_centre_m(obj: Mapping[str, Any]) -> tuple[float, float, float]:
    """World centre (m) of a placed object of a scene spec: the centre of its axis-aligned world box.

    The box is the one the render core aims the camera with (``render.layout.object_world_bounds``, used by
    ``render.camera.object_bounds_m``): the footprint rectangle ``footprint_m`` [w, d] turned by ``yaw_deg``
    about +z at ``position_m`` [x, y, z] (the local origin: the footprint's centre on the object's base; a wall
    item's back edge, its footprint spanning local y ∈ [0, d]), from z up to z + ``height_m``. A rectangle is
    symmetric about its centre, so its axis-aligned box has the same centre: the local centre (0, 0), or
    (0, d/2) for wall items, turned by the yaw.
    """
    x, y, z = (float(v) for v in obj["position_m"])
    depth_m = float(obj["footprint_m"][1])
    local_y = depth_m / 2 if obj.get("placement") == "wall" else 0.0
    yaw = math.radians(float(obj.get("yaw_deg", 0.0)))
    return (x - math.sin(yaw) * local_y, y + math.cos(yaw) * local_y, z + float(obj["height_m"]) / 2)


def camera_distances(scene: Mapping[str, Any]) -> dict[int, float]:
    """Distance (m) from the camera centre to each labelled object's centre, keyed by instance id.

    Parameters
    ----------
    scene : mapping
        A frame's scene spec (``scene.json``; :func:`render.spec.make_spec`): ``camera.position_m`` and
        ``objects`` with ``instance_id`` (the id of the instance mask and the labels), ``position_m``,
        ``yaw_deg``, ``footprint_m``, ``height_m`` and ``placement``. Distractors are unlabelled and left out.

    Returns
    -------
    dict
        ``{instance_id: distance_m}`` in instance-id order; empty when the spec has no camera position. An object
        missing one of the fields above is left out.

    Notes
    -----
    The centre is :func:`object_centre_m`, the point the render core's framing measures its camera distance
    (budget ``camera.distance_m``) from; the distance is Euclidean in the world frame (m).
    """
    camera = scene.get("camera")
    position = camera.get("position_m") if isinstance(camera, Mapping) else None
    if not isinstance(position, Sequence) or len(position) != 3:
        return {}
    cx, cy, cz = (float(v) for v in position)
    out: dict[int, float] = {}
    for obj in scene.get("objects") or ():
        try:
            instance_id = int(obj["instance_id"])
            ox, oy, oz = object_centre_m(obj)
        except (KeyError, TypeError, ValueError, IndexError):
            continue
        out[instance_id] = math.sqrt((ox - cx) ** 2 + (oy - cy) ** 2 + (oz - cz) ** 2)
    return dict(sorted(out.items()))
