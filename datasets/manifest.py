"""The manifest (``manifest.jsonl``): its format, reading it as a stream, and the file hash it records.

A header line (format, version, campaign, options, file and byte totals), then one line per file: path, size,
SHA-256; a frame's files also carry ``frame`` and, in a directory export, the exported file's ``mtime_ns`` and
its source's ``[size, mtime_ns]`` (what re-export compares).
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from datasets.errors import ExportError

EXPORT_FORMAT = "evenframe-dataset"
EXPORT_FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.jsonl"
COPY_CHUNK_BYTES = 1 << 20


def read_manifest_header(path: Path) -> dict[str, Any]:
    with open(path, encoding="utf-8") as handle:
        header = json.loads(handle.readline() or "null")
    if not isinstance(header, dict) or header.get("format") != EXPORT_FORMAT:
        raise ExportError(f"{path}: not an Evenframe dataset manifest")
    return header


def iter_manifest_entries(path: Path) -> Iterator[dict[str, Any]]:
    with open(path, encoding="utf-8") as handle:
        handle.readline()
        for line in handle:
            if line.strip():
                yield json.loads(line)


class PreviousManifest:
    """Entries of the previous export, consumed in frame order; aggregate entries (no frame) are ignored."""

    def __init__(self, path: Path | None) -> None:
        self._entries = iter_manifest_entries(path) if path is not None else iter(())
        self._pending: dict[str, Any] | None = None
        self._advance()

    def _advance(self) -> None:
        for entry in self._entries:
            if "frame" in entry:
                self._pending = entry
                return
        self._pending = None

    def for_frame(self, index: int) -> dict[str, dict[str, Any]]:
        found: dict[str, dict[str, Any]] = {}
        while self._pending is not None and self._pending["frame"] <= index:
            if self._pending["frame"] == index:
                found[self._pending["path"]] = self._pending
            self._advance()
        return found


def sha256_file(path: Path) -> tuple[int, str]:
    """Size in bytes and SHA-256 (hex) of a file, read in :data:`COPY_CHUNK_BYTES` chunks."""
    sha = hashlib.sha256()
    size = 0
    with open(path, "rb") as handle:
        while chunk := handle.read(COPY_CHUNK_BYTES):
            sha.update(chunk)
            size += len(chunk)
    return size, sha.hexdigest()
