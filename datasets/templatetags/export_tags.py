"""Template helpers for the dataset download (the permission rule itself lives in datasets.permissions.can_export)."""

from __future__ import annotations

from typing import Any

from django import template

from datasets import permissions

register = template.Library()


@register.filter
def can_export(user: Any, campaign: Any) -> bool:
    """``{% if request.user|can_export:campaign %}``."""
    return permissions.can_export(user=user, campaign=campaign)
