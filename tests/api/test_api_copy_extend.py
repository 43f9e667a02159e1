"""The API's copy and extend operations: the same rules as the pages, JSON errors per input, team scoping."""

from __future__ import annotations

import pytest

from campaigns.models import Campaign

pytestmark = pytest.mark.django_db


def test_copy_through_the_api(api, make_campaign, people):
    source = make_campaign("attic", quotas={"chair": 6})
    response = api("pia").post(f"/campaigns/{source.pk}/copy", {"seed": 8})
    assert response.status_code == 201, response.content
    body = response.json()
    assert body["name"] == "attic (copy)" and body["status"] == "draft"
    copy = Campaign.objects.get(pk=body["id"])
    assert copy.seed == 8 and copy.team_id == source.team_id
    assert dict(copy.quotas.values_list("object_class__name", "target_accepted")) == {"chair": 6}
    taken = api("pia").post(f"/campaigns/{source.pk}/copy", {"name": "attic"})
    assert taken.status_code == 400 and "name" in taken.json()["errors"]
    other_team = api("pia").post(f"/campaigns/{source.pk}/copy", {"team": people["other_team"].pk})
    assert other_team.status_code == 400 and "team" in other_team.json()["errors"]
    assert api("otto").post(f"/campaigns/{source.pk}/copy", {}).status_code == 404
    assert Campaign.objects.count() == 2


def test_extend_through_the_api(api, make_campaign, outbox):
    campaign = make_campaign("cellar", quotas={"chair": 3}, start=True)
    response = api("pia").post(
        f"/campaigns/{campaign.pk}/extend",
        {"quotas": [{"class_name": "chair", "target_accepted": 7}, {"class_name": "ottoman", "target_accepted": 2}]},
    )
    assert response.status_code == 200, response.content
    quotas = {q["class_name"]: q["target"] for q in response.json()["quotas"]}
    assert quotas == {"chair": 7, "ottoman": 2}
    lower = api("pia").post(
        f"/campaigns/{campaign.pk}/extend", {"quotas": [{"class_name": "chair", "target_accepted": 1}]}
    )
    assert lower.status_code == 400 and "only raises targets" in lower.json()["detail"]
    twice = api("pia").post(
        f"/campaigns/{campaign.pk}/extend",
        {"quotas": [{"class_name": "chair", "target_accepted": 9}, {"class_name": "chair", "target_accepted": 10}]},
    )
    assert twice.status_code == 400 and "listed twice" in twice.json()["detail"]
    assert api("vera").post(f"/campaigns/{campaign.pk}/extend", {"cost_budget": "200"}).status_code == 403
    assert api("otto").post(f"/campaigns/{campaign.pk}/extend", {"cost_budget": "200"}).status_code == 404
    assert dict(campaign.quotas.values_list("object_class__name", "target_accepted")) == {"chair": 7, "ottoman": 2}


def test_notification_settings_through_the_api(api, make_campaign):
    campaign = make_campaign("cellar")
    response = api("pia").post(
        f"/campaigns/{campaign.pk}/notifications", {"url": "https://ci.example.org/hook", "failure_rate": 0.3}
    )
    assert response.status_code == 200, response.content
    body = response.json()
    assert body["url"] == "https://ci.example.org/hook" and body["failure_rate"] == 0.3 and len(body["secret"]) == 64
    assert api("vera").get(f"/campaigns/{campaign.pk}/notifications").json()["secret"] is None
    bad = api("pia").post(f"/campaigns/{campaign.pk}/notifications", {"url": "gopher://x"})
    assert bad.status_code == 400 and "notify_url" in bad.json()["errors"]
    assert api("vera").post(f"/campaigns/{campaign.pk}/notifications", {"url": ""}).status_code == 403
    assert api("otto").get(f"/campaigns/{campaign.pk}/notifications").status_code == 404
