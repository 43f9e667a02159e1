"""``manage.py bench_estimate``: plan three campaigns of different sizes, run them, print estimate against actual.

For each plan the planner's estimate (:func:`campaigns.selectors.plan_estimate`: frames, CPU seconds, what the budget
pays) is taken first, with the history the bench's earlier campaigns left (the first has none: the measured
constants), then the campaign runs to completion in this process: the scheduler's task messages are delivered to
the real render task (:func:`campaigns.tasks.render_frame`) one after another, as one worker slot would. Printed per
campaign: estimated and actual frames, CPU seconds and cost, and each ratio; the goal is every figure within ±15 %.
The bench's campaigns and its user are deleted at the end unless ``--keep``.
"""

from __future__ import annotations

import time
from decimal import Decimal
from typing import Any

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError, CommandParser

from assets import services as asset_services
from campaigns import messaging, selectors, services
from campaigns.models import Campaign
from campaigns.tasks import render_frame

# Three sizes of one skewed plan (invented): a common class, a medium one, a rare one.
PLANS: tuple[dict[str, int], ...] = (
    {"chair": 6, "ottoman": 2},
    {"chair": 12, "armchair": 5, "wall_clock": 2},
    {"chair": 24, "armchair": 8, "side_table": 6, "wall_clock": 3},
)
BENCH_BUDGET: dict[str, Any] = {
    "render": {"width_px": 160, "height_px": 120, "spp": 8, "max_depth": 4},
    "room": {"width_m": [3.0, 5.0], "depth_m": [3.0, 5.0], "max_objects_per_m2": 0.5},
    "thresholds": {"min_visible_fraction": 0.3, "min_box_px": 6.0},
    "variation": {"layouts": 100000, "lighting_per_layout": 1, "views_per_lighting": 2},
}
PRICE_PER_CPU_HOUR = Decimal("0.05")
SETUP_COST = Decimal("0")  # exact by definition: the bench compares what the estimate has to guess
GOAL_RATIO = 0.15
BENCH_USER = "bench-estimate"


def within(estimated: float, actual: float) -> bool:
    return actual > 0 and abs(estimated / actual - 1.0) <= GOAL_RATIO


class Command(BaseCommand):
    help = "Plan three campaigns of different sizes, run them, and print estimated against actual frames, CPU, cost."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--scale", type=float, default=1.0, help="Multiply every target (default 1)")
        parser.add_argument("--width", type=int, help="Frame width in pixels (default 160)")
        parser.add_argument("--height", type=int, help="Frame height in pixels (default 120)")
        parser.add_argument("--spp", type=int, help="Samples per pixel (default 8)")
        parser.add_argument("--max-frames", type=int, default=400, help="Stop a campaign after this many frames")
        parser.add_argument("--keep", action="store_true", help="Keep the bench's campaigns")

    def handle(self, *args: Any, **options: Any) -> None:
        if options["scale"] <= 0:
            raise CommandError("--scale must be above 0")
        budget = {**BENCH_BUDGET, "render": dict(BENCH_BUDGET["render"])}
        for key, option in (("width_px", "width"), ("height_px", "height"), ("spp", "spp")):
            if options.get(option):
                budget["render"][key] = options[option]
        for name in {c for plan in PLANS for c in plan}:
            oc = asset_services.ensure_object_class(name=name)
            asset_services.ensure_procedural_asset(object_class=oc, name=f"procedural {name}")
        user, _ = get_user_model().objects.get_or_create(username=BENCH_USER)
        queue: list[dict[str, Any]] = []
        original_send = messaging.send_frame_task
        messaging.send_frame_task = lambda **message: queue.append(message)  # type: ignore[assignment]
        rows: list[dict[str, Any]] = []
        made: list[Campaign] = []
        try:
            for number, plan in enumerate(PLANS, start=1):
                targets = {name: max(1, round(t * options["scale"])) for name, t in plan.items()}
                rows.append(self._one(number, targets, budget, user, queue, options["max_frames"], made))
        finally:
            messaging.send_frame_task = original_send  # type: ignore[assignment]
            if not options["keep"]:
                for campaign in made:
                    Campaign.objects.filter(pk=campaign.pk).update(status=Campaign.Status.CANCELLED)
                    services.delete_campaign(campaign_id=campaign.pk)
        self._print(rows)

    def _one(
        self,
        number: int,
        targets: dict[str, int],
        budget: dict[str, Any],
        user: Any,
        queue: list[dict[str, Any]],
        max_frames: int,
        made: list[Campaign],
    ) -> dict[str, Any]:
        history = Campaign.objects.filter(pk__in=[c.pk for c in made])
        estimate = selectors.plan_estimate(
            budget=services.normalize_campaign_budget(budget),
            targets=targets,
            cost_budget=Decimal("1000"),
            price_per_cpu_hour=PRICE_PER_CPU_HOUR,
            setup_cost=SETUP_COST,
            manual_rate_per_hour=Decimal(0),
            history=history,
        )
        campaign = services.create_campaign(
            owner=user,
            name=f"estimate bench {number} {time.time_ns()}",
            quotas=[services.QuotaInput(name, target) for name, target in targets.items()],
            budget=budget,
            cost_budget=Decimal("1000"),
            price_per_cpu_hour=PRICE_PER_CPU_HOUR,
            setup_cost=SETUP_COST,
            seed=1000 + number,
        )
        made.append(campaign)
        started = time.perf_counter()
        services.start_campaign(campaign_id=campaign.pk)
        delivered = 0
        while queue and delivered < max_frames:
            message = queue.pop(0)
            kwargs = {k: message[k] for k in ("frame_id", "dispatch_no", "campaign_uid")}
            render_frame.apply(kwargs=kwargs, task_id=message["task_id"])
            delivered += 1
        campaign.refresh_from_db()
        summary = selectors.campaign_summary(campaign=campaign)
        self.stdout.write(
            f"campaign {number} ({', '.join(f'{n} {t}' for n, t in targets.items())}): {campaign.status}, "
            f"{campaign.frames_done} frames in {time.perf_counter() - started:.0f} s"
        )
        return {
            "number": number,
            "targets": targets,
            "status": campaign.status,
            "source": estimate.source,
            "frames": (estimate.frames, campaign.frames_done + campaign.frames_dead),
            "cpu_s": (estimate.cpu_hours * 3600.0, campaign.cpu_s_spent),
            "cost": (float(estimate.compute_cost), float(summary.compute_spent)),
        }

    def _print(self, rows: list[dict[str, Any]]) -> None:
        w = self.stdout.write
        w("")
        w(
            f"{'campaign':<9} {'basis':<9} {'frames est/actual':>18} {'CPU s est/actual':>20} {'compute cost est/actual':>26}"
        )
        verdicts = []
        for r in rows:
            cells = []
            for key, digits in (("frames", 0), ("cpu_s", 1), ("cost", 4)):
                est, act = r[key]
                ratio = est / act if act else float("nan")
                verdicts.append(within(est, act))
                cells.append(f"{est:.{digits}f}/{act:.{digits}f} ×{ratio:.2f}")
            w(f"{r['number']:<9} {r['source']:<9} {cells[0]:>18} {cells[1]:>20} {cells[2]:>26}")
        met = sum(verdicts)
        w(
            f"goal: every estimate within ±{GOAL_RATIO:.0%} of the actual: {met} of {len(verdicts)} figures "
            f"({'meets' if met == len(verdicts) else 'misses'})"
        )
