"""Uploaded meshes and asset previews: format sniffing, a resource-limited parse, and the 128×128 preview render.

Upload validation never parses a user's file in the web process: :func:`check_mesh_file` runs
``render.meshes.load_user_mesh`` in a child process with a memory cap (``RLIMIT_AS``), a CPU-time cap and
a wall-clock timeout, and reads back its one-line verdict. The preview (:func:`render_asset_preview`) runs in a
render worker (task ``evenframe.asset_preview`` in :mod:`assets.tasks`) or in ``manage.py asset_previews``;
the library shows "preview pending" until the file exists.

An OBJ with its MTL and images (or a glTF with its buffers) arrives as one ``.zip``: it is unpacked into a hidden
``.partial-<random>/`` folder (:func:`unpack_staged_zip`, through ``render.meshes.extract_model_zip``:
no path traversal, links, zip bombs or encrypted entries) and that folder is renamed to ``<random>/`` like a file.

Files of asset ``pk`` live under ``MEDIA_ROOT/assets/<pk>/``: ``info.json`` (extents, faces, unit) and
``preview.png``. Uploaded meshes live in ``MEDIA_ROOT/assets/meshes/<random>.<format>``; an upload is first staged
as a hidden ``.partial-<random>.<format>`` file beside it (:func:`stage_upload`) and renamed into place only in the
transaction that inserts its row (``assets.services.upload_mesh_asset``), which removes it on any failure.
"""

from __future__ import annotations

import json
import os
import struct
import subprocess
import sys
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

from evenframe.celery import app
from render.images import write_image

MAX_UPLOAD_BYTES = 32 * 1024 * 1024
CHECK_TIMEOUT_S = 30.0
CHECK_MEMORY_BYTES = 2 * 1024**3
CHECK_CPU_S = 30
PREVIEW_PX = 128
PREVIEW_SPP = 16
ROOT = Path(__file__).resolve().parent.parent


class UploadError(ValueError):
    """An uploaded file cannot become an asset; the message is for the user."""


def sniff_mesh_format(head: bytes, *, size_bytes: int) -> str | None:
    """The mesh format from the file's first bytes (not its name): ``glb``, ``ply``, ``stl``, ``obj``, ``zip`` or None.

    References
    ----------
    PKWARE APPNOTE.TXT §4.3.7 (a zip's local file header signature ``PK\x03\x04``);
    glTF 2.0 specification §4.4 (GLB header magic ``glTF``, version 2); the PLY header (``ply`` then ``format``);
    binary STL (80-byte header, uint32 triangle count, 50 bytes per triangle) and ASCII STL (``solid``);
    Wavefront OBJ (text lines of ``v``, ``vt``, ``vn``, ``f``, ``o``, ``g``, ``#``, ``mtllib``, ``usemtl``, ``s``).
    """
    if head[:4] == b"PK\x03\x04":
        return "zip"
    if head[:4] == b"glTF" and len(head) >= 8 and struct.unpack("<I", head[4:8])[0] == 2:
        return "glb"
    if head[:4] in (b"ply\n", b"ply\r"):
        return "ply"
    if len(head) >= 84 and size_bytes == 84 + 50 * struct.unpack("<I", head[80:84])[0]:
        return "stl"
    text: str | None
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError:
        text = head[:-4].decode("utf-8", errors="strict") if _decodes(head[:-4]) else None
    if text is None or "\x00" in text:
        return None
    if text.lstrip().lower().startswith("solid") and "facet" in text:
        return "stl"
    lines = [ln.strip() for ln in text.splitlines()[:-1] if ln.strip()]  # the last line may be cut off
    keywords = ("v ", "vt ", "vn ", "f ", "o ", "g ", "#", "mtllib", "usemtl", "s ", "l ", "vp ")
    if lines and all(ln.startswith(keywords) for ln in lines) and any(ln.startswith("v ") for ln in lines):
        return "obj"
    return None


@dataclass(frozen=True)
class StagedMesh:
    """An upload written to a hidden partial file (or, for a zip, unpacked into a hidden partial folder), not yet
    kept: ``final`` is its place once its row exists. ``model`` is the file to parse (``path`` itself, or the model
    file inside the folder) and ``final_model`` where that file will be."""

    path: Path
    final: Path
    kind: str
    model: Path | None = None
    final_model: Path | None = None

    @property
    def model_path(self) -> Path:
        return self.model or self.path

    @property
    def final_model_path(self) -> Path:
        return self.final_model or self.final


def discard(staged: StagedMesh) -> None:
    """Remove a staged upload (a file or an unpacked folder); never raises."""
    remove_path(staged.path)


def remove_path(path: Path) -> None:
    """Remove a file or a folder (an unpacked zip); never raises."""
    import shutil

    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        path.unlink(missing_ok=True)


def unpack_staged_zip(staged: StagedMesh) -> StagedMesh:
    """Unpack a staged ``.zip`` into a hidden partial folder beside it; the zip itself is removed either way.

    Raises :class:`UploadError` with the render core's reason (path traversal, links, too many or too large
    entries, a zip bomb, not exactly one model file) and leaves nothing behind.
    """
    # deferred: keeps render.meshes (trimesh) out of the web process
    from render.meshes import MeshError, extract_model_zip

    token = staged.final.name.split(".")[0]
    folder = staged.path.with_name(f".partial-{token}")
    try:
        model = extract_model_zip(staged.path, folder)
    except MeshError as exc:
        import shutil

        shutil.rmtree(folder, ignore_errors=True)
        raise UploadError(str(exc).split(": ", 1)[-1]) from exc
    except BaseException:
        import shutil

        shutil.rmtree(folder, ignore_errors=True)
        raise
    finally:
        staged.path.unlink(missing_ok=True)
    final = staged.final.with_name(token)
    return StagedMesh(
        path=folder, final=final, kind="zip-dir", model=model, final_model=final / model.relative_to(folder)
    )


def meshes_dir() -> Path:
    from django.conf import settings

    return Path(settings.MEDIA_ROOT) / "assets" / "meshes"


def stage_upload(upload: Any) -> StagedMesh:
    """Check an upload's size and content type and write it to a hidden partial file in the meshes folder.

    ``upload`` is a Django ``UploadedFile``. Raises :class:`UploadError` (nothing written) for an empty or too
    large file, or content that is not OBJ, PLY, STL, GLB or zip whatever its name says. The caller renames
    ``path`` to ``final`` once the asset's row is secured, and removes ``path`` otherwise.
    """
    size = int(upload.size or 0)
    if size > MAX_UPLOAD_BYTES:
        raise UploadError(f"the file is {size / 2**20:.1f} MiB; the limit is {MAX_UPLOAD_BYTES // 2**20} MiB.")
    if size == 0:
        raise UploadError("the file is empty.")
    head = b""
    for chunk in upload.chunks(chunk_size=4096):
        head = chunk[:4096]
        break
    kind = sniff_mesh_format(head, size_bytes=size)
    if kind is None:
        raise UploadError(
            "this is not a mesh file we can read: its content is not OBJ, PLY, STL, GLB or a zip "
            "(whatever its name says)."
        )
    folder = meshes_dir()
    folder.mkdir(parents=True, exist_ok=True)
    token = uuid.uuid4().hex
    staged = StagedMesh(path=folder / f".partial-{token}.{kind}", final=folder / f"{token}.{kind}", kind=kind)
    try:
        with open(staged.path, "xb") as out:
            for chunk in upload.chunks():
                out.write(chunk)
    except OSError as exc:  # disk full, read-only media: the user's file is fine, say why it was not kept
        staged.path.unlink(missing_ok=True)
        raise UploadError(f"the file could not be stored ({exc.strerror or exc}); nothing was kept.") from exc
    except BaseException:
        staged.path.unlink(missing_ok=True)
        raise
    return staged


def _decodes(data: bytes) -> bool:
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


_CHECK_SCRIPT = r"""
import json, resource, sys
memory, cpu = int(sys.argv[3]), int(sys.argv[4])
resource.setrlimit(resource.RLIMIT_AS, (memory, memory))
resource.setrlimit(resource.RLIMIT_CPU, (cpu, cpu))
from render.meshes import MeshError, load_user_model
try:
    model = load_user_model(sys.argv[1], unit=sys.argv[2], up_axis=sys.argv[5], front=sys.argv[6] or None)
    mesh = model.mesh()
except MeshError as exc:
    print(json.dumps({"ok": False, "error": str(exc)}))
except MemoryError:
    print(json.dumps({"ok": False, "error": "the mesh needs more memory than an upload may use"}))
else:
    extents = [round(float(v), 4) for v in mesh.extents]
    print(json.dumps({"ok": True, "extents_m": extents, "faces": int(len(mesh.faces)),
                      "vertices": int(len(mesh.vertices)), "unit": model.unit, "parts": len(model.parts),
                      "textured_parts": sum(p.look.texture is not None for p in model.parts)}))
"""


def check_mesh_file(*, path: Path, unit: str, up_axis: str = "+z", front: str = "") -> dict[str, Any]:
    """Parse a model with :func:`render.meshes.load_user_model` in a limited child process.

    Returns ``{"extents_m": [x, y, z], "faces": n, "vertices": n, "unit", "parts", "textured_parts"}``, extents in
    metres after normalization (x across the front, y front to back, z up); raises
    :class:`UploadError` with the render core's one-line reason (format, emptiness, NaNs, scale outside
    0.02–10 m, too many faces) or a timeout/limit message.
    """
    try:
        done = subprocess.run(
            [
                sys.executable,
                "-c",
                _CHECK_SCRIPT,
                str(path),
                unit,
                str(CHECK_MEMORY_BYTES),
                str(CHECK_CPU_S),
                up_axis,
                front,
            ],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=CHECK_TIMEOUT_S,
            env={**os.environ, "PYTHONPATH": str(ROOT)},
        )
    except subprocess.TimeoutExpired as exc:
        raise UploadError(f"reading the mesh took over {CHECK_TIMEOUT_S:g} s; simplify it first") from exc
    lines = [ln for ln in done.stdout.splitlines() if ln.startswith("{")]
    if not lines:
        raise UploadError("the mesh could not be read (the parser stopped: memory or time limit, or a crash)")
    verdict = json.loads(lines[-1])
    if not verdict.get("ok"):
        raise UploadError(str(verdict.get("error", "unreadable mesh")).replace(f"mesh {path.name}: ", ""))
    return {k: verdict[k] for k in ("extents_m", "faces", "vertices", "unit", "parts", "textured_parts")}


def size_text(extents_m: Any) -> str:
    """``0.30 × 0.03 × 0.30 m (width × depth × height)`` for messages."""
    return " × ".join(f"{float(v):.2f}" for v in extents_m) + " m (width × depth × height)"


def asset_dir(asset_pk: int) -> Path:
    from django.conf import settings

    return Path(settings.MEDIA_ROOT) / "assets" / str(asset_pk)


def asset_info(asset_pk: int) -> dict[str, Any]:
    try:
        return json.loads((asset_dir(asset_pk) / "info.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


def write_asset_info(asset_pk: int, info: dict[str, Any]) -> None:
    folder = asset_dir(asset_pk)
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f".info.json.{os.getpid()}"
    tmp.write_text(json.dumps(info, sort_keys=True), encoding="utf-8")
    os.replace(tmp, folder / "info.json")


def preview_path(asset_pk: int) -> Path:
    return asset_dir(asset_pk) / "preview.png"


# --- the preview render (render worker side; imports Mitsuba) -------------------------------------------------------


def _asset_parts(
    *,
    kind: str,
    class_name: str,
    mesh_path: str | None,
    unit: str,
    up_axis: str = "z",
    front: str = "",
    look: str = "randomize",
) -> list[Any]:
    """The asset's parts (``render.assets.Part``) in its local frame: front +y, z up."""
    import numpy as np

    from render import assets  # deferred: keeps render.assets (trimesh, scipy) out of the web process

    if kind == "mesh":
        if mesh_path is None:
            raise ValueError(f"mesh asset {class_name!r} has no mesh file")
        spec = assets.user_asset_spec(
            mesh_path,
            class_name,
            "floor",
            np.random.default_rng(7),
            unit=unit,
            up_axis=up_axis or "z",
            front=front or None,
            look="keep" if look == "keep" else "randomize",
        )
        if look != "keep":
            # A random colour would say nothing about the model; the preview shows its shape in a neutral grey.
            spec["materials"] = {"body": {"kind": "diffuse", "rgb": [0.55, 0.6, 0.62], "roughness": 1.0}}
        return assets.build_asset_parts(spec)
    spec = assets.sample_asset(class_name, np.random.default_rng(7))
    return assets.build_asset_parts(spec)


#: Where the preview camera sits, as a multiple of the asset's bounding radius from its centre: in front (+y, the
#: local frame's front), a little to the right and above, so the front fills the view and the top still shows.
PREVIEW_EYE_DIRECTION = (0.45, 2.6, 0.9)


def render_asset_preview(
    *,
    asset_pk: int,
    kind: str,
    class_name: str,
    mesh_path: str | None = None,
    unit: str = "auto",
    variant: str | None = None,
    up_axis: str = "z",
    front: str = "",
    look: str = "randomize",
) -> Path:
    """Render a 128×128 studio view of one asset from its front (local +y) under a sky and a key light to
    preview.png, with the model's own materials when its look is kept.

    Also writes info.json with the rendered instance's extents. Runs in a render worker, never in the web server.
    """
    import numpy as np
    import trimesh

    # deferred: Mitsuba loads in the worker that renders the preview, not the web process
    from render.backend import init_renderer

    init_renderer(variant=variant)
    import mitsuba as mi

    from render import scene as render_scene  # deferred: keeps the renderer (render.scene) out of the web process
    from render import srgb  # deferred: keeps the render core out of the web process

    parts = _asset_parts(
        kind=kind, class_name=class_name, mesh_path=mesh_path, unit=unit, up_axis=up_axis, front=front, look=look
    )
    # trimesh annotates concatenate() as returning Geometry; Trimesh parts concatenate to a Trimesh.
    combined = cast(trimesh.Trimesh, trimesh.util.concatenate([p.mesh for p in parts]))
    low, high = combined.bounds
    centre = (low + high) / 2
    radius = float(np.linalg.norm(high - low)) / 2 or 0.5
    eye = centre + radius * np.array(PREVIEW_EYE_DIRECTION)
    scene: dict[str, Any] = {
        "type": "scene",
        "integrator": {"type": "path", "max_depth": 4},
        "sensor": {
            "type": "perspective",
            "fov": 40.0,
            "to_world": mi.ScalarTransform4f().look_at(origin=eye.tolist(), target=centre.tolist(), up=[0, 0, 1]),
            "film": {"type": "hdrfilm", "width": PREVIEW_PX, "height": PREVIEW_PX, "pixel_format": "rgb"},
            "sampler": {"type": "independent", "sample_count": PREVIEW_SPP},
        },
        "sky": {"type": "constant", "radiance": {"type": "rgb", "value": [0.55, 0.6, 0.62]}},
        "key": {"type": "directional", "direction": [-0.4, -0.6, -1.0], "irradiance": {"type": "rgb", "value": 2.2}},
        "floor": {
            "type": "rectangle",
            "to_world": mi.ScalarTransform4f().translate([centre[0], centre[1], low[2]])
            @ mi.ScalarTransform4f().scale(radius * 6),
            "bsdf": {"type": "diffuse", "reflectance": {"type": "rgb", "value": [0.55, 0.6, 0.62]}},
        },
    }
    for i, part in enumerate(parts):
        material = part.material
        bsdf = mi.load_dict(render_scene.bsdf_dict(material))
        scene[f"part{i}"] = render_scene.mesh_from_arrays(
            f"part{i}", part.mesh.vertices, part.mesh.faces, bsdf, uv=material.get("uv")
        )
    image = np.asarray(mi.render(mi.load_dict(scene)))
    rgb8 = (np.clip(srgb.encode(np.clip(image, 0, 1)), 0, 1) * 255 + 0.5).astype(np.uint8)
    folder = asset_dir(asset_pk)
    folder.mkdir(parents=True, exist_ok=True)
    write_image(preview_path(asset_pk), rgb8)
    info = asset_info(asset_pk)
    info.setdefault("extents_m", [round(float(v), 4) for v in combined.extents])
    info.setdefault("faces", int(len(combined.faces)))
    write_asset_info(asset_pk, info)
    return preview_path(asset_pk)


def render_preview_for(asset: Any) -> Path:
    """:func:`render_asset_preview` for an :class:`assets.models.Asset` row."""
    from django.conf import settings

    mesh_path = str(Path(settings.MEDIA_ROOT) / asset.mesh_file.name) if asset.mesh_file else None
    return render_asset_preview(
        asset_pk=asset.pk,
        kind=asset.kind,
        class_name=asset.object_class.name,
        mesh_path=mesh_path,
        unit=asset.mesh_unit,
        up_axis=asset.up_axis or "z",
        front=asset.front or "",
        look=asset.look or "randomize",
    )


def request_preview(*, asset_pk: int) -> None:
    """Ask the fleet for an asset's preview (task ``evenframe.asset_preview``); best effort."""
    import logging

    try:
        app.send_task("evenframe.asset_preview", kwargs={"asset_pk": asset_pk})
    except Exception:  # noqa: BLE001 - a missing preview shows as pending; the upload itself succeeded
        logging.getLogger("evenframe.assets").warning("could not request preview of asset %s", asset_pk, exc_info=True)
