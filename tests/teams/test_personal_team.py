"""A user's personal team is found by its owner, never by its name."""

from __future__ import annotations

import importlib

import pytest
from django.apps import apps

from teams.models import Membership, Team
from teams.permissions import ADMIN, has_role, personal_team

pytestmark = pytest.mark.django_db


@pytest.fixture
def alices_team(django_user_model):
    """A team named like mallory's personal team would be, that belongs to alice."""
    alice = django_user_model.objects.create_user("alice", password="pw-alice-123")
    team = Team.objects.create(name="mallory (personal)")
    Membership.objects.create(team=team, user=alice, role=ADMIN)
    return team


def test_a_user_is_not_put_into_another_users_team_by_its_name(django_user_model, alices_team):
    mallory = django_user_model.objects.create_user("mallory", password="pw-mallory-123")
    team = personal_team(user=mallory)
    assert team != alices_team
    assert team.personal_owner == mallory
    assert team.name == "mallory (personal) 2"  # the taken name gets a number
    assert has_role(user=mallory, team=team, role=ADMIN)
    assert not Membership.objects.filter(team=alices_team, user=mallory).exists()
    assert list(alices_team.memberships.values_list("user__username", flat=True)) == ["alice"]
    assert personal_team(user=mallory) == team  # and it stays the same team


def test_a_campaign_without_a_team_lands_in_the_owners_own_team(django_user_model, alices_team):
    from assets import services as asset_services
    from campaigns import services

    asset_services.ensure_object_class(name="chair")
    mallory = django_user_model.objects.create_user("mallory", password="pw-mallory-123")
    campaign = services.create_campaign(
        owner=mallory,
        name="mine",
        cost_budget=100,
        price_per_cpu_hour=1,
        quotas=[services.QuotaInput(class_name="chair", target_accepted=5)],
    )
    assert campaign.team.personal_owner == mallory
    assert not alices_team.campaigns.exists()


def test_the_personal_team_survives_a_rename(django_user_model):
    solo = django_user_model.objects.create_user("solo", password="pw-solo-123")
    team = personal_team(user=solo)
    assert team.name == "solo (personal)"
    Team.objects.filter(pk=team.pk).update(name="Solo studio")
    assert personal_team(user=solo) == team
    assert Team.objects.count() == 1


def test_a_long_user_name_still_fits_the_team_name(django_user_model):
    long_name = "u" * django_user_model._meta.get_field("username").max_length
    user = django_user_model.objects.create_user(long_name, password="pw-long-123")
    team = personal_team(user=user)
    assert len(team.name) <= Team._meta.get_field("name").max_length
    assert team.name.endswith(" (personal)")


def test_migration_marks_only_teams_the_old_code_made(django_user_model, alices_team):
    migration = importlib.import_module("teams.migrations.0002_team_personal_owner")
    bob = django_user_model.objects.create_user("bob", password="pw-bob-123")
    bobs = Team.objects.create(name="bob (personal)")
    Membership.objects.create(team=bobs, user=bob, role=ADMIN)
    django_user_model.objects.create_user("mallory", password="pw-mallory-123")
    migration.mark_personal_teams(apps, None)
    bobs.refresh_from_db()
    alices_team.refresh_from_db()
    assert bobs.personal_owner == bob
    assert alices_team.personal_owner is None  # mallory is no admin of it: not hers
