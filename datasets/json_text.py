"""The export's two JSON spellings: compact one-line (JSON lines, COCO entries) and pretty (small files).

Both sort keys and keep non-ASCII text, so the same content always gives the same bytes.
"""

from __future__ import annotations

import json
from datetime import datetime
from decimal import Decimal
from typing import Any

import numpy as np


def dumps(value: Any) -> str:
    """Compact one-line JSON (no spaces after separators)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, default=_json_default)


def pretty(value: Any) -> bytes:
    """Indented JSON with a final newline, UTF-8."""
    return (json.dumps(value, sort_keys=True, indent=2, ensure_ascii=False, default=_json_default) + "\n").encode()


def _json_default(value: Any) -> Any:
    if isinstance(value, Decimal):
        return str(value)
    if isinstance(value, datetime):
        return value.isoformat()
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")
