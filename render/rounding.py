"""Byte-stable JSON numbers: every spec, light, camera and label record is rounded the same way."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

FLOAT_DECIMALS = 6


def round_floats(value: Any) -> Any:
    """Plain JSON types with floats rounded to :data:`FLOAT_DECIMALS` (−0.0 → 0.0)."""
    if isinstance(value, dict):
        return {str(k): round_floats(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [round_floats(v) for v in value]
    if isinstance(value, np.ndarray):
        return [round_floats(v) for v in value.tolist()]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        number = float(value)
        if not math.isfinite(number):
            raise ValueError(f"non-finite number {number!r} in a JSON record")
        rounded = round(number, FLOAT_DECIMALS)
        return 0.0 if rounded == 0 else rounded
    if value is None or isinstance(value, str):
        return value
    raise TypeError(f"{type(value).__name__} is not a JSON type")
