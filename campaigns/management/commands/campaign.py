"""``manage.py campaign create|start|pause|resume|cancel|status|copy|extend|set-budget|tick|list``."""

from __future__ import annotations

import json
from decimal import Decimal

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError, CommandParser

from campaigns import scheduler, selectors, services
from campaigns.models import Campaign
from evenframe.money import PER_UNIT_PLACES, format_money

BAR_WIDTH = 30


def progress_bar(done: int, target: int, width: int = BAR_WIDTH) -> str:
    fraction = 1.0 if target == 0 else min(1.0, done / target)
    filled = int(round(fraction * width))
    return "[" + "#" * filled + "." * (width - filled) + "]"


def format_duration(seconds: float | None) -> str:
    if seconds is None:
        return "unknown (no live worker or no finished frame yet)"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours} h {minutes:02d} min" if hours else f"{minutes} min {secs:02d} s"


QUOTA_SYNTAX = "class=target[:min_visible_fraction[:min_box_px[:min_contrast]]]"


def parse_quota(text: str) -> services.QuotaInput:
    """``class=target`` or ``class=target:min_visible_fraction:min_box_px:min_contrast`` (empty = default)."""
    if "=" not in text:
        raise CommandError(f"--quota {text!r}: expected {QUOTA_SYNTAX}")
    name, _, rest = text.partition("=")
    parts = rest.split(":")
    if len(parts) > 4:
        raise CommandError(f"--quota {text!r}: expected {QUOTA_SYNTAX}")
    try:
        target = int(parts[0])
        vis = float(parts[1]) if len(parts) > 1 and parts[1] else None
        box = float(parts[2]) if len(parts) > 2 and parts[2] else None
        contrast = float(parts[3]) if len(parts) > 3 and parts[3] else None
    except ValueError as exc:
        raise CommandError(f"--quota {text!r}: {exc}") from exc
    return services.QuotaInput(name.strip(), target, vis, box, contrast)


class Command(BaseCommand):
    help = "Create, start, pause, resume, cancel and inspect rendering campaigns."

    def add_arguments(self, parser: CommandParser) -> None:
        sub = parser.add_subparsers(dest="action", required=True)
        create = sub.add_parser("create", help="Create a draft campaign.")
        create.add_argument("name")
        create.add_argument("--owner", required=True, help="Username of the owner")
        create.add_argument(
            "--quota", action="append", default=[], required=True, help=f"{QUOTA_SYNTAX}; repeat per class"
        )
        create.add_argument("--budget-file", help="JSON randomization budget (partial; merged over the defaults)")
        create.add_argument("--budget-json", help="The same, inline")
        create.add_argument("--width", type=int, help="Shortcut for render.width_px")
        create.add_argument("--height", type=int, help="Shortcut for render.height_px")
        create.add_argument("--spp", type=int, help="Shortcut for render.spp")
        create.add_argument("--cost-budget", required=True)
        create.add_argument("--price-per-cpu-hour", required=True)
        create.add_argument("--setup-cost", default="0")
        create.add_argument("--manual-rate-per-hour", default="0")
        create.add_argument("--weight", type=int, default=1)
        create.add_argument("--seed", type=int, default=0)
        create.add_argument("--start", action="store_true", help="Start right after creating")
        for action in ("start", "pause", "resume", "cancel"):
            p = sub.add_parser(action, help=f"{action.capitalize()} a campaign.")
            p.add_argument("campaign", help="Campaign id or name")
        status = sub.add_parser("status", help="Show a campaign's progress, spend and ETA (without one: list them).")
        status.add_argument("campaign", nargs="?", help="Campaign id or name")
        budget = sub.add_parser("set-budget", help="Change a campaign's cost budget.")
        budget.add_argument("campaign")
        budget.add_argument("cost_budget")
        copy = sub.add_parser("copy", help="Copy a campaign's settings into a new draft.")
        copy.add_argument("campaign", help="Campaign id or name")
        copy.add_argument("--name", help="Name of the copy (default: '<name> (copy)')")
        copy.add_argument("--seed", type=int, help="Root seed of the copy (default: the source's)")
        copy.add_argument("--owner", required=True, help="Username of the copy's owner (a planner of its team)")
        extend = sub.add_parser("extend", help="Raise quotas or add classes to a started campaign.")
        extend.add_argument("campaign", help="Campaign id or name")
        extend.add_argument(
            "--quota", action="append", default=[], help="CLASS=NEW_TARGET; repeat per class (targets only go up)"
        )
        extend.add_argument("--cost-budget", help="New cost budget")
        sub.add_parser("tick", help="Take back lost frames, top up running campaigns, resend due retries.")
        sub.add_parser("list", help="List campaigns.")

    def handle(self, *args, **options) -> None:
        action = options["action"]
        try:
            if action == "create":
                return self._create(options)
            if action == "tick":
                counts = scheduler.sweep()  # also takes back frames running on dead workers
                self.stdout.write(
                    f"{counts['sent']} message(s) sent; lost frames: {counts['requeued']} requeued, "
                    f"{counts['dead']} dead, {counts['revoked']} revoked"
                )
                return
            if action == "list" or (action == "status" and not options.get("campaign")):
                campaigns = list(selectors.campaign_list())
                for c in campaigns:
                    self.stdout.write(f"{c.pk:4d}  {c.status:10s} {c.name}")
                if action == "status":
                    example = campaigns[0].pk if campaigns else "ID"
                    self.stdout.write(
                        "no campaigns yet" if not campaigns else f"status of one: manage.py campaign status {example}"
                    )
                return
            campaign = self._campaign(options["campaign"])
            if action == "status":
                return self._status(campaign)
            if action == "copy":
                return self._copy(campaign, options)
            if action == "extend":
                return self._extend(campaign, options)
            if action == "set-budget":
                services.set_cost_budget(campaign_id=campaign.pk, cost_budget=options["cost_budget"])
            else:
                {
                    "start": services.start_campaign,
                    "pause": services.pause_campaign,
                    "resume": services.resume_campaign,
                    "cancel": services.cancel_campaign,
                }[action](campaign_id=campaign.pk)
            campaign.refresh_from_db()
            self.stdout.write(f"campaign {campaign.pk} {campaign.name!r}: {campaign.status}")
        except services.CampaignError as exc:
            raise CommandError(str(exc)) from exc

    @staticmethod
    def _campaign(key: str) -> Campaign:
        found = Campaign.objects.filter(pk=int(key)).first() if key.isdigit() else None
        found = found or Campaign.objects.filter(name=key).first()
        if found is None:
            raise CommandError(f"no campaign with id or name {key!r}")
        return found

    def _create(self, options: dict) -> None:
        user = get_user_model().objects.filter(username=options["owner"]).first()
        if user is None:
            raise CommandError(f"--owner: no user {options['owner']!r}")
        budget: dict = {}
        if options.get("budget_file"):
            try:
                with open(options["budget_file"], encoding="utf-8") as handle:
                    budget = json.load(handle)
            except (OSError, json.JSONDecodeError) as exc:
                raise CommandError(f"--budget-file: {exc}") from exc
        if options.get("budget_json"):
            try:
                budget = json.loads(options["budget_json"])
            except json.JSONDecodeError as exc:
                raise CommandError(f"--budget-json: {exc}") from exc
        render = {
            k: options[o]
            for k, o in (("width_px", "width"), ("height_px", "height"), ("spp", "spp"))
            if options.get(o) is not None
        }
        if render:
            budget = {**budget, "render": {**budget.get("render", {}), **render}}
        campaign = services.create_campaign(
            owner=user,
            name=options["name"],
            quotas=[parse_quota(q) for q in options["quota"]],
            budget=budget,
            cost_budget=options["cost_budget"],
            price_per_cpu_hour=options["price_per_cpu_hour"],
            setup_cost=options["setup_cost"],
            manual_labelling_rate_per_hour=options["manual_rate_per_hour"],
            weight=options["weight"],
            seed=options["seed"],
        )
        self.stdout.write(f"created campaign {campaign.pk} {campaign.name!r} (draft)")
        if options["start"]:
            services.start_campaign(campaign_id=campaign.pk)
            self.stdout.write(f"campaign {campaign.pk}: running")

    def _copy(self, campaign: Campaign, options: dict) -> None:
        user = get_user_model().objects.filter(username=options["owner"]).first()
        if user is None:
            raise CommandError(f"--owner: no user {options['owner']!r}")
        copy = services.copy_campaign(campaign_id=campaign.pk, owner=user, name=options["name"], seed=options["seed"])
        self.stdout.write(
            f"created campaign {copy.pk} {copy.name!r} (draft), a copy of {campaign.pk} {campaign.name!r}"
        )

    def _extend(self, campaign: Campaign, options: dict) -> None:
        targets: dict[str, int] = {}
        for text in options["quota"]:
            name, sep, value = text.partition("=")
            if not sep or not name.strip() or not value.strip().isdigit():
                raise CommandError(f"--quota {text!r}: expected CLASS=NEW_TARGET, e.g. clock=300")
            targets[name.strip()] = int(value)
        if not targets and options.get("cost_budget") is None:
            raise CommandError("give --quota CLASS=NEW_TARGET (repeatable) or --cost-budget")
        services.extend_campaign(campaign_id=campaign.pk, targets=targets, cost_budget=options.get("cost_budget"))
        campaign.refresh_from_db()
        quotas = ", ".join(
            f"{q.object_class.name} {q.target_accepted}" for q in campaign.quotas.order_by("object_class__name")
        )
        self.stdout.write(f"campaign {campaign.pk} {campaign.name!r}: {campaign.status}; targets {quotas}")

    def _status(self, campaign: Campaign) -> None:
        s = selectors.campaign_summary(campaign=campaign)
        c = s.campaign
        w = self.stdout.write
        reason = f" ({c.get_pause_reason_display()}: {c.pause_detail})" if c.status == Campaign.Status.PAUSED else ""
        w(f"Campaign {c.pk} {c.name!r} — {c.status}{reason}")
        w(f"  {c.width_px}×{c.height_px} px, {c.spp} spp, seed {c.seed}, weight {c.weight}")
        w("  Quotas (accepted / target):")
        name_width = max([len(q.class_name) for q in s.quotas] + [5])
        for q in s.quotas:
            mark = "  met" if q.met else ""
            w(
                f"    {q.class_name:<{name_width}} {progress_bar(q.accepted, q.target)} {q.accepted:5d} / {q.target:<5d}"
                f" rejected {q.rejected:4d}  yield {q.yield_estimate:.2f}{mark}"
            )
        frames = ", ".join(f"{k} {v}" for k, v in s.frames.items() if v)
        w(f"  Frames: {frames or 'none yet'}")
        median_cpu = f"{s.median_cpu_s:.2f} CPU s" if s.median_cpu_s is not None else "—"
        median_wall = f"{s.median_wall_s:.2f} s" if s.median_wall_s is not None else "—"
        w(f"  Per frame (median of recent): {median_cpu}, wall {median_wall}; total {s.cpu_s_spent:.1f} CPU s")
        budget_fraction = float(s.total_spent / c.cost_budget) if c.cost_budget else 0.0
        w(
            f"  Spend: {format_money(s.total_spent)} of budget {format_money(c.cost_budget)} "
            f"{progress_bar(int(budget_fraction * 1000), 1000)} {budget_fraction * 100:.1f}%  "
            f"(setup {format_money(s.fixed)} + compute {format_money(s.compute_spent, PER_UNIT_PLACES)})"
        )
        if s.library:
            parts = "; ".join(
                f"{a.name} {format_money(a.creation_cost)} × {a.frames_here}/{a.frames_total} frames" for a in s.library
            )
            w(f"  Asset library share (not charged to the budget): {format_money(s.library_share)} ({parts})")
        if s.amortized.per_accepted_instance is not None:
            w(
                f"  Amortized: {format_money(s.amortized.per_frame, PER_UNIT_PLACES)} per frame, "
                f"{format_money(s.amortized.per_accepted_instance, PER_UNIT_PLACES)} per "
                "accepted instance"
            )
        p = s.projection
        if p.frames_remaining == 0:
            w("  Remaining: nothing — every quota is met")
        else:
            frames_left = p.frames_remaining if p.frames_remaining is not None else "unknown"
            cost_left = format_money(p.cost_remaining) if p.cost_remaining is not None else "unknown"
            w(
                f"  Remaining: ≈ {frames_left} frames, ≈ {cost_left} compute, ETA {format_duration(p.seconds_remaining)}"
                f" on {s.live_slots} live worker slot(s)"
            )
        m = s.manual
        if c.manual_labelling_rate_per_hour > Decimal(0):
            refs = "; ".join(f"{r.citation}: {r.seconds_per_instance:g} s for {r.what}" for r in m.references)
            w(
                f"  Manual labelling of {sum(q.target for q in s.quotas)} instances at "
                f"{format_money(c.manual_labelling_rate_per_hour)}/h: {format_money(m.cost_for_instances)} "
                f"({m.seconds_per_instance:g} s per instance — {refs})"
            )
            be = s.break_even_frames
            w(
                f"  Break-even: {be} frames"
                if be is not None
                else "  Break-even: not yet known (no accepted instances) or never (a frame costs more than its labels)"
            )
