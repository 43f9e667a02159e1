"""The copy and extend pages: the planner form filled from a campaign, the extension form with one row per class,
their errors beside the inputs, and who may use them."""

from __future__ import annotations

import pytest
from django.urls import reverse

from campaigns import services
from campaigns.models import Campaign, ClassQuota
from dashboard.forms import budget_form_data
from tests.dashboard.conftest import TINY_BUDGET

pytestmark = pytest.mark.django_db


def _form_data(page_form) -> dict:
    """What a browser would submit for a form as the server filled it in (initial values, checked boxes)."""
    data = {}
    for name in page_form.fields:
        value = page_form[name].value()
        if value is None:
            continue
        data[name] = value
    return data


def test_copy_page_is_the_planner_form_filled_from_the_campaign_and_saves_a_new_draft(client, people, make_campaign):
    source = make_campaign("hallway", quotas={"chair": 9, "wall_clock": 4}, start=True)
    ClassQuota.objects.filter(campaign=source, object_class__name="chair").update(min_contrast=3.5)
    client.force_login(people["pia"])
    response = client.get(reverse("campaigns:copy", args=[source.pk]))
    assert response.status_code == 200
    page = response.content.decode()
    assert "Copy “hallway”" in page and 'value="hallway (copy)"' in page and "This is the seed of “hallway”" in page
    form = response.context["form"]
    assert form["q_chair_target"].value() == 9 and form["q_wall_clock_target"].value() == 4
    assert form["q_chair_contrast"].value() == 3.5 and form["seed"].value() == source.seed
    data = _form_data(form)
    data.update(budget_form_data(TINY_BUDGET), name="hallway again", save="1")
    saved = client.post(reverse("campaigns:copy", args=[source.pk]), data)
    assert saved.status_code == 302, saved.content.decode()[:2000]
    copy = Campaign.objects.get(name="hallway again")
    assert copy.status == "draft" and copy.team_id == source.team_id and copy.seed == source.seed
    assert dict(copy.quotas.values_list("object_class__name", "target_accepted")) == {"chair": 9, "wall_clock": 4}
    assert copy.quotas.get(object_class__name="chair").min_contrast == 3.5
    assert copy.events.filter(detail__startswith=f"copy of campaign {source.pk}").exists()
    source.refresh_from_db()
    assert source.status == "running"


def test_copy_with_a_taken_name_shows_the_error_and_saves_nothing(client, people, make_campaign):
    source = make_campaign("porch")
    client.force_login(people["pia"])
    form = client.get(reverse("campaigns:copy", args=[source.pk])).context["form"]
    data = _form_data(form)
    data.update(budget_form_data(TINY_BUDGET), name="porch", save="1")
    response = client.post(reverse("campaigns:copy", args=[source.pk]), data)
    assert response.status_code == 400 and "already has a campaign called" in response.content.decode()
    assert Campaign.objects.count() == 1


def test_viewers_and_outsiders_cannot_copy(client, people, make_campaign):
    source = make_campaign("porch")
    client.force_login(people["otto"])
    assert client.get(reverse("campaigns:copy", args=[source.pk])).status_code == 404
    client.force_login(people["vera"])  # a viewer plans in no team
    assert client.get(reverse("campaigns:copy", args=[source.pk])).status_code == 403


def test_extend_page_raises_targets_adds_a_class_and_resumes_by_hand(client, people, make_campaign, outbox):
    campaign = make_campaign("den", quotas={"chair": 2, "ottoman": 1}, start=True)
    Campaign.objects.filter(pk=campaign.pk).update(status="completed")
    client.force_login(people["pia"])
    detail = client.get(reverse("campaigns:detail", args=[campaign.pk])).content.decode()
    assert reverse("campaigns:extend", args=[campaign.pk]) in detail
    page = client.get(reverse("campaigns:extend", args=[campaign.pk]))
    assert page.status_code == 200 and "not quoted" in page.content.decode()
    data = {"cost_budget": "150", "t_chair": "5", "t_ottoman": "1", "t_armchair": "0", "t_wall_clock": "3"}
    response = client.post(reverse("campaigns:extend", args=[campaign.pk]), data, follow=True)
    assert "resume it to render the new quotas" in response.content.decode()
    campaign.refresh_from_db()
    assert campaign.status == "paused" and str(campaign.cost_budget) == "150.00"
    targets = dict(campaign.quotas.values_list("object_class__name", "target_accepted"))
    assert targets == {"chair": 5, "ottoman": 1, "wall_clock": 3}


def test_extend_page_refuses_a_lower_target_beside_its_input(client, people, make_campaign, outbox):
    campaign = make_campaign("den", quotas={"chair": 4}, start=True)
    client.force_login(people["pia"])
    response = client.post(
        reverse("campaigns:extend", args=[campaign.pk]), {"cost_budget": "100", "t_chair": "2", "t_ottoman": "0"}
    )
    assert response.status_code == 400
    assert response.context["form"].errors["t_chair"]  # the form's own minimum: today's target
    nothing = client.post(reverse("campaigns:extend", args=[campaign.pk]), {"cost_budget": "100", "t_chair": "4"})
    assert nothing.status_code == 400 and "nothing to change" in nothing.content.decode()
    assert dict(campaign.quotas.values_list("object_class__name", "target_accepted")) == {"chair": 4}


def test_extend_is_for_planners_of_started_campaigns(client, people, make_campaign):
    draft = make_campaign("draft one")
    client.force_login(people["vera"])
    assert client.get(reverse("campaigns:extend", args=[draft.pk])).status_code == 403
    client.force_login(people["otto"])
    assert client.get(reverse("campaigns:extend", args=[draft.pk])).status_code == 404
    client.force_login(people["pia"])
    response = client.get(reverse("campaigns:extend", args=[draft.pk]), follow=True)
    assert "cannot be extended; edit its plan" in response.content.decode()
    with pytest.raises(services.CampaignError):
        services.extend_campaign(campaign_id=draft.pk, targets={"chair": 50})
