"""What to export (:class:`ExportOptions`) and the parsing of its text forms (command line, download query)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from datasets.errors import ExportError
from datasets.splits import DEFAULT_RATIOS, SPLITS

FORMATS: tuple[str, ...] = ("coco", "yolo")
RATIO_TOLERANCE = 1e-6


def parse_split_ratios(text: str | Sequence[float]) -> tuple[float, float, float]:
    """``"0.8,0.1,0.1"`` (train, val, test) → a tuple of three non-negative ratios that sum to 1."""
    parts = [p.strip() for p in text.split(",")] if isinstance(text, str) else list(text)
    if len(parts) != 3:
        raise ExportError(f"splits: expected three ratios train,val,test (e.g. 0.8,0.1,0.1), got {text!r}")
    try:
        ratios = tuple(float(p) for p in parts)
    except (TypeError, ValueError) as exc:
        raise ExportError(f"splits: not a number in {text!r}") from exc
    if any(not np.isfinite(r) or r < 0 for r in ratios):
        raise ExportError(f"splits: ratios must be finite and non-negative, got {text!r}")
    if abs(sum(ratios) - 1.0) > RATIO_TOLERANCE:
        raise ExportError(f"splits: ratios must sum to 1, got {sum(ratios):g} from {text!r}")
    if ratios[0] == 0:
        raise ExportError(f"splits: the train ratio must be positive, got {text!r}")
    return ratios  # type: ignore[return-value]


def parse_formats(text: str) -> frozenset[str]:
    """``coco``, ``yolo`` or ``both``."""
    value = (text or "").strip().lower()
    if value == "both":
        return frozenset(FORMATS)
    if value in FORMATS:
        return frozenset({value})
    raise ExportError(f"format: expected coco, yolo or both, got {text!r}")


@dataclass(frozen=True)
class ExportOptions:
    """What to export. ``accepted_only`` drops instances the quota rule rejected (frames stay, as negatives)."""

    accepted_only: bool = False
    ratios: tuple[float, float, float] = DEFAULT_RATIOS
    formats: frozenset[str] = frozenset({"coco"})

    def as_json(self) -> dict[str, Any]:
        return {
            "accepted_only": self.accepted_only,
            "splits": dict(zip(SPLITS, self.ratios, strict=True)),
            "formats": sorted(self.formats),
        }
