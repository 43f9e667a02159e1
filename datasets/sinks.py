"""Where an export's files go: a staging directory (reusing the previous export's unchanged files) or a zip streamed
while it is built. A sink also keeps the manifest entries of what it received (streamed to a scratch file).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import os
import shutil
import time
import zipfile
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from datasets.errors import ExportError
from datasets.json_text import dumps
from datasets.manifest import COPY_CHUNK_BYTES, MANIFEST_NAME, PreviousManifest

SCRATCH_DIR = ".scratch"  # inside a directory export's staging folder; removed before the swap
_STORED_SUFFIXES = (".png", ".npy", ".jpg", ".jpeg")


class HashingWriter:
    """File-like wrapper that counts and hashes what goes through it."""

    def __init__(self, raw: IO[bytes]) -> None:
        self.raw = raw
        self.sha = hashlib.sha256()
        self.size = 0

    def write(self, data: bytes) -> int:
        self.sha.update(data)
        self.size += len(data)
        self.raw.write(data)
        return len(data)


class ChunkBuffer(io.RawIOBase):
    """Where a streamed zip writes; the response generator drains it after every file."""

    def __init__(self) -> None:
        super().__init__()
        self._chunks: list[bytes] = []

    def writable(self) -> bool:
        return True

    def write(self, data: Any) -> int:
        self._chunks.append(bytes(data))
        return len(data)

    def drain(self) -> bytes:
        out = b"".join(self._chunks)
        self._chunks.clear()
        return out


@dataclass
class _Counts:
    files: int = 0
    bytes_total: int = 0
    files_written: int = 0
    bytes_written: int = 0
    files_reused: int = 0


class Sink:
    """Receives the export's files and keeps the manifest entries (streamed to a scratch file)."""

    def __init__(self, scratch: Path) -> None:
        self.scratch = scratch
        self.counts = _Counts()
        self._entries = open(scratch / "manifest-entries.jsonl", "w", encoding="utf-8")  # noqa: SIM115
        self._previous_frame: dict[str, dict[str, Any]] = {}

    def begin_frame(self, index: int) -> None:
        self._previous_frame = {}

    def _record(self, entry: dict[str, Any], *, written: bool) -> None:
        self._entries.write(dumps(entry) + "\n")
        self.counts.files += 1
        self.counts.bytes_total += entry["size"]
        if written:
            self.counts.files_written += 1
            self.counts.bytes_written += entry["size"]
        else:
            self.counts.files_reused += 1

    def copy_file(self, *, path: str, source: Path, frame: int | None = None) -> None:
        raise NotImplementedError

    def put_bytes(self, *, path: str, data: bytes, frame: int | None = None) -> None:
        raise NotImplementedError

    @contextlib.contextmanager
    def open(self, path: str) -> Iterator[HashingWriter]:
        raise NotImplementedError
        yield  # pragma: no cover

    def write_manifest(self, header: dict[str, Any]) -> None:
        self._entries.close()
        header = {**header, "files": self.counts.files, "bytes": self.counts.bytes_total}
        with self._open_manifest() as handle:
            handle.write((dumps(header) + "\n").encode())
            with open(self.scratch / "manifest-entries.jsonl", "rb") as entries:
                shutil.copyfileobj(entries, handle, COPY_CHUNK_BYTES)

    def _open_manifest(self) -> contextlib.AbstractContextManager[IO[bytes]]:
        raise NotImplementedError

    def close(self) -> None:
        if not self._entries.closed:
            self._entries.close()


def _stat_source(source: Path) -> os.stat_result:
    try:
        return os.stat(source)
    except FileNotFoundError as exc:
        raise ExportError(f"missing frame file {source}") from exc


class DirectorySink(Sink):
    """Writes into a staging folder; a frame file unchanged since the previous export is hard-linked from it."""

    def __init__(self, *, staging: Path, previous_root: Path | None) -> None:
        (staging / SCRATCH_DIR).mkdir(parents=True)
        super().__init__(staging / SCRATCH_DIR)
        self.staging = staging
        self.previous_root = previous_root
        manifest = previous_root / MANIFEST_NAME if previous_root is not None else None
        self._previous = PreviousManifest(manifest if manifest is not None and manifest.is_file() else None)
        self._dirs: set[str] = set()

    def begin_frame(self, index: int) -> None:
        self._previous_frame = self._previous.for_frame(index)

    def _dest(self, path: str) -> Path:
        parent = os.path.dirname(path)
        if parent and parent not in self._dirs:
            (self.staging / parent).mkdir(parents=True, exist_ok=True)
            self._dirs.add(parent)
        return self.staging / path

    def _reuse(self, path: str, dest: Path, previous: dict[str, Any] | None) -> bool:
        """Hard-link the previous export's file when its size and mtime are what its manifest says."""
        if previous is None or self.previous_root is None:
            return False
        old = self.previous_root / path
        try:
            st = os.stat(old)
            if st.st_size != previous["size"] or st.st_mtime_ns != previous.get("mtime_ns"):
                return False
            os.link(old, dest)
        except OSError:
            return False
        self._record(previous, written=False)
        return True

    def copy_file(self, *, path: str, source: Path, frame: int | None = None) -> None:
        src = _stat_source(source)
        dest = self._dest(path)
        previous = self._previous_frame.get(path)
        if previous is not None and previous.get("source") == [src.st_size, src.st_mtime_ns]:
            if self._reuse(path, dest, previous):
                return
        sha = hashlib.sha256()
        size = 0
        with open(source, "rb") as reader, open(dest, "wb") as writer:
            while chunk := reader.read(COPY_CHUNK_BYTES):
                sha.update(chunk)
                size += len(chunk)
                writer.write(chunk)
        entry = {
            "path": path,
            "size": size,
            "sha256": sha.hexdigest(),
            "mtime_ns": os.stat(dest).st_mtime_ns,
            "source": [src.st_size, src.st_mtime_ns],
        }
        if frame is not None:
            entry["frame"] = frame
        self._record(entry, written=True)

    def put_bytes(self, *, path: str, data: bytes, frame: int | None = None) -> None:
        dest = self._dest(path)
        sha = hashlib.sha256(data).hexdigest()
        previous = self._previous_frame.get(path)
        if previous is not None and previous["sha256"] == sha and self._reuse(path, dest, previous):
            return
        dest.write_bytes(data)
        entry = {"path": path, "size": len(data), "sha256": sha, "mtime_ns": os.stat(dest).st_mtime_ns}
        if frame is not None:
            entry["frame"] = frame
        self._record(entry, written=True)

    @contextlib.contextmanager
    def open(self, path: str) -> Iterator[HashingWriter]:
        dest = self._dest(path)
        with open(dest, "wb") as raw:
            writer = HashingWriter(raw)
            yield writer
        self._record(
            {
                "path": path,
                "size": writer.size,
                "sha256": writer.sha.hexdigest(),
                "mtime_ns": os.stat(dest).st_mtime_ns,
            },
            written=True,
        )

    def _open_manifest(self) -> contextlib.AbstractContextManager[IO[bytes]]:
        return open(self.staging / MANIFEST_NAME, "wb")


class ZipSink(Sink):
    """Writes into a zip on a non-seekable stream (data descriptors, ZIP64 where a size may be large)."""

    def __init__(self, *, scratch: Path, root: str, buffer: ChunkBuffer) -> None:
        super().__init__(scratch)
        self.root = root.strip("/")
        self.buffer = buffer
        self.zip = zipfile.ZipFile(buffer, mode="w", allowZip64=True)  # noqa: SIM115
        self._date_time = time.localtime()[:6]

    def _info(self, path: str, size: int | None = None) -> zipfile.ZipInfo:
        info = zipfile.ZipInfo(f"{self.root}/{path}", date_time=self._date_time)
        stored = path.lower().endswith(_STORED_SUFFIXES)
        info.compress_type = zipfile.ZIP_STORED if stored else zipfile.ZIP_DEFLATED
        info.external_attr = 0o644 << 16
        if size is not None:
            info.file_size = size
        return info

    def copy_file(self, *, path: str, source: Path, frame: int | None = None) -> None:
        src = _stat_source(source)
        sha = hashlib.sha256()
        size = 0
        with open(source, "rb") as reader, self.zip.open(self._info(path, src.st_size), "w") as writer:
            while chunk := reader.read(COPY_CHUNK_BYTES):
                sha.update(chunk)
                size += len(chunk)
                writer.write(chunk)
        entry = {"path": path, "size": size, "sha256": sha.hexdigest()}
        if frame is not None:
            entry["frame"] = frame
        self._record(entry, written=True)

    def put_bytes(self, *, path: str, data: bytes, frame: int | None = None) -> None:
        with self.zip.open(self._info(path, len(data)), "w") as writer:
            writer.write(data)
        entry = {"path": path, "size": len(data), "sha256": hashlib.sha256(data).hexdigest()}
        if frame is not None:
            entry["frame"] = frame
        self._record(entry, written=True)

    @contextlib.contextmanager
    def open(self, path: str) -> Iterator[HashingWriter]:
        with self.zip.open(self._info(path), "w", force_zip64=True) as raw:
            writer = HashingWriter(raw)
            yield writer
        self._record({"path": path, "size": writer.size, "sha256": writer.sha.hexdigest()}, written=True)

    def _open_manifest(self) -> contextlib.AbstractContextManager[IO[bytes]]:
        return self.zip.open(self._info(MANIFEST_NAME), "w", force_zip64=True)

    def close(self) -> None:
        super().close()
        self.zip.close()


def copy_into(sink: Sink, path: str, sources: Sequence[Path | bytes]) -> Iterator[None]:
    """Write ``path`` as the concatenation of ``sources`` (files, read in chunks, or literal bytes); yields after
    every chunk read from a file, so a streamed zip can send it on."""
    with sink.open(path) as writer:
        for source in sources:
            if isinstance(source, bytes):
                writer.write(source)
                continue
            with open(source, "rb") as reader:
                while chunk := reader.read(COPY_CHUNK_BYTES):
                    writer.write(chunk)
                    yield
