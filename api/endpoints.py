"""The API's operations (django-ninja). Thin, like the dashboard's views: rows through ``teams.permissions``
(outsiders 404, too low a role 403), reads through ``campaigns.selectors``, writes through ``campaigns.services``.

Every operation needs a token (``Authorization: Bearer ef_…``), the health check included (it names hosts and
paths). Errors are JSON ``{"detail": …, "errors": {input: message}}`` (:mod:`api.errors`).
"""

from __future__ import annotations

from typing import Any

from django.db.models import Exists, OuterRef, Q
from django.http import HttpRequest
from django.urls import reverse
from ninja import Query, Router, Status
from ninja.responses import codes_4xx

from api import schemas
from api.errors import ApiError
from assets.models import Asset
from campaigns import selectors, services
from campaigns.models import Campaign, Frame, Instance
from evenframe.health import run_checks
from teams.permissions import PLANNER, VIEWER, get_for_user_or_404, has_role, scope_to_user, teams_for

router = Router()

ACTIONS = {
    "start": services.start_campaign,
    "pause": services.pause_campaign,
    "resume": services.resume_campaign,
    "cancel": services.cancel_campaign,
}
# The files of a done frame, as the dashboard's frame file view serves them (thumb, mask and depth are derived views).
FRAME_FILE_NAMES = ("rgb.png", "thumb.jpg", "mask.png", "depth.png", "scene.json", "labels.json")
FRAMES_PAGE_MAX = 500


def _campaign(request: HttpRequest, campaign_id: int, role: str = VIEWER) -> Campaign:
    return get_for_user_or_404(
        Campaign.objects.select_related("team", "owner"), user=request.user, role=role, pk=campaign_id
    )


# --- health ---------------------------------------------------------------------------------------------------------


@router.get("/health", response={200: schemas.HealthOut, 503: schemas.HealthOut, codes_4xx: schemas.ErrorOut})
def health(request: HttpRequest) -> Status:
    """The checks of the health page (database, broker, live workers, renderer); 503 when one fails."""
    result = run_checks()
    return Status(200 if result["ok"] else 503, result)


# --- campaigns ------------------------------------------------------------------------------------------------------


@router.get("/campaigns", response={200: list[schemas.CampaignRowOut], codes_4xx: schemas.ErrorOut})
def campaign_list(request: HttpRequest) -> list[dict[str, Any]]:
    """Campaigns of your teams, newest first."""
    rows = selectors.campaign_rows(campaigns=scope_to_user(Campaign.objects.all(), user=request.user))
    out = []
    for row in rows:
        c = row["campaign"]
        out.append(
            {
                "id": c.pk,
                "name": c.name,
                "team": c.team_id,
                "team_name": c.team.name,
                "status": c.status,
                "progress_pct": row["progress_pct"],
                "spent": str(row["spent"]),
                "spent_pct": round(row["spent_pct"], 1),
                "cost_budget": str(c.cost_budget),
                "frames_done": c.frames_done,
                "eta_s": round(row["eta_s"]) if row["eta_s"] is not None else None,
                "created_at": c.created_at,
                "started_at": c.started_at,
                "finished_at": c.finished_at,
            }
        )
    return out


def _campaign_out(campaign: Campaign) -> dict[str, Any]:
    live = selectors.campaign_live(campaign=campaign)
    quotas = (
        campaign.quotas.order_by("object_class__name")
        .values("object_class__name", "target_accepted", "min_visible_fraction", "min_box_px", "min_contrast")
        .order_by("object_class__name")
    )
    running = live["status"] in (Campaign.Status.RUNNING, Campaign.Status.PAUSED)
    return {
        "id": campaign.pk,
        "name": campaign.name,
        "team": campaign.team_id,
        "team_name": campaign.team.name,
        "owner": campaign.owner.get_username(),
        "status": live["status"],
        "status_label": live["status_label"],
        "pause_reason": live["pause_reason"],
        "pause_detail": live["pause_detail"],
        "created_at": campaign.created_at,
        "started_at": campaign.started_at,
        "finished_at": campaign.finished_at,
        "settings": {
            "description": campaign.description,
            "seed": campaign.seed,
            "budget": campaign.budget,
            "quotas": [
                {
                    "class_name": q["object_class__name"],
                    "target_accepted": q["target_accepted"],
                    "min_visible_fraction": q["min_visible_fraction"],
                    "min_box_px": q["min_box_px"],
                    "min_contrast": q["min_contrast"],
                }
                for q in quotas
            ],
            "cost_budget": str(campaign.cost_budget),
            "price_per_cpu_hour": str(campaign.price_per_cpu_hour),
            "setup_cost": str(campaign.setup_cost),
            "manual_labelling_rate_per_hour": str(campaign.manual_labelling_rate_per_hour),
            "weight": campaign.weight,
            "max_attempts": campaign.max_attempts,
            "asset_ids": sorted(campaign.assets.values_list("pk", flat=True)),
        },
        "frames": live["frames"],
        "frames_done": live["frames_done"],
        "frames_dead": live["frames_dead"],
        "failed_open": live["failed_open"],
        "instances_accepted": live["instances_accepted"],
        "instances_rejected": live["instances_rejected"],
        "progress_pct": live["progress_pct"],
        "quotas": [{**q, "yield_estimate": q["yield"]} for q in live["quotas"]],
        "spend": {
            key: live[key]
            for key in (
                "spent",
                "spent_pct",
                "cost_budget",
                "fixed",
                "library_share",
                "compute",
                "cost_remaining",
                "per_accepted",
            )
        }
        | {"cpu_s": live["cpu_s"]},
        "frames_remaining": live["frames_remaining"],
        "eta_s": live["eta_s"] if running else None,
    }


@router.get("/campaigns/{campaign_id}", response={200: schemas.CampaignOut, codes_4xx: schemas.ErrorOut})
def campaign_detail(request: HttpRequest, campaign_id: int) -> dict[str, Any]:
    """Settings, status, per-class progress, spend and the projection (ETA) of one campaign."""
    return _campaign_out(_campaign(request, campaign_id))


@router.post("/campaigns", response={201: schemas.CampaignOut, codes_4xx: schemas.ErrorOut})
def campaign_create(request: HttpRequest, payload: schemas.CampaignIn) -> Status:
    """Create a draft campaign in a team where you are a planner (start it with the `start` action)."""
    team = teams_for(user=request.user, role=PLANNER).filter(pk=payload.team).first()
    if team is None:
        raise ApiError(400, "team: not a team where you are a planner", {"team": "not a team where you are a planner"})
    campaign = services.create_campaign(
        owner=request.user,
        team=team,
        name=payload.name,
        description=payload.description,
        quotas=[
            services.QuotaInput(q.class_name, q.target_accepted, q.min_visible_fraction, q.min_box_px, q.min_contrast)
            for q in payload.quotas
        ],
        budget=payload.budget,
        cost_budget=payload.cost_budget,
        price_per_cpu_hour=payload.price_per_cpu_hour,
        setup_cost=payload.setup_cost,
        manual_labelling_rate_per_hour=payload.manual_labelling_rate_per_hour,
        weight=payload.weight,
        seed=payload.seed,
        max_attempts=payload.max_attempts,
        asset_ids=payload.asset_ids,
    )
    return Status(201, _campaign_out(_campaign(request, campaign.pk)))


@router.post("/campaigns/{campaign_id}/copy", response={201: schemas.CampaignOut, codes_4xx: schemas.ErrorOut})
def campaign_copy(request: HttpRequest, campaign_id: int, payload: schemas.CampaignCopyIn) -> Status:
    """A new draft with every setting of a campaign you can see (budget, quotas, money and run settings, assets),
    in its team or another where you are a planner."""
    source = _campaign(request, campaign_id)
    team = None
    if payload.team is not None:
        team = teams_for(user=request.user, role=PLANNER).filter(pk=payload.team).first()
        if team is None:
            raise ApiError(
                400, "team: not a team where you are a planner", {"team": "not a team where you are a planner"}
            )
    copy = services.copy_campaign(
        campaign_id=source.pk, owner=request.user, name=payload.name, seed=payload.seed, team=team
    )
    return Status(201, _campaign_out(_campaign(request, copy.pk)))


@router.post("/campaigns/{campaign_id}/extend", response={200: schemas.CampaignOut, codes_4xx: schemas.ErrorOut})
def campaign_extend(request: HttpRequest, campaign_id: int, payload: schemas.CampaignExtendIn) -> dict[str, Any]:
    """Raise targets or add classes to a running, paused or completed campaign (a completed one with a new unmet
    quota becomes paused: resume it), and optionally set its cost budget; needs the planner role."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    targets: dict[str, int] = {}
    for q in payload.quotas:
        if q.class_name in targets:
            raise ApiError(400, f"quota {q.class_name!r}: listed twice", {"quotas": f"{q.class_name!r} listed twice"})
        targets[q.class_name] = q.target_accepted
    services.extend_campaign(campaign_id=campaign.pk, targets=targets, cost_budget=payload.cost_budget)
    return _campaign_out(_campaign(request, campaign.pk))


def _notifications_out(request: HttpRequest, campaign: Campaign) -> dict[str, Any]:
    campaign.refresh_from_db()
    return {
        "url": campaign.notify_url,
        "emails": campaign.notify_emails.split(),
        "failure_rate": campaign.notify_failure_rate,
        "secret": campaign.notify_secret if has_role(user=request.user, team=campaign.team_id, role=PLANNER) else None,
        "deliveries": [
            {
                "delivery_id": str(n.delivery_id),
                "event": n.event,
                "channel": n.channel,
                "state": n.state,
                "attempts": n.attempts,
                "last_status_code": n.last_status_code,
                "last_error": n.last_error,
                "created_at": n.created_at.isoformat(),
                "sent_at": n.sent_at.isoformat() if n.sent_at else None,
            }
            for n in selectors.recent_notifications(campaign=campaign, limit=50)
        ],
    }


@router.get(
    "/campaigns/{campaign_id}/notifications", response={200: schemas.NotificationsOut, codes_4xx: schemas.ErrorOut}
)
def notifications_read(request: HttpRequest, campaign_id: int) -> dict[str, Any]:
    """Where the campaign's notifications go and its latest 50 deliveries (the secret only for planners)."""
    return _notifications_out(request, _campaign(request, campaign_id))


@router.post(
    "/campaigns/{campaign_id}/notifications", response={200: schemas.NotificationsOut, codes_4xx: schemas.ErrorOut}
)
def notifications_set(request: HttpRequest, campaign_id: int, payload: schemas.NotificationsIn) -> dict[str, Any]:
    """Set the webhook URL, e-mail addresses and failure alert share; a webhook gets its secret the first time."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    services.set_notifications(
        campaign_id=campaign.pk, url=payload.url, emails=payload.emails, failure_rate=payload.failure_rate
    )
    return _notifications_out(request, campaign)


# --- frames ---------------------------------------------------------------------------------------------------------


def _frame_row(frame: Frame) -> dict[str, Any]:
    return {
        "index": frame.index,
        "state": frame.state,
        "seed": frame.seed,
        "layout_index": frame.layout_index,
        "lighting_index": frame.lighting_index,
        "view_index": frame.view_index,
        "composition": frame.composition or {},
        "attempts": frame.attempts,
        "cpu_s": frame.cpu_s,
        "wall_s": frame.wall_s,
        "compute_cost": str(frame.compute_cost) if frame.compute_cost is not None else None,
        "excluded": frame.excluded_at is not None,
        "created_at": frame.created_at,
        "finished_at": frame.finished_at,
    }


@router.get("/campaigns/{campaign_id}/frames", response={200: schemas.FramePageOut, codes_4xx: schemas.ErrorOut})
def frame_list(
    request: HttpRequest,
    campaign_id: int,
    state: str = "",
    class_name: str = Query("", alias="class", description="Frames planned with or holding this class"),
    limit: int = Query(50, ge=1, le=FRAMES_PAGE_MAX),
    offset: int = Query(0, ge=0),
) -> dict[str, Any]:
    """Frames by index, a page at a time (`limit`, `offset`), optionally of one state and one class."""
    campaign = _campaign(request, campaign_id)
    frames = Frame.objects.filter(campaign=campaign)
    if state:
        if state not in Frame.State.values:
            message = f"unknown state (known: {', '.join(Frame.State.values)})"
            raise ApiError(400, f"state: {message}", {"state": message})
        frames = frames.filter(state=state)
    if class_name:
        if "\x00" in class_name or not campaign.quotas.filter(object_class__name=class_name).exists():
            raise ApiError(400, "class: not a class of this campaign", {"class": "not a class of this campaign"})
        holding = Instance.objects.filter(frame=OuterRef("pk"), object_class__name=class_name)
        frames = frames.filter(Q(composition__has_key=class_name) | Exists(holding))
    count = frames.count()
    page = frames.order_by("index")[offset : offset + limit]
    return {"count": count, "limit": limit, "offset": offset, "items": [_frame_row(f) for f in page]}


@router.get(
    "/campaigns/{campaign_id}/frames/{index}", response={200: schemas.FrameDetailOut, codes_4xx: schemas.ErrorOut}
)
def frame_detail(request: HttpRequest, campaign_id: int, index: int) -> dict[str, Any]:
    """One frame: its state, its label rows (every instance, accepted or not, with the reasons) and its files."""
    campaign = _campaign(request, campaign_id)
    frame = Frame.objects.filter(campaign=campaign, index=index).first()
    if frame is None:
        raise ApiError(404, "no such frame")
    instances = selectors.frame_instances(frame_ids=[frame.pk])[frame.pk]
    files: dict[str, str] = {}
    if frame.state == Frame.State.DONE and frame.output_dir:
        for name in FRAME_FILE_NAMES:
            url = reverse(
                "campaigns:frame-file", kwargs={"campaign_id": campaign.pk, "index": frame.index, "name": name}
            )
            files[name] = request.build_absolute_uri(url)
    return {
        **_frame_row(frame),
        "error": frame.error,
        "excluded_reason": frame.excluded_reason,
        "labels": [
            {
                "instance_id": i["instance_id"],
                "class_name": i["object_class__name"],
                "asset_id": i["asset_id"],
                "bbox_xywh_px": i["bbox_xywh_px"],
                "amodal_bbox_xywh_px": i["amodal_bbox_xywh_px"],
                "visible_fraction": i["visible_fraction"],
                "contrast": i["contrast"],
                "occlusion_fraction": i["occlusion_fraction"],
                "truncation_fraction": i["truncation_fraction"],
                "mask_area_px": i["mask_area_px"],
                "accepted": i["accepted"],
                "reject_reasons": i["reject_reasons"] or [],
            }
            for i in instances
        ],
        "files": files,
    }


# Registered after the frames: Django tries the URL patterns in order, and "{action}" would take "frames".
@router.post("/campaigns/{campaign_id}/{action}", response={200: schemas.CampaignOut, codes_4xx: schemas.ErrorOut})
def campaign_action(request: HttpRequest, campaign_id: int, action: str) -> dict[str, Any]:
    """`start` (draft → running), `pause`, `resume` or `cancel`; needs the planner role. An impossible transition
    is a 400 that says why."""
    campaign = _campaign(request, campaign_id, role=PLANNER)
    if action not in ACTIONS:
        raise ApiError(404, f"no action {action!r} (known: {', '.join(ACTIONS)})")
    ACTIONS[action](campaign_id=campaign.pk)
    return _campaign_out(_campaign(request, campaign.pk))


# --- assets ---------------------------------------------------------------------------------------------------------


@router.get("/assets", response={200: list[schemas.AssetOut], codes_4xx: schemas.ErrorOut})
def asset_list(request: HttpRequest) -> list[dict[str, Any]]:
    """The shared procedural library and your teams' uploads."""
    assets = (
        scope_to_user(Asset.objects.all(), user=request.user, include_shared=True)
        .select_related("object_class", "team")
        .order_by("object_class__name", "kind", "name", "pk")
    )
    return [
        {
            "id": a.pk,
            "name": a.name,
            "class_name": a.object_class.name,
            "kind": a.kind,
            "team": a.team_id,
            "team_name": a.team.name if a.team is not None else None,
            "creation_cost": str(a.creation_cost),
            "created_at": a.created_at,
        }
        for a in assets
    ]
