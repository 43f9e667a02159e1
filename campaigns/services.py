"""Everything that writes campaign data. Keyword-only, type-annotated; views, commands and tasks call these.

Concurrency rules (several workers record results at once):

* every writing transaction first locks the campaign row (``SELECT … FOR
  UPDATE`` on PostgreSQL; SQLite's ``BEGIN IMMEDIATE`` serialises writers
  anyway), so all writers take locks in the same order — campaign, frame,
  quota — and cannot deadlock;
* a frame changes state only through a conditional ``UPDATE … WHERE state =
  …`` on its row, so a redelivered or duplicated task finds the frame already
  done and changes nothing;
* counters change only by ``F()`` increments in the transaction that records
  the result.

Unique names (a campaign's name in its team) are checked first, for a clear
message, and the insert or rename is guarded as well: a request that loses a race for the name between its check
and its write gets the same :class:`CampaignError` as the check gives (:func:`evenframe.inputs.name_guard`), never an
``IntegrityError``.
"""

from __future__ import annotations

import logging
import math
import secrets
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import asdict, dataclass
from datetime import timedelta
from decimal import Decimal
from typing import Any, NamedTuple

from django.conf import settings as django_settings
from django.db import transaction
from django.db.models import F, Q, QuerySet
from django.db.models.functions import Coalesce
from django.urls import reverse
from django.utils import timezone

from assets.models import Asset, ObjectClass
from campaigns import costs, errors, messaging, notify, planner, selectors
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance, Notification
from evenframe.inputs import DEFAULT_MONEY_MAXIMUM, InputError, clean_amount, clean_name, clean_text, name_guard
from render.budget import FIELDS_BY_KEY, BudgetError, normalize_budget
from teams.models import Team
from teams.permissions import PLANNER, has_role, personal_team

log = logging.getLogger("evenframe.campaigns")

# Caps on top of the budget schema's physical bounds: what one CPU worker can render in reasonable time.
MAX_CAMPAIGN_PIXELS = 1920 * 1080
MAX_CAMPAIGN_SPP = 1024
MAX_TARGET_ACCEPTED = 1_000_000
# The form's limit too; far below what the database integer holds, so no weight reaches it as an overflow.
MAX_WEIGHT = 1000
MAX_SEED = 2**63 - 1  # a campaign seed fits a signed 64-bit database integer
MAX_ATTEMPTS = 20
RETRY_BACKOFF_BASE_S = 2.0
RETRY_BACKOFF_MAX_S = 300.0

Status = Campaign.Status
State = Frame.State


class CampaignError(InputError):
    """Bad input or an impossible transition; the message says which and nothing was changed.

    Structured for forms: ``field`` names the input the error is about (the service's keyword, e.g. ``name``,
    ``cost_budget``, ``team``; ``quota`` for one class's quota row, with ``class_name`` and ``column``, the
    :class:`QuotaInput` attribute; ``budget`` for the randomization budget), or is empty for the request as a whole;
    ``message`` is the text for that input. ``str(error)`` reads ``"field: message"`` for commands and logs.
    """

    def __init__(
        self,
        message: str,
        *,
        field: str = "",
        class_name: str | None = None,
        column: str = "",
        budget_field: tuple[str, str, str] | None = None,
        detail: str = "",
    ) -> None:
        super().__init__(message, field=field)
        self.class_name = class_name
        self.column = column
        # For field "budget": (section, name, part) of the budget input, and the message for that input alone.
        self.budget_field = budget_field
        self.detail = detail or message
        if field == "quota" and class_name is not None:
            self.args = (f"quota {class_name!r}: {message}",)


@dataclass(frozen=True)
class QuotaInput:
    class_name: str
    target_accepted: int
    min_visible_fraction: float | None = None
    min_box_px: float | None = None
    min_contrast: float | None = None


class _CleanQuota(NamedTuple):
    """A checked quota row: the thresholds are the quota's own or the budget's acceptance defaults."""

    object_class: ObjectClass
    target_accepted: int
    min_visible_fraction: float
    min_box_px: float
    min_contrast: float


# --- helpers ---------------------------------------------------------------------------------------


def lock_campaign(campaign_id: int) -> Campaign:
    try:
        return Campaign.objects.select_for_update().get(pk=campaign_id)
    except Campaign.DoesNotExist as exc:
        raise CampaignError(f"campaign {campaign_id} does not exist") from exc


def _event(
    *,
    campaign_id: int,
    to_state: str,
    from_state: str = "",
    frame_id: int | None = None,
    worker_host: str = "",
    detail: str = "",
) -> None:
    FrameEvent.objects.create(
        campaign_id=campaign_id,
        frame_id=frame_id,
        from_state=from_state,
        to_state=to_state,
        worker_host=worker_host[:255],
        detail=detail,
    )


# Largest accepted money values: below what the DecimalFields can store (max_digits), so input is refused
# with a message instead of failing in the database.
MONEY_MAXIMUM = {"price_per_cpu_hour": Decimal("100000"), "manual_labelling_rate_per_hour": Decimal("1000000")}


def _decimal(value: Any, what: str, *, minimum: Decimal = Decimal(0)) -> Decimal:
    """A money amount from input; ``what`` is the input's name (the error's field)."""
    maximum = MONEY_MAXIMUM.get(what, DEFAULT_MONEY_MAXIMUM)
    return clean_amount(value, what, minimum=minimum, maximum=maximum, error=CampaignError)


def _finite(value: Any, what: str, **where: Any) -> float:
    """A finite number from user input, or a CampaignError saying ``what`` is wrong (``where``: its field)."""
    if isinstance(value, bool):
        raise CampaignError(f"{what}: expected a number, got {value!r}", **where)
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise CampaignError(f"{what}: expected a number, got {value!r}", **where) from exc
    if not math.isfinite(number):
        raise CampaignError(f"{what}: must be finite, got {value!r}", **where)
    return number


def normalize_campaign_budget(budget: Mapping[str, Any] | None) -> dict[str, Any]:
    """The render core's ``normalize_budget`` plus the campaign caps; :class:`CampaignError` on bad input."""
    try:
        normalized = normalize_budget(dict(budget or {}))
    except BudgetError as exc:
        raise CampaignError(
            str(exc),
            field="budget",
            detail=exc.detail,
            budget_field=(exc.section, exc.name, exc.part) if exc.name else None,
        ) from exc
    render = normalized["render"]
    pixels = render["width_px"] * render["height_px"]
    if pixels > MAX_CAMPAIGN_PIXELS:
        detail = f"{pixels} px exceeds the campaign cap of {MAX_CAMPAIGN_PIXELS} px (1920×1080)"
        raise CampaignError(
            f"render.width_px × height_px = {detail}",
            field="budget",
            detail=detail,
            budget_field=("render", "width_px", ""),
        )
    if render["spp"] > MAX_CAMPAIGN_SPP:
        detail = f"{render['spp']} exceeds the campaign cap of {MAX_CAMPAIGN_SPP}"
        raise CampaignError(f"render.spp {detail}", field="budget", detail=detail, budget_field=("render", "spp", ""))
    return normalized


# --- campaigns -------------------------------------------------------------------------------------


def _target_problem(target: Any) -> str:
    """Why a quota target cannot be used (a whole number from 0 to :data:`MAX_TARGET_ACCEPTED`), or ""."""
    if isinstance(target, bool) or not isinstance(target, int):
        return f"target must be a whole number, got {target!r}"
    if not 0 <= target <= MAX_TARGET_ACCEPTED:
        return f"target must be between 0 and {MAX_TARGET_ACCEPTED}, got {target}"
    return ""


def _clean_quota_inputs(*, quotas: Sequence[QuotaInput], normalized_budget: Mapping[str, Any]) -> list[_CleanQuota]:
    """Check class quotas against the normalized budget; an empty threshold takes the budget's default."""
    max_contrast = FIELDS_BY_KEY["thresholds", "min_contrast"].upper
    if not quotas:
        raise CampaignError("at least one class quota is required", field="quotas")
    for q in quotas:
        if not isinstance(q, QuotaInput):
            raise CampaignError(f"expected class quotas, got {type(q).__name__}", field="quotas")
        if not isinstance(q.class_name, str):
            raise CampaignError(f"class name must be text, got {q.class_name!r}", field="quota")
    # A name with NUL cannot exist (PostgreSQL text cannot hold it, and refuses it even in a lookup): unknown.
    classes = {
        c.name: c
        for c in ObjectClass.objects.filter(name__in=[q.class_name for q in quotas if "\x00" not in q.class_name])
    }
    thresholds = normalized_budget["thresholds"]
    longest_side_px = max(normalized_budget["render"]["width_px"], normalized_budget["render"]["height_px"])
    seen: set[str] = set()
    clean: list[_CleanQuota] = []
    for q in quotas:

        def where(column: str = "target_accepted", class_name: str = q.class_name) -> dict[str, Any]:
            """The error's place: this quota row's ``column`` (a QuotaInput attribute)."""
            return {"field": "quota", "class_name": class_name, "column": column}

        if q.class_name not in classes:
            raise CampaignError("unknown object class (create it first, e.g. with seed_demo)", **where())
        if q.class_name in seen:
            raise CampaignError("listed twice", **where())
        seen.add(q.class_name)
        if problem := _target_problem(q.target_accepted):
            raise CampaignError(problem, **where())
        vis = (
            thresholds["min_visible_fraction"]
            if q.min_visible_fraction is None
            else _finite(q.min_visible_fraction, "min visible fraction", **where("min_visible_fraction"))
        )
        box = (
            thresholds["min_box_px"]
            if q.min_box_px is None
            else _finite(q.min_box_px, "min box size", **where("min_box_px"))
        )
        contrast = (
            thresholds["min_contrast"]
            if q.min_contrast is None
            else _finite(q.min_contrast, "min contrast", **where("min_contrast"))
        )
        if not 0.0 <= vis <= 1.0:
            raise CampaignError(
                f"min visible fraction must be between 0 and 1, got {vis}", **where("min_visible_fraction")
            )
        if not 0.0 <= box <= longest_side_px:
            raise CampaignError(
                f"min box size must be between 0 and {longest_side_px} px, got {box}", **where("min_box_px")
            )
        if not 0.0 <= contrast <= max_contrast:
            raise CampaignError(
                f"min contrast must be between 0 and {max_contrast:g}, got {contrast:g}", **where("min_contrast")
            )
        clean.append(_CleanQuota(classes[q.class_name], q.target_accepted, vis, box, contrast))
    if sum(q.target_accepted for q in clean) == 0:
        raise CampaignError("every target is 0; nothing to render", field="quotas")
    return clean


def _clean_name(name: Any, description: str, *, max_length: int = 200) -> str:
    return clean_name(name, description, max_length=max_length, error=CampaignError)


def _campaign_name_conflict(*, team_id: int, name: str, exclude_pk: int | None = None) -> CampaignError | None:
    """The error for a campaign name the team already uses (other than campaign ``exclude_pk``), or None."""
    taken = Campaign.objects.filter(team_id=team_id, name=name)
    if exclude_pk is not None:
        taken = taken.exclude(pk=exclude_pk)
    if not taken.exists():
        return None
    team_name = Team.objects.filter(pk=team_id).values_list("name", flat=True).first()
    return CampaignError(f"team {team_name} already has a campaign called {name!r}", field="name")


@dataclass(frozen=True)
class _Settings:
    cost_budget: Decimal
    price_per_cpu_hour: Decimal
    setup_cost: Decimal
    manual_labelling_rate_per_hour: Decimal
    weight: int
    seed: int
    max_attempts: int


def _clean_settings(
    *,
    cost_budget: Any,
    price_per_cpu_hour: Any,
    setup_cost: Any,
    manual_labelling_rate_per_hour: Any,
    weight: Any,
    seed: Any,
    max_attempts: Any,
) -> _Settings:
    """The money and run settings shared by :func:`create_campaign` and :func:`update_draft_campaign`."""
    settings = _Settings(
        cost_budget=_decimal(cost_budget, "cost_budget"),
        price_per_cpu_hour=_decimal(price_per_cpu_hour, "price_per_cpu_hour"),
        setup_cost=_decimal(setup_cost, "setup_cost"),
        manual_labelling_rate_per_hour=_decimal(manual_labelling_rate_per_hour, "manual_labelling_rate_per_hour"),
        weight=weight,
        seed=seed,
        max_attempts=max_attempts,
    )
    if isinstance(weight, bool) or not isinstance(weight, int) or not 1 <= weight <= MAX_WEIGHT:
        raise CampaignError(f"must be a whole number from 1 to {MAX_WEIGHT}, got {weight!r}", field="weight")
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed <= MAX_SEED:
        raise CampaignError(f"must be a whole number from 0 to 2^63 − 1, got {seed!r}", field="seed")
    if isinstance(max_attempts, bool) or not isinstance(max_attempts, int) or not 1 <= max_attempts <= MAX_ATTEMPTS:
        raise CampaignError(f"must be between 1 and {MAX_ATTEMPTS}, got {max_attempts!r}", field="max_attempts")
    return settings


def _usable_assets(*, team_id: int | None) -> QuerySet[Asset]:
    """Shared (team-less) assets and the team's own uploads; never another team's."""
    return Asset.objects.filter(Q(team__isnull=True) | Q(team_id=team_id))


def default_campaign_assets(*, team_id: int | None, class_names: Iterable[str]) -> list[Asset]:
    """The assets a campaign uses when its planner does not choose: for each quota class, its procedural
    generators; an upload only when it is the team's one asset of a class that has no procedural generator.

    Uploads are otherwise opt-in per campaign (the planner form lists them), so a new upload never joins a
    campaign that did not ask for it.
    """
    names = set(class_names)
    usable = list(
        _usable_assets(team_id=team_id)
        .filter(object_class__name__in=names)
        .select_related("object_class")
        .order_by("object_class__name", "pk")
    )
    chosen = [a for a in usable if a.kind == Asset.Kind.PROCEDURAL]
    with_generator = {a.object_class_id for a in chosen}
    by_class: dict[int, list[Asset]] = {}
    for asset in usable:
        if asset.kind == Asset.Kind.MESH and asset.object_class_id not in with_generator:
            by_class.setdefault(asset.object_class_id, []).append(asset)
    chosen += [group[0] for group in by_class.values() if len(group) == 1]
    return chosen


def _chosen_assets(*, team_id: int | None, asset_ids: Iterable[int]) -> list[Asset]:
    wanted = set(asset_ids)
    assets = list(_usable_assets(team_id=team_id).filter(pk__in=wanted))
    if len(assets) != len(wanted):
        raise CampaignError(
            f"{len(wanted) - len(assets)} asset(s) are unknown or belong to another team", field="assets"
        )
    return assets


def _write_quotas(*, campaign: Campaign, clean: Sequence[_CleanQuota]) -> None:
    ClassQuota.objects.bulk_create(
        [
            ClassQuota(
                campaign=campaign,
                object_class=q.object_class,
                target_accepted=q.target_accepted,
                min_visible_fraction=q.min_visible_fraction,
                min_box_px=q.min_box_px,
                min_contrast=q.min_contrast,
            )
            for q in clean
        ]
    )


def _check_fixed_cost(*, settings: _Settings) -> None:
    """The budget must at least pay the campaign's own fixed cost, its setup cost. The assets' creation costs are
    the library's (a campaign bears an amortized share, reported beside its spend, not charged to its budget)."""
    fixed = costs.fixed_cost(asset_creation_costs=[], setup_cost=settings.setup_cost)
    if fixed > settings.cost_budget:
        raise CampaignError(
            f"{settings.cost_budget} is less than the fixed costs {fixed} (the setup cost)", field="cost_budget"
        )


@transaction.atomic
def create_campaign(
    *,
    owner: Any,
    name: str,
    quotas: Sequence[QuotaInput],
    team: Any = None,
    cost_budget: Decimal | float | str,
    price_per_cpu_hour: Decimal | float | str,
    budget: Mapping[str, Any] | None = None,
    setup_cost: Decimal | float | str = 0,
    manual_labelling_rate_per_hour: Decimal | float | str = 0,
    weight: int = 1,
    seed: int = 0,
    max_attempts: int = 3,
    asset_ids: Iterable[int] | None = None,
    description: str = "",
) -> Campaign:
    """Validate everything, then create a draft campaign with its quotas; nothing is written on bad input.

    One transaction: a request that fails half-way (or loses the race for the name) leaves no row behind."""
    name = _clean_name(name, description)
    if team is None:
        team = personal_team(user=owner)
    elif not has_role(user=owner, team=team, role=PLANNER):
        raise CampaignError(f"{owner} is not a planner in team {team}", field="team")
    if conflict := _campaign_name_conflict(team_id=team.pk, name=name):
        raise conflict
    normalized = normalize_campaign_budget(budget)
    settings = _clean_settings(
        cost_budget=cost_budget,
        price_per_cpu_hour=price_per_cpu_hour,
        setup_cost=setup_cost,
        manual_labelling_rate_per_hour=manual_labelling_rate_per_hour,
        weight=weight,
        seed=seed,
        max_attempts=max_attempts,
    )
    clean = _clean_quota_inputs(quotas=quotas, normalized_budget=normalized)
    if asset_ids is not None:
        assets = _chosen_assets(team_id=team.pk, asset_ids=asset_ids)
    else:
        assets = default_campaign_assets(team_id=team.pk, class_names=[q.object_class.name for q in clean])
    _check_fixed_cost(settings=settings)
    with name_guard(lambda: _campaign_name_conflict(team_id=team.pk, name=name)):
        campaign = Campaign.objects.create(
            name=name,
            team=team,
            owner=owner,
            description=description,
            budget=normalized,
            **asdict(settings),  # seed, money settings, weight, max_attempts
        )
    campaign.assets.set(assets)
    _write_quotas(campaign=campaign, clean=clean)
    _event(campaign_id=campaign.pk, to_state=Status.DRAFT, detail="created")
    return campaign


def set_status(campaign: Campaign, to: str, *, reason: str = "", detail: str = "", allowed_from: Sequence[str]) -> None:
    if campaign.status not in allowed_from:
        raise CampaignError(
            f"campaign {campaign.name!r} is {campaign.status}; cannot go to {to} "
            f"(allowed from: {', '.join(allowed_from)})"
        )
    now = timezone.now()
    fields: dict[str, Any] = {"status": to, "pause_reason": reason, "pause_detail": detail[:500]}
    if to == Status.RUNNING and campaign.started_at is None:
        fields["started_at"] = now
    if to in (Status.COMPLETED, Status.CANCELLED):
        fields["finished_at"] = now
    Campaign.objects.filter(pk=campaign.pk).update(**fields)
    _event(
        campaign_id=campaign.pk,
        from_state=campaign.status,
        to_state=to,
        detail=" — ".join(x for x in (reason, detail) if x),
    )
    for key, value in fields.items():
        setattr(campaign, key, value)
    event = _STATUS_EVENTS.get((to, reason))
    if event is not None:
        queue_notification(campaign=campaign, event=event, detail=detail)


def revoke_waiting_frames(campaign: Campaign, *, detail: str, states: Sequence[str] = (State.QUEUED,)) -> list[str]:
    """Queued (and optionally failed) frames become revoked; returns their task ids for a best-effort revoke."""
    waiting = list(Frame.objects.filter(campaign=campaign, state__in=states).values_list("pk", "state", "task_id"))
    task_ids = []
    for frame_id, state, task_id in waiting:
        if Frame.objects.filter(pk=frame_id, state=state).update(state=State.REVOKED, retry_at=None):
            _event(campaign_id=campaign.pk, frame_id=frame_id, from_state=state, to_state=State.REVOKED, detail=detail)
            if task_id:
                task_ids.append(task_id)
    return task_ids


@transaction.atomic
def start_campaign(*, campaign_id: int) -> Campaign:
    """draft → running, then dispatch the first frames (after commit)."""
    campaign = lock_campaign(campaign_id)
    fixed = selectors.fixed_cost(campaign=campaign)
    if fixed > campaign.cost_budget:
        raise CampaignError(f"the fixed costs {fixed} already exceed the cost budget {campaign.cost_budget}")
    set_status(campaign, Status.RUNNING, allowed_from=(Status.DRAFT,))
    ClassQuota.objects.filter(campaign=campaign, met_at__isnull=True, target_accepted=0).update(met_at=timezone.now())
    messaging.request_dispatch_on_commit(campaign.pk)
    return campaign


@transaction.atomic
def pause_campaign(*, campaign_id: int, reason: str = Campaign.PauseReason.USER, detail: str = "") -> Campaign:
    """running → paused: dispatch stops and queued frames are revoked; running frames finish and are recorded."""
    campaign = lock_campaign(campaign_id)
    set_status(campaign, Status.PAUSED, reason=reason, detail=detail, allowed_from=(Status.RUNNING,))
    messaging.revoke_on_commit(revoke_waiting_frames(campaign, detail=f"campaign paused ({reason})"))
    return campaign


@transaction.atomic
def resume_campaign(*, campaign_id: int) -> Campaign:
    """paused → running; revoked frames are dispatched again with their own index and seed."""
    campaign = lock_campaign(campaign_id)
    if campaign.status == Status.PAUSED and campaign.pause_reason == Campaign.PauseReason.BUDGET:
        if not selectors.can_afford_next_frame(campaign=campaign):
            raise CampaignError("the next frame would still take spend over the cost budget; raise the budget first")
    set_status(campaign, Status.RUNNING, allowed_from=(Status.PAUSED,))
    Campaign.objects.filter(pk=campaign.pk).update(failure_alert_at=None)  # a resumed campaign may alert again
    messaging.request_dispatch_on_commit(campaign.pk)
    return campaign


@transaction.atomic
def cancel_campaign(*, campaign_id: int) -> Campaign:
    """Any unfinished status → cancelled; waiting frames are revoked for good."""
    campaign = lock_campaign(campaign_id)
    set_status(campaign, Status.CANCELLED, allowed_from=(Status.DRAFT, Status.RUNNING, Status.PAUSED))
    messaging.revoke_on_commit(
        revoke_waiting_frames(campaign, detail="campaign cancelled", states=(State.QUEUED, State.FAILED))
    )
    return campaign


@transaction.atomic
def set_cost_budget(*, campaign_id: int, cost_budget: Decimal | float | str) -> Campaign:
    campaign = lock_campaign(campaign_id)
    value = _decimal(cost_budget, "cost_budget")
    Campaign.objects.filter(pk=campaign.pk).update(cost_budget=value)
    _event(
        campaign_id=campaign.pk,
        from_state=campaign.status,
        to_state=campaign.status,
        detail=f"cost budget {campaign.cost_budget} → {value}",
    )
    campaign.cost_budget = value
    return campaign


# --- copy and extend -------------------------------------------------------------------------------


def copy_name(*, campaign: Campaign) -> str:
    """A name the campaign's team does not use yet for a copy: "<name> (copy)", then "(copy 2)", "(copy 3)" …"""
    for n in range(1, 1000):
        suffix = " (copy)" if n == 1 else f" (copy {n})"
        name = campaign.name[: 200 - len(suffix)].rstrip() + suffix
        if not Campaign.objects.filter(team_id=campaign.team_id, name=name).exists():
            return name
    raise CampaignError("every copy name up to (copy 999) is taken; give the copy a name", field="name")


def source_quotas(*, campaign: Campaign) -> list[QuotaInput]:
    """A campaign's quotas as inputs for a new plan (targets and their own thresholds)."""
    return [
        QuotaInput(q.object_class.name, q.target_accepted, q.min_visible_fraction, q.min_box_px, q.min_contrast)
        for q in campaign.quotas.select_related("object_class").order_by("object_class__name")
    ]


@transaction.atomic
def copy_campaign(
    *, campaign_id: int, owner: Any, name: str | None = None, seed: int | None = None, team: Any = None
) -> Campaign:
    """A new draft with every setting of campaign ``campaign_id``: budget, quotas with their thresholds, money and
    run settings, assets, description. ``name`` defaults to :func:`copy_name`; ``seed`` to the source's (the same
    seed renders the same scenes at the same coordinates; give another for new ones); ``team`` to the source's.

    Checked like :func:`create_campaign` (the owner plans in the team, the name is free, the assets are usable
    by the team); nothing is written on bad input."""
    try:
        source = Campaign.objects.get(pk=campaign_id)
    except (Campaign.DoesNotExist, TypeError, ValueError) as exc:
        raise CampaignError(f"campaign {campaign_id} does not exist") from exc
    campaign = create_campaign(
        owner=owner,
        team=team if team is not None else source.team,
        name=copy_name(campaign=source) if name is None else name,
        quotas=source_quotas(campaign=source),
        budget=source.budget,
        cost_budget=source.cost_budget,
        price_per_cpu_hour=source.price_per_cpu_hour,
        setup_cost=source.setup_cost,
        manual_labelling_rate_per_hour=source.manual_labelling_rate_per_hour,
        weight=source.weight,
        seed=source.seed if seed is None else seed,
        max_attempts=source.max_attempts,
        asset_ids=list(source.assets.values_list("pk", flat=True)),
        description=source.description,
    )
    record_copy(campaign_id=campaign.pk, source=source)
    return campaign


def record_copy(*, campaign_id: int, source: Campaign) -> None:
    """The new draft's history says which campaign it was copied from (the planner page's copy saves through
    :func:`create_campaign`, since its settings may have been changed on the way)."""
    _event(
        campaign_id=campaign_id,
        from_state=Status.DRAFT,
        to_state=Status.DRAFT,
        detail=f"copy of campaign {source.pk} ({source.name})",
    )


EXTENDABLE = (Status.RUNNING, Status.PAUSED, Status.COMPLETED)
EXTENDED_DETAIL = "extended with new quotas; resume it to render them"


def _clean_extension_targets(targets: Any) -> dict[str, int]:
    if not isinstance(targets, Mapping):
        raise CampaignError(f"expected class names and targets, got {type(targets).__name__}", field="quotas")
    clean: dict[str, int] = {}
    for name, target in targets.items():
        if not isinstance(name, str) or not name or "\x00" in name:
            raise CampaignError(f"class name must be text, got {name!r}", field="quotas")
        if problem := _target_problem(target):
            raise CampaignError(problem, field="quota", class_name=name, column="target_accepted")
        clean[name] = target
    return clean


@transaction.atomic
def extend_campaign(
    *, campaign_id: int, targets: Mapping[str, int], cost_budget: Decimal | float | str | None = None
) -> Campaign:
    """Raise the targets of a started campaign's quotas or add classes to it, and optionally change its cost budget.

    ``targets`` maps class names to new targets: a quoted class's target may only go up (what it accepted stays
    accepted), a class the campaign does not quote yet joins with the budget's acceptance thresholds and its
    default assets (:func:`default_campaign_assets`); a target of 0 for a new class adds nothing. A running
    campaign's planner picks up the new deficits at its next dispatch; a completed campaign with an unmet quota
    again becomes paused (resume to render), a paused one stays paused. Drafts are edited instead, cancelled
    campaigns stay cancelled. Nothing is written on bad input."""
    campaign = lock_campaign(campaign_id)
    if campaign.status == Status.DRAFT:
        raise CampaignError(f"campaign {campaign.name!r} is a draft; edit its plan instead of extending it")
    if campaign.status not in EXTENDABLE:
        raise CampaignError(
            f"campaign {campaign.name!r} is {campaign.status} and renders no more frames; copy it to plan more"
        )
    wanted = _clean_extension_targets(targets)
    quotas = {
        q.object_class.name: q for q in ClassQuota.objects.filter(campaign=campaign).select_related("object_class")
    }
    raised: dict[str, tuple[ClassQuota, int]] = {}
    added: list[QuotaInput] = []
    for name, target in wanted.items():
        quota = quotas.get(name)
        if quota is None:
            if target > 0:
                added.append(QuotaInput(name, target))
        elif target < quota.target_accepted:
            raise CampaignError(
                f"an extension only raises targets; the target is {quota.target_accepted}",
                field="quota",
                class_name=name,
                column="target_accepted",
            )
        elif target > quota.target_accepted:
            raised[name] = (quota, target)
    new_quotas = _clean_quota_inputs(quotas=added, normalized_budget=campaign.budget) if added else []
    new_budget = None if cost_budget is None else _decimal(cost_budget, "cost_budget")
    if not raised and not new_quotas and (new_budget is None or new_budget == campaign.cost_budget):
        raise CampaignError(
            "nothing to change: give a class a higher target, a new class or a new budget", field="quotas"
        )
    changes = [f"{name} {quota.target_accepted} → {target}" for name, (quota, target) in sorted(raised.items())]
    changes += [f"{q.object_class.name} added with {q.target_accepted}" for q in new_quotas]
    for quota, target in raised.values():
        ClassQuota.objects.filter(pk=quota.pk).update(target_accepted=target)
        ClassQuota.objects.filter(pk=quota.pk, accepted_count__lt=target).update(met_at=None)
    if new_quotas:
        _write_quotas(campaign=campaign, clean=new_quotas)
        names = [q.object_class.name for q in new_quotas]
        campaign.assets.add(*default_campaign_assets(team_id=campaign.team_id, class_names=names))
    if new_budget is not None and new_budget != campaign.cost_budget:
        changes.append(f"cost budget {campaign.cost_budget} → {new_budget}")
        Campaign.objects.filter(pk=campaign.pk).update(cost_budget=new_budget)
        campaign.cost_budget = new_budget
    _event(
        campaign_id=campaign.pk,
        from_state=campaign.status,
        to_state=campaign.status,
        detail="extended: " + "; ".join(changes),
    )
    unmet = ClassQuota.objects.filter(campaign=campaign, accepted_count__lt=F("target_accepted")).exists()
    if campaign.status == Status.COMPLETED and unmet:
        set_status(
            campaign,
            Status.PAUSED,
            reason=Campaign.PauseReason.USER,
            detail=EXTENDED_DETAIL,
            allowed_from=(Status.COMPLETED,),
        )
        Campaign.objects.filter(pk=campaign.pk).update(finished_at=None)
        campaign.finished_at = None
    elif campaign.status == Status.RUNNING:
        messaging.request_dispatch_on_commit(campaign.pk)
    return campaign


# --- frames: created by the scheduler ----------------------------------------------------------------


def create_frame(
    *,
    campaign: Campaign,
    index: int,
    coordinates: tuple[int, int, int],
    composition: dict[str, int],
    expected_cpu_s: float,
    task_id_prefix: str = messaging.TASK_ID_PREFIX,
) -> Frame:
    """A new queued frame; call inside the scheduler's transaction (campaign row locked). ``task_id_prefix``: tests
    that record frames without a broker mark their task ids apart."""
    layout, lighting, view = coordinates
    seeds = planner.frame_seeds(
        campaign_seed=campaign.seed, index=index, layout_index=layout, lighting_index=lighting, view_index=view
    )
    now = timezone.now()
    frame = Frame.objects.create(
        campaign=campaign,
        index=index,
        seed=seeds.seed,
        layout_index=layout,
        lighting_index=lighting,
        view_index=view,
        composition=dict(sorted(composition.items())),
        state=State.QUEUED,
        dispatch_count=1,
        task_id=messaging.task_id(campaign_id=campaign.pk, index=index, dispatch_no=1, prefix=task_id_prefix),
        expected_cpu_s=expected_cpu_s,
        queued_at=now,
    )
    _event(campaign_id=campaign.pk, frame_id=frame.pk, to_state=State.QUEUED, detail=f"composition {frame.composition}")
    return frame


def requeue_frame(*, frame: Frame, composition: dict[str, int] | None, expected_cpu_s: float) -> Frame | None:
    """failed (retry due), revoked (campaign resumed) or a stale queued frame → queued with a new message id.

    Returns None if the frame moved meanwhile."""
    dispatch_no = frame.dispatch_count + 1
    task_id = messaging.task_id(campaign_id=frame.campaign_id, index=frame.index, dispatch_no=dispatch_no)
    fields: dict[str, Any] = {
        "state": State.QUEUED,
        "dispatch_count": dispatch_no,
        "task_id": task_id,
        "expected_cpu_s": expected_cpu_s,
        "queued_at": timezone.now(),
    }
    if composition is not None:
        fields["composition"] = dict(sorted(composition.items()))
    if not Frame.objects.filter(pk=frame.pk, state=frame.state, dispatch_count=frame.dispatch_count).update(**fields):
        return None
    _event(
        campaign_id=frame.campaign_id,
        frame_id=frame.pk,
        from_state=frame.state,
        to_state=State.QUEUED,
        detail=f"dispatch {dispatch_no}" + (f", composition {fields['composition']}" if composition else ""),
    )
    frame.refresh_from_db()
    return frame


def mark_message_unsent(*, frame_id: int, dispatch_no: int) -> bool:
    """The broker refused this queued frame's message (e.g. Redis is down): clear ``queued_at`` so the next
    dispatch or sweep sends it again at once instead of waiting for the stale-queued timeout."""
    return bool(
        Frame.objects.filter(pk=frame_id, state=State.QUEUED, dispatch_count=dispatch_no).update(queued_at=None)
    )


def mark_message_resent(*, frame_id: int, dispatch_no: int) -> bool:
    """An unsent message goes out again under the same dispatch number (it never reached the broker, so no
    copy can be delivered; a new number per failed send would also run the counter up during a long outage)."""
    return bool(
        Frame.objects.filter(
            pk=frame_id, state=State.QUEUED, dispatch_count=dispatch_no, queued_at__isnull=True
        ).update(queued_at=timezone.now())
    )


@dataclass(frozen=True)
class LostFrame:
    frame_id: int
    index: int
    to_state: str
    dispatch_no: int
    task_id: str


@transaction.atomic
def release_lost_frames(*, campaign_id: int, live_hosts: Iterable[str], started_before: Any) -> list[LostFrame]:
    """Frames ``running`` on a worker that is not live (kill -9, power loss, a partition) are taken back.

    A lost message is not redelivered by the file-system transport (it deletes the message file when a
    consumer takes it; the unacked copy lives only in that consumer's memory), and Redis redelivers only
    after its visibility timeout, so the heartbeats decide: the frame goes back to ``queued`` under a new
    dispatch number (the old message, should it still arrive, is stale), or ``dead`` once it has used its
    attempts (a frame that takes its worker down every time), or ``revoked`` when the campaign no longer runs.
    Only frames started before ``started_before`` count, so a worker whose first heartbeat is not yet written
    does not lose the frame it just claimed. The caller sends the returned queued frames after commit.
    """
    campaign = lock_campaign(campaign_id)
    live = set(live_hosts)
    lost = (
        Frame.objects.filter(campaign=campaign, state=State.RUNNING, started_at__lt=started_before)
        .exclude(worker_host__in=live)
        .order_by("index")
    )
    now = timezone.now()
    released: list[LostFrame] = []
    for frame in lost:
        same = Frame.objects.filter(
            pk=frame.pk,
            state=State.RUNNING,
            dispatch_count=frame.dispatch_count,
            attempts=frame.attempts,
            worker_host=frame.worker_host,
        )
        why = f"worker {frame.worker_host} lost during attempt {frame.attempts} (no heartbeat)"
        if campaign.status != Status.RUNNING:
            if same.update(state=State.REVOKED, retry_at=None, error=why):
                _event(
                    campaign_id=campaign.pk,
                    frame_id=frame.pk,
                    from_state=State.RUNNING,
                    to_state=State.REVOKED,
                    detail=f"{why}; campaign is {campaign.status}",
                )
                released.append(LostFrame(frame.pk, frame.index, State.REVOKED, frame.dispatch_count, frame.task_id))
            continue
        if frame.attempts >= campaign.max_attempts:
            if same.update(state=State.DEAD, finished_at=now, error=why, retry_at=None):
                _event(
                    campaign_id=campaign.pk,
                    frame_id=frame.pk,
                    from_state=State.RUNNING,
                    to_state=State.DEAD,
                    detail=f"{why}; attempt limit reached",
                )
                Campaign.objects.filter(pk=campaign.pk).update(frames_dead=F("frames_dead") + 1)
                released.append(LostFrame(frame.pk, frame.index, State.DEAD, frame.dispatch_count, frame.task_id))
            continue
        dispatch_no = frame.dispatch_count + 1
        task_id = messaging.task_id(campaign_id=campaign.pk, index=frame.index, dispatch_no=dispatch_no)
        if same.update(
            state=State.QUEUED, dispatch_count=dispatch_no, task_id=task_id, queued_at=now, retry_at=None, error=why
        ):
            _event(
                campaign_id=campaign.pk,
                frame_id=frame.pk,
                from_state=State.RUNNING,
                to_state=State.QUEUED,
                worker_host=frame.worker_host,
                detail=f"{why}; dispatch {dispatch_no}",
            )
            released.append(LostFrame(frame.pk, frame.index, State.QUEUED, dispatch_no, task_id))
    return released


# --- frames: claimed and finished by workers ---------------------------------------------------------


@dataclass(frozen=True)
class Claim:
    ok: bool
    reason: str
    frame: Frame | None = None
    campaign: Campaign | None = None


def _frame_key(frame_id: int) -> tuple[int, int] | None:
    row = Frame.objects.filter(pk=frame_id).values_list("campaign_id", "index").first()
    return row


@transaction.atomic
def claim_frame(
    *, frame_id: int, dispatch_no: int, worker_host: str, task_id: str = "", campaign_uid: str | None = None
) -> Claim:
    """A worker takes a frame: queued → running, or running → running when the message was redelivered.

    The campaign's state is checked here too (the file-system broker cannot
    revoke messages remotely): a frame of a paused or cancelled campaign is
    released (revoked), and a frame whose expected cost would take spend over
    the budget is not started — the campaign pauses with that reason.
    """
    key = _frame_key(frame_id)
    if key is None:
        return Claim(False, "no such frame")
    campaign = lock_campaign(key[0])
    if campaign_uid is not None and str(campaign.uid) != str(campaign_uid):
        log.error(
            "frame %s: message for campaign %s, but this database's frame belongs to campaign %s — is this "
            "worker on the same DATABASE_URL as the scheduler?",
            frame_id,
            campaign_uid,
            campaign.uid,
        )
        return Claim(False, "message is for another database's campaign")
    frame = Frame.objects.get(pk=frame_id)
    if frame.dispatch_count != dispatch_no:
        return Claim(False, f"stale message (dispatch {dispatch_no}, frame is at {frame.dispatch_count})")
    if frame.state not in (State.QUEUED, State.RUNNING):
        return Claim(False, f"frame is {frame.state}")
    if campaign.status != Status.RUNNING:
        Frame.objects.filter(pk=frame.pk, state=frame.state).update(state=State.REVOKED)
        _event(
            campaign_id=campaign.pk,
            frame_id=frame.pk,
            from_state=frame.state,
            to_state=State.REVOKED,
            worker_host=worker_host,
            detail=f"released at start: campaign is {campaign.status}",
        )
        return Claim(False, f"campaign is {campaign.status}")
    if frame.state == State.QUEUED:
        committed = selectors.committed_cost(campaign=campaign, states=(State.RUNNING,))
        spent = campaign.compute_cost_spent + selectors.fixed_cost(campaign=campaign)
        next_cost = costs.expected_frame_cost(
            expected_cpu_s=frame.expected_cpu_s, price_per_cpu_hour=campaign.price_per_cpu_hour
        )
        if not costs.can_afford_frame(
            spent=spent, committed=committed, next_frame_cost=next_cost, cost_budget=campaign.cost_budget
        ):
            Frame.objects.filter(pk=frame.pk, state=State.QUEUED).update(state=State.REVOKED)
            _event(
                campaign_id=campaign.pk,
                frame_id=frame.pk,
                from_state=State.QUEUED,
                to_state=State.REVOKED,
                worker_host=worker_host,
                detail="not started: expected cost would exceed the budget",
            )
            detail = (
                f"spent {costs.money(spent)} + running {committed} + next frame ≈ {next_cost} "
                f"> budget {campaign.cost_budget}"
            )
            set_status(
                campaign,
                Status.PAUSED,
                reason=Campaign.PauseReason.BUDGET,
                detail=detail,
                allowed_from=(Status.RUNNING,),
            )
            messaging.revoke_on_commit(revoke_waiting_frames(campaign, detail="campaign paused (budget)"))
            return Claim(False, "budget")
    now = timezone.now()
    attempts = frame.attempts + 1
    if attempts > campaign.max_attempts:
        # A message redelivered after its worker died, once too often.
        Frame.objects.filter(pk=frame.pk, state=frame.state).update(
            state=State.DEAD, finished_at=now, error=frame.error or "worker lost the task too many times"
        )
        _event(
            campaign_id=campaign.pk,
            frame_id=frame.pk,
            from_state=frame.state,
            to_state=State.DEAD,
            worker_host=worker_host,
            detail="attempt limit reached on redelivery",
        )
        Campaign.objects.filter(pk=campaign.pk).update(frames_dead=F("frames_dead") + 1)
        frame.refresh_from_db()
        return Claim(False, "attempt limit reached", frame, campaign)  # the task cleans up the lost attempts' files
    updated = Frame.objects.filter(pk=frame.pk, state=frame.state, dispatch_count=dispatch_no).update(
        state=State.RUNNING,
        attempts=attempts,
        worker_host=worker_host[:255],
        started_at=now,
        task_id=task_id or frame.task_id,
    )
    if not updated:
        return Claim(False, "frame changed meanwhile")
    _event(
        campaign_id=campaign.pk,
        frame_id=frame.pk,
        from_state=frame.state,
        to_state=State.RUNNING,
        worker_host=worker_host,
        detail=f"attempt {attempts}" + (" (redelivered)" if frame.state == State.RUNNING else ""),
    )
    frame.refresh_from_db()
    return Claim(True, "claimed", frame, campaign)


def _box(label: Mapping[str, Any], *keys: str) -> list[float] | None:
    for key in keys:
        if label.get(key) is not None:
            return [float(v) for v in label[key]]
    return None


def _optional_float(value: Any) -> float | None:
    """A finite float, or None (labels of frames rendered before a measure existed lack its key)."""
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


@transaction.atomic
def record_result(
    *,
    frame_id: int,
    dispatch_no: int,
    labels: Sequence[Mapping[str, Any]],
    cpu_s: float,
    wall_s: float,
    timings_s: Mapping[str, float] | None = None,
    output_dir: str = "",
    worker_host: str = "",
) -> bool:
    """running → done with its instances and counters; False (and no change) for a duplicate or stale result."""
    key = _frame_key(frame_id)
    if key is None:
        return False
    campaign = lock_campaign(key[0])
    price = campaign.price_per_cpu_hour
    cost = costs.frame_compute_cost(cpu_s=cpu_s, price_per_cpu_hour=price)
    now = timezone.now()
    # A frame's CPU, wall time and cost add up over its attempts (record_failure adds the failed ones), so the
    # campaign counters always equal the sum over frame rows (campaigns.integrity.recount).
    updated = Frame.objects.filter(pk=frame_id, state=State.RUNNING, dispatch_count=dispatch_no).update(
        state=State.DONE,
        cpu_s=Coalesce(F("cpu_s"), 0.0) + cpu_s,
        wall_s=Coalesce(F("wall_s"), 0.0) + wall_s,
        compute_cost=Coalesce(F("compute_cost"), Decimal(0)) + cost,
        timings_s=dict(timings_s or {}),
        output_dir=output_dir,
        finished_at=now,
        error="",
        traceback="",
        retry_at=None,
    )
    if not updated:
        log.info("frame %s: duplicate or stale result ignored", frame_id)
        return False
    frame = Frame.objects.get(pk=frame_id)
    _event(
        campaign_id=campaign.pk,
        frame_id=frame_id,
        from_state=State.RUNNING,
        to_state=State.DONE,
        worker_host=worker_host or frame.worker_host,
        detail=f"{len(labels)} instances, {cpu_s:.2f} CPU s",
    )
    quotas = {
        q.object_class.name: q for q in ClassQuota.objects.filter(campaign=campaign).select_related("object_class")
    }
    accepted: Counter[str] = Counter()
    rejected: Counter[str] = Counter()
    rows = []
    for label in labels:
        class_name = str(label.get("class_name", ""))
        quota = quotas.get(class_name)
        if quota is None:
            log.warning("frame %s: instance of class %r has no quota; not stored", frame_id, class_name)
            continue
        ok, reasons = planner.accept_instance(
            label,
            min_visible_fraction=quota.min_visible_fraction,
            min_box_px=quota.min_box_px,
            min_contrast=quota.min_contrast,
        )
        (accepted if ok else rejected)[class_name] += 1
        rows.append(
            Instance(
                frame_id=frame_id,
                campaign=campaign,
                object_class_id=quota.object_class_id,
                instance_id=int(label["instance_id"]),
                asset_id=str(label.get("asset_id", ""))[:200],
                bbox_xywh_px=_box(label, "bbox"),
                amodal_bbox_xywh_px=_box(label, "amodal_bbox"),
                visible_fraction=float(label.get("visible_fraction") or 0.0),
                contrast=_optional_float(label.get("contrast")),
                occlusion_fraction=float(label.get("occlusion_fraction") or 0.0),
                truncation_fraction=float(label.get("truncation_fraction") or 0.0),
                mask_area_px=int(label.get("mask_area_px") or 0),
                segmentation_rle=label.get("segmentation"),
                accepted=ok,
                reject_reasons=reasons,
            )
        )
    Instance.objects.bulk_create(rows)
    placed = Counter({name: int(count) for name, count in (frame.composition or {}).items()})
    for class_name, quota in quotas.items():
        a, r, p = accepted[class_name], rejected[class_name], placed[class_name]
        if a or r or p:
            ClassQuota.objects.filter(pk=quota.pk).update(
                accepted_count=F("accepted_count") + a,
                rejected_count=F("rejected_count") + r,
                placed_count=F("placed_count") + p,
            )
    Campaign.objects.filter(pk=campaign.pk).update(
        frames_done=F("frames_done") + 1,
        instances_accepted=F("instances_accepted") + sum(accepted.values()),
        instances_rejected=F("instances_rejected") + sum(rejected.values()),
        cpu_s_spent=F("cpu_s_spent") + cpu_s,
        wall_s_spent=F("wall_s_spent") + wall_s,
        compute_cost_spent=F("compute_cost_spent") + cost,
    )
    _mark_quotas_met(campaign=campaign, frame_id=frame_id)
    return True


def _mark_quotas_met(*, campaign: Campaign, frame_id: int | None) -> None:
    """Each quota is marked met once (conditional update); the campaign completes once every quota is met."""
    now = timezone.now()
    newly_met = ClassQuota.objects.filter(
        campaign=campaign, met_at__isnull=True, accepted_count__gte=F("target_accepted")
    )
    for quota_id, class_name in newly_met.values_list("pk", "object_class__name"):
        if ClassQuota.objects.filter(pk=quota_id, met_at__isnull=True).update(met_at=now):
            _event(
                campaign_id=campaign.pk,
                frame_id=frame_id,
                from_state="",
                to_state="quota_met",
                detail=f"quota for {class_name} met",
            )
    if (
        not ClassQuota.objects.filter(campaign=campaign)
        .filter(Q(met_at__isnull=True) | Q(accepted_count__lt=F("target_accepted")))
        .exists()
    ):
        campaign.refresh_from_db(fields=["status"])
        if campaign.status in (Status.RUNNING, Status.PAUSED):
            set_status(
                campaign, Status.COMPLETED, detail="every quota is met", allowed_from=(Status.RUNNING, Status.PAUSED)
            )
            messaging.revoke_on_commit(
                revoke_waiting_frames(campaign, detail="campaign completed", states=(State.QUEUED, State.FAILED))
            )


def retry_backoff_s(*, attempts: int) -> float:
    """Exponential backoff: 2 s, 4 s, 8 s … capped at 5 min."""
    return min(RETRY_BACKOFF_MAX_S, RETRY_BACKOFF_BASE_S * 2 ** max(0, attempts - 1))


@transaction.atomic
def record_failure(
    *,
    frame_id: int,
    dispatch_no: int,
    error: str,
    traceback: str = "",
    cpu_s: float = 0.0,
    wall_s: float = 0.0,
    permanent: bool = False,
    worker_host: str = "",
) -> str:
    """running → failed (retry later with backoff) or dead (attempt limit, or a permanent error).

    Returns the new state, or ``"stale"`` when the frame was not running
    under this message (nothing changed). The CPU time of the failed attempt
    is spent and counted.
    """
    key = _frame_key(frame_id)
    if key is None:
        return "stale"
    campaign = lock_campaign(key[0])
    frame = Frame.objects.get(pk=frame_id)
    if frame.state != State.RUNNING or frame.dispatch_count != dispatch_no:
        return "stale"
    now = timezone.now()
    dead = permanent or frame.attempts >= campaign.max_attempts
    to_state = State.DEAD if dead else State.FAILED
    retry_at = None if dead else now + timedelta(seconds=retry_backoff_s(attempts=frame.attempts))
    cost = costs.frame_compute_cost(cpu_s=cpu_s, price_per_cpu_hour=campaign.price_per_cpu_hour)
    updated = Frame.objects.filter(pk=frame_id, state=State.RUNNING, dispatch_count=dispatch_no).update(
        state=to_state,
        error=error[:10000],
        traceback=traceback[-20000:],
        retry_at=retry_at,
        finished_at=now if dead else None,
        cpu_s=(frame.cpu_s or 0.0) + cpu_s,
        wall_s=(frame.wall_s or 0.0) + wall_s,
        compute_cost=(frame.compute_cost or Decimal(0)) + cost,
    )
    if not updated:
        return "stale"
    why = "permanent error" if permanent else (f"attempt {frame.attempts} of {campaign.max_attempts}")
    _event(
        campaign_id=campaign.pk,
        frame_id=frame_id,
        from_state=State.RUNNING,
        to_state=to_state,
        worker_host=worker_host or frame.worker_host,
        detail=f"{why}: {error[:300]}" + ("" if dead else f"; retry at {retry_at:%H:%M:%S}"),
    )
    Campaign.objects.filter(pk=campaign.pk).update(
        frames_dead=F("frames_dead") + (1 if dead else 0),
        cpu_s_spent=F("cpu_s_spent") + cpu_s,
        wall_s_spent=F("wall_s_spent") + wall_s,
        compute_cost_spent=F("compute_cost_spent") + cost,
    )
    if dead:
        _alert_if_failing(campaign)
    return to_state


# --- notifications ---------------------------------------------------------------------------------------------

# Status changes that notify: (to, pause reason) → event (campaigns.notify.EVENTS).
_STATUS_EVENTS: dict[tuple[str, str], str] = {
    (Status.COMPLETED, ""): "campaign.completed",
    (Status.PAUSED, Campaign.PauseReason.BUDGET): "campaign.paused_budget",
    (Status.PAUSED, Campaign.PauseReason.FAILURES): "campaign.paused_failures",
}
# The failure alert looks at the latest finished frames, once enough have finished to say something.
FAILURE_ALERT_WINDOW = 50
FAILURE_ALERT_MIN_FRAMES = 10


def _notification_payload(campaign: Campaign, *, event: str, detail: str) -> dict[str, Any]:
    fresh = Campaign.objects.select_related("team").get(pk=campaign.pk)
    base = str(getattr(django_settings, "PUBLIC_URL", "") or "").rstrip("/")
    spent = selectors.total_spent(campaign=fresh)
    return {
        "event": event,
        "occurred_at": timezone.now().isoformat(),
        "detail": detail,
        "campaign": {
            "id": fresh.pk,
            "uid": str(fresh.uid),
            "name": fresh.name,
            "team": fresh.team.name,
            "status": fresh.status,
            "pause_reason": fresh.pause_reason,
            "frames_done": fresh.frames_done,
            "frames_dead": fresh.frames_dead,
            "instances_accepted": fresh.instances_accepted,
            "spent": f"{spent:.2f}",
            "cost_budget": f"{fresh.cost_budget:.2f}",
            "currency": str(django_settings.CURRENCY),
            "url": f"{base}{reverse('campaigns:detail', args=[fresh.pk])}" if base else "",
        },
        "quotas": [
            {"class_name": name, "target": target, "accepted": accepted}
            for name, target, accepted in ClassQuota.objects.filter(campaign=fresh)
            .order_by("object_class__name")
            .values_list("object_class__name", "target_accepted", "accepted_count")
        ],
    }


def queue_notification(*, campaign: Campaign, event: str, detail: str = "") -> list[Notification]:
    """One notification per channel the campaign has (webhook, e-mail), sent by the fleet after commit."""
    if event not in notify.EVENTS:
        raise ValueError(f"unknown notification event {event!r}")
    fresh = Campaign.objects.filter(pk=campaign.pk).values("notify_url", "notify_emails").first()
    if fresh is None or not (fresh["notify_url"] or fresh["notify_emails"]):
        return []
    payload = _notification_payload(campaign, event=event, detail=detail)
    channels = [
        (Notification.Channel.WEBHOOK, fresh["notify_url"]),
        (Notification.Channel.EMAIL, fresh["notify_emails"]),
    ]
    rows = [
        Notification.objects.create(
            campaign_id=campaign.pk, event=event, channel=channel, target=target, payload=payload
        )
        for channel, target in channels
        if target
    ]
    for row in rows:
        messaging.send_notification_on_commit(notification_id=row.pk)
    return rows


def _alert_if_failing(campaign: Campaign) -> None:
    """Once per run: notify when the dead share of the latest finished frames reaches the campaign's threshold."""
    row = Campaign.objects.filter(pk=campaign.pk).values("notify_failure_rate", "failure_alert_at").get()
    threshold = row["notify_failure_rate"]
    if not threshold or row["failure_alert_at"] is not None:
        return
    latest = list(
        Frame.objects.filter(campaign=campaign, state__in=(State.DONE, State.DEAD))
        .order_by("-finished_at", "-pk")
        .values_list("state", flat=True)[:FAILURE_ALERT_WINDOW]
    )
    if len(latest) < FAILURE_ALERT_MIN_FRAMES:
        return
    dead = sum(1 for s in latest if s == State.DEAD)
    share = dead / len(latest)
    if share < threshold:
        return
    if Campaign.objects.filter(pk=campaign.pk, failure_alert_at__isnull=True).update(failure_alert_at=timezone.now()):
        queue_notification(
            campaign=campaign,
            event="campaign.failure_rate",
            detail=f"{dead} of the latest {len(latest)} finished frames are dead ({share:.0%} ≥ {threshold:.0%})",
        )


@transaction.atomic
def set_notifications(*, campaign_id: int, url: Any = "", emails: Any = "", failure_rate: Any = None) -> Campaign:
    """Where a campaign's notifications go: a webhook URL, e-mail addresses, and the failure-alert threshold
    (a share 0–1; 0 turns the alert off; None keeps it). A webhook gets a signing secret the first time one is
    set. Nothing is written on bad input."""
    campaign = lock_campaign(campaign_id)
    try:
        clean_url = notify.clean_webhook_url(url)
    except notify.NotifyError as exc:
        raise CampaignError(str(exc), field="notify_url") from exc
    try:
        clean_emails = notify.clean_emails(emails)
    except notify.NotifyError as exc:
        raise CampaignError(str(exc), field="notify_emails") from exc
    rate = campaign.notify_failure_rate
    if failure_rate is not None:
        rate = _finite(failure_rate, "failure alert share", field="notify_failure_rate")
        if not 0.0 <= rate <= 1.0:
            raise CampaignError(f"must be a share between 0 and 1, got {rate:g}", field="notify_failure_rate")
    fields: dict[str, Any] = {
        "notify_url": clean_url,
        "notify_emails": " ".join(clean_emails),
        "notify_failure_rate": rate,
    }
    if clean_url and not campaign.notify_secret:
        fields["notify_secret"] = _new_secret()
    Campaign.objects.filter(pk=campaign.pk).update(**fields)
    _event(
        campaign_id=campaign.pk,
        from_state=campaign.status,
        to_state=campaign.status,
        detail=f"notifications: webhook {'on' if clean_url else 'off'}, {len(clean_emails)} e-mail address(es), "
        + (f"failure alert at {rate:.0%}" if rate else "failure alert off"),
    )
    campaign.refresh_from_db()
    return campaign


def _new_secret() -> str:
    return secrets.token_hex(32)


@transaction.atomic
def rotate_notification_secret(*, campaign_id: int) -> Campaign:
    """A new signing secret (the old one stops verifying at once)."""
    campaign = lock_campaign(campaign_id)
    Campaign.objects.filter(pk=campaign.pk).update(notify_secret=_new_secret())
    _event(
        campaign_id=campaign.pk, from_state=campaign.status, to_state=campaign.status, detail="webhook secret rotated"
    )
    campaign.refresh_from_db()
    return campaign


@transaction.atomic
def send_test_notification(*, campaign_id: int) -> list[Notification]:
    campaign = lock_campaign(campaign_id)
    if not (campaign.notify_url or campaign.notify_emails):
        raise CampaignError("set a webhook URL or an e-mail address first", field="notify_url")
    return queue_notification(
        campaign=campaign, event="test", detail="sent from the campaign page to check the receiver"
    )


@transaction.atomic
def record_notification_attempt(*, notification_id: int, attempt: notify.Attempt) -> str:
    """Count one delivery attempt: sent, retried later with backoff, or failed for good; the new state."""
    row = Notification.objects.select_for_update().filter(pk=notification_id).first()
    if row is None or row.state != Notification.State.PENDING:
        return row.state if row is not None else "gone"
    attempts = row.attempts + 1
    now = timezone.now()
    fields: dict[str, Any] = {
        "attempts": attempts,
        "last_status_code": attempt.status_code,
        "last_error": attempt.error[: notify.ERROR_TEXT_LIMIT],
    }
    if attempt.ok:
        fields.update(state=Notification.State.SENT, sent_at=now, next_attempt_at=None)
    elif attempts >= notify.MAX_ATTEMPTS:
        fields.update(state=Notification.State.FAILED, next_attempt_at=None)
    else:
        delay = notify.retry_delay_s(attempts)
        fields.update(next_attempt_at=now + timedelta(seconds=delay))
        messaging.send_notification_on_commit(notification_id=row.pk, countdown_s=delay)
    Notification.objects.filter(pk=row.pk).update(**fields)
    return str(fields.get("state", Notification.State.PENDING))


def resend_due_notifications(*, overdue_s: float = 120.0) -> int:
    """Pending notifications whose next attempt is long overdue (its message was lost: broker down, worker killed
    before it acknowledged) are sent again; the sweep calls this. Delivery ids keep repeats recognisable."""
    cutoff = timezone.now() - timedelta(seconds=overdue_s)
    due = list(
        Notification.objects.filter(state=Notification.State.PENDING)
        .filter(Q(next_attempt_at__lt=cutoff) | Q(next_attempt_at__isnull=True, created_at__lt=cutoff))
        .values_list("pk", flat=True)[:100]
    )
    for pk in due:
        Notification.objects.filter(pk=pk).update(next_attempt_at=timezone.now())
        messaging.send_notification(notification_id=pk)
    return len(due)


# --- dashboard actions (added for the dashboard, issue 5) ------------------------------------------------------


@transaction.atomic
def update_draft_campaign(
    *,
    campaign_id: int,
    name: str,
    quotas: Sequence[QuotaInput],
    cost_budget: Decimal | float | str,
    price_per_cpu_hour: Decimal | float | str,
    budget: Mapping[str, Any] | None = None,
    setup_cost: Decimal | float | str = 0,
    manual_labelling_rate_per_hour: Decimal | float | str = 0,
    weight: int = 1,
    seed: int = 0,
    max_attempts: int = 3,
    description: str = "",
    asset_ids: Iterable[int] | None = None,
) -> Campaign:
    """Replace a draft's settings and quotas (the team stays); only drafts, nothing written on bad input.

    ``asset_ids`` replaces the draft's asset choice; None keeps its chosen assets of the classes still quoted and
    gives newly quoted classes their defaults (:func:`default_campaign_assets`)."""
    campaign = lock_campaign(campaign_id)
    if campaign.status != Status.DRAFT:
        raise CampaignError(
            f"campaign {campaign.name!r} is {campaign.status}; only drafts can be edited "
            "(the cost budget of a started campaign can still be changed)"
        )
    name = _clean_name(name, description)
    if conflict := _campaign_name_conflict(team_id=campaign.team_id, name=name, exclude_pk=campaign.pk):
        raise conflict
    normalized = normalize_campaign_budget(budget)
    settings = _clean_settings(
        cost_budget=cost_budget,
        price_per_cpu_hour=price_per_cpu_hour,
        setup_cost=setup_cost,
        manual_labelling_rate_per_hour=manual_labelling_rate_per_hour,
        weight=weight,
        seed=seed,
        max_attempts=max_attempts,
    )
    clean = _clean_quota_inputs(quotas=quotas, normalized_budget=normalized)
    class_names = {q.object_class.name for q in clean}
    if asset_ids is not None:
        assets = _chosen_assets(team_id=campaign.team_id, asset_ids=asset_ids)
    else:
        kept = [a for a in campaign.assets.select_related("object_class") if a.object_class.name in class_names]
        covered = {a.object_class.name for a in kept}
        assets = kept + default_campaign_assets(team_id=campaign.team_id, class_names=class_names - covered)
    _check_fixed_cost(settings=settings)
    with name_guard(lambda: _campaign_name_conflict(team_id=campaign.team_id, name=name, exclude_pk=campaign.pk)):
        Campaign.objects.filter(pk=campaign.pk).update(
            name=name,
            description=description,
            budget=normalized,
            **asdict(settings),  # seed, money settings, weight, max_attempts
        )
    campaign.refresh_from_db()
    campaign.assets.set(assets)
    ClassQuota.objects.filter(campaign=campaign).delete()
    _write_quotas(campaign=campaign, clean=clean)
    _event(campaign_id=campaign.pk, from_state=Status.DRAFT, to_state=Status.DRAFT, detail="edited")
    return campaign


@transaction.atomic
def delete_campaign(*, campaign_id: int) -> None:
    """Delete a campaign that is not running, with its frames and events; its frame files go after commit."""
    campaign = lock_campaign(campaign_id)
    if campaign.status == Status.RUNNING:
        raise CampaignError(f"campaign {campaign.name!r} is running; pause or cancel it first")
    pk = campaign.pk
    campaign.delete()

    def remove_files() -> None:
        import shutil
        from pathlib import Path

        from django.conf import settings

        shutil.rmtree(Path(settings.MEDIA_ROOT) / "campaigns" / str(pk), ignore_errors=True)

    transaction.on_commit(remove_files)


def _retry_dead(campaign: Campaign, frame_ids: Sequence[int], *, detail: str) -> int:
    now = timezone.now()
    retried = 0
    for frame_id in frame_ids:
        # Conditional on the frame still being dead: a double click or two users retry it once.
        if Frame.objects.filter(pk=frame_id, campaign=campaign, state=State.DEAD).update(
            state=State.FAILED, attempts=0, retry_at=now, finished_at=None
        ):
            _event(
                campaign_id=campaign.pk, frame_id=frame_id, from_state=State.DEAD, to_state=State.FAILED, detail=detail
            )
            retried += 1
    if retried:
        Campaign.objects.filter(pk=campaign.pk).update(frames_dead=F("frames_dead") - retried)
        if campaign.status == Status.RUNNING:
            messaging.request_dispatch_on_commit(campaign.pk)
    return retried


def _check_retryable(campaign: Campaign) -> None:
    if campaign.status not in (Status.RUNNING, Status.PAUSED, Status.DRAFT):
        raise CampaignError(f"campaign {campaign.name!r} is {campaign.status}; its frames are not retried")


@transaction.atomic
def retry_frame(*, campaign_id: int, frame_id: int) -> int:
    """A dead frame gets its attempts back and goes to failed, due now; the scheduler sends it again.

    On a paused campaign it waits until the campaign resumes. Returns 1, or 0 when the frame was not dead."""
    campaign = lock_campaign(campaign_id)
    _check_retryable(campaign)
    return _retry_dead(campaign, [frame_id], detail="retried from the dashboard")


def frames_of_error_kind(*, campaign: Campaign, kind: str, states: Sequence[str] = (State.DEAD,)):
    """Frames of a campaign whose error's first line is ``kind`` (see :func:`error_kind`)."""
    return Frame.objects.filter(campaign=campaign, state__in=states).filter(errors.kind_filter(kind))


@transaction.atomic
def retry_failed_of_kind(*, campaign_id: int, kind: str) -> int:
    """Retry every dead frame whose error is of this kind; returns how many."""
    campaign = lock_campaign(campaign_id)
    _check_retryable(campaign)
    ids = list(frames_of_error_kind(campaign=campaign, kind=kind).values_list("pk", flat=True))
    return _retry_dead(campaign, ids, detail=f"retried with all of kind {kind[:200]!r}")


IGNORED = "ignored"


@transaction.atomic
def ignore_frame(*, campaign_id: int, frame_id: int, kind: str | None = None) -> int:
    """Hide a dead frame (or every dead frame of an error kind) from the failed-jobs list.

    Recorded as an ``ignored`` event after the frame's death: a frame retried later and dead again shows
    once more. Returns how many frames were ignored."""
    campaign = lock_campaign(campaign_id)
    frames = Frame.objects.filter(campaign=campaign, state=State.DEAD)
    frames = frames.filter(errors.kind_filter(kind)) if kind is not None else frames.filter(pk=frame_id)
    ids = list(frames.values_list("pk", flat=True))
    for fid in ids:
        _event(
            campaign_id=campaign.pk,
            frame_id=fid,
            from_state=State.DEAD,
            to_state=IGNORED,
            detail="ignored from the dashboard",
        )
    return len(ids)


EXCLUSION_REASON_MAX_CHARS = 500  # Frame.excluded_reason's max_length


@transaction.atomic
def exclude_frames(*, campaign_id: int, frame_ids: Iterable[int], reason: Any) -> int:
    """Leave done frames out of every later export, with a reason; returns how many changed.

    Curation only: the frames keep counting for the quotas, the spend and the statistics of the campaign's progress;
    an export skips them and lists them in its manifest. Frames that are not done, already excluded or of another
    campaign are left as they are.
    """
    reason = clean_text(
        " ".join(reason.split()) if isinstance(reason, str) else reason,
        "reason",
        max_length=EXCLUSION_REASON_MAX_CHARS,
        required="say why the frames are left out (it goes into the export's manifest)",
        error=CampaignError,
    )
    campaign = lock_campaign(campaign_id)
    return Frame.objects.filter(
        campaign=campaign, pk__in=list(frame_ids), state=State.DONE, excluded_at__isnull=True
    ).update(excluded_at=timezone.now(), excluded_reason=reason)


@transaction.atomic
def include_frames(*, campaign_id: int, frame_ids: Iterable[int]) -> int:
    """Put excluded frames back into later exports; returns how many changed."""
    campaign = lock_campaign(campaign_id)
    return Frame.objects.filter(campaign=campaign, pk__in=list(frame_ids), excluded_at__isnull=False).update(
        excluded_at=None, excluded_reason=""
    )


# What makes a frame of a campaign in this status render again; completed and cancelled campaigns never do.
RERENDER_HINT: dict[str, str] = {Status.DRAFT: "start it", Status.PAUSED: "resume it"}


@transaction.atomic
def rerender_frame(*, campaign_id: int, frame_id: int) -> Frame:
    """A new frame with the same layout, lighting and view coordinates and the same composition as a done one.

    Frame seeds per axis derive from the coordinates (``planner.frame_seeds``), so the new frame has the same
    room, furniture, lights and camera; only the noise sub-seed (from the new index) differs. It renders on the
    fleet like any frame, so the campaign must be running (a paused campaign re-plans released frames).
    """
    campaign = lock_campaign(campaign_id)
    if campaign.status in (Status.COMPLETED, Status.CANCELLED):
        raise CampaignError(
            f"campaign {campaign.name!r} is {campaign.status} and renders no more frames, so its frames cannot be "
            + (
                "re-rendered; extend it (a higher target or a new class) to render again, or copy it"
                if campaign.status == Status.COMPLETED
                else "re-rendered; copy it to plan more frames"
            )
        )
    if campaign.status != Status.RUNNING:
        hint = RERENDER_HINT.get(campaign.status, "start or resume it")
        raise CampaignError(
            f"campaign {campaign.name!r} is {campaign.status}; {hint} to re-render "
            "(frames render on the fleet only while it runs)"
        )
    try:
        source = Frame.objects.get(pk=frame_id, campaign=campaign)
    except Frame.DoesNotExist as exc:
        raise CampaignError(f"frame {frame_id} is not in campaign {campaign.name!r}") from exc
    if source.state != State.DONE:
        raise CampaignError(f"frame {source.index} is {source.state}; only done frames are re-rendered")
    last_index = Frame.objects.filter(campaign=campaign).order_by("-index").values_list("index", flat=True).first()
    frame = create_frame(
        campaign=campaign,
        index=(last_index or 0) + 1,
        coordinates=(source.layout_index, source.lighting_index, source.view_index),
        composition=dict(source.composition),
        expected_cpu_s=source.cpu_s or source.expected_cpu_s,
    )
    _event(
        campaign_id=campaign.pk,
        frame_id=frame.pk,
        from_state="",
        to_state=State.QUEUED,
        detail=f"re-render of frame {source.index}",
    )
    uid, fid, dispatch_no, task_id = str(campaign.uid), frame.pk, frame.dispatch_count, frame.task_id
    transaction.on_commit(
        lambda: messaging.send_frame_task(frame_id=fid, dispatch_no=dispatch_no, campaign_uid=uid, task_id=task_id)
    )
    return frame
