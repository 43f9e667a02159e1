"""Admin for API tokens: superusers see who holds which token and may revoke one; nobody adds or edits a token here
(a token is made on its owner's profile page, where its plaintext is shown once; the admin never sees it)."""

from __future__ import annotations

from typing import Any

from django.contrib import admin
from django.http import HttpRequest
from django.utils import timezone

from api.models import ApiToken


@admin.register(ApiToken)
class ApiTokenAdmin(admin.ModelAdmin):
    list_display = ("name", "user", "prefix", "created_at", "last_used_at", "revoked_at")
    list_filter = ("revoked_at",)
    search_fields = ("name", "user__username", "prefix")
    fields = ("name", "user", "prefix", "created_at", "last_used_at", "revoked_at")
    readonly_fields = fields
    actions = ["revoke"]

    def has_module_permission(self, request: HttpRequest) -> bool:
        return request.user.is_active and request.user.is_superuser

    def has_view_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        return request.user.is_active and request.user.is_superuser

    def has_add_permission(self, request: HttpRequest) -> bool:
        return False

    def has_change_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        return False

    def has_delete_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        return request.user.is_active and request.user.is_superuser

    @admin.action(description="Revoke the selected tokens")
    def revoke(self, request: HttpRequest, queryset: Any) -> None:
        changed = queryset.filter(revoked_at__isnull=True).update(revoked_at=timezone.now())
        self.message_user(request, f"{changed} token(s) revoked.")
