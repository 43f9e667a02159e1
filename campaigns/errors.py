"""Failure kinds: how failed frames are grouped on the failed-jobs page (pure: builds a query filter, runs none)."""

from __future__ import annotations

import re

from django.db.models import Q

ERROR_KIND_CHARS = 300


def error_kind(error: str) -> str:
    """The failed-jobs grouping key: exception type and the first line of its message, numbers shown as ``#``.

    ``LayoutError: cannot place bed ×6 … in a 2.3 × 2.5 m room`` and the same error in a 2.5 × 2.5 m room are one
    kind; :func:`kind_filter` finds the frames of a kind with a database regex built from it.
    """
    return re.sub(r"\d+(?:\.\d+)?", "#", (error or "").split("\n", 1)[0])[:ERROR_KIND_CHARS]


def kind_filter(kind: str) -> Q:
    """Errors whose first line is of this kind (see :func:`error_kind`): ``#`` matches a number."""
    if "\x00" in kind:  # no stored error holds NUL (PostgreSQL text cannot), and the database refuses it in a query
        return Q(pk__in=[])

    pattern = "^" + "".join(
        "[0-9]+([.][0-9]+)?" if part == "#" else re.escape(part) for part in re.split(r"(#)", kind) if part
    )
    if len(kind) < ERROR_KIND_CHARS:  # a key shorter than the cap is the whole first line
        pattern += "(\n|$)"
    return Q(error__regex=pattern)
