"""Everything the dashboard, the commands and the scheduler read. Aggregates happen in the database."""

from __future__ import annotations

import statistics
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from decimal import Decimal
from typing import cast

from django.db.models import Count, Q, QuerySet, Sum

from assets.models import Asset
from campaigns import costs, planner
from campaigns.errors import error_kind
from campaigns.models import Campaign, ClassQuota, Frame, Instance, Notification
from campaigns.sampling import MAX_OBJECTS_PER_FRAME
from fleet.models import live_workers
from render.lights import SKY_CCT_K, SUN_CCT_K
from teams.permissions import scope_to_user

State = Frame.State
RECENT_FRAMES_FOR_ESTIMATES = 50


def campaign_list() -> QuerySet[Campaign]:
    return Campaign.objects.select_related("owner").order_by("-created_at")


def observed_cpu_s(*, campaign: Campaign, limit: int = RECENT_FRAMES_FOR_ESTIMATES) -> list[float]:
    """CPU seconds of the most recent done frames (a bounded list: the median is not portable SQL)."""
    cpu_s = (
        Frame.objects.filter(campaign=campaign, state=State.DONE, cpu_s__isnull=False)
        .order_by("-finished_at")
        .values_list("cpu_s", flat=True)[:limit]
    )
    return cast("list[float]", list(cpu_s))  # cpu_s__isnull=False: no None in the column


def expected_frame_cpu_s(*, campaign: Campaign) -> float:
    return costs.expected_frame_cpu_s(
        observed_cpu_s=observed_cpu_s(campaign=campaign),
        width_px=campaign.width_px,
        height_px=campaign.height_px,
        spp=campaign.spp,
    )


def committed_cost(*, campaign: Campaign, states: Sequence[str] = tuple(Frame.IN_FLIGHT_STATES)) -> Decimal:
    """Expected cost of the frames started or waiting to start (their estimate at dispatch)."""
    total_cpu_s = (
        Frame.objects.filter(campaign=campaign, state__in=states).aggregate(s=Sum("expected_cpu_s"))["s"] or 0.0
    )
    return costs.frame_compute_cost(cpu_s=total_cpu_s, price_per_cpu_hour=campaign.price_per_cpu_hour)


def fixed_cost(*, campaign: Campaign) -> Decimal:
    """The campaign's own fixed cost, which its budget pays: its setup cost. The assets' creation costs belong to
    the asset library and reach a campaign only as its amortized share (:func:`library_shares`)."""
    return costs.fixed_cost(asset_creation_costs=[], setup_cost=campaign.setup_cost)


def _asset_instances(asset: Asset) -> Q:
    """The instances an asset made: a procedural generator every instance of its class the render core drew
    from it (asset ids ``<class>/<variant>``), an upload those naming it (``user/<asset pk>``)."""
    if asset.kind == Asset.Kind.PROCEDURAL:
        return Q(object_class_id=asset.object_class_id) & ~Q(asset_id__startswith="user/")
    return Q(asset_id=f"user/{asset.pk}")


def asset_usage(*, assets: Sequence[Asset]) -> dict[int, dict[int, tuple[int, int]]]:
    """Per asset pk, per campaign id (every campaign of every team): (frames, instances) the asset appears in.

    One aggregate query per asset."""
    out: dict[int, dict[int, tuple[int, int]]] = {}
    for asset in assets:
        rows = (
            Instance.objects.filter(_asset_instances(asset))
            .values("campaign_id")
            .annotate(f=Count("frame", distinct=True), n=Count("pk"))
            .values_list("campaign_id", "f", "n")
        )
        out[asset.pk] = {campaign_id: (frames, instances) for campaign_id, frames, instances in rows}
    return out


@dataclass(frozen=True)
class AssetShare:
    """A campaign's share of one asset's creation cost (:func:`campaigns.costs.library_share`)."""

    asset_id: int
    name: str
    class_name: str
    creation_cost: Decimal
    frames_here: int
    frames_total: int
    share: Decimal


def library_shares(*, campaign: Campaign) -> list[AssetShare]:
    """For each asset the campaign may use: its creation cost, the frames it appears in here and in every
    campaign, and this campaign's amortized share of the cost."""
    assets = list(campaign.assets.select_related("object_class").order_by("object_class__name", "name"))
    usage = asset_usage(assets=assets)
    out = []
    for asset in assets:
        per_campaign = usage[asset.pk]
        here = per_campaign.get(campaign.pk, (0, 0))[0]
        total = sum(frames for frames, _ in per_campaign.values())
        out.append(
            AssetShare(
                asset_id=asset.pk,
                name=asset.name,
                class_name=asset.object_class.name,
                creation_cost=costs.money(asset.creation_cost),
                frames_here=here,
                frames_total=total,
                share=costs.library_share(creation_cost=asset.creation_cost, frames_here=here, frames_total=total),
            )
        )
    return out


def total_spent(*, campaign: Campaign) -> Decimal:
    return costs.money(fixed_cost(campaign=campaign) + campaign.compute_cost_spent)


def can_afford_next_frame(*, campaign: Campaign) -> bool:
    next_cost = costs.expected_frame_cost(
        expected_cpu_s=expected_frame_cpu_s(campaign=campaign), price_per_cpu_hour=campaign.price_per_cpu_hour
    )
    return costs.can_afford_frame(
        spent=total_spent(campaign=campaign),
        committed=committed_cost(campaign=campaign),
        next_frame_cost=next_cost,
        cost_budget=campaign.cost_budget,
    )


def in_flight_placed(*, campaign: Campaign) -> Counter[str]:
    """Instances per class in frames dispatched but not finished (bounded by the in-flight limit)."""
    placed: Counter[str] = Counter()
    for composition in Frame.objects.filter(campaign=campaign, state__in=Frame.IN_FLIGHT_STATES).values_list(
        "composition", flat=True
    ):
        placed.update({k: int(v) for k, v in (composition or {}).items()})
    return placed


def class_progress(*, campaign: Campaign, include_in_flight: bool = True) -> list[planner.ClassProgress]:
    flight = in_flight_placed(campaign=campaign) if include_in_flight else Counter()
    return [
        planner.ClassProgress(
            name=name, target_accepted=target, accepted=accepted, placed=placed, in_flight_placed=flight.get(name, 0)
        )
        for name, target, accepted, placed in ClassQuota.objects.filter(campaign=campaign)
        .order_by("object_class__name")
        .values_list("object_class__name", "target_accepted", "accepted_count", "placed_count")
    ]


def frame_state_counts(*, campaign: Campaign) -> dict[str, int]:
    rows = Frame.objects.filter(campaign=campaign).values("state").annotate(n=Count("pk"))
    counts = {state: 0 for state in State.values}
    counts.update({row["state"]: row["n"] for row in rows})
    return counts


@dataclass(frozen=True)
class QuotaRow:
    class_name: str
    target: int
    accepted: int
    rejected: int
    placed: int
    yield_estimate: float
    met: bool


@dataclass(frozen=True)
class CampaignSummary:
    campaign: Campaign
    quotas: list[QuotaRow]
    frames: dict[str, int]
    fixed: Decimal
    compute_spent: Decimal
    total_spent: Decimal
    cpu_s_spent: float
    median_cpu_s: float | None
    median_wall_s: float | None
    library: list[AssetShare]
    library_share: Decimal
    amortized: costs.Amortized
    projection: costs.Projection
    manual: costs.ManualComparison
    break_even_frames: int | None
    live_slots: int


def campaign_summary(*, campaign: Campaign) -> CampaignSummary:
    campaign.refresh_from_db()
    quota_rows = [
        QuotaRow(
            class_name=q["object_class__name"],
            target=q["target_accepted"],
            accepted=q["accepted_count"],
            rejected=q["rejected_count"],
            placed=q["placed_count"],
            yield_estimate=planner.posterior_yield(accepted=q["accepted_count"], placed=q["placed_count"]),
            met=q["met_at"] is not None,
        )
        for q in ClassQuota.objects.filter(campaign=campaign)
        .order_by("object_class__name")
        .values("object_class__name", "target_accepted", "accepted_count", "rejected_count", "placed_count", "met_at")
    ]
    done = Frame.objects.filter(campaign=campaign, state=State.DONE)
    # record_result() sets cpu_s and wall_s on every frame it marks done: neither is None here.
    recent = cast(
        "list[tuple[float, float]]",
        list(done.order_by("-finished_at").values_list("cpu_s", "wall_s")[:RECENT_FRAMES_FOR_ESTIMATES]),
    )
    median_cpu_s = statistics.median(r[0] for r in recent) if recent else None
    median_wall_s = statistics.median(r[1] for r in recent) if recent else None
    fixed = fixed_cost(campaign=campaign)
    compute = costs.money(campaign.compute_cost_spent)
    library = library_shares(campaign=campaign)
    library_share = costs.money(sum((a.share for a in library), Decimal(0)))
    amortized = costs.amortized_cost(
        fixed=fixed + library_share,
        compute_spent=compute,
        frames_done=campaign.frames_done,
        accepted_instances=campaign.instances_accepted,
    )
    live_slots = live_workers().aggregate(s=Sum("concurrency"))["s"] or 0
    progress = class_progress(campaign=campaign, include_in_flight=False)
    needed = sum(planner.placements_needed(progress).values())
    placed_total = sum(q.placed for q in quota_rows)
    per_frame = placed_total / campaign.frames_done if campaign.frames_done else 0.0
    expected_cpu = expected_frame_cpu_s(campaign=campaign)
    cost_per_frame = costs.expected_frame_cost(
        expected_cpu_s=expected_cpu, price_per_cpu_hour=campaign.price_per_cpu_hour
    )
    projection = costs.project_remaining(
        placements_needed=needed,
        instances_per_frame=per_frame,
        cost_per_frame=cost_per_frame,
        wall_s_per_frame=median_wall_s,
        parallel_slots=live_slots,
    )
    total_target = sum(q.target for q in quota_rows)
    manual = costs.manual_labelling_cost(instances=total_target, rate_per_hour=campaign.manual_labelling_rate_per_hour)
    accepted_per_frame = campaign.instances_accepted / campaign.frames_done if campaign.frames_done else 0.0
    break_even = costs.break_even_frames(
        fixed=fixed + library_share,
        compute_cost_per_frame=cost_per_frame,
        accepted_per_frame=accepted_per_frame,
        manual_cost_per_instance=manual.cost_per_instance,
    )
    return CampaignSummary(
        campaign=campaign,
        quotas=quota_rows,
        frames=frame_state_counts(campaign=campaign),
        fixed=fixed,
        compute_spent=compute,
        total_spent=costs.money(fixed + compute),
        library=library,
        library_share=library_share,
        cpu_s_spent=campaign.cpu_s_spent,
        median_cpu_s=median_cpu_s,
        median_wall_s=median_wall_s,
        amortized=amortized,
        projection=projection,
        manual=manual,
        break_even_frames=break_even,
        live_slots=live_slots,
    )


def frames_to_redispatch(*, campaign: Campaign) -> QuerySet[Frame]:
    """Failed frames (sent again at once, with their backoff as the message's countdown) and revoked ones."""
    return Frame.objects.filter(campaign=campaign, state__in=(State.FAILED, State.REVOKED)).order_by("index")


# --- dashboard reads (issue 5) ----------------------------------------------------------------------------------
# Everything below aggregates in the database (values + Count/Sum, bucketed by frame index or minute). The only
# reads that open files are the coverage histograms and the appearance tallies, which read one bounded sample of
# scene.json files, because the sampled camera, light and surface parameters live only there (see coverage_sample).

import json as _json  # noqa: E402
import math as _math  # noqa: E402
from datetime import timedelta as _timedelta  # noqa: E402
from pathlib import Path as _Path  # noqa: E402
from typing import Any as _Any  # noqa: E402

from django.db.models import (  # noqa: E402
    Avg,
    Exists,
    ExpressionWrapper,
    F,
    IntegerField,
    Max,
    Min,
    OuterRef,
    Subquery,
)
from django.db.models.functions import Coalesce, Least, TruncMinute  # noqa: E402
from django.utils import timezone as _timezone  # noqa: E402

from campaigns.models import FrameEvent  # noqa: E402

COVERAGE_SAMPLE_FRAMES = 500
PLAIN_SURFACE = "plain"  # a material slot without a texture
DISTRACTOR_HISTOGRAM_BARS = 16
CHART_BUCKETS = 60
FAILED_STATES = (State.QUEUED, State.RUNNING, State.FAILED, State.DEAD)


def campaign_rows(*, campaigns: QuerySet[Campaign]) -> list[dict[str, _Any]]:
    """The campaign list: status, progress (accepted up to each quota over the targets), spend and ETA.

    ETA is the pace since start (accepted-towards-quota per second) applied to what is left: a simple, honest
    figure for a list; the campaign page has the planner-based projection.
    """
    quota_target = (
        ClassQuota.objects.filter(campaign=OuterRef("pk"))
        .values("campaign")
        .annotate(s=Sum("target_accepted"))
        .values("s")
    )
    quota_done = (
        ClassQuota.objects.filter(campaign=OuterRef("pk"))
        .values("campaign")
        .annotate(s=Sum(Least("accepted_count", "target_accepted")))
        .values("s")
    )
    rows = (
        campaigns.select_related("team")
        .annotate(
            target_total=Coalesce(Subquery(quota_target, output_field=IntegerField()), 0),
            towards_quota=Coalesce(Subquery(quota_done, output_field=IntegerField()), 0),
        )
        .order_by("-created_at")
    )
    now = _timezone.now()
    out = []
    for c in rows:
        spent = costs.money(c.setup_cost + c.compute_cost_spent)  # what the budget pays (no library share)
        progress = c.towards_quota / c.target_total if c.target_total else 0.0
        eta_s = None
        if c.status == Campaign.Status.RUNNING and c.started_at and c.towards_quota:
            elapsed = (now - c.started_at).total_seconds()
            eta_s = (c.target_total - c.towards_quota) * elapsed / c.towards_quota
        out.append(
            {
                "campaign": c,
                "progress": progress,
                "progress_pct": round(100 * progress, 1),
                "spent": spent,
                "spent_pct": float(100 * spent / c.cost_budget) if c.cost_budget else 0.0,
                "eta_s": eta_s,
                "target_total": c.target_total,
                "towards_quota": c.towards_quota,
            }
        )
    return out


def _index_bucket_size(*, campaign: Campaign) -> int:
    last = Frame.objects.filter(campaign=campaign).aggregate(m=Max("index"))["m"] or 0
    return max(1, _math.ceil((last + 1) / CHART_BUCKETS))


def cost_series(*, campaign: Campaign, start_cost: Decimal) -> dict[str, _Any]:
    """Per bucket of frame indices: done frames, compute cost, accepted instances, last finish time.

    From these the page draws cost per frame over time and the amortization curve (cumulative cost per accepted
    instance against frames done, from ``start_cost``: the setup cost plus today's share of the asset library, as
    :func:`campaign_summary` has them), with the manual-labelling line and the break-even point. The share falls as
    other campaigns use the same assets, so earlier points are drawn with today's share too.
    """
    size = _index_bucket_size(campaign=campaign)
    bucket = ExpressionWrapper(F("index") / size, output_field=IntegerField())
    frames = list(
        Frame.objects.filter(campaign=campaign, state=State.DONE)
        .annotate(b=bucket)
        .values("b")
        .annotate(n=Count("pk"), cost=Sum("compute_cost"), cpu=Sum("cpu_s"), last=Max("finished_at"))
        .order_by("b")
    )
    accepted = dict(
        Instance.objects.filter(campaign=campaign, accepted=True)
        .annotate(b=ExpressionWrapper(F("frame__index") / size, output_field=IntegerField()))
        .values("b")
        .annotate(n=Count("pk"))
        .values_list("b", "n")
    )
    manual = costs.manual_labelling_cost(instances=1, rate_per_hour=campaign.manual_labelling_rate_per_hour)
    cumulative_frames, cumulative_cost, cumulative_accepted = 0, Decimal(start_cost), 0
    x_frames, per_instance, per_frame, times = [], [], [], []
    for row in frames:
        cumulative_frames += row["n"]
        cumulative_cost += row["cost"] or Decimal(0)
        cumulative_accepted += accepted.get(row["b"], 0)
        x_frames.append(cumulative_frames)
        per_instance.append(float(cumulative_cost / cumulative_accepted) if cumulative_accepted else None)
        per_frame.append(float((row["cost"] or 0) / row["n"]))
        times.append(row["last"].isoformat() if row["last"] else None)
    return {
        "bucket_frames": size,
        "frames": x_frames,
        "cost_per_accepted": per_instance,
        "cost_per_frame": per_frame,
        "times": times,
        "manual_cost_per_instance": float(manual.cost_per_instance),
        "fixed": float(start_cost),
    }


def throughput(*, campaign: Campaign, minutes: int = 120) -> dict[str, _Any]:
    """Done frames per minute over the last ``minutes`` (one grouped query) and the campaign's pace by the one
    definition of throughput (:func:`campaigns.costs.frames_per_hour` over :data:`~campaigns.costs.THROUGHPUT_WINDOW_S`,
    counted from the start when it started within the window); the worker table uses the same."""
    now = _timezone.now()
    since = now - _timedelta(minutes=minutes)
    rows = list(
        Frame.objects.filter(campaign=campaign, state=State.DONE, finished_at__gte=since)
        .annotate(m=TruncMinute("finished_at"))
        .values("m")
        .annotate(n=Count("pk"))
        .order_by("m")
    )
    window_s = costs.THROUGHPUT_WINDOW_S
    recent_since = now - _timedelta(seconds=window_s)
    recent = Frame.objects.filter(campaign=campaign, state=State.DONE, finished_at__gte=recent_since).count()
    running_for_s = (now - campaign.started_at).total_seconds() if campaign.started_at else None
    return {
        "minutes": [r["m"].isoformat() for r in rows],
        "frames": [r["n"] for r in rows],
        "frames_per_hour_10min": costs.frames_per_hour(frames=recent, window_s=window_s, running_for_s=running_for_s),
        "window_s": window_s,
    }


def fleet(*, window_s: float | None = None) -> list[dict[str, _Any]]:
    """Live workers with their pace over the throughput window (all campaigns; :func:`campaigns.costs.frames_per_hour`,
    the campaign headline's definition, counted from the worker's start when it started within the window) and CPU
    use (CPU s per wall s per slot) over the same window."""
    window_s = costs.THROUGHPUT_WINDOW_S if window_s is None else window_s
    now = _timezone.now()
    since = now - _timedelta(seconds=window_s)
    per_host = {
        r["worker_host"]: r
        for r in Frame.objects.filter(state=State.DONE, finished_at__gte=since)
        .values("worker_host")
        .annotate(n=Count("pk"), cpu=Sum("cpu_s"))
    }
    out = []
    for w in live_workers().order_by("hostname"):
        running_for_s = (now - w.started_at).total_seconds()
        seconds = max(costs.THROUGHPUT_MIN_SPAN_S, min(window_s, running_for_s))
        row = per_host.get(w.hostname, {"n": 0, "cpu": 0.0})
        out.append(
            {
                "hostname": w.hostname,
                "machine": w.machine,
                "concurrency": w.concurrency,
                "variant": w.renderer_variant,
                "last_seen_s": round((now - w.last_seen).total_seconds(), 1),
                "frames_in_window": row["n"],
                "frames_per_hour": costs.frames_per_hour(
                    frames=int(row["n"]), window_s=window_s, running_for_s=running_for_s
                ),
                "cpu_use": round((row["cpu"] or 0.0) / seconds / max(1, w.concurrency), 3),
            }
        )
    return out


def _read_json(path: _Path) -> dict[str, _Any] | None:
    try:
        return _json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def texture_families(spec: _Any) -> Counter[str]:
    """Material slots per texture family in one frame spec: the room's surfaces, every object's and distractor's parts.

    A slot without a texture counts as :data:`PLAIN_SURFACE`. Malformed parts of a spec are skipped, never raised.
    """
    if not isinstance(spec, dict):
        return Counter()
    materials: list[_Any] = []
    room = spec.get("room")
    if isinstance(room, dict) and isinstance(room.get("materials"), dict):
        materials += room["materials"].values()
    for key in ("objects", "distractors"):
        items = spec.get(key)
        for item in items if isinstance(items, list) else ():
            if isinstance(item, dict) and isinstance(item.get("materials"), dict):
                materials += item["materials"].values()
    families: Counter[str] = Counter()
    for material in materials:
        if not isinstance(material, dict):
            continue
        texture = material.get("texture")
        family = texture.get("family") if isinstance(texture, dict) else None
        families[str(family) if family else PLAIN_SURFACE] += 1
    return families


def distractor_count(spec: _Any) -> int | None:
    """Number of distractors in one frame spec; None for a spec made before distractors existed.

    A spec lists ``distractors`` only when it has some; its budget's ``appearance.distractor_count`` says that the
    spec was made by a render core that draws them, so a spec with that field and no list has none.
    """
    if not isinstance(spec, dict):
        return None
    distractors = spec.get("distractors")
    if isinstance(distractors, list):
        return len(distractors)
    budget = spec.get("budget")
    appearance = budget.get("appearance") if isinstance(budget, dict) else None
    return 0 if isinstance(appearance, dict) and "distractor_count" in appearance else None


def room_summary(*, room_types: Counter[str], layout_modes: Counter[str]) -> dict[str, _Any]:
    """Rows of the overview's room table: frames per room type and per arrangement (``home`` or ``free``), most
    frequent first, with shares of the frames that record one (specs made before room types record none)."""

    def rows(counts: Counter[str]) -> list[dict[str, _Any]]:
        total = sum(counts.values())
        return [
            {"name": name, "label": name.replace("_", " "), "frames": n, "share_pct": round(100.0 * n / total, 1)}
            for name, n in sorted(counts.items(), key=lambda item: (-item[1], item[0]))
        ]

    return {"room_types": rows(room_types), "layout_modes": rows(layout_modes)}


def appearance_summary(
    *, families: Counter[str], distractor_counts: Sequence[int], frames: int, library: Sequence[str] = ()
) -> dict[str, _Any]:
    """What the overview shows of the frames' surfaces and distractors, from tallies over ``frames`` scene files.

    ``textures``: one row per family, most used first (plain surfaces last), with its share of all material slots;
    ``not_drawn``: the families of ``library`` (the render core's texture families) that no slot wears.
    ``distractors``: None when no frame lists distractors; else min / median / max over the frames that do and a
    histogram of frames per distractor count (one bar per count, or per range of counts when there are more than
    :data:`DISTRACTOR_HISTOGRAM_BARS` counts).
    """
    slots = sum(families.values())
    textured = slots - families.get(PLAIN_SURFACE, 0)
    top = max(families.values(), default=0)
    rows = [
        {
            "family": family,
            "label": family.replace("_", " "),
            "slots": n,
            "plain": family == PLAIN_SURFACE,
            "share_pct": round(100.0 * n / slots, 1) if slots else 0.0,
            "bar_pct": round(100.0 * n / top, 1) if top else 0.0,
        }
        for family, n in sorted(families.items(), key=lambda item: (item[0] == PLAIN_SURFACE, -item[1], item[0]))
    ]
    distractors = None
    if distractor_counts:
        low, high = min(distractor_counts), max(distractor_counts)
        width = max(1, _math.ceil((high - low + 1) / DISTRACTOR_HISTOGRAM_BARS))
        per_bar = Counter((n - low) // width for n in distractor_counts)
        tallest = max(per_bar.values())
        bars = []
        for bar in range((high - low) // width + 1):
            first = low + bar * width
            last = min(first + width - 1, high)
            n = per_bar.get(bar, 0)
            bars.append(
                {
                    "label": str(first) if first == last else f"{first}–{last}",
                    "frames": n,
                    "height_pct": round(100.0 * n / tallest, 1),
                }
            )
        distractors = {
            "frames": len(distractor_counts),
            "min": low,
            "max": high,
            "median": statistics.median(distractor_counts),
            "bars": bars,
        }
    return {
        "frames": frames,
        "slots": slots,
        "families": sum(1 for r in rows if not r["plain"]),
        "textured_pct": round(100.0 * textured / slots, 1) if slots else 0.0,
        "textures": rows,
        "not_drawn": [name.replace("_", " ") for name in sorted(set(library) - set(families))],
        "library_size": len(library),
        "distractors": distractors,
    }


def coverage_sample(*, campaign: Campaign, limit: int = COVERAGE_SAMPLE_FRAMES) -> dict[str, _Any]:
    """Sampled scene parameters of the latest ``limit`` done frames, read from their scene.json files.

    No database column holds camera height, focal length, f-number, ISO, light CCT and flux, viewing angles,
    texture families or distractors, so this reads a bounded sample (at most ``limit`` files, about 10 kB each;
    the database picks the files: the latest done frames by finish time). Viewing angle: the camera's azimuth
    around the object, 0° = seen from its front (local +y), and its elevation above the object's centre.
    ``appearance`` is :func:`appearance_summary` over the same files.
    """
    from django.conf import settings

    dirs = list(
        Frame.objects.filter(campaign=campaign, state=State.DONE)
        .exclude(output_dir="")
        .order_by("-finished_at")
        .values_list("output_dir", flat=True)[:limit]
    )
    root = _Path(settings.MEDIA_ROOT)
    values: dict[str, list[float]] = {k: [] for k in ("eye_height_m", "focal_length_mm", "f_number", "iso")}
    flux: dict[str, list[float]] = {}
    cct: dict[str, list[float]] = {}
    azimuth: dict[str, list[float]] = {}
    elevation: dict[str, list[float]] = {}
    families: Counter[str] = Counter()
    distractor_counts: list[int] = []
    room_types: Counter[str] = Counter()
    layout_modes: Counter[str] = Counter()
    specs_read = 0
    for relative in dirs:
        spec = _read_json(root / relative / "scene.json")
        if not spec:
            continue
        specs_read += 1
        families.update(texture_families(spec))
        distractors = distractor_count(spec)
        if distractors is not None:
            distractor_counts.append(distractors)
        room = spec.get("room")
        if isinstance(room, dict) and isinstance(room.get("room_type"), str):
            room_types[room["room_type"]] += 1
        if isinstance(spec.get("layout_mode"), str):
            layout_modes[spec["layout_mode"]] += 1
        camera = spec.get("camera", {})
        position = camera.get("position_m") or [0, 0, 0]
        values["eye_height_m"].append(float(position[2]))
        for key in ("focal_length_mm", "f_number", "iso"):
            if key in camera:
                values[key].append(float(camera[key]))
        for light in spec.get("lights", []):
            if "cct_k" in light:
                cct.setdefault(str(light.get("kind", "light")), []).append(float(light["cct_k"]))
            if "flux_lm" in light:
                flux.setdefault(str(light.get("kind", "light")), []).append(float(light["flux_lm"]))
        for obj in spec.get("objects", []):
            p = obj.get("position_m") or [0, 0, 0]
            dx, dy = position[0] - p[0], position[1] - p[1]
            dz = position[2] - (p[2] + float(obj.get("height_m", 0.0)) / 2)
            front_deg = float(obj.get("yaw_deg", 0.0)) + 90.0
            name = str(obj.get("class_name", "?"))
            azimuth.setdefault(name, []).append(round((_math.degrees(_math.atan2(dy, dx)) - front_deg) % 360.0, 2))
            elevation.setdefault(name, []).append(round(_math.degrees(_math.atan2(dz, _math.hypot(dx, dy))), 2))
    budget = campaign.budget
    ranges = {
        "eye_height_m": budget["camera"]["eye_height_m"],
        "focal_length_mm": budget["camera"]["focal_length_mm"],
        "f_number": budget["camera"]["f_number"],
        "iso": budget["camera"]["iso"],
    }
    flux_ranges = {kind: budget["lighting"].get(f"{kind}_flux_lm") for kind in flux}
    # Each light kind against its own range: the lamps draw from the budget's lighting.cct_k, daylight from the
    # render core's fixed sun and sky ranges (a sky at 9,000 K is not a lamp outside its budget).
    daylight_cct = {"sun": list(SUN_CCT_K), "dome": list(SKY_CCT_K)}
    cct_ranges = {kind: daylight_cct.get(kind, budget["lighting"]["cct_k"]) for kind in cct}
    return {
        "frames_read": len(dirs),
        "limit": limit,
        "frames_done": campaign.frames_done,
        "values": values,
        "ranges": ranges,
        "flux": flux,
        "flux_ranges": flux_ranges,
        "cct": cct,
        "cct_ranges": cct_ranges,
        "azimuth_deg": azimuth,
        "elevation_deg": elevation,
        "appearance": {
            **appearance_summary(
                families=families, distractor_counts=distractor_counts, frames=specs_read, library=_texture_library()
            ),
            "distractor_range": budget.get("appearance", {}).get("distractor_count"),
            **room_summary(room_types=room_types, layout_modes=layout_modes),
        },
    }


def _texture_library() -> tuple[str, ...]:
    try:
        # deferred: optional render core, see the ImportError fallback
        from render.textures import FAMILIES
    except ImportError:  # the web server may run without the render core
        return ()
    return tuple(FAMILIES)


def _ignored_after_death() -> Exists:
    return Exists(
        FrameEvent.objects.filter(frame=OuterRef("pk"), to_state="ignored", created_at__gte=OuterRef("finished_at"))
    )


def failed_frames(*, campaign: Campaign) -> QuerySet[Frame]:
    """Frames whose last attempt failed and that nobody ignored: dead ones, and ones waiting to retry."""
    return (
        Frame.objects.filter(campaign=campaign, state__in=FAILED_STATES)
        .exclude(error="")
        .annotate(ignored=_ignored_after_death())
        .filter(ignored=False)
    )


def error_groups(*, campaign: Campaign) -> list[dict[str, _Any]]:
    """Failed frames grouped by error kind (exception type + first line), biggest group first.

    The database groups by the full error text (few distinct texts); groups with the same first line merge here.
    """
    groups: dict[str, dict[str, _Any]] = {}
    for row in (
        failed_frames(campaign=campaign)
        .values("error")
        .annotate(n=Count("pk"), dead=Count("pk", filter=Q(state=State.DEAD)), last=Max("started_at"))
    ):
        kind = error_kind(row["error"])
        g = groups.setdefault(kind, {"kind": kind, "count": 0, "dead": 0, "last": None})
        g["count"] += row["n"]
        g["dead"] += row["dead"]
        if row["last"] and (g["last"] is None or row["last"] > g["last"]):
            g["last"] = row["last"]
    return sorted(groups.values(), key=lambda g: (-g["count"], g["kind"]))


GALLERY_EXPORT_STATES = ("", "included", "excluded")


def gallery_frames(*, campaign: Campaign, match: Q | None = None, export_state: str = "") -> QuerySet[Frame]:
    """Done frames that hold at least one instance matching ``match`` (:func:`instance_filter`), and in the export
    (``included``) or left out of it (``excluded``) when asked."""
    frames = Frame.objects.filter(campaign=campaign, state=State.DONE)
    if match is not None:
        frames = frames.filter(Exists(Instance.objects.filter(match, frame=OuterRef("pk"))))
    if export_state == "included":
        frames = frames.filter(excluded_at__isnull=True)
    elif export_state == "excluded":
        frames = frames.filter(excluded_at__isnull=False)
    return frames.order_by("-index")


def instance_filter(
    *,
    class_name: str = "",
    accepted: str = "",
    min_visible_fraction: float | None = None,
    min_contrast: float | None = None,
    min_box_px: float | None = None,
) -> Q | None:
    """Instances of a class, accepted or rejected, at least this visible, this contrasted (instances without a
    contrast measure never match a contrast filter) and whose visible box has both sides at least ``min_box_px``
    (the quota rule's measure: the box's shorter side)."""
    query = Q()
    if class_name:
        query &= Q(object_class__name=class_name)
    if accepted == "accepted":
        query &= Q(accepted=True)
    elif accepted == "rejected":  # visible but rejected: an instance without pixels shows nothing to look at
        query &= Q(accepted=False, mask_area_px__gt=0)
    if min_visible_fraction is not None:
        query &= Q(visible_fraction__gte=min_visible_fraction)
    if min_contrast is not None:
        query &= Q(contrast__gte=min_contrast)
    if min_box_px is not None:  # COCO [x, y, w, h]: both sides, as JSON array elements 2 and 3
        query &= Q(bbox_xywh_px__2__gte=min_box_px, bbox_xywh_px__3__gte=min_box_px)
    return query if query else None


def frame_instances(*, frame_ids: Sequence[int]) -> dict[int, list[Mapping[str, _Any]]]:
    """Instances of some frames (one query), for box overlays and labels tables."""
    out: dict[int, list[Mapping[str, _Any]]] = {fid: [] for fid in frame_ids}
    for row in (
        Instance.objects.filter(frame_id__in=list(frame_ids))
        .order_by("frame_id", "instance_id")
        .values(
            "frame_id",
            "instance_id",
            "object_class__name",
            "asset_id",
            "bbox_xywh_px",
            "amodal_bbox_xywh_px",
            "visible_fraction",
            "contrast",
            "occlusion_fraction",
            "truncation_fraction",
            "mask_area_px",
            "accepted",
            "reject_reasons",
        )
    ):
        out[row["frame_id"]].append(row)
    return out


def asset_library(*, user: _Any) -> list[dict[str, _Any]]:
    """Procedural (shared) and the user's teams' uploaded assets, with their appearances in every campaign.

    An appearance is a done frame holding an instance of the asset (:func:`_asset_instances`). The creation cost
    is the library's, amortized over every appearance in every campaign of every team (a shared generator's
    counts include other teams' campaigns: only the totals are shown, never which campaigns).
    """
    assets = (
        scope_to_user(Asset.objects.all(), user=user, include_shared=True)
        .select_related("object_class", "team")
        .order_by("object_class__name", "kind", "name")
    )
    rows = list(assets)
    usage = asset_usage(assets=rows)
    out = []
    for a in rows:
        frames = sum(f for f, _ in usage[a.pk].values())
        instances = sum(n for _, n in usage[a.pk].values())
        out.append(
            {
                "asset": a,
                "frames": frames,
                "instances": instances,
                "campaigns": len(usage[a.pk]),
                "per_appearance": costs.money(a.creation_cost / frames) if frames else None,
            }
        )
    return out


# --- the planner's estimate ---------------------------------------------------------------------------------------

HISTORY_CAMPAIGNS = 100
HISTORY_MIN_FRAMES = 3


@dataclass(frozen=True)
class FrameTimeEstimate:
    cpu_s: float
    wall_per_cpu: float
    source: str
    detail: str


def _fit_frame_time(seen: Sequence[tuple[Mapping[str, _Any], int]]) -> tuple[float, float]:
    """``(a, b)`` of ``cpu = a + b × samples`` from campaign means (``n`` frames each): a frame-weighted
    least-squares line when the campaigns differ in samples and the line is plausible (a ≥ 0, b > 0); otherwise
    the ratio estimate of ``b`` past a fixed overhead ``a``."""
    weights = [float(r["n"]) for r, _ in seen]
    xs = [float(n) for _, n in seen]
    ys = [float(r["cpu"]) for r, _ in seen]
    total = sum(weights)
    mean_x = sum(w * x for w, x in zip(weights, xs, strict=True)) / total
    mean_y = sum(w * y for w, y in zip(weights, ys, strict=True)) / total
    sxx = sum(w * (x - mean_x) ** 2 for w, x in zip(weights, xs, strict=True))
    if sxx > 0:
        sxy = sum(w * (x - mean_x) * (y - mean_y) for w, x, y in zip(weights, xs, ys, strict=True))
        slope = sxy / sxx
        intercept = mean_y - slope * mean_x
        if slope > 0 and intercept >= 0:
            return intercept, slope
    overhead = min(costs.PRIOR_FRAME_OVERHEAD_CPU_S, 0.5 * min(ys))
    slope = sum(w * (y - overhead) for w, y in zip(weights, ys, strict=True)) / sum(
        w * x for w, x in zip(weights, xs, strict=True)
    )
    return overhead, slope


def frame_time_estimate(*, width_px: int, height_px: int, spp: int, history: QuerySet[Campaign]) -> FrameTimeEstimate:
    """CPU seconds per frame for a new budget, on one basis: ``a + b × samples`` (samples = pixels × spp).

    With history (done frames of up to :data:`HISTORY_CAMPAIGNS` visible campaigns, each with at least
    :data:`HISTORY_MIN_FRAMES`): ``a`` (the per-frame overhead: scene build, label pass, kernel compile) and ``b``
    from a frame-weighted least-squares line through the campaigns' mean CPU seconds (:func:`_fit_frame_time`);
    with a single sample count, or an implausible line, ``a`` is
    :data:`campaigns.costs.PRIOR_FRAME_OVERHEAD_CPU_S` (or half the smallest mean if lower) and ``b`` the ratio
    estimate ``Σ nᵢ (cpuᵢ − a) / Σ nᵢ samplesᵢ`` (Cochran, *Sampling Techniques*, 3rd ed., ch. 6 — from memory).
    Without history: the constants measured on this machine. Either way the estimate is a straight line with a positive slope in samples, so it
    grows with resolution and spp and never jumps when a setting crosses from one past campaign to another.
    """
    samples = width_px * height_px * spp
    stats = list(
        Frame.objects.filter(
            campaign__in=history.values("pk")[:HISTORY_CAMPAIGNS], state=State.DONE, cpu_s__isnull=False
        )
        .values("campaign")
        .annotate(n=Count("pk"), cpu=Avg("cpu_s"), wall=Avg("wall_s"))
        .filter(n__gte=HISTORY_MIN_FRAMES)
    )
    budgets = dict(Campaign.objects.filter(pk__in=[r["campaign"] for r in stats]).values_list("pk", "budget"))
    seen = []
    for r in stats:
        render = budgets.get(r["campaign"], {}).get("render", {})
        n_samples = int(render.get("width_px", 0)) * int(render.get("height_px", 0)) * int(render.get("spp", 0))
        if n_samples > 0 and r["cpu"]:
            seen.append((r, n_samples))
    if not seen:
        return FrameTimeEstimate(
            cpu_s=costs.prior_frame_cpu_s(width_px=width_px, height_px=height_px, spp=spp),
            wall_per_cpu=1.0,
            source="constant",
            detail=(
                f"no campaign has finished frames yet: the constant measured on this machine, "
                f"{costs.PRIOR_FRAME_OVERHEAD_CPU_S:g} CPU s per frame + {costs.PRIOR_CPU_S_PER_SAMPLE * 1e6:g} CPU s "
                "per megapixel-sample"
            ),
        )
    frames = sum(r["n"] for r, _ in seen)
    overhead, per_sample = _fit_frame_time(seen)
    wall_per_cpu = sum(r["n"] * ((r["wall"] or r["cpu"]) / r["cpu"]) for r, _ in seen) / frames
    return FrameTimeEstimate(
        cpu_s=overhead + per_sample * samples,
        wall_per_cpu=wall_per_cpu,
        source="history",
        detail=(
            f"measured on {frames} frames of {len(seen)} campaign{'s' if len(seen) != 1 else ''}: "
            f"{overhead:.2f} CPU s per frame + {per_sample * 1e6:.3g} CPU s per megapixel-sample, "
            "scaled to these settings by pixels × spp"
        ),
    )


@dataclass(frozen=True)
class PlanEstimate:
    frames: int
    instances_per_frame: float
    cpu_hours: float
    compute_cost: Decimal
    fixed_cost: Decimal
    library_share: Decimal
    library: list[dict[str, _Any]]
    total_cost: Decimal
    within_budget: bool
    wall_s_on_fleet: float | None
    live_slots: int
    cost_per_accepted: Decimal | None
    manual_cost_per_instance: Decimal
    manual_total: Decimal
    frame_cpu_s: float
    source: str
    detail: str
    yields: dict[str, float]


def _projected_library(
    *, targets: Mapping[str, int], yields: Mapping[str, float], frames: int, per_frame: float
) -> list[dict[str, _Any]]:
    """The shared generators of the planned classes: creation cost, frames that used them so far, and the share of
    their cost this plan would bear with ``min(frames, placements of the class)`` frames of its own (a class's
    placements spread over the frames, at most one frame each)."""
    generators = list(
        Asset.objects.filter(object_class__name__in=[n for n, t in targets.items() if t > 0], team__isnull=True)
        .select_related("object_class")
        .order_by("object_class__name", "name")
    )
    usage = asset_usage(assets=generators)
    items = []
    for asset in generators:
        name = asset.object_class.name
        planned = min(frames, _math.ceil(targets[name] / yields[name])) if frames else 0
        so_far = sum(f for f, _ in usage[asset.pk].values())
        items.append(
            {
                "name": asset.name,
                "class_name": name,
                "creation_cost": costs.money(asset.creation_cost),
                "frames_so_far": so_far,
                "frames_planned": planned,
                "share": costs.projected_library_share(
                    creation_cost=asset.creation_cost, frames_so_far=so_far, frames_planned=planned
                ),
            }
        )
    return items


def plan_estimate(
    *,
    budget: dict[str, _Any],
    targets: dict[str, int],
    cost_budget: Decimal,
    price_per_cpu_hour: Decimal,
    setup_cost: Decimal,
    manual_rate_per_hour: Decimal,
    history: QuerySet[Campaign],
) -> PlanEstimate:
    """Frames, CPU-hours, cost, time on the live workers and cost per accepted instance for a planned campaign.

    Frames: each class needs ``target / yield`` placements, with the yield per class from the history of the
    visible campaigns (Beta posterior, :func:`campaigns.planner.posterior_yield`), shared over frames holding
    ``min(12, density × mean floor area)`` objects (the scheduler's density limit). ``budget`` is normalized.
    """
    render = budget["render"]
    frame_time = frame_time_estimate(
        width_px=render["width_px"], height_px=render["height_px"], spp=render["spp"], history=history
    )
    seen: dict[str, Mapping[str, _Any]] = {
        r["object_class__name"]: r
        for r in ClassQuota.objects.filter(campaign__in=history.values("pk"))
        .values("object_class__name")
        .annotate(a=Sum("accepted_count"), p=Sum("placed_count"))
    }
    yields = {
        name: planner.posterior_yield(
            accepted=seen.get(name, {}).get("a") or 0, placed=seen.get(name, {}).get("p") or 0
        )
        for name in targets
    }
    placements = sum(t / yields[n] for n, t in targets.items())
    room = budget["room"]
    area = (sum(room["width_m"]) / 2) * (sum(room["depth_m"]) / 2)
    per_frame = float(max(1, min(MAX_OBJECTS_PER_FRAME, _math.floor(area * room["max_objects_per_m2"]))))
    frames = _math.ceil(placements / per_frame) if placements else 0
    cpu_s = frames * frame_time.cpu_s
    compute = costs.frame_compute_cost(cpu_s=cpu_s, price_per_cpu_hour=price_per_cpu_hour)
    fixed = costs.fixed_cost(asset_creation_costs=[], setup_cost=setup_cost)
    library = _projected_library(targets=targets, yields=yields, frames=frames, per_frame=per_frame)
    library_share = costs.money(sum((item["share"] for item in library), Decimal(0)))
    total = costs.money(fixed + compute)
    slots = live_workers().aggregate(s=Sum("concurrency"))["s"] or 0
    wall = (frame_time.cpu_s * frame_time.wall_per_cpu * _math.ceil(frames / slots)) if slots else None
    instances = sum(targets.values())
    manual = costs.manual_labelling_cost(instances=instances, rate_per_hour=manual_rate_per_hour)
    return PlanEstimate(
        frames=frames,
        instances_per_frame=per_frame,
        cpu_hours=cpu_s / 3600.0,
        compute_cost=compute,
        fixed_cost=fixed,
        library_share=library_share,
        library=library,
        total_cost=total,
        within_budget=total <= cost_budget,
        wall_s_on_fleet=wall,
        live_slots=slots,
        cost_per_accepted=costs.money((total + library_share) / instances) if instances else None,
        manual_cost_per_instance=manual.cost_per_instance,
        manual_total=manual.cost_for_instances,
        frame_cpu_s=frame_time.cpu_s,
        source=frame_time.source,
        detail=frame_time.detail,
        yields=yields,
    )


def campaign_live(*, campaign: Campaign) -> dict[str, _Any]:
    """What dashboard.js polls: counters, quotas, frame states, spend, projection and the chart series."""
    s = campaign_summary(campaign=campaign)
    c = s.campaign
    accepted = [q.accepted for q in s.quotas]
    targets = [q.target for q in s.quotas]
    ratios = [a / t for a, t in zip(accepted, targets, strict=True) if t]
    imbalance = (max(ratios) / min(ratios)) if ratios and min(ratios) > 0 else None
    towards = sum(min(a, t) for a, t in zip(accepted, targets, strict=True))
    return {
        "status": c.status,
        "status_label": c.get_status_display(),
        "pause_reason": c.get_pause_reason_display() if c.pause_reason else "",
        "pause_detail": c.pause_detail,
        "frames": s.frames,
        "frames_done": c.frames_done,
        "frames_dead": c.frames_dead,
        "instances_accepted": c.instances_accepted,
        "instances_rejected": c.instances_rejected,
        "progress_pct": round(100 * towards / sum(targets), 1) if sum(targets) else 0.0,
        "quotas": [
            {
                "class_name": q.class_name,
                "target": q.target,
                "accepted": q.accepted,
                "rejected": q.rejected,
                "placed": q.placed,
                "yield": round(q.yield_estimate, 3),
                "met": q.met,
                "pct": round(100 * min(1.0, q.accepted / q.target), 1) if q.target else 100.0,
            }
            for q in s.quotas
        ],
        "imbalance_ratio": round(imbalance, 2) if imbalance else None,
        "spent": str(costs.money(s.total_spent).quantize(Decimal("0.0001"))),
        "spent_pct": round(float(100 * s.total_spent / c.cost_budget), 1) if c.cost_budget else 0.0,
        "cost_budget": str(c.cost_budget),
        "fixed": str(s.fixed),
        "library_share": str(s.library_share),
        "library": [
            {
                "name": a.name,
                "class_name": a.class_name,
                "creation_cost": str(a.creation_cost),
                "frames_here": a.frames_here,
                "frames_total": a.frames_total,
                "share": str(a.share),
            }
            for a in s.library
        ],
        "compute": str(s.compute_spent.quantize(Decimal("0.0001"))),
        "cpu_s": round(s.cpu_s_spent, 1),
        "per_accepted": str(s.amortized.per_accepted_instance.quantize(Decimal("0.0001")))
        if s.amortized.per_accepted_instance is not None
        else None,
        "manual_per_instance": str(s.manual.cost_per_instance.quantize(Decimal("0.0001"))),
        "break_even_frames": s.break_even_frames,
        "median_cpu_s": round(s.median_cpu_s, 2) if s.median_cpu_s is not None else None,
        "median_wall_s": round(s.median_wall_s, 2) if s.median_wall_s is not None else None,
        "frames_remaining": s.projection.frames_remaining,
        "cost_remaining": str(s.projection.cost_remaining.quantize(Decimal("0.0001")))
        if s.projection.cost_remaining is not None
        else None,
        "eta_s": round(s.projection.seconds_remaining) if s.projection.seconds_remaining is not None else None,
        "live_slots": s.live_slots,
        "failed_open": failed_frames(campaign=c).count(),
        "series": cost_series(campaign=c, start_cost=s.fixed + s.library_share),
        "throughput": throughput(campaign=c),
        "fleet": fleet(),
    }


def frame_neighbours(*, frame: Frame) -> tuple[int | None, int | None]:
    """Previous and next done frame indices (for the frame page's arrows)."""
    done = Frame.objects.filter(campaign_id=frame.campaign_id, state=State.DONE)
    prev = done.filter(index__lt=frame.index).aggregate(m=Max("index"))["m"]
    nxt = done.filter(index__gt=frame.index).aggregate(m=Min("index"))["m"]
    return prev, nxt


# --- uploaded meshes for the render core ------------------------------------------------------------------------

_USER_PLACEMENT_BY_CLASS_RULE = {"floor": "floor", "wall": "wall", "surface_or_floor": "surface"}


def campaign_user_mesh_entries(*, campaign: Campaign) -> dict[str, list[dict[str, str]]]:
    """``{class_name: [entry, ...]}`` of the campaign's uploaded meshes, for ``make_spec(user_assets=...)``.

    Only mesh assets attached to the campaign whose file exists under MEDIA_ROOT (a path escaping it is skipped);
    each entry's ``asset_id`` is ``user/<asset pk>``, the id the asset library counts appearances by. The placement
    follows the class's rule in the render core (a shelf item may stand on a table). Ordered by asset pk, so the
    same assets always give the same entries (and the same frames).
    """
    from django.conf import settings

    try:
        # deferred: optional render core, see the ImportError fallback
        from render.assets import CLASSES
    except ImportError:  # the web server may run without the render core
        CLASSES = {}
    root = _Path(settings.MEDIA_ROOT).resolve()
    out: dict[str, list[dict[str, str]]] = {}
    for asset in (
        campaign.assets.filter(kind=Asset.Kind.MESH).exclude(mesh_file="").select_related("object_class").order_by("pk")
    ):
        if asset.mesh_file.name is None:  # excluded by the query (mesh_file="" is no file)
            continue
        path = (root / asset.mesh_file.name).resolve()
        if not path.is_relative_to(root) or not path.is_file():
            continue
        asset_class = CLASSES.get(asset.object_class.name)
        placement = _USER_PLACEMENT_BY_CLASS_RULE.get(asset_class.placement if asset_class else "floor", "floor")
        out.setdefault(asset.object_class.name, []).append(
            {
                "asset_id": f"user/{asset.pk}",
                "mesh_path": str(path),
                "unit": asset.mesh_unit or "auto",
                "up_axis": asset.up_axis or "z",
                "placement": placement,
                "front": asset.front or "",
                "look": asset.look or "randomize",
            }
        )
    return out


# --- dataset statistics: streamed rows (datasets.page_statistics counts them) -------------------------------------

from collections.abc import Iterator as _Iterator  # noqa: E402
from datetime import datetime as _datetime  # noqa: E402

STATISTICS_FRAME_CHUNK = 2000
STATISTICS_INSTANCE_CHUNK = 10000


@dataclass(frozen=True)
class StatisticsFrame:
    """A done frame and its accepted, visible instances (instance id order), as :func:`statistics_frames` reads it.

    Each instance is ``{"instance_id", "class_name", "bbox_xywh_px", "mask_area_px", "visible_fraction",
    "truncation_fraction", "occlusion_fraction"}``.
    """

    index: int
    output_dir: str
    instances: tuple[Mapping[str, _Any], ...]


def _statistics_frames(*, campaign: Campaign, finished_before: _datetime) -> QuerySet[Frame]:
    # Frames a user left out of exports are left out here too: the page shows what an export holds.
    return Frame.objects.filter(
        campaign=campaign, state=State.DONE, finished_at__lte=finished_before, excluded_at__isnull=True
    )


def _statistics_instances(*, campaign: Campaign, finished_before: _datetime) -> QuerySet[Instance]:
    # The instances an accepted-only export holds: accepted, with a mask and a box, on a done frame.
    return Instance.objects.filter(
        campaign=campaign,
        frame__state=State.DONE,
        frame__finished_at__lte=finished_before,
        frame__excluded_at__isnull=True,
        accepted=True,
        mask_area_px__gt=0,
        bbox_xywh_px__isnull=False,
    )


def statistics_class_names(*, campaign: Campaign) -> list[str]:
    """The campaign's quota classes and any other class its instances have, sorted by name."""
    names = set(ClassQuota.objects.filter(campaign=campaign).values_list("object_class__name", flat=True))
    names.update(Instance.objects.filter(campaign=campaign).values_list("object_class__name", flat=True).distinct())
    return sorted(names)


def statistics_frame_count(*, campaign: Campaign, finished_before: _datetime, before_index: int | None = None) -> int:
    """Done frames (finished by ``finished_before``), only those with an index below ``before_index`` if given."""
    frames = _statistics_frames(campaign=campaign, finished_before=finished_before)
    return (frames if before_index is None else frames.filter(index__lt=before_index)).count()


def statistics_frame_limit(*, campaign: Campaign, finished_before: _datetime, max_instances: int) -> int | None:
    """Index of the first frame past the first ``max_instances`` accepted instances in frame order; None if all fit.

    Reading the frames below that index reads at most ``max_instances`` instances and only whole frames (the
    frame holding instance number ``max_instances + 1`` is left out with all after it).
    """
    over = list(
        _statistics_instances(campaign=campaign, finished_before=finished_before)
        .order_by("frame__index", "instance_id")
        .values_list("frame__index", flat=True)[max_instances : max_instances + 1]
    )
    return over[0] if over else None


def statistics_frames(
    *, campaign: Campaign, finished_before: _datetime, before_index: int | None = None
) -> _Iterator[StatisticsFrame]:
    """The done frames in index order, each with its accepted, visible instances, streamed.

    Two ``.iterator()`` queries (frames; instances sorted by frame index) merged by frame index, so memory holds
    one frame's instances; frames finished after ``finished_before`` are left out of both (a snapshot, as the
    export takes). A frame without accepted instances comes with none.
    """
    frames = _statistics_frames(campaign=campaign, finished_before=finished_before)
    instances = _statistics_instances(campaign=campaign, finished_before=finished_before)
    if before_index is not None:
        frames = frames.filter(index__lt=before_index)
        instances = instances.filter(frame__index__lt=before_index)
    frame_rows = frames.order_by("index").values_list("index", "output_dir").iterator(chunk_size=STATISTICS_FRAME_CHUNK)
    keys = (
        "instance_id",
        "class_name",
        "bbox_xywh_px",
        "mask_area_px",
        "visible_fraction",
        "truncation_fraction",
        "occlusion_fraction",
    )
    instance_rows = (
        instances.order_by("frame__index", "instance_id")
        .values_list(
            "frame__index",
            "instance_id",
            "object_class__name",
            "bbox_xywh_px",
            "mask_area_px",
            "visible_fraction",
            "truncation_fraction",
            "occlusion_fraction",
        )
        .iterator(chunk_size=STATISTICS_INSTANCE_CHUNK)
    )
    pending = next(instance_rows, None)
    for index, output_dir in frame_rows:
        rows = []
        while pending is not None and pending[0] <= index:
            if pending[0] == index:
                rows.append(dict(zip(keys, pending[1:], strict=True)))
            pending = next(instance_rows, None)
        yield StatisticsFrame(index=index, output_dir=output_dir, instances=tuple(rows))


# --- notifications ------------------------------------------------------------------------------------------------


def notification_to_send(*, notification_id: int) -> Notification | None:
    """A pending notification with its campaign (for the webhook secret), or None (sent, failed for good, gone)."""
    return (
        Notification.objects.select_related("campaign")
        .filter(pk=notification_id, state=Notification.State.PENDING)
        .first()
    )


def recent_notifications(*, campaign: Campaign, limit: int = 10) -> list[Notification]:
    return list(Notification.objects.filter(campaign=campaign).order_by("-created_at", "-pk")[:limit])
