"""Admin for every campaign model. Counters and state are read-only here: they change through services only."""

from __future__ import annotations

from django.contrib import admin

from campaigns.models import Asset, Campaign, ClassQuota, Frame, FrameEvent, Instance, ObjectClass
from teams.permissions import ADMIN, PLANNER, has_role, scope_to_user, teams_for


class TeamScopedAdmin(admin.ModelAdmin):
    """Staff who are not superusers see and edit only their teams' rows (issue: scoped admin lists)."""

    team_field = "campaign__team"

    def get_queryset(self, request):
        return scope_to_user(super().get_queryset(request), user=request.user, team_field=self.team_field)

    def _team_id(self, obj):
        return type(obj).objects.filter(pk=obj.pk).values_list(self.team_field, flat=True).first()

    def has_change_permission(self, request, obj=None):
        allowed = super().has_change_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return has_role(user=request.user, team=self._team_id(obj), role=PLANNER)

    def has_delete_permission(self, request, obj=None):
        allowed = super().has_delete_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return has_role(user=request.user, team=self._team_id(obj), role=ADMIN)

    def formfield_for_foreignkey(self, db_field, request, **kwargs):
        # Drop-downs must not list other teams' campaigns or teams.
        if db_field.related_model is Campaign:
            kwargs["queryset"] = scope_to_user(Campaign.objects.all(), user=request.user, role=PLANNER)
        elif db_field.name == "team":
            kwargs["queryset"] = teams_for(user=request.user, role=PLANNER)
        return super().formfield_for_foreignkey(db_field, request, **kwargs)


@admin.register(ObjectClass)
class ObjectClassAdmin(admin.ModelAdmin):
    list_display = ("name", "label")
    search_fields = ("name", "label")


@admin.register(Asset)
class AssetAdmin(TeamScopedAdmin):
    team_field = "team"

    def get_queryset(self, request):
        # Shared procedural assets (no team) are visible to everyone; uploaded ones to their team.
        return scope_to_user(admin.ModelAdmin.get_queryset(self, request), user=request.user, include_shared=True)

    def has_change_permission(self, request, obj=None):
        if obj is not None and obj.team_id is None:
            return request.user.is_superuser
        return super().has_change_permission(request, obj)

    def has_delete_permission(self, request, obj=None):
        if obj is not None and obj.team_id is None:
            return request.user.is_superuser
        return super().has_delete_permission(request, obj)

    list_display = ("name", "object_class", "kind", "generator", "creation_cost")
    list_filter = ("kind", "object_class")
    search_fields = ("name", "generator")


class ClassQuotaInline(admin.TabularInline):
    model = ClassQuota
    extra = 0
    readonly_fields = ("placed_count", "accepted_count", "rejected_count", "met_at")


COUNTER_FIELDS = ("frames_done", "frames_dead", "instances_accepted", "instances_rejected", "cpu_s_spent",
                  "wall_s_spent", "compute_cost_spent")


@admin.register(Campaign)
class CampaignAdmin(TeamScopedAdmin):
    team_field = "team"
    list_display = ("name", "team", "owner", "status", "pause_reason", "weight", "frames_done", "instances_accepted",
                    "compute_cost_spent", "cost_budget", "created_at")
    list_filter = ("status", ("team", admin.RelatedOnlyFieldListFilter))
    search_fields = ("name",)
    readonly_fields = ("status", "pause_reason", "pause_detail", "started_at", "finished_at", *COUNTER_FIELDS)
    filter_horizontal = ("assets",)
    inlines = [ClassQuotaInline]


@admin.register(ClassQuota)
class ClassQuotaAdmin(TeamScopedAdmin):
    list_display = ("campaign", "object_class", "target_accepted", "accepted_count", "rejected_count",
                    "placed_count", "min_visible_fraction", "min_box_px", "min_contrast", "met_at")
    list_filter = ("object_class",)
    readonly_fields = ("placed_count", "accepted_count", "rejected_count", "met_at")


@admin.register(Frame)
class FrameAdmin(TeamScopedAdmin):
    list_display = ("campaign", "index", "state", "attempts", "worker_host", "cpu_s", "wall_s", "layout_index",
                    "lighting_index", "view_index", "finished_at")
    list_filter = ("state",)
    search_fields = ("task_id", "worker_host")
    readonly_fields = [f.name for f in Frame._meta.fields]


@admin.register(FrameEvent)
class FrameEventAdmin(TeamScopedAdmin):
    list_display = ("created_at", "campaign", "frame", "from_state", "to_state", "worker_host", "detail")
    list_filter = ("to_state",)
    readonly_fields = [f.name for f in FrameEvent._meta.fields]


@admin.register(Instance)
class InstanceAdmin(TeamScopedAdmin):
    list_display = ("frame", "instance_id", "object_class", "accepted", "visible_fraction", "contrast", "mask_area_px")
    list_filter = ("accepted", "object_class")
    readonly_fields = [f.name for f in Instance._meta.fields]
