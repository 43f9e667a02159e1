"""Admin lists and change pages are scoped to the staff member's teams."""

from __future__ import annotations

import pytest
from django.contrib.auth.models import Permission
from django.urls import reverse

from assets import services as asset_services
from campaigns import services
from campaigns.models import Campaign, Frame
from teams.models import Membership, Team

pytestmark = pytest.mark.django_db


@pytest.fixture
def setup(django_user_model):
    asset_services.ensure_object_class(name="chair")
    a, b = Team.objects.create(name="Alpha"), Team.objects.create(name="Bravo")
    staff = django_user_model.objects.create_user("staff-a", password="pw-123-long", is_staff=True)
    staff.user_permissions.set(Permission.objects.filter(content_type__app_label__in=("assets", "campaigns")))
    Membership.objects.create(team=a, user=staff, role="planner")
    owner_b = django_user_model.objects.create_user("owner-b", password="pw-123-long")
    Membership.objects.create(team=b, user=owner_b, role="admin")
    quota = [services.QuotaInput(class_name="chair", target_accepted=3)]
    mine = services.create_campaign(
        owner=staff, team=a, name="alpha-campaign", quotas=quota, cost_budget=10, price_per_cpu_hour=1
    )
    theirs = services.create_campaign(
        owner=owner_b, team=b, name="bravo-secret", quotas=quota, cost_budget=10, price_per_cpu_hour=1
    )
    frame = Frame.objects.create(
        campaign=theirs, index=0, seed=1, layout_index=0, lighting_index=0, view_index=0, composition={"chair": 1}
    )
    return staff, mine, theirs, frame


def test_campaign_changelist_shows_only_own_team(client, setup):
    staff, mine, theirs, _ = setup
    client.force_login(staff)
    page = client.get(reverse("admin:campaigns_campaign_changelist"))
    assert page.status_code == 200
    assert b"alpha-campaign" in page.content
    assert b"bravo-secret" not in page.content and b"Bravo" not in page.content


def test_other_teams_rows_are_not_reachable(client, setup):
    staff, _, theirs, frame = setup
    client.force_login(staff)
    for url in (
        reverse("admin:campaigns_campaign_change", args=[theirs.pk]),
        reverse("admin:campaigns_frame_change", args=[frame.pk]),
    ):
        response = client.get(url, follow=True)
        assert b"bravo-secret" not in response.content
        assert response.redirect_chain or response.status_code == 404
    frames = client.get(reverse("admin:campaigns_frame_changelist"))
    assert b"bravo-secret" not in frames.content


def test_planner_cannot_delete_in_admin(client, setup):
    staff, mine, _, _ = setup
    client.force_login(staff)
    response = client.post(reverse("admin:campaigns_campaign_delete", args=[mine.pk]), {"post": "yes"})
    assert response.status_code == 403
    assert Campaign.objects.filter(pk=mine.pk).exists()
