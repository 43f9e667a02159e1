"""The sRGB transfer function, in one place.

``decode`` turns sRGB-encoded values (0..1) into linear light (0..1); ``encode`` does the reverse. Both work on
arrays of any shape and keep a floating input's precision (float32 in, float32 out), so the callers that work in
float32 images do not pay for a float64 copy; integers and Python numbers are computed in float64.

Neither clips: a caller that needs [0, 1] (8-bit encoding, for one) clips first, because only it knows whether an
out-of-range value is an error or a highlight.

References
----------
IEC 61966-2-1:1999, *Multimedia systems and equipment — Colour measurement and management — Part 2-1: Default
RGB colour space — sRGB*, clause 5.2 (encoding) and 5.3 (decoding): linear segment of slope 12.92 below
0.0031308 (linear) / 0.04045 (encoded), else a 2.4-power segment with offset 0.055.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

# IEC 61966-2-1:1999 constants. The encoded break point 0.04045 is 12.92 × 0.0031308 rounded, as the standard has it.
LINEAR_BREAK = 0.0031308
ENCODED_BREAK = 0.04045
LINEAR_SLOPE = 12.92
OFFSET = 0.055
SCALE = 1.055  # 1 + OFFSET, so that the two segments meet at the break point
GAMMA = 2.4


def _as_float(values: np.ndarray | Sequence[float] | float) -> np.ndarray:
    array = np.asarray(values)
    if not np.issubdtype(array.dtype, np.floating):
        array = array.astype(np.float64)
    return array


def decode(encoded: np.ndarray | Sequence[float] | float) -> np.ndarray:
    """sRGB-encoded values (0..1) to linear light (0..1), in the input's floating precision.

    References
    ----------
    IEC 61966-2-1:1999, clause 5.3: ``C / 12.92`` for ``C ≤ 0.04045``, else ``((C + 0.055) / 1.055) ** 2.4``.
    """
    c = _as_float(encoded)
    return np.where(c <= ENCODED_BREAK, c / LINEAR_SLOPE, ((c + OFFSET) / SCALE) ** GAMMA).astype(c.dtype, copy=False)


def encode(linear: np.ndarray | Sequence[float] | float) -> np.ndarray:
    """Linear light (0..1) to sRGB-encoded values (0..1), in the input's floating precision; no clipping.

    References
    ----------
    IEC 61966-2-1:1999, clause 5.2: ``12.92 L`` for ``L ≤ 0.0031308``, else ``1.055 L ** (1 / 2.4) − 0.055``.
    """
    c = _as_float(linear)
    return np.where(c <= LINEAR_BREAK, LINEAR_SLOPE * c, SCALE * np.power(c, 1.0 / GAMMA) - OFFSET).astype(
        c.dtype, copy=False
    )
