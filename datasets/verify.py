"""Checking an export against its manifest (``manage.py verify_dataset DIR``)."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from datasets.errors import ExportError
from datasets.manifest import MANIFEST_NAME, iter_manifest_entries, read_manifest_header, sha256_file


@dataclass
class VerifyReport:
    directory: str
    files: int = 0
    bytes_checked: int = 0
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


def verify_dataset(*, directory: str | Path) -> VerifyReport:
    """Re-hash every file the manifest lists; report missing, altered (size or SHA-256) and unlisted files."""
    root = Path(directory)
    report = VerifyReport(directory=str(root))
    manifest = root / MANIFEST_NAME
    if not root.is_dir():
        report.problems.append(f"missing: {root} is not a directory")
        return report
    if not manifest.is_file():
        report.problems.append(f"missing: {MANIFEST_NAME}")
        return report
    try:
        header = read_manifest_header(manifest)
    except (ExportError, ValueError, UnicodeDecodeError) as exc:
        report.problems.append(f"altered: {MANIFEST_NAME} ({exc})")
        return report
    listed: set[str] = {MANIFEST_NAME}
    try:
        for entry in iter_manifest_entries(manifest):
            path = entry["path"]
            listed.add(path)
            report.files += 1
            target = root / path
            if not target.is_file():
                report.problems.append(f"missing: {path}")
                continue
            size, sha = sha256_file(target)
            report.bytes_checked += size
            if size != entry["size"]:
                report.problems.append(f"altered: {path} (size {size} bytes, manifest says {entry['size']})")
            elif sha != entry["sha256"]:
                report.problems.append(f"altered: {path} (SHA-256 differs from the manifest)")
    except (ValueError, KeyError, UnicodeDecodeError) as exc:
        report.problems.append(f"altered: {MANIFEST_NAME} (unreadable entry: {exc})")
    if header.get("files") is not None and header["files"] != report.files:
        report.problems.append(f"altered: {MANIFEST_NAME} (lists {report.files} files, header says {header['files']})")
    for dirpath, dirnames, filenames in os.walk(root):
        dirnames.sort()
        for name in sorted(filenames):
            relative = os.path.relpath(os.path.join(dirpath, name), root).replace(os.sep, "/")
            if relative not in listed:
                report.problems.append(f"unexpected: {relative} (not in the manifest)")
    return report
