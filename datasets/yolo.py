"""YOLO labels (``labels/<stem>.txt``), ``data.yaml``, ``classes.txt`` and the per-split image lists.

References
----------
YOLO text label format ``class cx cy w h`` normalised to [0, 1] (Ultralytics documentation, "Dataset
formats / detect", from memory).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import IO, Any

from datasets.queries import Category
from datasets.sinks import Sink, copy_into


def label_line(category: Category, bbox: Sequence[float], width_px: int, height_px: int) -> str:
    """``class cx cy w h`` of a pixel box ``[x, y, w, h]``, normalised by the image size, six decimals."""
    x, y, w, h = (float(v) for v in bbox)
    return (
        f"{category.yolo_index} {(x + w / 2) / width_px:.6f} "
        f"{(y + h / 2) / height_px:.6f} {w / width_px:.6f} {h / height_px:.6f}\n"
    )


def open_split_lists(scratch: Path, splits: Sequence[str]) -> dict[str, IO[str]]:
    """Per split, the scratch file that collects its image paths (``<split>.txt`` at the end)."""
    return {split: open(scratch / f"{split}.list", "w", encoding="utf-8") for split in splits}  # noqa: SIM115


def list_line(stem: str) -> str:
    """An image's line in its split's list: a path relative to the dataset folder."""
    return f"./images/{stem}.png\n"


def unlabelled_line(stem: str, count: int) -> str:
    """A line of ``yolo_unlabelled.txt``: an image path and how many visible objects in it carry no label."""
    return f"./images/{stem}.png {int(count)}\n"


def write_yolo_meta(
    sink: Sink, *, campaign: Any, categories: Sequence[Category], active: Sequence[str]
) -> Iterator[None]:
    """``data.yaml``, ``classes.txt`` and ``<split>.txt`` for each active split; yields while it copies."""
    import yaml

    names = {cat.yolo_index: cat.name for cat in categories}
    data = {"names": names, "nc": len(names), **{s: f"{s}.txt" for s in active}}
    header = (
        "# YOLO dataset of Evenframe campaign "
        f"{campaign.pk}. Paths are relative to this file's folder; labels/<stem>.txt sits beside "
        "images/<stem>.png.\n"
    )
    sink.put_bytes(path="data.yaml", data=(header + yaml.safe_dump(data, sort_keys=False)).encode())
    sink.put_bytes(path="classes.txt", data="".join(f"{names[i]}\n" for i in sorted(names)).encode())
    for split in active:
        yield from copy_into(sink, f"{split}.txt", [sink.scratch / f"{split}.list"])
