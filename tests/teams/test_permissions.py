"""Team scoping: outsiders see nothing (404), roles gate actions (403)."""

from __future__ import annotations

import pytest
from django.core.exceptions import PermissionDenied
from django.http import Http404

from assets import services as asset_services
from campaigns import services
from campaigns.models import Campaign
from teams.models import Membership, Team
from teams.permissions import (
    PLANNER,
    VIEWER,
    get_for_user_or_404,
    has_role,
    personal_team,
    scope_to_user,
    teams_for,
)

pytestmark = pytest.mark.django_db


@pytest.fixture
def people(django_user_model):
    team = Team.objects.create(name="Team A")
    other = Team.objects.create(name="Team B")
    users = {
        name: django_user_model.objects.create_user(name, password="pw-123-long")
        for name in ("viewer", "planner", "admin", "outsider")
    }
    for name in ("viewer", "planner", "admin"):
        Membership.objects.create(team=team, user=users[name], role=name)
    Membership.objects.create(team=other, user=users["outsider"], role="admin")
    return team, other, users


def _campaign(team, owner):
    asset_services.ensure_object_class(name="chair")
    return services.create_campaign(
        owner=owner,
        team=team,
        name=f"c-{team.pk}",
        quotas=[services.QuotaInput(class_name="chair", target_accepted=5)],
        cost_budget=100,
        price_per_cpu_hour=1,
    )


def test_roles_are_ordered(people):
    team, _, users = people
    assert has_role(user=users["admin"], team=team, role=PLANNER)
    assert has_role(user=users["planner"], team=team, role=PLANNER)
    assert not has_role(user=users["viewer"], team=team, role=PLANNER)
    assert has_role(user=users["viewer"], team=team, role=VIEWER)
    assert not has_role(user=users["outsider"], team=team, role=VIEWER)
    assert list(teams_for(user=users["planner"], role=PLANNER)) == [team]
    assert list(teams_for(user=users["viewer"], role=PLANNER)) == []


def test_outsider_gets_404_and_viewer_403(people):
    team, _, users = people
    campaign = _campaign(team, users["planner"])
    qs = Campaign.objects.all()
    assert get_for_user_or_404(qs, user=users["viewer"], pk=campaign.pk) == campaign
    with pytest.raises(Http404):
        get_for_user_or_404(qs, user=users["outsider"], pk=campaign.pk)
    with pytest.raises(PermissionDenied):
        get_for_user_or_404(qs, user=users["viewer"], role=PLANNER, pk=campaign.pk)
    with pytest.raises(Http404):
        get_for_user_or_404(qs, user=users["viewer"], pk="not-a-number")
    assert list(scope_to_user(qs, user=users["outsider"])) == []


def test_viewer_cannot_create_campaigns_in_the_team(people):
    team, _, users = people
    asset_services.ensure_object_class(name="chair")
    with pytest.raises(services.CampaignError, match="not a planner"):
        services.create_campaign(
            owner=users["viewer"],
            team=team,
            name="x",
            quotas=[services.QuotaInput(class_name="chair", target_accepted=5)],
            cost_budget=100,
            price_per_cpu_hour=1,
        )
    assert not Campaign.objects.exists()


def test_same_name_allowed_in_two_teams_but_not_twice_in_one(people):
    team, other, users = people
    _campaign(team, users["planner"])
    services.create_campaign(
        owner=users["outsider"],
        team=other,
        name=f"c-{team.pk}",
        quotas=[services.QuotaInput(class_name="chair", target_accepted=5)],
        cost_budget=100,
        price_per_cpu_hour=1,
    )
    with pytest.raises(services.CampaignError, match="already has a campaign"):
        _campaign(team, users["admin"])


def test_personal_team_is_created_once(django_user_model):
    user = django_user_model.objects.create_user("solo", password="pw-123-long")
    first = personal_team(user=user)
    assert personal_team(user=user) == first
    assert has_role(user=user, team=first, role="admin")
