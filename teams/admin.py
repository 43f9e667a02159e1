from django.contrib import admin

from teams.models import Membership, Team
from teams.permissions import ADMIN, scope_to_user, teams_for


class MembershipInline(admin.TabularInline):
    model = Membership
    extra = 1


@admin.register(Team)
class TeamAdmin(admin.ModelAdmin):
    list_display = ("name", "created_at")
    inlines = [MembershipInline]

    def get_queryset(self, request):
        return scope_to_user(super().get_queryset(request), user=request.user, team_field="pk")

    def has_change_permission(self, request, obj=None):
        if obj is None:
            return super().has_change_permission(request)
        return request.user.is_superuser or teams_for(user=request.user, role=ADMIN).filter(pk=obj.pk).exists()


@admin.register(Membership)
class MembershipAdmin(admin.ModelAdmin):
    list_display = ("team", "user", "role")
    list_filter = ("role",)

    def get_queryset(self, request):
        return scope_to_user(super().get_queryset(request), user=request.user)
