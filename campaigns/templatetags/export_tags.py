"""Template helpers for the dataset download (the permission rule itself lives in campaigns.export.can_export)."""

from __future__ import annotations

from typing import Any

from django import template

from campaigns import export

register = template.Library()


@register.filter
def can_export(user: Any, campaign: Any) -> bool:
    """``{% if request.user|can_export:campaign %}``."""
    return export.can_export(user=user, campaign=campaign)
