"""Team and membership admin: only a team's admins manage its members, nobody changes their own membership, only
superusers create or delete teams. Every refused post must change nothing and answer without a server error."""

from __future__ import annotations

import pytest
from django.test import Client
from django.urls import reverse

from teams.models import Membership, Team
from tests.security.admin_forms import form_values, select_options
from tests.security.admin_world import build_world

pytestmark = pytest.mark.django_db

ADD_MEMBERSHIP = reverse("admin:teams_membership_add")


@pytest.fixture
def world(django_user_model):
    return build_world(django_user_model)


def _signed_in(user) -> Client:
    client = Client()
    client.force_login(user)
    return client


def _user_value(world, user) -> str:
    """The user field as the membership form asks for it: an option value of a drop-down, else the user name."""
    page = _signed_in(world.root).get(ADD_MEMBERSHIP)
    assert page.status_code == 200
    return str(user.pk) if b'<select name="user"' in page.content else user.get_username()


def _roles(team: Team) -> dict[str, str]:
    return dict(Membership.objects.filter(team=team).values_list("user__username", "role"))


def test_planner_cannot_make_themselves_admin_of_another_team(world):
    before = _roles(world.bravo)
    response = _signed_in(world.pia).post(
        ADD_MEMBERSHIP, {"team": world.bravo.pk, "user": _user_value(world, world.pia), "role": "admin"}
    )
    assert response.status_code in (200, 403), response.status_code
    assert _roles(world.bravo) == before
    assert not Membership.objects.filter(team=world.bravo, user=world.pia).exists()


def test_planner_cannot_promote_themselves(world):
    own = Membership.objects.get(team=world.alpha, user=world.pia)
    url = reverse("admin:teams_membership_change", args=[own.pk])
    response = _signed_in(world.pia).post(
        url, {"team": world.alpha.pk, "user": _user_value(world, world.pia), "role": "admin"}
    )
    assert response.status_code in (200, 403), response.status_code
    own.refresh_from_db()
    assert own.role == "planner"


def test_planner_cannot_add_members_to_their_team(world):
    response = _signed_in(world.pia).post(
        ADD_MEMBERSHIP, {"team": world.alpha.pk, "user": _user_value(world, world.loner), "role": "viewer"}
    )
    assert response.status_code in (200, 403), response.status_code
    assert not Membership.objects.filter(user=world.loner).exists()


def test_team_admin_adds_members_to_their_own_team_only(world):
    ada = _signed_in(world.ada)
    # Ada is a planner in Bravo: she may not add anyone there.
    refused = ada.post(
        ADD_MEMBERSHIP, {"team": world.bravo.pk, "user": _user_value(world, world.loner), "role": "viewer"}
    )
    assert refused.status_code == 200
    assert not Membership.objects.filter(team=world.bravo, user=world.loner).exists()
    # In Alpha she is an admin: the same form for her own team goes through.
    added = ada.post(
        ADD_MEMBERSHIP, {"team": world.alpha.pk, "user": _user_value(world, world.loner), "role": "planner"}
    )
    assert added.status_code == 302, added.content[:2000]
    assert Membership.objects.get(team=world.alpha, user=world.loner).role == "planner"


def test_membership_add_page_offers_only_teams_the_user_administers(world):
    page = _signed_in(world.ada).get(ADD_MEMBERSHIP)
    assert page.status_code == 200
    assert [v for v in select_options(page.content, "team") if v] == [str(world.alpha.pk)]


def test_membership_pages_do_not_list_every_account(world):
    for url in (ADD_MEMBERSHIP, reverse("admin:teams_team_change", args=[world.alpha.pk])):
        page = _signed_in(world.ada).get(url)
        assert page.status_code == 200
        assert b"loner" not in page.content and b"bob" not in page.content, url


def test_team_admin_cannot_change_their_own_role(world):
    own = Membership.objects.get(team=world.alpha, user=world.ada)
    response = _signed_in(world.ada).post(
        reverse("admin:teams_membership_change", args=[own.pk]),
        {"team": world.alpha.pk, "user": _user_value(world, world.ada), "role": "viewer"},
    )
    assert response.status_code in (200, 403), response.status_code
    own.refresh_from_db()
    assert own.role == "admin"


def test_team_admin_changes_other_members_roles(world):
    vic = Membership.objects.get(team=world.alpha, user=world.vic)
    response = _signed_in(world.ada).post(
        reverse("admin:teams_membership_change", args=[vic.pk]),
        {"team": world.alpha.pk, "user": _user_value(world, world.vic), "role": "planner"},
    )
    assert response.status_code == 302
    vic.refresh_from_db()
    assert vic.role == "planner"


def test_nobody_deletes_their_own_membership_or_a_foreign_one(world):
    ada = _signed_in(world.ada)
    own = Membership.objects.get(team=world.alpha, user=world.ada)
    bob = Membership.objects.get(team=world.bravo, user=world.bob)
    for membership in (own, bob):
        response = ada.post(reverse("admin:teams_membership_delete", args=[membership.pk]), {"post": "yes"})
        assert response.status_code in (302, 403, 404), response.status_code
        assert Membership.objects.filter(pk=membership.pk).exists()


class TestTeamPage:
    """The team change page: its name and its members inline."""

    def _form(self, client: Client, team: Team) -> dict[str, list[str]]:
        page = client.get(reverse("admin:teams_team_change", args=[team.pk]))
        assert page.status_code == 200
        return form_values(page.content, "team_form")

    @staticmethod
    def _row(values: dict[str, list[str]], membership: Membership) -> str:
        for name, value in values.items():
            if name.startswith("memberships-") and name.endswith("-id") and value == [str(membership.pk)]:
                return name.removesuffix("-id")
        raise AssertionError(f"no inline row for {membership}")

    def test_planner_cannot_rename_the_team_or_change_members(self, world):
        pia = _signed_in(world.pia)
        vic = Membership.objects.get(team=world.alpha, user=world.vic)
        response = pia.post(
            reverse("admin:teams_team_change", args=[world.alpha.pk]),
            {
                "name": "Renamed",
                "memberships-TOTAL_FORMS": "1",
                "memberships-INITIAL_FORMS": "1",
                "memberships-MIN_NUM_FORMS": "0",
                "memberships-MAX_NUM_FORMS": "1000",
                "memberships-0-id": vic.pk,
                "memberships-0-team": world.alpha.pk,
                "memberships-0-user": _user_value(world, world.vic),
                "memberships-0-role": "admin",
            },
        )
        assert response.status_code == 403
        world.alpha.refresh_from_db()
        vic.refresh_from_db()
        assert world.alpha.name == "Alpha" and vic.role == "viewer"

    def test_team_admin_cannot_change_or_remove_their_own_row(self, world):
        ada = _signed_in(world.ada)
        own = Membership.objects.get(team=world.alpha, user=world.ada)
        for change in ({"-role": ["viewer"]}, {"-DELETE": ["on"]}):
            values = self._form(ada, world.alpha)
            row = self._row(values, own)
            values.update({row + suffix: value for suffix, value in change.items()})
            response = ada.post(reverse("admin:teams_team_change", args=[world.alpha.pk]), values)
            assert response.status_code == 200, (change, response.status_code)
            assert Membership.objects.get(pk=own.pk).role == "admin", change

    def test_team_admin_renames_the_team_and_adds_a_member(self, world):
        ada = _signed_in(world.ada)
        values = self._form(ada, world.alpha)
        values["name"] = ["Alpha Studio"]
        total = int(values["memberships-TOTAL_FORMS"][0])
        new_row = f"memberships-{total - 1}"  # the empty extra row
        assert values[f"{new_row}-id"] == [""]
        values[f"{new_row}-user"] = [_user_value(world, world.loner)]
        values[f"{new_row}-role"] = ["viewer"]
        response = ada.post(reverse("admin:teams_team_change", args=[world.alpha.pk]), values)
        assert response.status_code == 302, response.content[:3000]
        world.alpha.refresh_from_db()
        assert world.alpha.name == "Alpha Studio"
        assert Membership.objects.get(team=world.alpha, user=world.loner).role == "viewer"

    def test_inline_member_cannot_be_made_admin_in_a_foreign_team_row(self, world):
        # A row id of another team's membership posted on Alpha's page is not Alpha's row: nothing changes.
        ada = _signed_in(world.ada)
        bob = Membership.objects.get(team=world.bravo, user=world.bob)
        values = self._form(ada, world.alpha)
        total = int(values["memberships-TOTAL_FORMS"][0])
        row = f"memberships-{total - 1}"
        values[f"{row}-id"] = [str(bob.pk)]
        values[f"{row}-user"] = [_user_value(world, world.bob)]
        values[f"{row}-role"] = ["viewer"]
        values["memberships-INITIAL_FORMS"] = [str(total)]
        response = ada.post(reverse("admin:teams_team_change", args=[world.alpha.pk]), values)
        assert response.status_code in (200, 302, 400, 403, 404), response.status_code
        bob.refresh_from_db()
        assert bob.team_id == world.bravo.pk and bob.role == "admin"

    def test_only_superusers_create_or_delete_teams(self, world):
        empty = Team.objects.create(name="Charlie")
        Membership.objects.create(team=empty, user=world.pia, role="viewer")
        pia = _signed_in(world.pia)
        created = pia.post(
            reverse("admin:teams_team_add"),
            {
                "name": "Zulu",
                "memberships-TOTAL_FORMS": "0",
                "memberships-INITIAL_FORMS": "0",
                "memberships-MIN_NUM_FORMS": "0",
                "memberships-MAX_NUM_FORMS": "1000",
            },
        )
        assert created.status_code == 403
        assert not Team.objects.filter(name="Zulu").exists()
        deleted = pia.post(reverse("admin:teams_team_delete", args=[empty.pk]), {"post": "yes"})
        assert deleted.status_code == 403
        assert Team.objects.filter(pk=empty.pk).exists()
        root = _signed_in(world.root)
        assert root.post(reverse("admin:teams_team_delete", args=[empty.pk]), {"post": "yes"}).status_code == 302
        assert not Team.objects.filter(pk=empty.pk).exists()


def test_superuser_keeps_full_power(world):
    root = _signed_in(world.root)
    response = root.post(
        ADD_MEMBERSHIP, {"team": world.bravo.pk, "user": _user_value(world, world.pia), "role": "admin"}
    )
    assert response.status_code == 302
    assert Membership.objects.get(team=world.bravo, user=world.pia).role == "admin"
    ada = Membership.objects.get(team=world.alpha, user=world.ada)
    response = root.post(
        reverse("admin:teams_membership_change", args=[ada.pk]),
        {"team": world.alpha.pk, "user": _user_value(world, world.ada), "role": "viewer"},
    )
    assert response.status_code == 302
    ada.refresh_from_db()
    assert ada.role == "viewer"
