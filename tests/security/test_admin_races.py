"""A save in the admin that loses a race on a unique value answers with a message, changes nothing and never 500s.

The race: two saves of the same name both pass the form's uniqueness check, then the database refuses the second.
The tests reproduce the second save deterministically by letting the form's uniqueness check pass (as it does in
the race) while the rival row already exists.
"""

from __future__ import annotations

import pytest
from django.forms.models import BaseModelForm
from django.test import Client
from django.urls import reverse

from teams.models import Team
from tests.security.admin_world import build_world

pytestmark = pytest.mark.django_db


@pytest.fixture
def world(django_user_model):
    return build_world(django_user_model)


@pytest.fixture
def uniqueness_check_passes(monkeypatch):
    """The form's check sees no rival, as in a race where the rival is inserted just after the check."""
    monkeypatch.setattr(BaseModelForm, "validate_unique", lambda self: None)


def _root_client(world) -> Client:
    client = Client()
    client.force_login(world.root)
    return client


def test_adding_a_team_under_a_name_just_taken_gives_a_message_not_a_500(world, uniqueness_check_passes):
    rival = Team.objects.first()
    before = Team.objects.count()
    client = _root_client(world)
    response = client.post(
        reverse("admin:teams_team_add"),
        {"name": rival.name, "memberships-TOTAL_FORMS": "0", "memberships-INITIAL_FORMS": "0"},
        follow=True,
    )
    assert response.status_code == 200
    assert b"Not saved: another save took the same name" in response.content
    assert Team.objects.count() == before
