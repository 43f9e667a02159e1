"""``manage.py bench_planner``: the quota planner against uniform sampling on real scene sampling."""

from __future__ import annotations

import statistics
import time

from django.core.management.base import BaseCommand, CommandError
from django.db import DatabaseError

from campaigns import sampling
from campaigns.management.commands.seed_demo import DEMO_BUDGET, DEMO_CAMPAIGN_NAME, DEMO_QUOTAS, DEMO_SEED
from campaigns.models import Campaign
from campaigns.services import normalize_campaign_budget

TARGET_FRAME_RATIO = 0.6
TARGET_SURPLUS_FRACTION = 0.10


class Command(BaseCommand):
    help = (
        "Fill the demo campaign's quotas with the planner and with uniform sampling, each frame sampled by the "
        "render core with a low-resolution label pass; print frames needed and surplus for both."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument(
            "--campaign",
            default="",
            help="Campaign id or name (default: the demo campaign, or "
            "the seed_demo definition when it is not in the database)",
        )
        parser.add_argument("--repeats", type=int, default=2, help="Independent runs (different seeds)")
        parser.add_argument("--label-width", type=int, default=80)
        parser.add_argument("--label-height", type=int, default=60)
        parser.add_argument(
            "--in-flight",
            type=int,
            default=2,
            help="Frames planned before the oldest one's labels are known (the scheduler queues two per worker slot)",
        )
        parser.add_argument("--max-frames", type=int, default=1500)
        parser.add_argument("--threads", type=int, default=0, help="Renderer threads (default: all cores)")

    def handle(self, *args, **options) -> None:
        key = options["campaign"] or DEMO_CAMPAIGN_NAME
        try:
            campaign = (
                Campaign.objects.filter(pk=int(key)).first() if key.isdigit() else None
            ) or Campaign.objects.filter(name=key).first()
        except DatabaseError as exc:
            # An unmigrated database: the demo definition below needs no tables.
            if options["campaign"]:
                raise CommandError(f"cannot read campaigns ({exc}); run `manage.py migrate` first") from exc
            campaign = None
        if campaign is not None:
            budget, seed, source = campaign.budget, campaign.seed, f"campaign {campaign.pk} {campaign.name!r}"
            quotas = {
                q.object_class.name: sampling.QuotaRule(q.target_accepted, q.min_visible_fraction, q.min_box_px)
                for q in campaign.quotas.select_related("object_class")
            }
        elif options["campaign"]:
            raise CommandError(f"no campaign {key!r}")
        else:
            budget, seed, source = normalize_campaign_budget(DEMO_BUDGET), DEMO_SEED, "the seed_demo definition"
            quotas = {
                q.class_name: sampling.QuotaRule(
                    q.target_accepted, budget["thresholds"]["min_visible_fraction"], budget["thresholds"]["min_box_px"]
                )
                for q in DEMO_QUOTAS
            }
        if options["repeats"] < 1:
            raise CommandError("--repeats must be at least 1")
        label_pass = sampling.render_core_label_pass(threads=options["threads"] or None)
        w = self.stdout.write
        targets = ", ".join(f"{n} {q.target_accepted}" for n, q in sorted(quotas.items()))
        w(f"Planner bench on {source}: quotas {targets} (sum {sum(q.target_accepted for q in quotas.values())})")
        w(
            f"Label pass {options['label_width']}×{options['label_height']} px, 1 spp (campaign renders "
            f"{budget['render']['width_px']}×{budget['render']['height_px']}; box thresholds scaled); "
            f"{options['in_flight']} frame(s) in flight"
        )
        rows = []
        all_cpu: list[float] = []
        started = time.perf_counter()
        for repeat in range(options["repeats"]):
            run_seed = seed + 1000 * repeat
            result = {}
            for strategy in ("planner", "uniform"):
                result[strategy] = sampling.simulate(
                    strategy=strategy,
                    quotas=quotas,
                    budget=budget,
                    campaign_seed=run_seed,
                    label_width_px=options["label_width"],
                    label_height_px=options["label_height"],
                    max_frames=options["max_frames"],
                    in_flight=options["in_flight"],
                    label_pass=label_pass,
                )
                all_cpu.extend(result[strategy].frame_cpu_s)
            p, u = result["planner"], result["uniform"]
            rows.append((p, u))
            w(
                f"  run {repeat + 1} (seed {run_seed}): planner {p.frames} frames{'' if p.filled else ' (NOT filled)'},"
                f" surplus {p.surplus} ({p.surplus_fraction:.1%}); uniform {u.frames} frames"
                f"{'' if u.filled else ' (NOT filled)'}, surplus {u.surplus} ({u.surplus_fraction:.1%}); "
                f"ratio {p.frames / u.frames:.2f}; layout errors {p.layout_errors}/{u.layout_errors}"
            )
            w(
                "    accepted per class (planner / uniform): "
                + ", ".join(f"{n} {p.accepted.get(n, 0)}/{u.accepted.get(n, 0)}" for n in sorted(quotas))
            )
        planner_frames = sum(p.frames for p, _ in rows)
        uniform_frames = sum(u.frames for _, u in rows)
        ratio = planner_frames / uniform_frames
        p_surplus = sum(p.surplus for p, _ in rows) / sum(p.quota_sum for p, _ in rows)
        u_surplus = sum(u.surplus for _, u in rows) / sum(u.quota_sum for _, u in rows)
        w("")
        w(f"{'':32s}{'planner':>12s}{'uniform':>12s}")
        w(f"{'frames to fill every quota':32s}{planner_frames / len(rows):12.1f}{uniform_frames / len(rows):12.1f}")
        w(f"{'surplus, % of sum of quotas':32s}{p_surplus * 100:11.1f}%{u_surplus * 100:11.1f}%")
        w(
            f"frames ratio planner/uniform: {ratio:.2f} (target ≤ {TARGET_FRAME_RATIO}) "
            f"{'PASS' if ratio <= TARGET_FRAME_RATIO else 'FAIL'}"
        )
        w(
            f"planner surplus: {p_surplus:.1%} (target ≤ {TARGET_SURPLUS_FRACTION:.0%}) "
            f"{'PASS' if p_surplus <= TARGET_SURPLUS_FRACTION else 'FAIL'}"
        )
        w(
            f"label-pass frame: median {statistics.median(all_cpu):.3f} CPU s over {len(all_cpu)} frames; "
            f"bench took {time.perf_counter() - started:.0f} s wall"
        )
