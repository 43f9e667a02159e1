"""User mesh import: OBJ (+ MTL), PLY, STL, GLB and glTF files normalized to the asset local frame.

A user mesh becomes an asset like the procedural ones: metres, z up, front on
+y, the centre of its footprint at the origin and its base on z = 0. The file's
own up axis and front direction (any of ±x, ±y, ±z) are turned onto +z and +y
by one proper rotation (:func:`axis_rotation`). :func:`load_user_model` keeps
the model's parts, one per material, with their texture coordinates and look
(:mod:`render.user_materials`); :func:`load_user_mesh` is the same
geometry as one mesh. An OBJ with its MTL and images arrives as a zip,
unpacked by :func:`extract_model_zip`. Anything that
would make a frame silently wrong (an empty or corrupt file, NaN vertices, a
model in the wrong unit that is 100 m tall) is refused with a one-line
:class:`MeshError` instead, so the dashboard can show the reason.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

import numpy as np
import trimesh

from .user_materials import check_textures_present, visual_look

SUPPORTED_EXTENSIONS: tuple[str, ...] = (".obj", ".ply", ".stl", ".glb", ".gltf")
UNIT_TO_M: dict[str, float] = {"m": 1.0, "cm": 0.01, "mm": 0.001, "in": 0.0254}
#: Signed file axes a model's up or front may point along. "z" and "y" are the older spellings of "+z" and "+y".
SIGNED_AXES: tuple[str, ...] = ("+x", "-x", "+y", "-y", "+z", "-z")
UP_AXES: tuple[str, ...] = ("z", "y", *SIGNED_AXES)
FRONT_AXES: tuple[str, ...] = SIGNED_AXES
_AXIS_VECTORS = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}

# A zip (an OBJ with its MTL and images, or a glTF with its buffers) is unpacked only within these limits: a
# file that expands past them is refused as a zip bomb before it fills the disk.
MAX_ZIP_MEMBERS = 64
MAX_ZIP_UNCOMPRESSED_BYTES = 256 * 1024 * 1024
# Deflate reaches about 1032:1 at best (zlib technical details); real meshes and PNGs compress far less. A
# member claiming more than this ratio is treated as hostile (common practice of zip-bomb guards).
MAX_ZIP_RATIO = 200.0
MODEL_EXTENSIONS_IN_ZIP: tuple[str, ...] = (".obj", ".gltf", ".glb")

# An indoor object smaller than a 2 cm die or larger than 10 m is almost
# certainly a unit mistake, and would wreck the layout either way.
MIN_EXTENT_M = 0.02
MAX_EXTENT_M = 10.0
# Frames render in about a second; a mesh heavier than this dominates
# the scene build time and memory of every frame it is in.
MAX_FACES = 500_000
MAX_VERTICES = 1_000_000
MAX_FILE_BYTES = 256 * 1024 * 1024


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


def _signed_axis(value: str) -> np.ndarray:
    text = {"z": "+z", "y": "+y"}.get(value, value)
    return (1.0 if text[0] == "+" else -1.0) * np.asarray(_AXIS_VECTORS[text[1]])


def default_front(up_axis: str) -> str:
    """The front assumed when none is given: the first of +y, +z, +x at right angles to ``up_axis``.

    Keeps the older behaviour: up z → front +y (no rotation); up y → front +z, the glTF convention (glTF 2.0
    specification §3.4 "Coordinate System and Units": +Y up, an asset's front faces +Z).
    """
    up = _signed_axis(up_axis)
    return next(axis for axis in ("+y", "+z", "+x") if abs(float(_signed_axis(axis) @ up)) < 0.5)


def axis_rotation(up_axis: str, front: str | None = None) -> np.ndarray:
    """3×3 proper rotation taking the file's ``up_axis`` to +z and its ``front`` to +y (our local frame).

    Rows are (front × up, front, up) in file coordinates, so ``R @ p_file = p_local`` and det R = +1
    (right-handed: x = y × z). Raises ``ValueError`` for unknown or parallel axes.
    """
    if up_axis not in UP_AXES:
        raise ValueError(f"unknown up axis {up_axis!r} (known: {', '.join(UP_AXES)})")
    front = front or default_front(up_axis)
    if front not in FRONT_AXES:
        raise ValueError(f"unknown front {front!r} (known: {', '.join(FRONT_AXES)})")
    up, ahead = _signed_axis(up_axis), _signed_axis(front)
    if abs(float(up @ ahead)) > 0.5:
        raise ValueError(f"front {front} is along the up axis {up_axis}; it must be at right angles to it")
    return np.array([np.cross(ahead, up), ahead, up])


@dataclass
class UserPart:
    """One material's worth of a user model, in the local frame: metres, z up, front +y.

    ``uv``: (V, 2) texture coordinates in the file's convention (origin at the image's bottom left, as trimesh
    gives them) or None; ``look``: see :func:`render.user_materials.visual_look`.
    """

    mesh: trimesh.Trimesh
    uv: np.ndarray | None
    look: Any


@dataclass
class UserModel:
    parts: list[UserPart]
    unit: str

    @property
    def extents_m(self) -> np.ndarray:
        return self.mesh().extents

    def mesh(self) -> trimesh.Trimesh:
        """All parts as one mesh (no merging)."""
        meshes = [p.mesh for p in self.parts]
        # trimesh annotates concatenate() as returning Geometry; for a list of Trimesh parts it returns a Trimesh.
        return meshes[0].copy() if len(meshes) == 1 else cast(trimesh.Trimesh, trimesh.util.concatenate(meshes))


def _pieces(loaded: object, name: str) -> list[trimesh.Trimesh]:
    if isinstance(loaded, trimesh.Trimesh):
        return [loaded] if len(loaded.faces) else []
    if isinstance(loaded, trimesh.Scene):
        # dump applies each node's transform, so a multi-node GLB keeps its parts where the author put them;
        # trimesh splits a glTF mesh per primitive and an OBJ per material, so a piece has one material.
        return [g for g in loaded.dump() if isinstance(g, trimesh.Trimesh) and len(g.faces)]
    raise MeshError(f"mesh {name}: the file holds no triangles ({type(loaded).__name__})")


def _read(file_path: Path, name: str, extension: str) -> object:
    try:
        # process=False: merging vertices would hide the real vertex count, cost time on big files and weld
        # texture seams; the loaders already split vertices where texture coordinates differ.
        return trimesh.load(str(file_path), file_type=extension[1:], process=False)
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


def load_user_model(
    path: str | os.PathLike[str], *, unit: str = "auto", up_axis: str = "z", front: str | None = None
) -> UserModel:
    """Load a user model, one :class:`UserPart` per material, normalized to metres, z up, front +y,
    footprint centred, base on z = 0.

    Parameters
    ----------
    path : OBJ (its MTL and images beside it), PLY, STL, GLB or glTF file.
    unit : "m", "cm", "mm", "in", or "auto" (guessed from the extent, see :func:`guess_unit`).
    up_axis : the file axis pointing up: "+z" (no change), "+y" (glTF), any of ±x, ±y, ±z; "z", "y" as "+z", "+y".
    front : the file axis the model's front faces (±x, ±y, ±z, at right angles to ``up_axis``); None:
        :func:`default_front`.

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
        rotation = axis_rotation(up_axis, front)
    except ValueError as exc:
        raise MeshError(f"mesh {name}: {exc}") from exc
    try:
        size_bytes = file_path.stat().st_size
    except OSError as exc:
        raise MeshError(f"mesh {name}: cannot read the file ({exc.strerror or exc})") from exc
    if size_bytes == 0:
        raise MeshError(f"mesh {name}: the file is empty (0 bytes)")
    if size_bytes > MAX_FILE_BYTES:
        raise MeshError(
            f"mesh {name}: file is {size_bytes / 2**20:.0f} MiB, over the {MAX_FILE_BYTES // 2**20} MiB limit"
        )
    try:
        check_textures_present(file_path)
    except ValueError as exc:
        raise MeshError(f"mesh {name}: {exc}") from exc
    pieces = _pieces(_read(file_path, name, extension), name)
    if not pieces:
        raise MeshError(f"mesh {name}: the file holds no triangles (empty scene or point cloud)")
    faces_total = sum(len(p.faces) for p in pieces)
    vertices_total = sum(len(p.vertices) for p in pieces)
    if faces_total > MAX_FACES:
        raise MeshError(f"mesh {name}: {faces_total:,} faces, over the {MAX_FACES:,} limit; decimate it first")
    if vertices_total > MAX_VERTICES:
        raise MeshError(f"mesh {name}: {vertices_total:,} vertices, over the {MAX_VERTICES:,} limit")
    arrays = []
    for piece in pieces:
        vertices = np.asarray(piece.vertices, dtype=np.float64)
        if not np.all(np.isfinite(vertices)):
            raise MeshError(f"mesh {name}: some vertices are NaN or infinite")
        faces = np.asarray(piece.faces, dtype=np.int64)
        # Faces pointing past the vertex list appear in truncated files that trimesh still parses.
        if faces.min() < 0 or faces.max() >= len(vertices):
            raise MeshError(f"mesh {name}: faces refer to vertices that do not exist (truncated file?)")
        arrays.append((vertices, faces, piece.visual))
    # Only referenced vertices count for the extent: stray points would skew the scale guess.
    used = np.concatenate([v[np.unique(f)] for v, f, _ in arrays])
    raw_extent = float(np.max(used.max(axis=0) - used.min(axis=0)))
    chosen_unit = guess_unit(raw_extent) if unit == "auto" else unit
    scale_m = UNIT_TO_M[chosen_unit]
    extent_m = raw_extent * scale_m
    if not (MIN_EXTENT_M <= extent_m <= MAX_EXTENT_M):
        raise MeshError(
            f"mesh {name}: largest extent {extent_m:.4g} m (unit {chosen_unit}) is outside "
            f"{MIN_EXTENT_M}–{MAX_EXTENT_M} m; pass the right unit"
        )
    parts = []
    for vertices, faces, visual in arrays:
        used_index = np.unique(faces)
        remap = np.full(len(vertices), -1, dtype=np.int64)
        remap[used_index] = np.arange(len(used_index))
        local = (vertices[used_index] * scale_m) @ rotation.T
        mesh = trimesh.Trimesh(vertices=local, faces=remap[faces], process=False)
        uv = getattr(visual, "uv", None)
        uv = None if uv is None or len(uv) != len(vertices) else np.asarray(uv, dtype=np.float64)[used_index]
        if uv is not None and not np.all(np.isfinite(uv)):
            uv = None
        parts.append(UserPart(mesh=mesh, uv=uv, look=visual_look(visual, has_uv=uv is not None)))
    low = np.min([p.mesh.bounds[0] for p in parts], axis=0)
    high = np.max([p.mesh.bounds[1] for p in parts], axis=0)
    shift = [-(low[0] + high[0]) / 2.0, -(low[1] + high[1]) / 2.0, -low[2]]
    for part in parts:
        part.mesh.apply_translation(shift)
    return UserModel(parts=parts, unit=chosen_unit)


def load_user_mesh(
    path: str | os.PathLike[str], *, unit: str = "auto", up_axis: str = "z", front: str | None = None
) -> trimesh.Trimesh:
    """:func:`load_user_model` as one mesh (geometry only): metres, z up, front +y, footprint centred, base on z = 0.

    Raises
    ------
    MeshError
        With a one-line reason; the file is never partly used.
    """
    return load_user_model(path, unit=unit, up_axis=up_axis, front=front).mesh()


def _safe_member_name(name: str) -> str | None:
    """The member's relative POSIX path, or None for a name that could escape the folder it is unpacked in."""
    text = name.replace("\\", "/")
    if not text or text.startswith("/") or "\x00" in text or (len(text) > 1 and text[1] == ":"):
        return None
    parts = [p for p in text.split("/") if p not in ("", ".")]
    if not parts or any(p == ".." for p in parts):
        return None
    return "/".join(parts)


def extract_model_zip(zip_path: str | os.PathLike[str], dest_dir: str | os.PathLike[str]) -> Path:
    """Unpack a zip holding one model (OBJ with its MTL and images, or glTF / GLB with its files) into ``dest_dir``.

    Refuses, with a one-line :class:`MeshError` and before writing anything: member names that could escape the
    folder (absolute, drive letters, ``..``), symbolic links, more than :data:`MAX_ZIP_MEMBERS` members, more than
    :data:`MAX_ZIP_UNCOMPRESSED_BYTES` in all, a member compressed more than :data:`MAX_ZIP_RATIO`:1 (a zip bomb),
    and a zip without exactly one model file (.obj, .gltf or .glb). While writing, each member is cut off at its
    declared size, so a header that lies is caught too. Returns the model file's path inside ``dest_dir``.
    The caller removes ``dest_dir`` on failure.
    """
    import stat
    import zipfile

    name = Path(zip_path).name
    try:
        archive = zipfile.ZipFile(zip_path)
    except (zipfile.BadZipFile, OSError) as exc:
        raise MeshError(f"zip {name}: not a readable zip file ({exc})") from exc
    with archive:
        members = [m for m in archive.infolist() if not m.is_dir()]
        if len(members) > MAX_ZIP_MEMBERS:
            raise MeshError(f"zip {name}: {len(members)} files, over the {MAX_ZIP_MEMBERS} limit")
        total = sum(m.file_size for m in members)
        if total > MAX_ZIP_UNCOMPRESSED_BYTES:
            raise MeshError(
                f"zip {name}: unpacks to {total / 2**20:.0f} MiB, over the "
                f"{MAX_ZIP_UNCOMPRESSED_BYTES // 2**20} MiB limit"
            )
        plan = []
        for member in members:
            relative = _safe_member_name(member.filename)
            if relative is None:
                raise MeshError(f"zip {name}: the entry {member.filename[:80]!r} points outside the zip's folder")
            if stat.S_ISLNK(member.external_attr >> 16):
                raise MeshError(f"zip {name}: the entry {relative[:80]!r} is a symbolic link")
            if member.file_size > MAX_ZIP_RATIO * max(member.compress_size, 1) and member.file_size > 1024 * 1024:
                raise MeshError(
                    f"zip {name}: the entry {relative[:80]!r} expands {member.file_size / max(member.compress_size, 1):.0f}:1, "
                    "which looks like a zip bomb"
                )
            if member.flag_bits & 0x1:
                raise MeshError(f"zip {name}: the entry {relative[:80]!r} is encrypted")
            plan.append((member, relative))
        models = [rel for _, rel in plan if Path(rel).suffix.lower() in MODEL_EXTENSIONS_IN_ZIP]
        if len(models) != 1:
            found = ", ".join(models[:5]) if models else "none"
            raise MeshError(f"zip {name}: expected exactly one model file (.obj, .gltf or .glb), found {found}")
        seen: set[str] = set()
        for _, relative in plan:
            if relative.lower() in seen:
                raise MeshError(f"zip {name}: two entries named {relative[:80]!r}")
            seen.add(relative.lower())
        dest = Path(dest_dir)
        dest.mkdir(parents=True, exist_ok=True)
        for member, relative in plan:
            target = dest / relative
            target.parent.mkdir(parents=True, exist_ok=True)
            written = 0
            try:
                with archive.open(member) as source, open(target, "xb") as out:
                    while chunk := source.read(1 << 20):
                        written += len(chunk)
                        if written > member.file_size:
                            raise MeshError(f"zip {name}: the entry {relative[:80]!r} is larger than its header says")
                        out.write(chunk)
            except (zipfile.BadZipFile, OSError, EOFError, RuntimeError) as exc:
                raise MeshError(f"zip {name}: the entry {relative[:80]!r} cannot be unpacked ({exc})") from exc
        return dest / models[0]
