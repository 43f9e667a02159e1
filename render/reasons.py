"""Reject reasons: one wording for why an instance was not accepted, used by the render core's labels and by the
campaign planner when it judges a label again with a quota's own thresholds. Pure (no renderer, no pycocotools).

Each reason shows its comparison with enough digits to read true: "visible_fraction 0.2496 < 0.25", never
"0.25 < 0.25".
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any


def below_text(value: float, limit: float) -> str:
    """``value`` with the fewest decimals (2–6) that still print it below ``limit``."""
    for decimals in range(2, 7):
        text = f"{value:.{decimals}f}"
        if float(text) < limit:
            return text
    return repr(value)


def visible_fraction_reason(visible_fraction: float, *, min_visible_fraction: float) -> str | None:
    """The reason for too small a visible fraction (unitless, 0–1); None when it passes."""
    if visible_fraction >= min_visible_fraction:
        return None
    return f"visible_fraction {below_text(visible_fraction, min_visible_fraction)} < {min_visible_fraction:g}"


def box_reason(side_px: float, *, min_box_px: float) -> str | None:
    """The reason for too short a visible box side (px); None when it passes. Whole pixels print as such."""
    if side_px >= min_box_px:
        return None
    text = f"{side_px:g}"
    if float(text) >= min_box_px:
        text = below_text(side_px, min_box_px)
    return f"box {text} px < {min_box_px:g} px"


def contrast_reason(label: Mapping[str, Any], *, min_contrast: float) -> str | None:
    """The reject reason for too little contrast, worded like the others; None when it passes.

    Instances with no visible pixels are judged by their geometry ("not visible") alone.
    """
    if not label.get("mask_area_px") or min_contrast <= 0:
        return None
    contrast = label.get("contrast")
    if contrast is None:  # labels from before the measure existed
        return None
    contrast = float(contrast)
    if contrast >= min_contrast:
        return None
    return f"contrast {below_text(contrast, min_contrast)} < {min_contrast:g}"
