"""Names from the database may hold any character; the dashboard's pages and scripts must not care.

Headless Debian Chromium (Playwright) against pytest-django's live server: a class, a campaign and assets named
with quotes, backslashes, ``</script>``, HTML tags and entities. Every page renders them as text, raises no page
error, runs no injected script, and the scripts still work: the campaign page draws its chart with the literal
names and its polling updates the quota row of the oddly named class, the list page's polling updates its row,
and the planner's estimate follows a target typed for that class.
"""

from __future__ import annotations

from decimal import Decimal
from typing import Any
from urllib.parse import urlencode

import pytest
from django.urls import reverse

pytestmark = pytest.mark.browser

# At most 64 characters (ObjectClass.name's column).
CLASS_NAME = "c\"]'\\</script><b>b</b>&amp;<img src=x onerror=__pwned=1>"
CAMPAIGN_NAME = (
    "Camp \"double\" 'single' \\back </script><script>window.__pwned=2</script> <b>bold</b> & "
    '<img src=x onerror="window.__pwned=3">'
)
ASSET_NAME = 'stool "x" \'y\' \\z </script><img src=x onerror="window.__pwned=4"> <i>it</i> &lt;'
TINY_BUDGET = {"render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3}}


@pytest.fixture
def odd_world(transactional_db, django_user_model) -> dict[str, Any]:
    from assets import services as asset_services
    from assets.models import Asset, ObjectClass
    from campaigns import services
    from teams.models import Membership, Team

    assert len(CLASS_NAME) <= 64
    team = Team.objects.create(name="Studio North")
    planner = django_user_model.objects.create_user(username="pia", password="odd-names-password-1")
    Membership.objects.create(team=team, user=planner, role="planner")
    odd = ObjectClass.objects.create(name=CLASS_NAME, label=CLASS_NAME)
    asset_services.ensure_object_class(name="chair")
    asset_services.ensure_procedural_asset(object_class=odd, name=ASSET_NAME, creation_cost="1")
    Asset.objects.create(object_class=odd, name=ASSET_NAME, kind=Asset.Kind.MESH, team=team)
    campaign = services.create_campaign(
        owner=planner,
        team=team,
        name=CAMPAIGN_NAME,
        description=CAMPAIGN_NAME,
        quotas=[services.QuotaInput(CLASS_NAME, 5), services.QuotaInput("chair", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    return {"team": team, "planner": planner, "campaign": campaign, "class": odd}


@pytest.fixture
def browser_page(live_server, odd_world, chromium_context) -> tuple[Any, list[str]]:
    """A signed-in page and the list of problems seen on it (page errors, dialogs, console errors).

    ``chromium_context`` comes last so that the odd names are written before Playwright's event loop starts.
    """
    from django.conf import settings
    from django.test import Client

    client = Client()
    client.force_login(odd_world["planner"])
    session = client.cookies[settings.SESSION_COOKIE_NAME].value
    problems: list[str] = []
    chromium_context.add_cookies([{"name": settings.SESSION_COOKIE_NAME, "value": session, "url": live_server.url}])
    page = chromium_context.new_page()
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("dialog", lambda dialog: (problems.append(f"dialog: {dialog.message}"), dialog.dismiss()))
    page.on(
        "console",
        lambda msg: (
            problems.append(f"console {msg.type}: {msg.text}")
            if msg.type == "error" and "Failed to load resource" not in msg.text
            else None
        ),
    )
    return page, problems


def _no_injection(page: Any, problems: list[str]) -> None:
    assert page.evaluate("() => window.__pwned") is None, "a script from a name ran"
    assert problems == []


def test_campaign_page_charts_and_polls_with_odd_names(browser_page, live_server, odd_world, wait_until):
    from campaigns.models import ClassQuota

    page, problems = browser_page
    campaign = odd_world["campaign"]
    page.goto(live_server.url + reverse("campaigns:detail", args=[campaign.pk]))
    assert page.text_content("h1").startswith(CAMPAIGN_NAME)
    assert CAMPAIGN_NAME in page.title()
    # The chart is drawn and shows the class name as it is (plotly would read <b> and entities as markup).
    page.wait_for_selector("#chart-balance .main-svg")
    ticks = page.locator("#chart-balance .xtick text").all_text_contents()
    assert sorted(ticks) == sorted([CLASS_NAME, "chair"]), ticks
    # Polling finds the odd class's row and updates it.
    ClassQuota.objects.filter(campaign=campaign, object_class=odd_world["class"]).update(accepted_count=4)
    row = page.locator("#quota-table tbody tr").filter(has_text="/ 5")
    assert row.get_attribute("data-class") == CLASS_NAME
    assert row.locator("td").first.text_content() == CLASS_NAME
    wait_until(lambda: row.locator('[data-q="accepted"]').text_content() == "4", 25, "the poll to update the row")
    _no_injection(page, problems)


def test_list_page_polls_with_odd_names(browser_page, live_server, odd_world, wait_until):
    from campaigns.models import Campaign

    page, problems = browser_page
    campaign = odd_world["campaign"]
    page.goto(live_server.url + reverse("campaigns:list"))
    link = page.locator("table.campaigns tbody tr td a")
    assert link.text_content() == CAMPAIGN_NAME
    Campaign.objects.filter(pk=campaign.pk).update(frames_done=7)
    cell = page.locator(f'tr[data-campaign="{campaign.pk}"] [data-field="frames_done"]')
    wait_until(lambda: cell.text_content() == "7", 20, "the list poll to update the row")
    _no_injection(page, problems)


def test_planner_estimate_follows_a_target_for_an_oddly_named_class(browser_page, live_server, odd_world, wait_until):
    page, problems = browser_page
    for url in (reverse("campaigns:create"), reverse("campaigns:edit", args=[odd_world["campaign"].pk])):
        page.goto(live_server.url + url)
        labels = page.locator(".quota-table tbody th label").all_text_contents()
        assert CLASS_NAME in labels
        # Type a target for the odd class (its input's name holds the class name as it is).
        page.evaluate(
            """(name) => {
            const input = document.getElementsByName(name)[0];
            input.value = "7";
            input.dispatchEvent(new Event("input", {bubbles: true}));
        }""",
            f"q_{CLASS_NAME}_target",
        )
        page.wait_for_selector("#estimate .estimate-body:not([hidden])")
        wait_until(lambda: (page.text_content("[data-est=frames]") or "").strip().isdigit(), 20, "the estimate")
        assert page.locator("[data-est=verdict] .pill").count() == 1
    assert page.input_value("#id_name") == CAMPAIGN_NAME
    _no_injection(page, problems)


def test_every_page_shows_odd_names_as_text(browser_page, live_server, odd_world):
    page, problems = browser_page
    campaign = odd_world["campaign"]
    page.goto(live_server.url + reverse("campaigns:assets"))
    names = page.locator(".assets-table tbody tr td strong").all_text_contents()
    assert names.count(ASSET_NAME) == 2  # the shared generator and the team's upload
    for url in (
        reverse("campaigns:gallery", args=[campaign.pk]) + "?" + urlencode({"class": CLASS_NAME}),
        reverse("campaigns:failed", args=[campaign.pk]),
    ):
        page.goto(live_server.url + url)
        assert page.text_content("h1").startswith(CAMPAIGN_NAME)
    options = page.goto(live_server.url + reverse("campaigns:gallery", args=[campaign.pk]))
    assert options is not None and options.status == 200
    assert CLASS_NAME in page.locator("select[name=class] option").all_text_contents()
    _no_injection(page, problems)
