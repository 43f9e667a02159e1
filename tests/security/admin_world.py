"""Two teams, staff members with every teams and campaigns model permission, and rows owned by each team."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from django.contrib.auth.models import Permission

from assets import services as asset_services
from assets.models import Asset
from campaigns import services
from campaigns.models import Campaign
from teams.models import Membership, Team

PASSWORD = "admin-world-password-123"


@dataclass
class World:
    alpha: Team
    bravo: Team
    pia: Any  # staff, planner in Alpha
    ada: Any  # staff, admin in Alpha, planner in Bravo
    vic: Any  # viewer in Alpha, not staff
    bob: Any  # admin in Bravo, not staff
    loner: Any  # an account in no team
    root: Any  # superuser
    shared_asset: Asset
    alpha_asset: Asset
    bravo_asset: Asset
    alpha_campaign: Campaign
    bravo_campaign: Campaign


def build_world(user_model: Any) -> World:
    chair = asset_services.ensure_object_class(name="chair")
    alpha, bravo = Team.objects.create(name="Alpha"), Team.objects.create(name="Bravo")
    staff_permissions = Permission.objects.filter(content_type__app_label__in=("teams", "assets", "campaigns"))

    def person(name: str, *, staff: bool = False, **roles: str) -> Any:
        user = user_model.objects.create_user(name, password=PASSWORD, is_staff=staff)
        if staff:
            user.user_permissions.set(staff_permissions)
        for team_name, role in roles.items():
            Membership.objects.create(team={"alpha": alpha, "bravo": bravo}[team_name], user=user, role=role)
        return user

    pia = person("pia", staff=True, alpha="planner")
    ada = person("ada", staff=True, alpha="admin", bravo="planner")
    vic = person("vic", alpha="viewer")
    bob = person("bob", bravo="admin")
    loner = person("loner")
    root = user_model.objects.create_superuser("root", password=PASSWORD)
    shared = asset_services.ensure_procedural_asset(object_class=chair, name="shared-library-chair")
    alpha_asset = Asset.objects.create(object_class=chair, name="alpha-own-mesh", kind=Asset.Kind.MESH, team=alpha)
    bravo_asset = Asset.objects.create(object_class=chair, name="bravo-secret-mesh", kind=Asset.Kind.MESH, team=bravo)
    quota = [services.QuotaInput(class_name="chair", target_accepted=3)]
    alpha_campaign = services.create_campaign(
        owner=pia,
        team=alpha,
        name="alpha-campaign",
        quotas=quota,
        cost_budget=10,
        price_per_cpu_hour=1,
        asset_ids=[shared.pk],
    )
    bravo_campaign = services.create_campaign(
        owner=bob,
        team=bravo,
        name="bravo-secret-campaign",
        quotas=quota,
        cost_budget=10,
        price_per_cpu_hour=1,
        asset_ids=[bravo_asset.pk],
    )
    return World(
        alpha=alpha,
        bravo=bravo,
        pia=pia,
        ada=ada,
        vic=vic,
        bob=bob,
        loner=loner,
        root=root,
        shared_asset=shared,
        alpha_asset=alpha_asset,
        bravo_asset=bravo_asset,
        alpha_campaign=alpha_campaign,
        bravo_campaign=bravo_campaign,
    )
