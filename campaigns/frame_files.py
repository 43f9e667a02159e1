"""Where a frame's files live, and how a finished render is put there.

The one place that knows the folder layout under MEDIA_ROOT (``campaigns/<campaign id>/frames/<index>``); the
worker, the scheduler, the integrity check and the export all ask here.
"""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

from django.conf import settings


def frame_relative_dir(*, campaign_id: int, index: int) -> str:
    """A frame's folder relative to MEDIA_ROOT (the value stored in ``Frame.output_dir``)."""
    return f"campaigns/{int(campaign_id)}/frames/{int(index)}"


def frame_output_dir(*, campaign_id: int, index: int) -> tuple[Path, str]:
    """Absolute directory for a frame's files and the same path relative to MEDIA_ROOT."""
    relative = frame_relative_dir(campaign_id=campaign_id, index=index)
    return Path(settings.MEDIA_ROOT) / relative, relative


def publish_frame_dir(*, partial: Path, final: Path) -> None:
    """Move a completely written frame folder into place by renames (same file system, so each is atomic).

    A folder already there (left by an earlier attempt whose result was never recorded) is moved aside first
    and deleted afterwards, so readers see the old complete folder or the new complete one.
    """
    if final.exists():
        old = final.with_name(f".{final.name}.old-{os.getpid()}-{time.monotonic_ns()}")
        os.rename(final, old)
        os.rename(partial, final)
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.rename(partial, final)
    # Partial folders of earlier attempts of this frame whose worker was killed mid-render (nobody else cleans
    # them); a duplicate attempt still rendering loses its folder and records a stale failure, which is harmless.
    remove_partial_folders(final)


def remove_partial_folders(final: Path) -> None:
    """Remove what killed attempts of a frame left beside its folder (called once the frame has settled)."""
    for leftover in final.parent.glob(f".{final.name}.partial-*"):
        shutil.rmtree(leftover, ignore_errors=True)
