"""The permission module's rules for admin forms: which team owns a row, which rows a user may pick, who may
manage which membership."""

from __future__ import annotations

import pytest
from django.contrib.auth import get_user_model

from assets import services as asset_services
from assets.models import Asset, ObjectClass
from campaigns.models import Campaign, ClassQuota, Frame, FrameEvent, Instance
from teams.models import Membership, Team
from teams.permissions import (
    ADMIN,
    PLANNER,
    VIEWER,
    may_change_membership,
    membership_change_errors,
    scope_by_team,
    team_id_of,
    team_path,
)

pytestmark = pytest.mark.django_db


def test_team_paths_of_every_model():
    assert {
        model: team_path(model)
        for model in (
            Team,
            Membership,
            get_user_model(),
            Asset,
            Campaign,
            ClassQuota,
            Frame,
            FrameEvent,
            Instance,
            ObjectClass,
        )
    } == {
        Team: "pk",
        Membership: "team",
        get_user_model(): "memberships__team",
        Asset: "team",
        Campaign: "team",
        ClassQuota: "campaign__team",
        Frame: "campaign__team",
        FrameEvent: "campaign__team",
        Instance: "campaign__team",
        ObjectClass: None,
    }


@pytest.fixture
def people(django_user_model):
    a, b = Team.objects.create(name="A"), Team.objects.create(name="B")
    users = {
        name: django_user_model.objects.create_user(name, password="pw-123-long")
        for name in ("viewer", "planner", "admin", "outsider", "newcomer")
    }
    for role in ("viewer", "planner", "admin"):
        Membership.objects.create(team=a, user=users[role], role=role)
    Membership.objects.create(team=b, user=users["outsider"], role="admin")
    users["root"] = django_user_model.objects.create_superuser("root", password="pw-123-long")
    return a, b, users


def test_scope_by_team_keeps_own_and_shared_rows(people):
    a, b, users = people
    chair = asset_services.ensure_object_class(name="chair")
    shared = asset_services.ensure_procedural_asset(object_class=chair, name="shared")
    mine = Asset.objects.create(object_class=chair, name="mine", team=a)
    theirs = Asset.objects.create(object_class=chair, name="theirs", team=b)
    assert set(scope_by_team(Asset.objects.all(), user=users["viewer"])) == {shared, mine}
    assert set(scope_by_team(Asset.objects.all(), user=users["viewer"], role=PLANNER)) == {shared}
    assert set(scope_by_team(Asset.objects.all(), user=users["root"], role=ADMIN)) == {shared, mine, theirs}
    assert list(scope_by_team(ObjectClass.objects.all(), user=users["newcomer"])) == [chair]
    assert set(scope_by_team(Team.objects.all(), user=users["planner"], role=PLANNER)) == {a}
    people_of_a = scope_by_team(get_user_model().objects.all(), user=users["admin"], role=ADMIN)
    assert {u.username for u in people_of_a} == {"viewer", "planner", "admin"}
    assert team_id_of(mine) == a.pk and team_id_of(shared) is None and team_id_of(chair) is None


def test_only_team_admins_manage_members_and_never_their_own_membership(people):
    a, b, users = people
    own = Membership.objects.get(team=a, user=users["admin"])
    planner = Membership.objects.get(team=a, user=users["planner"])
    assert membership_change_errors(user=users["admin"], team=a, member=users["newcomer"], role=ADMIN) == {}
    assert (
        membership_change_errors(user=users["admin"], team=a, member=users["planner"], role=VIEWER, current=planner)
        == {}
    )
    assert set(
        membership_change_errors(user=users["admin"], team=a, member=users["admin"], role=VIEWER, current=own)
    ) == {"user"}
    assert set(membership_change_errors(user=users["admin"], team=b, member=users["newcomer"], role=VIEWER)) == {"team"}
    # Moving a membership of A into B needs admin rights in both.
    assert set(
        membership_change_errors(user=users["outsider"], team=b, member=users["planner"], role=VIEWER, current=planner)
    ) == {"team"}
    assert membership_change_errors(user=users["root"], team=b, member=users["root"], role=ADMIN) == {}
    assert may_change_membership(user=users["admin"], membership=planner)
    assert not may_change_membership(user=users["admin"], membership=own)
    assert not may_change_membership(user=users["planner"], membership=planner)
    assert not may_change_membership(user=users["outsider"], membership=planner)
    assert may_change_membership(user=users["root"], membership=own)


def test_nobody_grants_a_role_above_their_own(people):
    a, _, users = people
    errors = membership_change_errors(user=users["planner"], team=a, member=users["newcomer"], role=ADMIN)
    assert errors["role"] == "You cannot grant a role above your own (planner)."
    assert "role" not in membership_change_errors(user=users["planner"], team=a, member=users["newcomer"], role=PLANNER)
    assert "role" in membership_change_errors(user=users["viewer"], team=a, member=users["newcomer"], role=PLANNER)
