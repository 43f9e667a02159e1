"""The one error of dataset export."""

from __future__ import annotations


class ExportError(ValueError):
    """Bad input or an export that cannot be written; the message says which, and nothing was changed."""
