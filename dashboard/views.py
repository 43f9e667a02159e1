"""Dashboard views. Thin: resolve the object through the team permission helpers, read through selectors, write
through services, render. Every page works without JavaScript; dashboard.js adds polling and charts.

Permissions (teams.permissions): anonymous users are redirected to the login page by the middleware; rows of
other teams are 404; viewers read; planners create, edit, start, pause, resume, cancel, retry, ignore, re-render
and upload; admins delete.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

from django.conf import settings
from django.contrib import messages
from django.core.paginator import Paginator
from django.db.models import Q, QuerySet
from django.http import (
    FileResponse,
    Http404,
    HttpRequest,
    HttpResponse,
    HttpResponseNotAllowed,
    JsonResponse,
    QueryDict,
)
from django.shortcuts import redirect, render
from django.urls import reverse
from django.views.decorators.cache import never_cache
from django.views.decorators.http import require_GET, require_POST

from api import services as api_services
from assets import files as asset_files
from assets import services as asset_services
from assets.models import Asset
from campaigns import errors, notify, selectors, services
from campaigns.models import Campaign, Frame
from dashboard.forms import (
    AssetUploadForm,
    CampaignForm,
    CostBudgetForm,
    ExtendForm,
    NotificationForm,
    budget_value,
)
from dashboard.templatetags.money import currency, format_money
from datasets import page_statistics
from render.budget import FIELDS
from render.images import write_image
from teams.permissions import ADMIN, PLANNER, VIEWER, get_for_user_or_404, has_role, scope_to_user, teams_for

GALLERY_PAGE = 24
FAILED_PAGE = 50
THUMB_WIDTH_PX = 320


def _campaign(request: HttpRequest, campaign_id: int, role: str = VIEWER) -> Campaign:
    return get_for_user_or_404(
        Campaign.objects.select_related("team", "owner"), user=request.user, role=role, pk=campaign_id
    )


def _roles(request: HttpRequest, campaign: Campaign) -> dict[str, bool]:
    return {
        "can_plan": has_role(user=request.user, team=campaign.team_id, role=PLANNER),
        "can_admin": has_role(user=request.user, team=campaign.team_id, role=ADMIN),
    }


def _duration(seconds: float | None) -> str:
    if seconds is None:
        return "—"
    seconds = max(0, int(round(seconds)))
    if seconds < 90:
        return f"{seconds} s"
    if seconds < 5400:
        return f"{round(seconds / 60)} min"
    if seconds < 172800:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds / 86400:.1f} days"


# --- plotly.js, from the installed package -----------------------------------------------------------------------


@lru_cache(maxsize=1)
def _plotly_js() -> bytes:
    from plotly.offline import get_plotlyjs

    return get_plotlyjs().encode("utf-8")


def plotly_version() -> str:
    import plotly

    return plotly.__version__


@require_GET
def plotly_js(request: HttpRequest, version: str) -> HttpResponse:
    """plotly.js of the installed plotly package; the URL carries the version, so it may be cached for a year."""
    if version != plotly_version():
        raise Http404("another plotly version")
    response = HttpResponse(_plotly_js(), content_type="text/javascript; charset=utf-8")
    response["Cache-Control"] = "public, max-age=31536000, immutable"
    return response


# --- campaign list ---------------------------------------------------------------------------------------------


@require_GET
def campaign_list(request: HttpRequest) -> HttpResponse:
    campaigns = scope_to_user(Campaign.objects.all(), user=request.user)
    rows = selectors.campaign_rows(campaigns=campaigns)
    for row in rows:
        row["eta"] = _duration(row["eta_s"]) if row["eta_s"] is not None else None
    return render(
        request,
        "campaigns/list.html",
        {"rows": rows, "can_create": teams_for(user=request.user, role=PLANNER).exists()},
    )


@never_cache
@require_GET
def campaign_list_live(request: HttpRequest) -> JsonResponse:
    campaigns = scope_to_user(Campaign.objects.all(), user=request.user)
    out = []
    for row in selectors.campaign_rows(campaigns=campaigns):
        c = row["campaign"]
        out.append(
            {
                "id": c.pk,
                "status": c.status,
                "status_label": c.get_status_display(),
                "progress_pct": row["progress_pct"],
                "spent": f"{row['spent']:.2f}",
                "spent_pct": round(row["spent_pct"], 1),
                "frames_done": c.frames_done,
                "eta": _duration(row["eta_s"]) if row["eta_s"] is not None else "—",
            }
        )
    return JsonResponse({"campaigns": out, "currency": currency()})


# --- planner -----------------------------------------------------------------------------------------------------


def _estimate(request: HttpRequest, form: CampaignForm) -> dict[str, Any] | None:
    """The plan estimate for a valid form (nothing is saved), or None."""
    if not form.is_valid():
        return None
    d = form.cleaned_data
    history = scope_to_user(Campaign.objects.all(), user=request.user)
    est = selectors.plan_estimate(
        budget=d["budget"],
        targets={q.class_name: q.target_accepted for q in d["quotas"]},
        cost_budget=d["cost_budget"],
        price_per_cpu_hour=d["price_per_cpu_hour"],
        setup_cost=d["setup_cost"],
        manual_rate_per_hour=d["manual_labelling_rate_per_hour"],
        history=history,
    )
    return {
        "frames": est.frames,
        "instances_per_frame": est.instances_per_frame,
        "cpu_hours": round(est.cpu_hours, 3),
        "frame_cpu_s": round(est.frame_cpu_s, 3),
        "price_per_cpu_hour": f"{d['price_per_cpu_hour']:.4f}",
        "compute_cost": f"{est.compute_cost:.4f}",
        "fixed_cost": f"{est.fixed_cost:.2f}",
        "library_share": f"{est.library_share:.2f}",
        "library": [
            {
                "name": item["name"],
                "class_name": item["class_name"],
                "creation_cost": f"{item['creation_cost']:.2f}",
                "frames_so_far": item["frames_so_far"],
                "frames_planned": item["frames_planned"],
                "share": f"{item['share']:.2f}",
            }
            for item in est.library
        ],
        "total_cost": f"{est.total_cost:.2f}",
        "cost_budget": f"{d['cost_budget']:.2f}",
        "within_budget": est.within_budget,
        "fleet_time": _duration(est.wall_s_on_fleet) if est.wall_s_on_fleet is not None else None,
        "live_slots": est.live_slots,
        "cost_per_accepted": f"{est.cost_per_accepted:.4f}" if est.cost_per_accepted is not None else None,
        "manual_cost_per_instance": f"{est.manual_cost_per_instance:.4f}",
        "manual_total": f"{est.manual_total:.2f}",
        "source": est.source,
        "detail": est.detail,
        "cheaper": (est.cost_per_accepted is not None and est.cost_per_accepted < est.manual_cost_per_instance),
    }


def _planner_page(
    request: HttpRequest,
    form: CampaignForm,
    *,
    campaign: Campaign | None,
    estimate: dict[str, Any] | None,
    status: int = 200,
    source: Campaign | None = None,
) -> HttpResponse:
    return render(
        request,
        "campaigns/plan.html",
        {
            "form": form,
            "campaign": campaign,
            "source": source,
            "estimate": estimate,
            "estimate_url": reverse("campaigns:estimate"),
        },
        status=status,
    )


def campaign_create(request: HttpRequest) -> HttpResponse:
    return _new_campaign_page(request, source=None)


def _new_campaign_page(request: HttpRequest, *, source: Campaign | None) -> HttpResponse:
    """The planning form for a new campaign, empty or filled from ``source`` (a copy); saving makes a draft."""
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    if not teams_for(user=request.user, role=PLANNER).exists():
        return render(request, "campaigns/no_team.html", status=403)
    if request.method == "GET":
        form = CampaignForm(user=request.user, source=source)
        return _planner_page(request, form, campaign=None, estimate=None, source=source)
    form = CampaignForm(request.POST, user=request.user, source=source)
    estimate = _estimate(request, form)
    if "preview" in request.POST or estimate is None:
        status = 200 if estimate is not None or "preview" in request.POST else 400
        return _planner_page(request, form, campaign=None, estimate=estimate, status=status, source=source)
    try:
        campaign = services.create_campaign(owner=request.user, team=form.cleaned_data["team"], **form.service_kwargs())
    except services.CampaignError as exc:
        form.add_service_error(exc)
        return _planner_page(request, form, campaign=None, estimate=estimate, status=400, source=source)
    if source is None:
        messages.success(request, f"Campaign “{campaign.name}” saved as a draft. Start it when the plan looks right.")
    else:
        services.record_copy(campaign_id=campaign.pk, source=source)
        messages.success(request, f"Campaign “{campaign.name}” saved as a draft, a copy of “{source.name}”.")
    return redirect("campaigns:detail", campaign_id=campaign.pk)


def campaign_edit(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id, role=PLANNER)
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    if campaign.status != Campaign.Status.DRAFT:
        budget_form = CostBudgetForm(request.POST or None, initial={"cost_budget": campaign.cost_budget})
        if request.method == "POST":
            if budget_form.is_valid():
                try:
                    services.set_cost_budget(
                        campaign_id=campaign.pk, cost_budget=budget_form.cleaned_data["cost_budget"]
                    )
                except services.CampaignError as exc:
                    field = exc.field if exc.field in budget_form.fields else None
                    budget_form.add_error(field, exc.message if field else str(exc))
                else:
                    messages.success(
                        request, f"Cost budget set to {format_money(budget_form.cleaned_data['cost_budget'])}."
                    )
                    return redirect("campaigns:detail", campaign_id=campaign.pk)
            return render(
                request, "campaigns/edit_budget.html", {"campaign": campaign, "form": budget_form}, status=400
            )
        return render(request, "campaigns/edit_budget.html", {"campaign": campaign, "form": budget_form})
    if request.method == "GET":
        return _planner_page(
            request, CampaignForm(user=request.user, campaign=campaign), campaign=campaign, estimate=None
        )
    form = CampaignForm(request.POST, user=request.user, campaign=campaign)
    estimate = _estimate(request, form)
    if "preview" in request.POST or estimate is None:
        return _planner_page(
            request,
            form,
            campaign=campaign,
            estimate=estimate,
            status=200 if estimate is not None or "preview" in request.POST else 400,
        )
    try:
        services.update_draft_campaign(campaign_id=campaign.pk, **form.service_kwargs())
    except services.CampaignError as exc:
        form.add_service_error(exc)
        return _planner_page(request, form, campaign=campaign, estimate=estimate, status=400)
    messages.success(request, "Plan saved.")
    return redirect("campaigns:detail", campaign_id=campaign.pk)


def campaign_copy(request: HttpRequest, campaign_id: int) -> HttpResponse:
    """The planner form filled with every setting of a campaign the user may see; saving makes a new draft."""
    return _new_campaign_page(request, source=_campaign(request, campaign_id))


def campaign_extend(request: HttpRequest, campaign_id: int) -> HttpResponse:
    """Raise a started campaign's targets, add classes, change its budget (:func:`services.extend_campaign`)."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    if campaign.status not in services.EXTENDABLE:
        what = "edit its plan" if campaign.status == Campaign.Status.DRAFT else "copy it to plan more frames"
        messages.error(request, f"A {campaign.get_status_display().lower()} campaign cannot be extended; {what}.")
        return redirect("campaigns:detail", campaign_id=campaign.pk)
    form = ExtendForm(request.POST or None, campaign=campaign)
    if request.method == "POST" and form.is_valid():
        try:
            services.extend_campaign(
                campaign_id=campaign.pk, targets=form.targets(), cost_budget=form.cleaned_data["cost_budget"]
            )
        except services.CampaignError as exc:
            name = f"t_{exc.class_name}" if exc.class_name else exc.field
            field = name if name in form.fields else None
            form.add_error(field, exc.message if field else str(exc))
        else:
            campaign.refresh_from_db()
            after: dict[str, str] = {
                Campaign.Status.PAUSED: " It is paused: resume it to render the new quotas.",
                Campaign.Status.RUNNING: " The planner takes the new quotas from the next frames on.",
            }
            messages.success(request, f"Campaign extended.{after.get(str(campaign.status), '')}")
            return redirect("campaigns:detail", campaign_id=campaign.pk)
    status = 400 if request.method == "POST" else 200
    return render(request, "campaigns/extend.html", {"campaign": campaign, "form": form}, status=status)


NOTIFICATION_ACTIONS = ("save", "rotate", "test")


def campaign_notifications(request: HttpRequest, campaign_id: int) -> HttpResponse:
    """Webhook, e-mail and failure alert of a campaign; its latest deliveries. Planners change them and see the
    signing secret; viewers see where notifications go."""
    campaign = _campaign(request, campaign_id)
    roles = _roles(request, campaign)
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    initial = {
        "notify_url": campaign.notify_url,
        "notify_emails": campaign.notify_emails,
        "failure_alert_pct": round(100 * campaign.notify_failure_rate, 4),
    }
    form = NotificationForm(initial=initial)
    status = 200
    if request.method == "POST":
        campaign = _campaign(request, campaign_id, role=PLANNER)
        action = request.POST.get("action", "save")
        try:
            if action == "rotate":
                services.rotate_notification_secret(campaign_id=campaign.pk)
                messages.success(request, "New signing secret: update your receiver; the old one no longer verifies.")
                return redirect("campaigns:notifications", campaign_id=campaign.pk)
            if action == "test":
                sent = services.send_test_notification(campaign_id=campaign.pk)
                messages.success(request, f"Test notification queued on {len(sent)} channel(s); see the list below.")
                return redirect("campaigns:notifications", campaign_id=campaign.pk)
            if action not in NOTIFICATION_ACTIONS:
                raise services.CampaignError(f"unknown action {action!r}")
            form = NotificationForm(request.POST)
            if form.is_valid():
                services.set_notifications(
                    campaign_id=campaign.pk,
                    url=form.cleaned_data["notify_url"],
                    emails=form.cleaned_data["notify_emails"],
                    failure_rate=form.cleaned_data["failure_alert_pct"] / 100.0,
                )
                messages.success(request, "Notification settings saved.")
                return redirect("campaigns:notifications", campaign_id=campaign.pk)
            status = 400
        except services.CampaignError as exc:
            field = {"notify_failure_rate": "failure_alert_pct"}.get(exc.field, exc.field)
            if field in form.fields and form.is_bound:
                form.add_error(field, exc.message)
            else:
                messages.error(request, str(exc))
            status = 400
    context = {
        "c": campaign,
        "form": form,
        "deliveries": selectors.recent_notifications(campaign=campaign, limit=20),
        "events": notify.EVENTS,
        **roles,
    }
    return render(request, "campaigns/notifications.html", context, status=status)


@never_cache
@require_GET
def estimate_json(request: HttpRequest) -> JsonResponse:
    """The live estimate beside the planner form: the form's fields as query parameters; nothing is saved."""
    form = CampaignForm(request.GET, user=request.user)
    form.fields.pop("team", None)  # the estimate does not depend on the team
    form.fields["name"].required = False
    estimate = _estimate(request, form)
    if estimate is None:
        errors = {k: [str(e) for e in v] for k, v in form.errors.items()}
        return JsonResponse({"ok": False, "errors": errors})
    return JsonResponse({"ok": True, "estimate": estimate, "currency": currency()})


# --- campaign page -------------------------------------------------------------------------------------------------


@require_GET
def campaign_detail(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id)
    live = selectors.campaign_live(campaign=campaign)
    live["eta"] = _eta(live)
    coverage = selectors.coverage_sample(campaign=campaign)
    return render(
        request,
        "campaigns/detail.html",
        {
            "c": campaign,
            "live": live,
            "eta": live["eta"],
            "chart_data": {"live": live, "coverage": coverage},
            "coverage": coverage,
            "plotly_url": reverse("campaigns:plotly", kwargs={"version": plotly_version()}),
            "live_url": reverse("campaigns:live", kwargs={"campaign_id": campaign.pk}),
            "budget_rows": _budget_summary(campaign),
            **_roles(request, campaign),
        },
    )


def _eta(live: dict[str, Any]) -> str:
    if live["status"] == Campaign.Status.COMPLETED:
        return "done"
    if live["status"] in (Campaign.Status.CANCELLED, Campaign.Status.DRAFT):
        return "—"
    return _duration(live["eta_s"]) if live["eta_s"] is not None else "—"


def _budget_summary(campaign: Campaign) -> list[dict[str, Any]]:
    rows = []
    for f in FIELDS:
        value = budget_value(campaign.budget, f)
        if isinstance(value, bool):
            text = "on" if value else "off"
        elif f.kind == "choices":
            text = ", ".join(v.replace("_", " ") for v in value)
        else:
            text = f"{value[0]:g}–{value[1]:g}" if isinstance(value, list) else f"{value:g}"
        rows.append(
            {"section": f.section, "name": f.name.replace("_", " "), "value": text, "unit": f.unit, "help": f.help}
        )
    return rows


@require_GET
def campaign_statistics(request: HttpRequest, campaign_id: int) -> HttpResponse:
    """Dataset statistics of the campaign's done frames (datasets.page_statistics), drawn with plotly."""
    campaign = _campaign(request, campaign_id)
    stats = page_statistics.campaign_statistics(campaign=campaign)
    return render(
        request,
        "campaigns/statistics.html",
        {
            "c": campaign,
            "tab": "statistics",
            "stats": stats,
            "chart_data": stats["statistics"],
            "plotly_url": reverse("campaigns:plotly", kwargs={"version": plotly_version()}),
            **_roles(request, campaign),
        },
    )


@never_cache
@require_GET
def campaign_live(request: HttpRequest, campaign_id: int) -> JsonResponse:
    campaign = _campaign(request, campaign_id)
    live = selectors.campaign_live(campaign=campaign)
    live["eta"] = _eta(live)
    if request.GET.get("coverage"):
        live["coverage"] = selectors.coverage_sample(campaign=campaign)
    live["currency"] = currency()  # amounts stay numbers (as strings of digits); the page adds the code
    return JsonResponse(live)


ACTIONS = {
    "start": (services.start_campaign, "Campaign started; frames go to the fleet."),
    "pause": (services.pause_campaign, "Campaign paused; frames already rendering will finish."),
    "resume": (services.resume_campaign, "Campaign resumed."),
    "cancel": (services.cancel_campaign, "Campaign cancelled."),
}


# Actions that cannot be undone ask first: a POST without ``confirm=yes`` changes nothing and shows a page whose
# form posts again with it (no JavaScript needed).
CONFIRMED_ACTIONS = {"cancel"}


@require_POST
def campaign_action(request: HttpRequest, campaign_id: int, action: str) -> HttpResponse:
    campaign = _campaign(request, campaign_id, role=PLANNER)
    if action not in ACTIONS:
        raise Http404("no such action")
    if action in CONFIRMED_ACTIONS and request.POST.get("confirm") != "yes":
        return _confirm_page(
            request,
            campaign,
            title="Cancel campaign",
            question=f"Cancel the campaign “{campaign.name}”?",
            consequence="No more frames are sent and frames waiting in the queue are withdrawn. A cancelled "
            "campaign cannot be started or resumed again; its done frames stay and can still be exported.",
            action_url=reverse("campaigns:action", kwargs={"campaign_id": campaign.pk, "action": action}),
            confirm_label="Yes, cancel the campaign",
            keep_label="Keep it",
        )
    function, done = ACTIONS[action]
    try:
        function(campaign_id=campaign.pk)
    except services.CampaignError as exc:
        messages.error(request, str(exc))
    else:
        messages.success(request, done)
    return redirect("campaigns:detail", campaign_id=campaign.pk)


def _confirm_page(
    request: HttpRequest, campaign: Campaign, *, ask_name: bool = False, error: str = "", status: int = 200, **text: str
) -> HttpResponse:
    context = {"c": campaign, "ask_name": ask_name, "error": error, **text}
    return render(request, "campaigns/confirm.html", context, status=status)


@require_POST
def campaign_delete(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id, role=ADMIN)
    typed = request.POST.get("confirm_name", "").strip()
    if typed != campaign.name:
        return _confirm_page(
            request,
            campaign,
            title="Delete campaign",
            question=f"Delete the campaign “{campaign.name}”?",
            consequence="Deletes the campaign, its frames, instances and rendered files; this cannot be undone. "
            "A running campaign must be paused or cancelled first.",
            action_url=reverse("campaigns:delete", kwargs={"campaign_id": campaign.pk}),
            confirm_label="Delete",
            keep_label="Keep it",
            ask_name=True,
            error="Type the campaign's name exactly to delete it." if typed else "",
            status=400 if typed else 200,
        )
    try:
        services.delete_campaign(campaign_id=campaign.pk)
    except services.CampaignError as exc:
        messages.error(request, str(exc))
        return redirect("campaigns:detail", campaign_id=campaign.pk)
    messages.success(request, f"Campaign “{campaign.name}” deleted with its frames.")
    return redirect("campaigns:list")


# --- failed jobs -----------------------------------------------------------------------------------------------------


@require_GET
def failed_jobs(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id)
    groups = selectors.error_groups(campaign=campaign)
    kind = request.GET.get("kind", "")
    frames = selectors.failed_frames(campaign=campaign)
    if kind:
        frames = frames.filter(errors.kind_filter(kind))
    page = Paginator(frames.order_by("-started_at", "-index"), FAILED_PAGE).get_page(request.GET.get("page"))
    rows = [{"frame": f, "kind": errors.error_kind(f.error), "first_line": f.error.split("\n", 1)[0]} for f in page]
    return render(
        request,
        "campaigns/failed.html",
        {"c": campaign, "groups": groups, "kind": kind, "page": page, "rows": rows, **_roles(request, campaign)},
    )


@require_POST
def failed_action(request: HttpRequest, campaign_id: int, action: str) -> HttpResponse:
    campaign = _campaign(request, campaign_id, role=PLANNER)
    kind = request.POST.get("kind")
    frame_id = request.POST.get("frame_id", "")
    back = reverse("campaigns:failed", kwargs={"campaign_id": campaign.pk})
    if request.POST.get("back_kind"):
        from urllib.parse import urlencode

        back += "?" + urlencode({"kind": request.POST["back_kind"]})
    if kind is None and not frame_id.isdigit():
        messages.error(request, "Choose a frame or an error kind.")
        return redirect(back)
    try:
        if action == "retry":
            n = (
                services.retry_failed_of_kind(campaign_id=campaign.pk, kind=kind)
                if kind is not None
                else services.retry_frame(campaign_id=campaign.pk, frame_id=int(frame_id))
            )
            verb = (
                "sent back to the queue"
                if campaign.status == Campaign.Status.RUNNING
                else "set to retry when the campaign runs"
            )
            messages.success(request, f"{n} frame(s) {verb}." if n else "Nothing to retry: no dead frame matched.")
        elif action == "ignore":
            n = services.ignore_frame(campaign_id=campaign.pk, frame_id=int(frame_id or 0), kind=kind)
            messages.success(request, f"{n} frame(s) hidden from this list." if n else "Nothing to ignore.")
        else:
            raise Http404("no such action")
    except services.CampaignError as exc:
        messages.error(request, str(exc))
    return redirect(back)


# --- frames ----------------------------------------------------------------------------------------------------------


def _float_or_none(text: str | None, *, low: float, high: float) -> float | None:
    try:
        value = float(text) if text not in (None, "") else None
    except ValueError:
        return None
    if value is None or not math.isfinite(value):
        return None
    return min(high, max(low, value))


@dataclass(frozen=True)
class _GalleryFilter:
    """The gallery's filters, parsed leniently (a value out of range is clamped, a bad one ignored): instances of a
    class, accepted or rejected, at least this visible / contrasted / large; frames in or out of the export."""

    class_name: str = ""
    accepted: str = ""
    min_visible: float | None = None
    min_contrast: float | None = None
    min_box_px: float | None = None
    export_state: str = ""

    @classmethod
    def parse(cls, data: Mapping[str, str], campaign: Campaign) -> _GalleryFilter:
        class_name = data.get("class", "")
        # A name with NUL is no class's (and PostgreSQL refuses it even in a lookup).
        if class_name and ("\x00" in class_name or not campaign.quotas.filter(object_class__name=class_name).exists()):
            class_name = ""
        accepted = data.get("accepted", "")
        export_state = data.get("export", "")
        return cls(
            class_name=class_name,
            accepted=accepted if accepted in ("accepted", "rejected") else "",
            min_visible=_float_or_none(data.get("min_visible"), low=0.0, high=1.0),
            min_contrast=_float_or_none(data.get("min_contrast"), low=0.0, high=1e6),
            min_box_px=_float_or_none(data.get("min_box"), low=0.0, high=1e5),
            export_state=export_state if export_state in selectors.GALLERY_EXPORT_STATES else "",
        )

    @property
    def instance_query(self) -> Q | None:
        return selectors.instance_filter(
            class_name=self.class_name,
            accepted=self.accepted,
            min_visible_fraction=self.min_visible,
            min_contrast=self.min_contrast,
            min_box_px=self.min_box_px,
        )

    def frames(self, campaign: Campaign) -> QuerySet[Frame]:
        return selectors.gallery_frames(campaign=campaign, match=self.instance_query, export_state=self.export_state)

    def matches(self, inst: Mapping[str, Any]) -> bool:
        """Whether an instance row passes the instance filters (the same rule as :meth:`instance_query`)."""
        box = inst["bbox_xywh_px"]
        contrast = inst["contrast"]
        return (
            (not self.class_name or inst["object_class__name"] == self.class_name)
            and (self.accepted != "accepted" or inst["accepted"])
            and (self.accepted != "rejected" or (not inst["accepted"] and inst["mask_area_px"] > 0))
            and (self.min_visible is None or inst["visible_fraction"] >= self.min_visible)
            and (self.min_contrast is None or (contrast is not None and contrast >= self.min_contrast))
            and (self.min_box_px is None or (bool(box) and min(box[2], box[3]) >= self.min_box_px))
        )

    @property
    def filters_instances(self) -> bool:
        return self.instance_query is not None

    def as_form(self) -> dict[str, str]:
        """The values to show back in the form (numbers as typed, clamped)."""

        def text(value: float | None) -> str:
            return "" if value is None else f"{value:g}"

        return {
            "class_name": self.class_name,
            "accepted": self.accepted,
            "min_visible": text(self.min_visible),
            "min_contrast": text(self.min_contrast),
            "min_box": text(self.min_box_px),
            "export": self.export_state,
        }


def _boxes(instances: Sequence[Mapping[str, Any]], rule: _GalleryFilter | None = None) -> list[dict[str, Any]]:
    out = []
    for inst in instances:
        matches = rule is None or rule.matches(inst)
        out.append(
            {
                **inst,
                "box": inst["bbox_xywh_px"],
                "matches": matches,
                "reasons": ", ".join(inst["reject_reasons"] or []),
            }
        )
    return out


@require_GET
def frame_gallery(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id)
    rule = _GalleryFilter.parse(request.GET, campaign)
    page = Paginator(rule.frames(campaign), GALLERY_PAGE).get_page(request.GET.get("page"))
    instances = selectors.frame_instances(frame_ids=[f.pk for f in page])
    tiles = [{"frame": f, "boxes": _boxes(instances[f.pk], rule if rule.filters_instances else None)} for f in page]
    query = request.GET.copy()
    query.pop("page", None)
    return render(
        request,
        "campaigns/gallery.html",
        {
            "c": campaign,
            "page": page,
            "tiles": tiles,
            "flt": rule.as_form(),
            "query": query.urlencode(),
            "classes": list(
                campaign.quotas.order_by("object_class__name").values_list("object_class__name", flat=True)
            ),
            "filtered": rule != _GalleryFilter(),
            # What the bulk form would leave out: the selected frames not left out already.
            "to_exclude": rule.frames(campaign).filter(excluded_at__isnull=True).count()
            if rule != _GalleryFilter() and rule.export_state != "excluded"
            else 0,
            "filters_instances": rule.filters_instances,
            "label_size": round(campaign.width_px / 20, 2),
            "reason_max": services.EXCLUSION_REASON_MAX_CHARS,
            **_roles(request, campaign),
        },
    )


@require_POST
def frames_exclude(request: HttpRequest, campaign_id: int) -> HttpResponse:
    """Leave frames out of exports, with a reason: one frame (``frame``: its index) or every frame the gallery's
    filters select (the filters posted back as fields)."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    index = request.POST.get("frame", "")
    if index:
        frame = _frame(campaign, int(index)) if index.isdigit() and len(index) <= 9 else None
        if frame is None:
            raise Http404("no such frame")
        frames = Frame.objects.filter(pk=frame.pk)
        back = redirect("campaigns:frame", campaign_id=campaign.pk, index=frame.index)
    else:
        frames = _GalleryFilter.parse(request.POST, campaign).frames(campaign).filter(excluded_at__isnull=True)
        query = QueryDict(mutable=True)
        for key in ("class", "accepted", "min_visible", "min_contrast", "min_box", "export"):
            if request.POST.get(key):
                query[key] = request.POST[key]
        back = redirect(f"{reverse('campaigns:gallery', args=[campaign.pk])}?{query.urlencode()}")
    try:
        changed = services.exclude_frames(
            campaign_id=campaign.pk, frame_ids=frames.values_list("pk", flat=True), reason=request.POST.get("reason")
        )
    except services.CampaignError as exc:
        messages.error(request, exc.message[:1].upper() + exc.message[1:] + ".")
        return back
    messages.success(request, f"{changed} frame{'s' if changed != 1 else ''} left out of exports.")
    return back


@require_POST
def frame_include(request: HttpRequest, campaign_id: int, index: int) -> HttpResponse:
    """Put an excluded frame back into exports."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    frame = _frame(campaign, index)
    changed = services.include_frames(campaign_id=campaign.pk, frame_ids=[frame.pk])
    if changed:
        messages.success(request, f"Frame {frame.index} is in exports again.")
    return redirect("campaigns:frame", campaign_id=campaign.pk, index=frame.index)


def _frame(campaign: Campaign, index: int) -> Frame:
    frame = Frame.objects.filter(campaign=campaign, index=index).first()
    if frame is None:
        raise Http404("no such frame")
    return frame


def _frame_dir(frame: Frame) -> Path:
    root = Path(settings.MEDIA_ROOT).resolve()
    folder = (root / frame.output_dir).resolve() if frame.output_dir else None
    if folder is None or root not in folder.parents or not folder.is_dir():
        raise Http404("the frame has no files")
    return folder


def _read_json(path: Path) -> dict[str, Any]:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


@require_GET
def frame_detail(request: HttpRequest, campaign_id: int, index: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id)
    frame = _frame(campaign, index)
    instances = selectors.frame_instances(frame_ids=[frame.pk])[frame.pk]
    boxes = _boxes(instances)
    spec, labels = {}, {}
    has_files = False
    if frame.state == Frame.State.DONE and frame.output_dir:
        try:
            folder = _frame_dir(frame)
        except Http404:
            folder = None
        if folder is not None:
            has_files = (folder / "rgb.png").is_file()
            spec = _read_json(folder / "scene.json")
            labels = _read_json(folder / "labels.json")
    prev_index, next_index = selectors.frame_neighbours(frame=frame)
    render_settings = spec.get("render") or campaign.budget["render"]
    return render(
        request,
        "campaigns/frame.html",
        {
            "c": campaign,
            "frame": frame,
            "boxes": boxes,
            "spec": spec,
            "has_files": has_files,
            "camera": spec.get("camera", {}),
            "lights": spec.get("lights", []),
            "room": spec.get("room", {}),
            "exposure": labels.get("exposure", {}),
            "variant": labels.get("variant", ""),
            "width_px": render_settings["width_px"],
            "height_px": render_settings["height_px"],
            "prev_index": prev_index,
            "next_index": next_index,
            "timings": frame.timings_s or {},
            "reason_max": services.EXCLUSION_REASON_MAX_CHARS,
            "label_size": round(render_settings["width_px"] / 48, 2),
            **_roles(request, campaign),
        },
    )


FRAME_FILES = {"rgb.png", "thumb.jpg", "mask.png", "depth.png", "scene.json", "labels.json"}


def _write_derived(path: Path, image: Any) -> None:
    """Write a derived view (RGB, RGBA or grey array) atomically; a failure is a missing view, not a crash."""
    try:
        write_image(path, image)
    except (OSError, ValueError) as exc:
        raise Http404("could not write the derived image") from exc


def _derived(folder: Path, name: str) -> Path:
    """thumb.jpg, mask.png and depth.png are made once from the frame's files and cached next to them."""
    import cv2
    import numpy as np

    target = folder / f"view-{name}"
    if target.is_file():
        return target
    if name == "thumb.jpg":
        rgb = cv2.imread(str(folder / "rgb.png"), cv2.IMREAD_COLOR)
        if rgb is None:
            raise Http404("no image")
        h, w = rgb.shape[:2]
        if w > THUMB_WIDTH_PX:
            rgb = cv2.resize(rgb, (THUMB_WIDTH_PX, round(h * THUMB_WIDTH_PX / w)), interpolation=cv2.INTER_AREA)
        _write_derived(target, np.ascontiguousarray(rgb[..., ::-1]))  # OpenCV reads BGR
    elif name == "mask.png":
        ids = cv2.imread(str(folder / "instances.png"), cv2.IMREAD_UNCHANGED)
        if ids is None:
            raise Http404("no instance image")
        ids = ids.astype(np.int64)
        # A fixed golden-angle hue per instance id: neighbouring ids get distant colours; 0 (background) is clear.
        hue = ((ids * 137.508) % 360 / 2).astype(np.uint8)
        hsv = np.stack([hue, np.full_like(hue, 200), np.full_like(hue, 255)], axis=-1)
        bgr = cv2.cvtColor(hsv, cv2.COLOR_HSV2BGR)
        alpha = np.where(ids > 0, 255, 0).astype(np.uint8)
        _write_derived(target, np.dstack([bgr[..., ::-1], alpha]))
    elif name == "depth.png":
        try:
            depth = np.load(folder / "depth.npy", allow_pickle=False)
        except (OSError, ValueError) as exc:
            raise Http404("no depth") from exc
        hit = depth > 0
        scaled = np.zeros(depth.shape, np.uint8)
        if hit.any():
            near, far = float(depth[hit].min()), float(depth[hit].max())
            scaled[hit] = (255 - np.clip((depth[hit] - near) / max(far - near, 1e-6), 0, 1) * 235).astype(np.uint8)
        colour = cv2.applyColorMap(scaled, cv2.COLORMAP_VIRIDIS)
        colour[~hit] = (40, 33, 31)  # no hit: our ink colour
        _write_derived(target, np.ascontiguousarray(colour[..., ::-1]))
    else:
        raise Http404("no such view")
    return target


@require_GET
def frame_file(request: HttpRequest, campaign_id: int, index: int, name: str) -> FileResponse:
    campaign = _campaign(request, campaign_id)
    if name not in FRAME_FILES:
        raise Http404("no such file")
    folder = _frame_dir(_frame(campaign, index))
    path = _derived(folder, name) if name in ("thumb.jpg", "mask.png", "depth.png") else folder / name
    if not path.is_file():
        raise Http404("no such file")
    response = FileResponse(open(path, "rb"))
    response["Cache-Control"] = "private, max-age=3600"
    return response


@require_POST
def frame_rerender(request: HttpRequest, campaign_id: int, index: int) -> HttpResponse:
    campaign = _campaign(request, campaign_id, role=PLANNER)
    frame = _frame(campaign, index)
    try:
        new = services.rerender_frame(campaign_id=campaign.pk, frame_id=frame.pk)
    except services.CampaignError as exc:
        messages.error(request, str(exc))
        return redirect("campaigns:frame", campaign_id=campaign.pk, index=frame.index)
    messages.success(request, f"Frame {new.index} queued: the same layout, lighting and view as frame {frame.index}.")
    return redirect("campaigns:frame", campaign_id=campaign.pk, index=new.index)


# --- asset library -----------------------------------------------------------------------------------------------------


def _asset_rows(request: HttpRequest) -> list[dict[str, Any]]:
    from render.assets import HANDBOOK_RANGES  # deferred: keeps render.assets (trimesh, scipy) out of the web process

    rows = selectors.asset_library(user=request.user)
    for row in rows:
        a = row["asset"]
        info = asset_files.asset_info(a.pk)
        row["info"] = info
        row["has_preview"] = asset_files.preview_path(a.pk).is_file()
        extents = info.get("extents_m")
        row["dimensions"] = " × ".join(f"{v:.2f}" for v in extents) + " m" if extents else None
        ranges = HANDBOOK_RANGES.get(a.object_class.name, {}) if a.kind == Asset.Kind.PROCEDURAL else {}
        row["ranges"] = [
            f"{k.removesuffix('_m').replace('_', ' ')} {r.low:g}–{r.high:g} m"
            for k, r in ranges.items()
            if k.endswith("_m")
        ][:3]
    return rows


def asset_library(request: HttpRequest) -> HttpResponse:
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    can_upload = teams_for(user=request.user, role=PLANNER).exists()
    form = AssetUploadForm(user=request.user)
    status = 200
    if request.method == "POST":
        if not can_upload:
            from django.core.exceptions import PermissionDenied

            raise PermissionDenied("uploading needs the planner role in a team")
        form = AssetUploadForm(request.POST, request.FILES, user=request.user)
        asset = _upload(request, form)
        if asset is not None:
            info = asset_files.asset_info(asset.pk)
            size = f" Size in the room: {asset_files.size_text(info['extents_m'])}." if info.get("extents_m") else ""
            messages.success(
                request,
                f"“{asset.name}” added to the library; its preview renders on the fleet.{size} "
                "Campaigns use it only where they choose it.",
            )
            return redirect("campaigns:assets")
        status = 400
    return render(
        request,
        "campaigns/assets.html",
        {
            "rows": _asset_rows(request),
            "form": form,
            "can_upload": can_upload,
            "max_upload_mib": asset_files.MAX_UPLOAD_BYTES // 2**20,
        },
        status=status,
    )


def _upload(request: HttpRequest, form: AssetUploadForm) -> Asset | None:
    """Validate and keep an upload through the service (content sniffing, size, a limited parse with scale checks,
    the name free in the team); nothing is kept on error, and the error lands on its field."""
    if not form.is_valid():
        return None
    d = form.cleaned_data
    try:
        return asset_services.upload_mesh_asset(
            user=request.user,
            team=d["team"],
            object_class_name=d["object_class"].name,
            name=d["name"],
            upload=d["mesh"],
            unit=d["unit"],
            creation_cost=d["creation_cost"],
            up_axis=d.get("up_axis") or "+z",
            front=d.get("front") or "",
            look=d.get("look") or "keep",
        )
    except asset_files.UploadError as exc:
        form.add_error("mesh", str(exc)[:1].upper() + str(exc)[1:])
    except asset_services.AssetError as exc:
        form.add_service_error(exc)
    return None


@require_GET
def asset_preview(request: HttpRequest, asset_id: int) -> FileResponse:
    asset = scope_to_user(Asset.objects.all(), user=request.user, include_shared=True).filter(pk=asset_id).first()
    if asset is None:
        raise Http404("no such asset")
    path = asset_files.preview_path(asset.pk)
    if not path.is_file():
        raise Http404("preview pending")
    response = FileResponse(open(path, "rb"), content_type="image/png")
    response["Cache-Control"] = "private, max-age=600"
    return response


def home(request: HttpRequest) -> HttpResponse:
    return redirect("campaigns:list")


def protected_media(request: HttpRequest, path: str) -> FileResponse:
    """Files under MEDIA_ROOT, for members of the owning team only.

    ``campaigns/<id>/...`` belongs to that campaign's team; ``assets/...`` to the uploading asset's team
    (shared procedural previews are readable by every signed-in user). Anything else is not served.
    """
    root = Path(settings.MEDIA_ROOT).resolve()
    target = (root / path).resolve()
    # Refuse anything that escapes the media root (../, absolute paths, symlinks out).
    if root not in target.parents or not target.is_file():
        raise Http404("no such file")
    parts = target.relative_to(root).parts
    allowed = False
    if len(parts) >= 3 and parts[0] == "campaigns" and parts[1].isdigit():
        team_id = Campaign.objects.filter(pk=int(parts[1])).values_list("team_id", flat=True).first()
        allowed = team_id is not None and has_role(user=request.user, team=team_id, role=VIEWER)
    elif parts and parts[0] == "assets":
        relative = "/".join(parts)
        asset = Asset.objects.filter(mesh_file=relative).values("team_id").first()
        if asset is not None:
            allowed = asset["team_id"] is None or has_role(user=request.user, team=asset["team_id"], role=VIEWER)
        else:
            allowed = bool(getattr(request.user, "is_superuser", False))
    elif getattr(request.user, "is_superuser", False):
        allowed = True
    if not allowed:
        raise Http404("no such file")  # outsiders must not learn that the file exists
    return FileResponse(open(target, "rb"))


# --- API tokens (profile) ----------------------------------------------------------------------------------------------


@never_cache
def api_tokens(request: HttpRequest) -> HttpResponse:
    """The user's API tokens; a POST makes one and shows its plaintext on this response only (it is not stored)."""
    if request.method not in ("GET", "POST"):
        return HttpResponseNotAllowed(["GET", "POST"])
    created = None
    name_error = ""
    status = 200
    if request.method == "POST":
        try:
            created = api_services.create_token(user=request.user, name=request.POST.get("name"))
        except api_services.ApiTokenError as exc:
            name_error = exc.message[:1].upper() + exc.message[1:] + "."
            status = 400
    return render(
        request,
        "profile/api_tokens.html",
        {
            "tokens": api_services.tokens_of(user=request.user),
            "new_token": created[0] if created else None,
            "plaintext": created[1] if created else "",
            "name_error": name_error,
            "name": request.POST.get("name", "") if status == 400 else "",
            "api_docs_url": reverse("api-v1:openapi-view"),
        },
        status=status,
    )


@require_POST
def api_token_revoke(request: HttpRequest, token_id: int) -> HttpResponse:
    if api_services.revoke_token(user=request.user, token_id=token_id):
        messages.success(request, "Token revoked; requests with it are refused from now on.")
    else:
        raise Http404("no such token")
    return redirect("api-tokens")
