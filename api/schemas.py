"""Request and response bodies of the API (pydantic, through django-ninja). Money is text with its decimals, as
stored (``"12.50"``); a request may send a number or a string."""

from __future__ import annotations

from datetime import datetime
from decimal import Decimal
from typing import Any

from ninja import Schema
from pydantic import Field


class ErrorOut(Schema):
    detail: str = Field(description="What went wrong, for a person")
    errors: dict[str, str] = Field(
        default_factory=dict,
        description="Input → message. Body fields by name (`name`, `cost_budget`, `quotas.0.target_accepted` for "
        "a malformed row, `quotas.<class_name>.<column>` for a rule a quota row breaks, "
        "`budget.<section>.<name>[.min|.max]`), query parameters by name",
    )


# --- health ---------------------------------------------------------------------------------------------------------


class CheckOut(Schema):
    name: str
    ok: bool
    detail: str


class HealthOut(Schema):
    ok: bool
    checks: list[CheckOut]
    elapsed_s: float


# --- campaigns ------------------------------------------------------------------------------------------------------


class QuotaIn(Schema):
    class_name: str = Field(description="An object class, e.g. `chair`")
    target_accepted: int = Field(description="Accepted instances wanted (0 = not in the campaign)")
    min_visible_fraction: float | None = Field(None, description="Empty: the budget's acceptance default")
    min_box_px: float | None = None
    min_contrast: float | None = None


class CampaignIn(Schema):
    name: str
    team: int = Field(description="Id of a team where you are a planner")
    description: str = ""
    quotas: list[QuotaIn]
    budget: dict[str, Any] | None = Field(
        None, description="The randomization budget (render, variation, thresholds, room, …); omitted keys default"
    )
    cost_budget: Decimal = Field(description="Most the campaign may spend: setup cost plus compute")
    price_per_cpu_hour: Decimal
    setup_cost: Decimal = Decimal(0)
    manual_labelling_rate_per_hour: Decimal = Decimal(0)
    weight: int = 1
    seed: int = 0
    max_attempts: int = 3
    asset_ids: list[int] | None = Field(None, description="Omitted: the default assets of the quota classes")


class CampaignCopyIn(Schema):
    name: str | None = Field(None, description="Omitted: '<name> (copy)', or '(copy 2)' … when taken")
    team: int | None = Field(None, description="Id of a team where you are a planner; omitted: the source's team")
    seed: int | None = Field(
        None, description="Omitted: the source's seed (the same scenes where the settings agree); another for new ones"
    )


class TargetIn(Schema):
    class_name: str
    target_accepted: int = Field(description="The new target: at least today's for a quoted class")


class CampaignExtendIn(Schema):
    quotas: list[TargetIn] = Field(default_factory=list, description="Raised targets and classes to add")
    cost_budget: Decimal | None = Field(None, description="Omitted: the budget stays")


class NotificationsIn(Schema):
    url: str = Field("", description="Webhook URL (http or https); empty: no webhook")
    emails: str = Field("", description="E-mail addresses separated by spaces or commas; empty: none")
    failure_rate: float | None = Field(
        None, description="Alert when this share (0–1) of the latest finished frames is dead; 0: off; omitted: kept"
    )


class DeliveryOut(Schema):
    delivery_id: str
    event: str
    channel: str
    state: str
    attempts: int
    last_status_code: int | None
    last_error: str
    created_at: str
    sent_at: str | None


class NotificationsOut(Schema):
    url: str
    emails: list[str]
    failure_rate: float
    secret: str | None = Field(description="The webhook's HMAC-SHA256 key; planners only")
    deliveries: list[DeliveryOut]


class CampaignRowOut(Schema):
    id: int
    name: str
    team: int
    team_name: str
    status: str
    progress_pct: float
    spent: str
    spent_pct: float
    cost_budget: str
    frames_done: int
    eta_s: float | None = Field(description="Seconds left at the pace since start (running campaigns)")
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None


class QuotaSettingsOut(Schema):
    class_name: str
    target_accepted: int
    min_visible_fraction: float
    min_box_px: float
    min_contrast: float


class CampaignSettingsOut(Schema):
    description: str
    seed: int
    budget: dict[str, Any]
    quotas: list[QuotaSettingsOut]
    cost_budget: str
    price_per_cpu_hour: str
    setup_cost: str
    manual_labelling_rate_per_hour: str
    weight: int
    max_attempts: int
    asset_ids: list[int]


class QuotaProgressOut(Schema):
    class_name: str
    target: int
    accepted: int
    rejected: int
    placed: int
    yield_estimate: float = Field(description="Posterior share of placed instances that are accepted")
    met: bool
    pct: float


class SpendOut(Schema):
    spent: str = Field(description="What the budget pays: setup cost plus compute")
    spent_pct: float
    cost_budget: str
    fixed: str = Field(description="The setup cost")
    library_share: str = Field(
        description="This campaign's share of its assets' creation costs, amortized over every frame of every "
        "campaign that used them (reported, not charged to the budget)"
    )
    compute: str
    cpu_s: float
    cost_remaining: str | None
    per_accepted: str | None


class CampaignOut(Schema):
    id: int
    name: str
    team: int
    team_name: str
    owner: str
    status: str
    status_label: str
    pause_reason: str
    pause_detail: str
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
    settings: CampaignSettingsOut
    frames: dict[str, int] = Field(description="Frames by state")
    frames_done: int
    frames_dead: int
    failed_open: int
    instances_accepted: int
    instances_rejected: int
    progress_pct: float
    quotas: list[QuotaProgressOut]
    spend: SpendOut
    frames_remaining: int | None
    eta_s: float | None = Field(description="Projected seconds left on the live fleet; null when unknown")


# --- frames ---------------------------------------------------------------------------------------------------------


class FrameOut(Schema):
    index: int
    state: str
    seed: int
    layout_index: int
    lighting_index: int
    view_index: int
    composition: dict[str, int]
    attempts: int
    cpu_s: float | None
    wall_s: float | None
    compute_cost: str | None
    excluded: bool
    created_at: datetime
    finished_at: datetime | None


class FramePageOut(Schema):
    count: int
    limit: int
    offset: int
    items: list[FrameOut]


class InstanceOut(Schema):
    instance_id: int
    class_name: str
    asset_id: str
    bbox_xywh_px: list[float] | None
    amodal_bbox_xywh_px: list[float] | None
    visible_fraction: float
    contrast: float | None
    occlusion_fraction: float
    truncation_fraction: float
    mask_area_px: int
    accepted: bool
    reject_reasons: list[Any]


class FrameDetailOut(FrameOut):
    error: str
    excluded_reason: str
    labels: list[InstanceOut]
    files: dict[str, str] = Field(
        description="File name → URL of the dashboard's frame file view (signed-in browser session)"
    )


# --- assets ---------------------------------------------------------------------------------------------------------


class AssetOut(Schema):
    id: int
    name: str
    class_name: str
    kind: str
    team: int | None = Field(description="null: the shared procedural library")
    team_name: str | None
    creation_cost: str
    created_at: datetime
