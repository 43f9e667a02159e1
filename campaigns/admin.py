"""Admin for every campaign model. Counters and state are read-only here: they change through services only."""

from __future__ import annotations

from django.contrib import admin

from campaigns.models import Asset, Campaign, ClassQuota, Frame, FrameEvent, Instance, ObjectClass


@admin.register(ObjectClass)
class ObjectClassAdmin(admin.ModelAdmin):
    list_display = ("name", "label")
    search_fields = ("name", "label")


@admin.register(Asset)
class AssetAdmin(admin.ModelAdmin):
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
class CampaignAdmin(admin.ModelAdmin):
    list_display = ("name", "owner", "status", "pause_reason", "weight", "frames_done", "instances_accepted",
                    "compute_cost_spent", "cost_budget", "created_at")
    list_filter = ("status",)
    search_fields = ("name",)
    readonly_fields = ("status", "pause_reason", "pause_detail", "started_at", "finished_at", *COUNTER_FIELDS)
    filter_horizontal = ("assets",)
    inlines = [ClassQuotaInline]


@admin.register(ClassQuota)
class ClassQuotaAdmin(admin.ModelAdmin):
    list_display = ("campaign", "object_class", "target_accepted", "accepted_count", "rejected_count",
                    "placed_count", "min_visible_fraction", "min_box_px", "met_at")
    list_filter = ("object_class",)
    readonly_fields = ("placed_count", "accepted_count", "rejected_count", "met_at")


@admin.register(Frame)
class FrameAdmin(admin.ModelAdmin):
    list_display = ("campaign", "index", "state", "attempts", "worker_host", "cpu_s", "wall_s", "layout_index",
                    "lighting_index", "view_index", "finished_at")
    list_filter = ("state", "campaign")
    search_fields = ("task_id", "worker_host")
    readonly_fields = [f.name for f in Frame._meta.fields]


@admin.register(FrameEvent)
class FrameEventAdmin(admin.ModelAdmin):
    list_display = ("created_at", "campaign", "frame", "from_state", "to_state", "worker_host", "detail")
    list_filter = ("to_state", "campaign")
    readonly_fields = [f.name for f in FrameEvent._meta.fields]


@admin.register(Instance)
class InstanceAdmin(admin.ModelAdmin):
    list_display = ("frame", "instance_id", "object_class", "accepted", "visible_fraction", "mask_area_px")
    list_filter = ("accepted", "object_class")
    readonly_fields = [f.name for f in Instance._meta.fields]
