"""User mesh import: OBJ, PLY, STL and GLB files normalized to the asset local frame.

A user mesh becomes an asset like the procedural ones: metres, z up, the
centre of its footprint at the origin and its base on z = 0. Anything that
would make a frame silently wrong (an empty or corrupt file, NaN vertices, a
model in the wrong unit that is 100 m tall) is refused with a one-line
:class:`MeshError` instead, so the dashboard can show the reason.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import trimesh

SUPPORTED_EXTENSIONS: tuple[str, ...] = (".obj", ".ply", ".stl", ".glb")
UNIT_TO_M: dict[str, float] = {"m": 1.0, "cm": 0.01, "mm": 0.001, "in": 0.0254}
UP_AXES: tuple[str, ...] = ("z", "y")

# An indoor object smaller than a 2 cm die or larger than 10 m is almost
# certainly a unit mistake, and would wreck the layout either way.
MIN_EXTENT_M = 0.02
MAX_EXTENT_M = 10.0
# Frames render in about a second; a mesh heavier than this dominates
# the scene build time and memory of every frame it is in.
MAX_FACES = 500_000
MAX_VERTICES = 1_000_000
MAX_FILE_BYTES = 256 * 1024 * 1024

# glTF is +y up with the front on +z (glTF 2.0 specification, section 3.4
# "Coordinate System and Units"). This proper rotation sends +y to +z and
# +z to +y, so the front lands on our +y: (x, y, z) -> (-x, z, y).
_Y_UP_TO_Z_UP = np.array(
    [[-1.0, 0.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0], [0.0, 1.0, 0.0, 0.0], [0.0, 0.0, 0.0, 1.0]]
)


class MeshError(ValueError):
    """A user mesh cannot be used: unreadable, unsupported, empty, non-finite, absurd scale or too heavy."""


def guess_unit(largest_extent: float) -> str:
    """Guess the file's unit from its largest extent, for furniture-sized objects.

    Furniture is 0.02–10 m in metres, so 10–500 units is read as centimetres
    and anything bigger as millimetres (common practice of DCC exporters:
    Blender writes metres, many CAD tools centimetres or millimetres). Inches
    cannot be told apart from centimetres by size alone and are never guessed.
    """
    if largest_extent <= MAX_EXTENT_M:
        return "m"
    if largest_extent <= 500.0:
        return "cm"
    return "mm"


def _flatten(loaded: object, name: str) -> trimesh.Trimesh:
    if isinstance(loaded, trimesh.Trimesh):
        return loaded
    if isinstance(loaded, trimesh.Scene):
        # dump applies each node's transform, so a multi-node GLB keeps its
        # parts where the author put them.
        meshes = [g for g in loaded.dump() if isinstance(g, trimesh.Trimesh) and len(g.faces)]
        if not meshes:
            raise MeshError(f"mesh {name}: the file holds no triangles (empty scene or point cloud)")
        return meshes[0] if len(meshes) == 1 else trimesh.util.concatenate(meshes)
    raise MeshError(f"mesh {name}: the file holds no triangles ({type(loaded).__name__})")


def load_user_mesh(path: str | os.PathLike[str], *, unit: str = "auto", up_axis: str = "z") -> trimesh.Trimesh:
    """Load a user mesh and normalize it to metres, z up, footprint centred, base on z = 0.

    Parameters
    ----------
    path : OBJ, PLY, STL or GLB file.
    unit : "m", "cm", "mm", "in", or "auto" (guessed from the extent, see :func:`guess_unit`).
    up_axis : "z" (no change) or "y" (glTF convention: +y up, front +z; the front ends on +y).

    Raises
    ------
    MeshError
        With a one-line reason; the file is never partly used.
    """
    file_path = Path(path)
    name = file_path.name
    extension = file_path.suffix.lower()
    if extension not in SUPPORTED_EXTENSIONS:
        raise MeshError(
            f"mesh {name}: unsupported file type {extension or '(none)'!r} (supported: {', '.join(SUPPORTED_EXTENSIONS)})"
        )
    if unit != "auto" and unit not in UNIT_TO_M:
        raise MeshError(f"mesh {name}: unknown unit {unit!r} (known: auto, {', '.join(UNIT_TO_M)})")
    if up_axis not in UP_AXES:
        raise MeshError(f"mesh {name}: unknown up axis {up_axis!r} (known: {', '.join(UP_AXES)})")
    try:
        size_bytes = file_path.stat().st_size
    except OSError as exc:
        raise MeshError(f"mesh {name}: cannot read the file ({exc.strerror or exc})") from exc
    if size_bytes == 0:
        raise MeshError(f"mesh {name}: the file is empty (0 bytes)")
    if size_bytes > MAX_FILE_BYTES:
        raise MeshError(f"mesh {name}: file is {size_bytes / 2**20:.0f} MiB, over the {MAX_FILE_BYTES // 2**20} MiB limit")
    try:
        # process=False: merging vertices would hide the real vertex count and
        # costs time on big files; we only need positions and faces.
        loaded = trimesh.load(str(file_path), file_type=extension[1:], process=False)
    except MeshError:
        raise
    except Exception as exc:  # trimesh raises many types for corrupt files; all mean the same to a user
        if isinstance(exc, ImportError):
            # trimesh falls back to an optional text-encoding detector on binary junk; the
            # missing module is not the user's problem, the file is.
            reason = "not text a parser can read"
        else:
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise MeshError(f"mesh {name}: unreadable or corrupt {extension[1:].upper()} file ({reason[:120]})") from exc
    mesh = _flatten(loaded, name)
    if len(mesh.faces) == 0 or len(mesh.vertices) == 0:
        raise MeshError(f"mesh {name}: the file holds no triangles")
    if len(mesh.faces) > MAX_FACES:
        raise MeshError(f"mesh {name}: {len(mesh.faces):,} faces, over the {MAX_FACES:,} limit; decimate it first")
    if len(mesh.vertices) > MAX_VERTICES:
        raise MeshError(f"mesh {name}: {len(mesh.vertices):,} vertices, over the {MAX_VERTICES:,} limit")
    vertices = np.asarray(mesh.vertices, dtype=np.float64)
    if not np.all(np.isfinite(vertices)):
        raise MeshError(f"mesh {name}: some vertices are NaN or infinite")
    faces = np.asarray(mesh.faces, dtype=np.int64)
    # Faces pointing past the vertex list appear in truncated files that trimesh still parses.
    if faces.min() < 0 or faces.max() >= len(vertices):
        raise MeshError(f"mesh {name}: faces refer to vertices that do not exist (truncated file?)")
    # Only referenced vertices count for the extent: stray points would skew the scale guess.
    used = vertices[np.unique(faces)]
    raw_extent = float(np.max(used.max(axis=0) - used.min(axis=0)))
    chosen_unit = guess_unit(raw_extent) if unit == "auto" else unit
    scale_m = UNIT_TO_M[chosen_unit]
    extent_m = raw_extent * scale_m
    if not (MIN_EXTENT_M <= extent_m <= MAX_EXTENT_M):
        raise MeshError(
            f"mesh {name}: largest extent {extent_m:.4g} m (unit {chosen_unit}) is outside "
            f"{MIN_EXTENT_M}–{MAX_EXTENT_M} m; pass the right unit"
        )
    result = trimesh.Trimesh(vertices=vertices * scale_m, faces=faces, process=False)
    result.remove_unreferenced_vertices()
    if up_axis == "y":
        result.apply_transform(_Y_UP_TO_Z_UP)
    low, high = result.bounds
    result.apply_translation([-(low[0] + high[0]) / 2.0, -(low[1] + high[1]) / 2.0, -low[2]])
    return result
