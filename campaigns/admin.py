"""Admin for every campaign model (object classes and assets: :mod:`assets.admin`). Counters and state are read-only here: they change through services only."""

from __future__ import annotations

from typing import Any

from django import forms
from django.contrib import admin
from django.http import HttpRequest

from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance
from campaigns.services import CampaignError, normalize_campaign_budget
from teams.admin import TeamScopedAdmin, TeamScopedAdminMixin
from teams.permissions import PLANNER, has_role


class RecordAdmin(TeamScopedAdmin):
    """Rows that only the services write (frames, their events, instances): viewed here, never added or edited.

    Saving one from a form would write every column back and could undo a worker's update made meanwhile.
    """

    def has_add_permission(self, request: HttpRequest) -> bool:
        return False

    def has_change_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        return False


class ClassQuotaInline(TeamScopedAdminMixin, admin.TabularInline):
    model = ClassQuota
    extra = 0
    readonly_fields = ("placed_count", "accepted_count", "rejected_count", "met_at")


COUNTER_FIELDS = (
    "frames_done",
    "frames_dead",
    "instances_accepted",
    "instances_rejected",
    "cpu_s_spent",
    "wall_s_spent",
    "compute_cost_spent",
)


class CampaignAdminForm(forms.ModelForm):
    """A campaign uses its own team's assets and shared ones, and is owned by a planner of its team."""

    request_user: Any = None

    class Meta:
        model = Campaign
        fields = "__all__"

    def clean_budget(self) -> dict[str, Any]:
        # The same normalization as a campaign created on the dashboard: pages and workers read it as such.
        budget = self.cleaned_data.get("budget")
        if not isinstance(budget, dict):
            raise forms.ValidationError("The budget must be a JSON object of budget sections.")
        try:
            return normalize_campaign_budget(budget)
        except CampaignError as exc:
            raise forms.ValidationError(str(exc)) from exc

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if (
            data is None
        ):  # ModelForm.clean() returns cleaned_data; Django keeps cleaned_data when a clean() returns None
            data = self.cleaned_data
        team = data.get("team")
        if team is None:
            return data
        foreign = sorted(str(a) for a in data.get("assets") or () if a.team_id not in (None, team.pk))
        if foreign:
            self.add_error("assets", f"These assets belong to another team: {', '.join(foreign)}.")
        owner = data.get("owner")
        if owner is not None and not has_role(user=owner, team=team, role=PLANNER):
            self.add_error("owner", f"{owner} is not a planner in team {team}.")
        return data


@admin.register(Campaign)
class CampaignAdmin(TeamScopedAdmin):
    form = CampaignAdminForm
    list_display = (
        "name",
        "team",
        "owner",
        "status",
        "pause_reason",
        "weight",
        "frames_done",
        "instances_accepted",
        "compute_cost_spent",
        "cost_budget",
        "created_at",
    )
    list_filter = ("status", ("team", admin.RelatedOnlyFieldListFilter))
    search_fields = ("name",)
    readonly_fields = ("status", "pause_reason", "pause_detail", "started_at", "finished_at", *COUNTER_FIELDS)
    filter_horizontal = ("assets",)
    inlines = [ClassQuotaInline]


@admin.register(ClassQuota)
class ClassQuotaAdmin(TeamScopedAdmin):
    list_display = (
        "campaign",
        "object_class",
        "target_accepted",
        "accepted_count",
        "rejected_count",
        "placed_count",
        "min_visible_fraction",
        "min_box_px",
        "min_contrast",
        "met_at",
    )
    list_filter = ("object_class",)
    readonly_fields = ("placed_count", "accepted_count", "rejected_count", "met_at")


@admin.register(Frame)
class FrameAdmin(RecordAdmin):
    list_display = (
        "campaign",
        "index",
        "state",
        "attempts",
        "worker_host",
        "cpu_s",
        "wall_s",
        "layout_index",
        "lighting_index",
        "view_index",
        "finished_at",
    )
    list_filter = ("state",)
    search_fields = ("task_id", "worker_host")
    readonly_fields = [f.name for f in Frame._meta.fields]


@admin.register(FrameEvent)
class FrameEventAdmin(RecordAdmin):
    list_display = ("created_at", "campaign", "frame", "from_state", "to_state", "worker_host", "detail")
    list_filter = ("to_state",)
    readonly_fields = [f.name for f in FrameEvent._meta.fields]


@admin.register(Instance)
class InstanceAdmin(RecordAdmin):
    list_display = ("frame", "instance_id", "object_class", "accepted", "visible_fraction", "contrast", "mask_area_px")
    list_filter = ("accepted", "object_class")
    readonly_fields = [f.name for f in Instance._meta.fields]
