"""Day-one workflow findings: money with its currency, confirmation before cancel and delete, re-render only where
a frame would render, the demo's status hint."""

from __future__ import annotations

import re
from decimal import Decimal

import pytest
from django.core.exceptions import ImproperlyConfigured
from django.core.management import call_command
from django.template import Context, Template
from django.test import override_settings
from django.urls import reverse

from campaigns import services
from campaigns.models import Campaign, Frame
from dashboard.templatetags.money import format_money, money
from evenframe.settings import env_currency
from tests.dashboard.test_views import _plan_data

RAW_DECIMAL = re.compile(r"\b\d+\.\d{5,}\b")  # "660.000000", "0.012345": stored precision leaking onto a page


# --- money -----------------------------------------------------------------------------------------------------------


@override_settings(CURRENCY="EUR")
def test_money_rounds_to_cents_with_the_currency_code():
    assert format_money(Decimal("660.000000")) == "EUR 660.00"
    assert format_money(Decimal("2.675")) == "EUR 2.68"  # half up, not banker's rounding
    assert format_money(Decimal("0.004999")) == "EUR 0.00"
    assert format_money(Decimal("-0.001")) == "EUR 0.00"  # no "-0.00"
    assert format_money("12.3456") == "EUR 12.35" and format_money(7) == "EUR 7.00"
    assert money(Decimal("0.05"), 4) == "EUR 0.0500"
    assert money("0.00012345", "4") == "EUR 0.0001"
    for nothing in (None, "", "n/a", float("nan")):
        assert format_money(nothing) == "—"
    rendered = Template("{% load money %}{{ a|money }} · {{ p|money:4 }} per CPU hour · {% currency %}").render(
        Context({"a": Decimal("660.000000"), "p": Decimal("0.05")})
    )
    assert rendered == "EUR 660.00 · EUR 0.0500 per CPU hour · EUR"


def test_money_uses_the_configured_currency():
    with override_settings(CURRENCY="CHF"):
        assert format_money(Decimal("1.5")) == "CHF 1.50"


def test_currency_setting_is_three_capital_letters(monkeypatch):
    monkeypatch.delenv("EVENFRAME_CURRENCY", raising=False)
    assert env_currency("EVENFRAME_CURRENCY", "EUR") == "EUR"
    monkeypatch.setenv("EVENFRAME_CURRENCY", " USD ")
    assert env_currency("EVENFRAME_CURRENCY", "EUR") == "USD"
    for bad in ("eur", "EURO", "E1R", "€", "US"):
        monkeypatch.setenv("EVENFRAME_CURRENCY", bad)
        with pytest.raises(ImproperlyConfigured, match="EVENFRAME_CURRENCY must be an ISO 4217 code"):
            env_currency("EVENFRAME_CURRENCY", "EUR")


@pytest.mark.django_db
@override_settings(CURRENCY="EUR")
def test_pages_show_money_with_the_currency_and_no_raw_decimals(client, done_campaign, people):
    Campaign.objects.filter(pk=done_campaign.pk).update(cost_budget=Decimal("660"))
    client.force_login(people["pia"])
    detail = client.get(reverse("campaigns:detail", args=[done_campaign.pk])).content.decode()
    assert "of EUR 660.00 (" in detail and "at EUR 0.0500 per CPU hour" in detail
    assert re.search(r'data-live="spent" data-money="2">EUR \d+\.\d\d<', detail)
    assert re.search(r"setup EUR \d+\.\d\d \+ compute", detail)
    listing = client.get(reverse("campaigns:list")).content.decode()
    assert "of EUR 660.00</span>" in listing
    budget = client.get(reverse("campaigns:edit", args=[done_campaign.pk])).content.decode()
    assert "EUR 660.00" in budget and "Cost budget (EUR)" in budget
    response = client.post(reverse("campaigns:edit", args=[done_campaign.pk]), {"cost_budget": "700"}, follow=True)
    assert "Cost budget set to EUR 700.00." in response.content.decode()
    assets = client.get(reverse("campaigns:assets")).content.decode()
    assert re.search(r"<td>EUR \d+\.\d\d</td>", assets)  # creation cost
    estimate = client.post(reverse("campaigns:create"), {**_plan_data(people["team"]), "preview": "1"})
    page = estimate.content.decode()
    assert re.search(r'data-est="total_cost" data-money="2">EUR \d+\.\d\d<', page)
    assert "EUR 0.0500</span> per CPU hour" in page and "Cost budget (EUR)" in page
    for text in (detail, listing, budget, assets, page):
        visible = re.sub(r"<script.*?</script>", "", text, flags=re.S)  # chart data stays numbers
        assert not RAW_DECIMAL.search(visible), RAW_DECIMAL.search(visible)
    # JSON keeps numbers (as before) and names the currency for the page's script.
    live = client.get(reverse("campaigns:live", args=[done_campaign.pk])).json()
    assert live["currency"] == "EUR" and Decimal(live["spent"]) >= 0
    assert client.get(reverse("campaigns:list-live")).json()["currency"] == "EUR"


# --- confirmation ----------------------------------------------------------------------------------------------------


@pytest.mark.django_db
def test_cancel_without_confirmation_changes_nothing_and_asks(client, done_campaign, people, outbox):
    client.force_login(people["pia"])
    url = reverse("campaigns:action", args=[done_campaign.pk, "cancel"])
    response = client.post(url)
    page = response.content.decode()
    assert response.status_code == 200 and "Yes, cancel the campaign" in page
    assert f'action="{url}"' in page and 'name="confirm" value="yes"' in page
    done_campaign.refresh_from_db()
    assert done_campaign.status == Campaign.Status.RUNNING
    assert client.post(url, {"confirm": "no"}).status_code == 200
    done_campaign.refresh_from_db()
    assert done_campaign.status == Campaign.Status.RUNNING
    response = client.post(url, {"confirm": "yes"})
    assert response.status_code == 302
    done_campaign.refresh_from_db()
    assert done_campaign.status == Campaign.Status.CANCELLED


@pytest.mark.django_db
def test_delete_without_the_name_changes_nothing_and_asks(client, done_campaign, people, outbox):
    client.force_login(people["ada"])
    services.cancel_campaign(campaign_id=done_campaign.pk)
    url = reverse("campaigns:delete", args=[done_campaign.pk])
    response = client.post(url)
    assert response.status_code == 200 and 'name="confirm_name"' in response.content.decode()
    response = client.post(url, {"confirm_name": "wrong"})
    assert response.status_code == 400 and "Type the campaign" in response.content.decode()
    assert Campaign.objects.filter(pk=done_campaign.pk).exists()
    assert client.post(url, {"confirm_name": done_campaign.name}).status_code == 302
    assert not Campaign.objects.filter(pk=done_campaign.pk).exists()


# --- re-render -------------------------------------------------------------------------------------------------------


@pytest.mark.django_db
@pytest.mark.parametrize("status", [Campaign.Status.COMPLETED, Campaign.Status.CANCELLED])
def test_rerender_is_neither_offered_nor_done_on_a_finished_campaign(client, done_campaign, people, outbox, status):
    client.force_login(people["pia"])
    frame_url = reverse("campaigns:frame", args=[done_campaign.pk, 1])
    assert "Re-render" in client.get(frame_url).content.decode()
    Campaign.objects.filter(pk=done_campaign.pk).update(status=status)
    page = client.get(frame_url).content.decode()
    assert "Re-render" not in page and "rerender" not in page
    frames = Frame.objects.filter(campaign=done_campaign).count()
    response = client.post(reverse("campaigns:rerender", args=[done_campaign.pk, 1]), follow=True)
    assert f"is {status} and renders no more frames" in response.content.decode()
    assert Frame.objects.filter(campaign=done_campaign).count() == frames
    way_on = "extend it" if status == Campaign.Status.COMPLETED else "copy it"
    with pytest.raises(services.CampaignError, match=way_on):
        services.rerender_frame(
            campaign_id=done_campaign.pk, frame_id=Frame.objects.get(campaign=done_campaign, index=1).pk
        )


@pytest.mark.django_db
def test_paused_campaign_points_to_resume_instead_of_rerender(client, done_campaign, people, outbox):
    client.force_login(people["pia"])
    services.pause_campaign(campaign_id=done_campaign.pk)
    page = client.get(reverse("campaigns:frame", args=[done_campaign.pk, 1])).content.decode()
    assert "Re-render from its spec" not in page and "Resume the campaign to re-render" in page


# --- the demo's hint -------------------------------------------------------------------------------------------------


@pytest.mark.django_db
def test_seed_demo_names_the_campaign_for_the_status_hint(capsys):
    from io import StringIO

    out = StringIO()
    call_command("seed_demo", stdout=out)
    last = out.getvalue().strip().splitlines()[-1]
    campaign = Campaign.objects.get()
    assert last == f"progress: manage.py campaign status {campaign.pk}"
    status = StringIO()
    call_command("campaign", "status", str(campaign.pk), stdout=status)
    assert f"Campaign {campaign.pk}" in status.getvalue()
    listing = StringIO()
    call_command("campaign", "status", stdout=listing)  # no id: the list and how to ask for one
    assert campaign.name in listing.getvalue()
    assert f"status of one: manage.py campaign status {campaign.pk}" in listing.getvalue()


def test_demo_script_prints_the_campaign_id_in_its_hint():
    from pathlib import Path

    script = (Path(__file__).resolve().parents[2] / "scripts" / "demo.sh").read_text()
    assert "campaign status ${demo_id}" in script and "seed_demo --start" in script
