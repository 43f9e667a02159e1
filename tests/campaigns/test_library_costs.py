"""Asset creation costs belong to the library: each campaign bears a share in proportion to the frames that used
the asset, the shares add up to the creation cost, the budget pays only setup and compute, and the estimate and the
asset library page show the pieces."""

from __future__ import annotations

from decimal import Decimal

import pytest

from campaigns import costs, selectors, services
from campaigns.models import Campaign

pytestmark = pytest.mark.django_db(transaction=True)


def _labels(class_counts: dict[str, int], *, user_asset: int | None = None) -> list[dict]:
    rows, next_id = [], 1
    for name, n in class_counts.items():
        for _ in range(n):
            asset_id = f"user/{user_asset}" if user_asset and name == "ottoman" else f"{name}/3"
            rows.append(
                {
                    "instance_id": next_id,
                    "class_name": name,
                    "asset_id": asset_id,
                    "bbox": [0, 0, 9, 9],
                    "mask_area_px": 81,
                    "visible_fraction": 1.0,
                }
            )
            next_id += 1
    return rows


def _record(campaign: Campaign, outbox, plans: list[dict[str, int]], **kwargs) -> None:
    """Record one done frame per entry of ``plans`` (class → instances) through the services."""
    for plan in plans:
        message = outbox.take()[0] if outbox else None
        assert message is not None, "the scheduler sent no frame"
        assert services.claim_frame(
            frame_id=message["frame_id"], dispatch_no=message["dispatch_no"], worker_host="w"
        ).ok
        services.record_result(
            frame_id=message["frame_id"],
            dispatch_no=message["dispatch_no"],
            labels=_labels(plan, **kwargs),
            cpu_s=1.0,
            wall_s=1.0,
        )
        from campaigns import scheduler

        scheduler.dispatch(campaign_id=campaign.pk)


def test_library_share_arithmetic():
    assert costs.library_share(creation_cost=Decimal("160"), frames_here=30, frames_total=120) == Decimal("40")
    assert costs.library_share(creation_cost=Decimal("160"), frames_here=0, frames_total=0) == 0
    assert costs.projected_library_share(creation_cost=Decimal("100"), frames_so_far=300, frames_planned=100) == 25
    with pytest.raises(ValueError):
        costs.library_share(creation_cost=Decimal("1"), frames_here=3, frames_total=2)


def test_cost_per_appearance_over_two_campaigns_is_creation_cost_over_all_appearances(
    make_campaign, outbox, live_worker_rows, user
):
    live_worker_rows(1)
    chair = selectors.Asset.objects.get(name="procedural chair")
    chair.creation_cost = Decimal("90.00")
    chair.save()
    first = make_campaign(quotas={"chair": 500, "ottoman": 500}, start=True)
    _record(first, outbox, [{"chair": 2}, {"chair": 1, "ottoman": 1}, {"ottoman": 2}])
    services.pause_campaign(campaign_id=first.pk)
    outbox.take()
    second = make_campaign(quotas={"chair": 500}, start=True)
    _record(second, outbox, [{"chair": 1}] * 4)

    # chair frames: 2 in the first campaign, 4 in the second.
    rows = {r["asset"].name: r for r in selectors.asset_library(user=user)}
    assert rows["procedural chair"]["frames"] == 6 and rows["procedural chair"]["instances"] == 7
    assert rows["procedural chair"]["campaigns"] == 2
    assert rows["procedural chair"]["per_appearance"] == Decimal("15")  # 90 / 6 (Decimal's own division)
    shares = {c.pk: {a.name: a for a in selectors.library_shares(campaign=c)} for c in (first, second)}
    assert shares[first.pk]["procedural chair"].share == Decimal("30")  # 90 × 2 / 6
    assert shares[second.pk]["procedural chair"].share == Decimal("60")  # 90 × 4 / 6
    assert (
        shares[first.pk]["procedural chair"].share + shares[second.pk]["procedural chair"].share == chair.creation_cost
    )
    # The ottoman generator (1.00) appears only in the first campaign: it bears all of it.
    assert shares[first.pk]["procedural ottoman"].share == Decimal("1")

    summary = selectors.campaign_summary(campaign=first)
    assert summary.library_share == Decimal("31")
    assert summary.total_spent == summary.compute_spent  # no setup cost; the library share is not spent budget
    accepted = summary.campaign.instances_accepted
    assert summary.amortized.per_accepted_instance == costs.money((Decimal("31") + summary.compute_spent) / accepted)
    live = selectors.campaign_live(campaign=first)
    assert live["library_share"] == "31.000000" and {a["name"] for a in live["library"]} == {
        "procedural chair",
        "procedural ottoman",
    }


def test_an_upload_counts_only_its_own_instances(make_campaign, outbox, live_worker_rows, user, classes):
    live_worker_rows(1)
    campaign = make_campaign(quotas={"ottoman": 500}, start=True)
    upload = selectors.Asset.objects.create(
        object_class=classes["ottoman"],
        name="studio pouf",
        kind="mesh",
        team=campaign.team,
        creation_cost=Decimal("40"),
    )
    campaign.assets.add(upload)
    _record(campaign, outbox, [{"ottoman": 1}, {"ottoman": 2}], user_asset=upload.pk)
    shares = {a.name: a for a in selectors.library_shares(campaign=campaign)}
    assert shares["studio pouf"].frames_here == 2 and shares["studio pouf"].share == Decimal("40")
    # The generator made none of these ottomans (their asset ids name the upload).
    assert shares["procedural ottoman"].frames_total == 0 and shares["procedural ottoman"].share == 0


def test_the_budget_pays_setup_and_compute_only(make_campaign):
    # Generators cost 1.00 each (tests/campaigns/conftest.py); a budget of 0.50 no longer has to pay them.
    campaign = make_campaign(quotas={"chair": 3, "ottoman": 2}, cost_budget="0.50")
    assert selectors.fixed_cost(campaign=campaign) == 0
    services.start_campaign(campaign_id=campaign.pk)
    with pytest.raises(services.CampaignError, match="less than the fixed costs 5.000000 \\(the setup cost\\)"):
        make_campaign(cost_budget="3", setup_cost="5")


def test_plan_estimate_itemizes_the_library_share(make_campaign, outbox, live_worker_rows, user):
    from render.budget import normalize_budget
    from tests.campaigns.conftest import TINY_BUDGET

    estimate = selectors.plan_estimate(
        budget=normalize_budget(TINY_BUDGET),
        targets={"chair": 6, "wall_clock": 2},
        cost_budget=Decimal("50"),
        price_per_cpu_hour=Decimal("0.05"),
        setup_cost=Decimal("3"),
        manual_rate_per_hour=Decimal("12"),
        history=Campaign.objects.all(),
    )
    assert estimate.fixed_cost == Decimal("3")
    items = {item["class_name"]: item for item in estimate.library}
    assert set(items) == {"chair", "wall_clock"}
    for item in items.values():
        assert item["frames_so_far"] == 0 and 0 < item["frames_planned"] <= estimate.frames
        assert item["share"] == Decimal("1")  # nobody used them yet: the plan would bear all of their cost
    assert estimate.library_share == Decimal("2")
    assert estimate.total_cost == costs.money(estimate.fixed_cost + estimate.compute_cost)
    assert estimate.cost_per_accepted == costs.money((estimate.total_cost + Decimal("2")) / 8)
