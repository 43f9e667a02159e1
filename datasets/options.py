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


#: What happens to instances that are visible but were not accepted by the quota rules (too occluded, too small,
#: too little contrast): ``ignore`` (default) marks them as regions a trainer must neither reward nor punish (COCO
#: ``iscrowd: 1`` with their mask; YOLO by :data:`YOLO_IGNORE_MODES`); ``label`` exports them as ordinary objects;
#: ``drop`` leaves them out (they become unlabelled background; the export counts them).
REJECTED_MODES: tuple[str, ...] = ("ignore", "label", "drop")
#: YOLO has no ignore regions (its label format is boxes only). ``fill`` (default) paints each ignore region's
#: pixels (its mask, grown by one pixel for the anti-aliased edge, never over a labelled object) with a neutral
#: colour in the exported images; ``skip`` leaves frames with an ignore region out of the YOLO split lists;
#: ``keep`` keeps them unchanged and lists how many unlabelled objects each holds (``yolo_unlabelled.txt``).
YOLO_IGNORE_MODES: tuple[str, ...] = ("fill", "skip", "keep")
#: Below this many visible pixels an instance that was not accepted is background, not even an ignore region
#: (a few stray pixels of a hidden sofa are not an object a detector could find). Our default; per class settable.
DEFAULT_BACKGROUND_BELOW_PX = 16
MAX_BACKGROUND_BELOW_PX = 10**7


def parse_choice(text: str, choices: Sequence[str], what: str) -> str:
    value = (text or "").strip().lower()
    if value not in choices:
        raise ExportError(f"{what}: expected one of {', '.join(choices)}, got {text!r}")
    return value


def _pixels(text: str, what: str) -> int:
    try:
        value = int(text.strip())
    except (AttributeError, ValueError) as exc:
        raise ExportError(f"{what}: expected a whole number of pixels, got {text!r}") from exc
    if not 0 <= value <= MAX_BACKGROUND_BELOW_PX:
        raise ExportError(f"{what}: must be between 0 and {MAX_BACKGROUND_BELOW_PX} px, got {value}")
    return value


def parse_background_below(text: str) -> tuple[int, tuple[tuple[str, int], ...]]:
    """``"16"`` or ``"16,wall_clock=40,ottoman=0"`` → (default px, per-class px): the visible-pixel count below
    which a not-accepted instance counts as background. An empty text gives the default."""
    default, per_class = DEFAULT_BACKGROUND_BELOW_PX, {}
    for part in [p.strip() for p in (text or "").split(",") if p.strip()]:
        if "=" in part:
            name, value = (x.strip() for x in part.split("=", 1))
            if not name or "\x00" in name:
                raise ExportError(f"background below: a class name is missing in {part!r}")
            per_class[name] = _pixels(value, f"background below ({name})")
        else:
            default = _pixels(part, "background below")
    return default, tuple(sorted(per_class.items()))


@dataclass(frozen=True)
class ExportOptions:
    """What to export: the split ratios, the formats, and what becomes of instances that are visible but were not
    accepted (``rejected``: :data:`REJECTED_MODES`; ``yolo_ignore``: :data:`YOLO_IGNORE_MODES`;
    ``background_below_px`` and its per-class overrides: below that many visible pixels such an instance is
    background). Frames without a labelled object stay, as negatives."""

    ratios: tuple[float, float, float] = DEFAULT_RATIOS
    formats: frozenset[str] = frozenset({"coco"})
    rejected: str = "ignore"
    yolo_ignore: str = "fill"
    background_below_px: int = DEFAULT_BACKGROUND_BELOW_PX
    background_below_px_by_class: tuple[tuple[str, int], ...] = ()

    def __post_init__(self) -> None:
        parse_choice(self.rejected, REJECTED_MODES, "rejected instances")
        parse_choice(self.yolo_ignore, YOLO_IGNORE_MODES, "YOLO ignore regions")

    @property
    def labels_rejected(self) -> bool:
        """Whether not-accepted instances are exported as ordinary objects (and count in the split balance)."""
        return self.rejected == "label"

    @property
    def fills_images(self) -> bool:
        """Whether ignore regions are painted over in the exported images (YOLO in the export, ``fill``)."""
        return self.rejected == "ignore" and "yolo" in self.formats and self.yolo_ignore == "fill"

    def background_below(self, class_name: str) -> int:
        return dict(self.background_below_px_by_class).get(class_name, self.background_below_px)

    def as_json(self) -> dict[str, Any]:
        return {
            "splits": dict(zip(SPLITS, self.ratios, strict=True)),
            "formats": sorted(self.formats),
            "rejected": self.rejected,
            "yolo_ignore": self.yolo_ignore if "yolo" in self.formats else None,
            "background_below_px": self.background_below_px,
            "background_below_px_by_class": dict(self.background_below_px_by_class),
        }
