"""Uploaded models at scene build: parsed once per process per file version, and their base-colour textures.

Split from :mod:`render.user_materials` (what a model's visuals mean, no file access) and
:mod:`render.meshes` (reading and normalizing the file), which this module joins.
"""

from __future__ import annotations

import functools
import json
import os
from pathlib import Path
from typing import Any

import numpy as np

from render import srgb
from render.meshes import MeshError, load_user_model
from render.user_materials import ALBEDO_MAX, ALBEDO_MIN, mitsuba_normal_map


@functools.lru_cache(maxsize=16)
def _cached_model(path: str, mtime_ns: int, size: int, unit: str, up_axis: str, front: str) -> Any:
    # mtime and size in the key: a replaced file is reloaded, an unchanged one is parsed once per process.
    return load_user_model(path, unit=unit, up_axis=up_axis, front=front or None)


def load_model_cached(path: str, *, unit: str = "auto", up_axis: str = "z", front: str | None = None) -> Any:
    """:func:`render.meshes.load_user_model`, parsed once per process per file version. Shared: do not
    change the returned meshes (copy them)."""
    try:
        stat = os.stat(path)
    except OSError as exc:
        raise MeshError(f"mesh {Path(path).name}: cannot read the file ({exc.strerror or exc})") from exc
    return _cached_model(str(path), stat.st_mtime_ns, stat.st_size, unit, up_axis, front or "")


def _part_look(record_json: str, image: str, what: str, missing: str) -> Any:
    """The look of the part a spec ``user_texture`` / ``user_normal`` record names, which must have the ``image``
    (``texture``, ``normal_texture``): else a ValueError "{what}: part {index} of {file name} {missing}"."""
    record = json.loads(record_json)
    model = load_model_cached(
        record["mesh_path"], unit=record["unit"], up_axis=record["up_axis"], front=record.get("front") or None
    )
    index = int(record["part"])
    if not 0 <= index < len(model.parts) or getattr(model.parts[index].look, image) is None:
        raise ValueError(f"{what}: part {index} of {Path(record['mesh_path']).name} {missing}")
    return model.parts[index].look


@functools.lru_cache(maxsize=64)
def _linear_texture(record_json: str) -> np.ndarray:
    look = _part_look(record_json, "texture", "user texture", "has no texture")
    linear = srgb.decode(look.texture.astype(np.float32) / np.float32(255.0)) * np.asarray(look.rgb, np.float32)
    image = np.clip(linear, ALBEDO_MIN, ALBEDO_MAX).astype(np.float32)
    image.setflags(write=False)
    return image


def texture_linear_rgb(record: dict[str, Any]) -> np.ndarray:
    """Linear-RGB base colour (H, W, 3) float32 of a spec ``user_texture`` record (texture × factor; read-only,
    cached per process). Row 0 is the image's top row, as Mitsuba's bitmap expects."""
    return _linear_texture(json.dumps(record, sort_keys=True))


@functools.lru_cache(maxsize=64)
def _normal_map(record_json: str) -> np.ndarray:
    look = _part_look(record_json, "normal_texture", "user normal map", "has none")
    image = mitsuba_normal_map(look.normal_texture)
    image.setflags(write=False)
    return image


def normal_rgb(record: dict[str, Any]) -> np.ndarray:
    """Mitsuba ``normalmap`` image (H, W, 3) float32 of a spec ``user_normal`` record (read-only, cached per
    process; :func:`render.user_materials.mitsuba_normal_map`)."""
    return _normal_map(json.dumps(record, sort_keys=True))
