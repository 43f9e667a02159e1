"""The Notifications tab: planners set the webhook, e-mail and alert threshold, see the signing secret, rotate it
and send a test; viewers see where notifications go, never the secret; errors sit beside their input."""

from __future__ import annotations

import pytest
from django.urls import reverse

from campaigns import messaging
from campaigns.models import Campaign, Notification

pytestmark = pytest.mark.django_db


@pytest.fixture
def queued(monkeypatch):
    box: list[int] = []
    monkeypatch.setattr(
        messaging, "send_notification", lambda *, notification_id, countdown_s=0.0: box.append(notification_id)
    )
    return box


def test_planner_sets_notifications_and_sends_a_test(
    client, people, make_campaign, queued, django_capture_on_commit_callbacks
):
    campaign = make_campaign("attic")
    url = reverse("campaigns:notifications", args=[campaign.pk])
    client.force_login(people["pia"])
    assert url in client.get(reverse("campaigns:detail", args=[campaign.pk])).content.decode()
    response = client.post(
        url,
        {
            "action": "save",
            "notify_url": "https://ci.example.org/hook",
            "notify_emails": "a@example.org",
            "failure_alert_pct": "10",
        },
    )
    assert response.status_code == 302
    campaign.refresh_from_db()
    assert campaign.notify_url == "https://ci.example.org/hook" and campaign.notify_failure_rate == pytest.approx(0.1)
    page = client.get(url).content.decode()
    assert campaign.notify_secret in page and "Make a new secret" in page
    with django_capture_on_commit_callbacks(execute=True):
        client.post(url, {"action": "test"})
    assert sorted(Notification.objects.filter(campaign=campaign).values_list("channel", flat=True)) == [
        "email",
        "webhook",
    ]
    assert len(queued) == 2
    assert "test" in client.get(url).content.decode()
    old = campaign.notify_secret
    client.post(url, {"action": "rotate"})
    campaign.refresh_from_db()
    assert campaign.notify_secret != old


def test_bad_input_is_shown_beside_the_field_and_saves_nothing(client, people, make_campaign):
    campaign = make_campaign("attic")
    url = reverse("campaigns:notifications", args=[campaign.pk])
    client.force_login(people["pia"])
    response = client.post(
        url, {"action": "save", "notify_url": "ftp://x.example.org/", "notify_emails": "", "failure_alert_pct": "10"}
    )
    assert response.status_code == 400 and "must start with http:// or https://" in response.content.decode()
    response = client.post(url, {"action": "save", "notify_url": "", "notify_emails": "", "failure_alert_pct": "150"})
    assert response.status_code == 400
    campaign.refresh_from_db()
    assert campaign.notify_url == "" and campaign.notify_failure_rate == pytest.approx(0.2)
    test_without_channels = client.post(url, {"action": "test"})
    assert (
        test_without_channels.status_code == 400
        and "set a webhook URL or an e-mail address first" in test_without_channels.content.decode()
    )


def test_viewers_see_the_settings_but_not_the_secret_and_cannot_change_them(client, people, make_campaign):
    from campaigns import services

    campaign = make_campaign("attic")
    services.set_notifications(campaign_id=campaign.pk, url="https://ci.example.org/hook")
    secret = Campaign.objects.get(pk=campaign.pk).notify_secret
    url = reverse("campaigns:notifications", args=[campaign.pk])
    client.force_login(people["vera"])
    page = client.get(url)
    assert page.status_code == 200 and secret not in page.content.decode() and "Webhook: set" in page.content.decode()
    assert client.post(url, {"action": "save", "notify_url": "", "failure_alert_pct": "0"}).status_code == 403
    client.force_login(people["otto"])
    assert client.get(url).status_code == 404
    assert Campaign.objects.get(pk=campaign.pk).notify_url == "https://ci.example.org/hook"
