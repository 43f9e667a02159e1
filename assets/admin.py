"""Admin for the asset library: object classes and assets (shared rows are changed by superusers only)."""

from __future__ import annotations

from typing import Any

from django.contrib import admin
from django.http import HttpRequest

from assets.models import Asset, ObjectClass
from teams.admin import TeamScopedAdmin


@admin.register(ObjectClass)
class ObjectClassAdmin(TeamScopedAdmin):
    list_display = ("name", "label")
    search_fields = ("name", "label")


@admin.register(Asset)
class AssetAdmin(TeamScopedAdmin):
    """Shared procedural assets (no team) are listed for everyone and changed by superusers; uploaded ones belong
    to their team. Mesh files arrive through the dashboard's upload page, which checks them."""

    list_display = ("name", "object_class", "kind", "generator", "creation_cost")
    list_filter = ("kind", "object_class")
    search_fields = ("name", "generator")

    def get_readonly_fields(self, request: HttpRequest, obj: Any = None) -> tuple[str, ...]:
        readonly = tuple(super().get_readonly_fields(request, obj))
        return readonly if request.user.is_superuser else (*readonly, "mesh_file")
