"""``manage.py seed_demo``: object classes, procedural assets and one demo campaign. Idempotent.

The scenario (invented): *Lindqvist & Daughters*, an online furniture
catalogue, runs a detector that tags the pieces in customers' room photos.
It finds chairs and sofas well but misses the rarer pieces — wall clocks and
ottomans above all — because its training photos hardly contain any. The
team renders a small, skewed top-up set: many chairs (to keep the common
class stable), and a tenth as many wall clocks.
"""

from __future__ import annotations

from decimal import Decimal

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from assets import services as asset_services
from campaigns import services
from campaigns.models import Campaign
from render.assets import CLASSES
from teams.models import Membership, Team

DEMO_CAMPAIGN_NAME = "Catalogue top-up: rare pieces"
DEMO_OWNER = "demo"
DEMO_TEAM = "Lindqvist & Daughters — catalogue vision"

CLASS_LABELS = {
    "chair": "Chair",
    "armchair": "Armchair",
    "sofa": "Sofa",
    "dining_table": "Dining table",
    "coffee_table": "Coffee table",
    "side_table": "Side table",
    "ottoman": "Ottoman",
    "wall_clock": "Wall clock",
    "floor_lamp": "Floor lamp",
    "bookshelf": "Bookshelf",
    "potted_plant": "Potted plant",
    "bed": "Bed",
}
# One-off cost of writing and checking each procedural generator (an invented studio rate: about 4 h at 40/h).
GENERATOR_CREATION_COST = Decimal("160.00")

# Skewed on purpose: chairs 10× wall clocks. Small enough to fill in a few minutes on one 2-core worker.
DEMO_QUOTAS: tuple[services.QuotaInput, ...] = (
    services.QuotaInput("chair", 80),
    services.QuotaInput("armchair", 30),
    services.QuotaInput("side_table", 24),
    services.QuotaInput("ottoman", 16),
    services.QuotaInput("wall_clock", 8),
)
DEMO_BUDGET = {
    "render": {"width_px": 160, "height_px": 120, "spp": 8, "max_depth": 4},
    "room": {"width_m": [3.0, 5.0], "depth_m": [3.0, 5.0], "max_objects_per_m2": 0.5},
    "thresholds": {"min_visible_fraction": 0.3, "min_box_px": 6.0},
    "variation": {"layouts": 100000, "lighting_per_layout": 1, "views_per_lighting": 2},
}
DEMO_COST_BUDGET = Decimal("2000.00")
DEMO_PRICE_PER_CPU_HOUR = Decimal("0.05")  # roughly an on-demand cloud vCPU-hour (from memory)
DEMO_SETUP_COST = Decimal("200.00")
DEMO_MANUAL_RATE_PER_HOUR = Decimal("12.00")  # crowd annotation rate, invented for the scenario
DEMO_SEED = 20240611


def demo_class_names() -> list[str]:
    return sorted(CLASSES)


class Command(BaseCommand):
    help = "Create the demo object classes, assets and the demo campaign (safe to run twice)."

    def add_arguments(self, parser) -> None:
        parser.add_argument(
            "--owner",
            default=DEMO_OWNER,
            help="Username that owns the demo campaign "
            "(created by make demo; created here without a usable password if missing)",
        )
        parser.add_argument("--start", action="store_true", help="Start the demo campaign if it is a draft")

    def handle(self, *args, **options) -> None:
        User = get_user_model()
        with transaction.atomic():
            owner = User.objects.filter(username=options["owner"]).first()
            if owner is None:
                owner = User.objects.create_user(username=options["owner"])
                owner.set_unusable_password()
                owner.save(update_fields=["password"])
                self.stdout.write(f"created user {owner.username!r} without a password (make demo sets one)")
            team, _ = Team.objects.get_or_create(name=DEMO_TEAM)
            Membership.objects.update_or_create(team=team, user=owner, defaults={"role": Membership.Role.ADMIN})
            created_assets = 0
            for name in demo_class_names():
                object_class = asset_services.ensure_object_class(name=name, label=CLASS_LABELS.get(name, ""))
                before = object_class.assets.count()
                asset_services.ensure_procedural_asset(
                    object_class=object_class, name=f"procedural {name}", creation_cost=GENERATOR_CREATION_COST
                )
                created_assets += object_class.assets.count() - before
            campaign = Campaign.objects.filter(team=team, name=DEMO_CAMPAIGN_NAME).first()
            if campaign is None:
                try:
                    campaign = services.create_campaign(
                        owner=owner,
                        team=team,
                        name=DEMO_CAMPAIGN_NAME,
                        quotas=DEMO_QUOTAS,
                        budget=DEMO_BUDGET,
                        cost_budget=DEMO_COST_BUDGET,
                        price_per_cpu_hour=DEMO_PRICE_PER_CPU_HOUR,
                        setup_cost=DEMO_SETUP_COST,
                        manual_labelling_rate_per_hour=DEMO_MANUAL_RATE_PER_HOUR,
                        seed=DEMO_SEED,
                        description="Lindqvist & Daughters' detector misses wall clocks and ottomans: "
                        "a skewed top-up set, chairs 10× wall clocks.",
                    )
                except services.CampaignError as exc:
                    raise CommandError(str(exc)) from exc
                self.stdout.write(f"created demo campaign {campaign.pk} {campaign.name!r}")
            else:
                self.stdout.write(f"demo campaign {campaign.pk} already exists ({campaign.status})")
            self.stdout.write(f"{len(demo_class_names())} object classes, {created_assets} new asset(s)")
        if options["start"] and campaign.status == Campaign.Status.DRAFT:
            services.start_campaign(campaign_id=campaign.pk)
            self.stdout.write(f"started demo campaign {campaign.pk}")
        # The last line names the id, for make demo's hint (scripts/demo.sh) and for people reading along.
        self.stdout.write(f"progress: manage.py campaign status {campaign.pk}")
