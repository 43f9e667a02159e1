"""Pure planner, scheduler-share and cost functions (no database, no renderer)."""

from __future__ import annotations

from decimal import Decimal

import numpy as np
import pytest

from campaigns import costs, planner
from campaigns.planner import ClassProgress
from campaigns.scheduler import fleet_slots, share_slots


def test_posterior_yield_moves_from_prior_to_observed_rate():
    assert planner.posterior_yield(accepted=0, placed=0) == pytest.approx(planner.PRIOR_YIELD)
    # Beta-Binomial posterior mean with prior mean 0.5 and strength 4: (30 + 2) / (100 + 4).
    assert planner.posterior_yield(accepted=30, placed=100) == pytest.approx(32 / 104)


def test_often_rejected_class_is_placed_more_often():
    progress = [
        ClassProgress("chair", 20, accepted=40, placed=50),
        ClassProgress("wall_clock", 20, accepted=5, placed=50),
    ]
    # Wait: chair's quota is met; only wall_clock is needed, and it is needed in volume.
    plan = planner.plan_composition(progress, max_objects=8)
    assert plan == {"wall_clock": 8}
    progress = [
        ClassProgress("chair", 100, accepted=40, placed=50),
        ClassProgress("ottoman", 100, accepted=10, placed=50),
    ]
    plan = planner.plan_composition(progress, max_objects=10)
    assert plan["ottoman"] > plan["chair"] and sum(plan.values()) == 10


def test_met_quota_is_not_placed_and_in_flight_counts():
    progress = [
        ClassProgress("chair", 10, accepted=10, placed=20),
        ClassProgress("sofa", 4, accepted=0, placed=0, in_flight_placed=8),
    ]
    # chair met; sofa's 8 in-flight placements are expected to bring 4 accepted (yield prior 0.5): nothing to add.
    assert planner.plan_composition(progress, max_objects=6) == {}


def test_end_game_places_what_is_needed_not_a_full_room():
    progress = [ClassProgress("chair", 50, accepted=49, placed=60), ClassProgress("sofa", 10, accepted=8, placed=12)]
    plan = planner.plan_composition(progress, max_objects=12)
    assert 1 <= plan["chair"] <= 2 and 2 <= plan["sofa"] <= 3
    assert sum(plan.values()) < 12


def test_plan_never_exceeds_density_limit():
    rng = np.random.default_rng(0)
    for _ in range(200):
        progress = [
            ClassProgress(
                f"c{i}",
                int(rng.integers(0, 50)),
                accepted=int(rng.integers(0, 40)),
                placed=int(rng.integers(40, 80)),
                in_flight_placed=int(rng.integers(0, 5)),
            )
            for i in range(5)
        ]
        limit = int(rng.integers(1, 13))
        plan = planner.plan_composition(progress, max_objects=limit)
        assert sum(plan.values()) <= limit
        assert all(p.deficit > 0 for p in progress if plan.get(p.name))


def test_density_limit_per_room_size():
    assert planner.max_objects_for_room(floor_area_m2=9.0, max_objects_per_m2=0.5) == 4
    assert planner.max_objects_for_room(floor_area_m2=30.0, max_objects_per_m2=0.5, cap=12) == 12
    assert planner.max_objects_for_room(floor_area_m2=1.0, max_objects_per_m2=0.1) == 1


def test_uniform_composition_fills_the_room():
    plan = planner.uniform_composition(["a", "b", "c"], max_objects=9, rng=np.random.default_rng(1))
    assert sum(plan.values()) == 9 and set(plan) <= {"a", "b", "c"}


def test_variation_budget_walk():
    walk = [None]
    for _ in range(7):
        walk.append(
            planner.next_coordinates(
                walk[-1], lighting_per_layout=2, views_per_lighting=2, layouts=10, continue_layout=True
            )
        )
    assert walk[1:] == [(0, 0, 0), (0, 0, 1), (0, 1, 0), (0, 1, 1), (1, 0, 0), (1, 0, 1), (1, 1, 0)]
    assert planner.next_coordinates(
        (3, 0, 0), lighting_per_layout=2, views_per_lighting=2, layouts=10, continue_layout=False
    ) == (4, 0, 0)


def test_frame_seeds_share_axes_by_coordinates():
    a = planner.frame_seeds(campaign_seed=7, index=0, layout_index=0, lighting_index=0, view_index=0)
    b = planner.frame_seeds(campaign_seed=7, index=1, layout_index=0, lighting_index=0, view_index=1)
    c = planner.frame_seeds(campaign_seed=7, index=2, layout_index=1, lighting_index=0, view_index=0)
    assert a.layout_seed == b.layout_seed and a.lighting_seed == b.lighting_seed and a.camera_seed != b.camera_seed
    assert c.layout_seed != a.layout_seed and len({a.seed, b.seed, c.seed}) == 3
    assert a == planner.frame_seeds(campaign_seed=7, index=0, layout_index=0, lighting_index=0, view_index=0)


def test_accept_instance_uses_quota_thresholds():
    label = {"visible_fraction": 0.4, "bbox": [10, 10, 20, 8], "mask_area_px": 100, "reject_reasons": []}
    assert planner.accept_instance(label, min_visible_fraction=0.3, min_box_px=6)[0]
    ok, reasons = planner.accept_instance(label, min_visible_fraction=0.5, min_box_px=10)
    assert not ok and reasons == ["visible_fraction 0.40 < 0.5", "box 8 px < 10 px"]
    assert planner.accept_instance(
        {**label, "bbox": None, "mask_area_px": 0}, min_visible_fraction=0, min_box_px=0
    ) == (False, ["not visible"])


def test_accept_instance_judges_contrast_by_the_quota_minimum():
    from render.reasons import contrast_reason

    label = {"visible_fraction": 0.9, "bbox": [10, 10, 20, 20], "mask_area_px": 300, "contrast": 1.42}
    ok, reasons = planner.accept_instance(label, min_visible_fraction=0.3, min_box_px=6, min_contrast=2.0)
    # The wording is the render core's own (render.reasons.contrast_reason), never a copy of it.
    assert not ok and reasons == [contrast_reason(label, min_contrast=2.0)] and reasons[0].startswith("contrast 1.42")
    assert planner.accept_instance(
        {**label, "contrast": 2.0}, min_visible_fraction=0.3, min_box_px=6, min_contrast=2.0
    ) == (True, [])  # at the minimum: accepted
    assert planner.accept_instance(
        {**label, "contrast": 7.5}, min_visible_fraction=0.3, min_box_px=6, min_contrast=2.0
    ) == (True, [])
    assert planner.accept_instance(label, min_visible_fraction=0.3, min_box_px=6, min_contrast=0.0) == (True, [])
    # Every failed rule is listed, contrast after visibility and box.
    ok, reasons = planner.accept_instance(
        {**label, "visible_fraction": 0.1}, min_visible_fraction=0.3, min_box_px=30, min_contrast=2.0
    )
    assert reasons == ["visible_fraction 0.10 < 0.3", "box 20 px < 30 px", "contrast 1.42 < 2"]


def test_accept_instance_judges_labels_without_contrast_as_before():
    old = {"visible_fraction": 0.4, "bbox": [10, 10, 20, 8], "mask_area_px": 100, "reject_reasons": []}
    for kwargs in ({}, {"min_contrast": 2.0}, {"min_contrast": 1000.0}):
        assert planner.accept_instance(old, min_visible_fraction=0.3, min_box_px=6, **kwargs) == (True, [])
        assert planner.accept_instance(old, min_visible_fraction=0.5, min_box_px=10, **kwargs) == (
            False,
            ["visible_fraction 0.40 < 0.5", "box 8 px < 10 px"],
        )
    # No visible pixels: judged by geometry alone, whatever the contrast says.
    assert planner.accept_instance(
        {**old, "bbox": None, "mask_area_px": 0, "contrast": 0.0},
        min_visible_fraction=0,
        min_box_px=0,
        min_contrast=2.0,
    ) == (False, ["not visible"])


def test_share_slots_by_weight():
    assert fleet_slots(concurrencies=[1, 2]) == 6
    assert fleet_slots(concurrencies=[]) == 0
    assert share_slots(total_slots=6, weights={1: 2, 2: 1}) == {1: 4, 2: 2}
    assert share_slots(total_slots=2, weights={1: 1, 2: 1, 3: 5}) == {1: 1, 2: 1, 3: 2}
    assert share_slots(total_slots=0, weights={1: 1}) == {1: 1}


def test_frame_cost_and_amortization():
    # 7200 CPU s = 2 CPU-hours at 0.05 per CPU-hour.
    assert costs.frame_compute_cost(cpu_s=7200, price_per_cpu_hour=Decimal("0.05")) == Decimal("0.1")
    fixed = costs.fixed_cost(asset_creation_costs=[Decimal("160"), Decimal("40")], setup_cost=Decimal("100"))
    assert fixed == Decimal("300")
    a = costs.amortized_cost(fixed=fixed, compute_spent=Decimal("10"), frames_done=10, accepted_instances=31)
    assert a.per_frame == Decimal("31") and a.per_accepted_instance == Decimal("10")
    assert (
        costs.amortized_cost(fixed=fixed, compute_spent=Decimal(0), frames_done=0, accepted_instances=0).per_frame
        is None
    )


def test_budget_check_and_expected_cpu():
    assert costs.can_afford_frame(
        spent=Decimal("9"), committed=Decimal("0.5"), next_frame_cost=Decimal("0.5"), cost_budget=Decimal("10")
    )
    assert not costs.can_afford_frame(
        spent=Decimal("9"), committed=Decimal("0.5"), next_frame_cost=Decimal("0.51"), cost_budget=Decimal("10")
    )
    assert costs.expected_frame_cpu_s(observed_cpu_s=[1.0, 9.0, 2.0], width_px=64, height_px=48, spp=4) == 2.0
    assert costs.expected_frame_cpu_s(observed_cpu_s=[], width_px=64, height_px=48, spp=4) > 0


def test_manual_labelling_and_break_even():
    m = costs.manual_labelling_cost(instances=100, rate_per_hour=Decimal("36"))
    # Su et al. 2012 box with quality control (42 s) + Lin et al. 2014 polygon (79 s) = 121 s; 36/h = 0.01 per s.
    assert m.seconds_per_instance == pytest.approx(121.0)
    assert m.cost_per_instance == Decimal("1.21") and m.cost_for_instances == Decimal("121")
    assert all(r.note == "from memory" for r in m.references)
    # fixed 100, frame costs 0.1 and yields 3 instances worth 1.21 each: n = 100 / (3.63 - 0.1) → 29 frames.
    assert (
        costs.break_even_frames(
            fixed=Decimal(100),
            compute_cost_per_frame=Decimal("0.1"),
            accepted_per_frame=3,
            manual_cost_per_instance=Decimal("1.21"),
        )
        == 29
    )
    assert (
        costs.break_even_frames(
            fixed=Decimal(100),
            compute_cost_per_frame=Decimal("5"),
            accepted_per_frame=1,
            manual_cost_per_instance=Decimal("1"),
        )
        is None
    )


def test_projection_uses_rates_and_fleet():
    p = costs.project_remaining(
        placements_needed=40,
        instances_per_frame=8,
        cost_per_frame=Decimal("0.01"),
        wall_s_per_frame=2.0,
        parallel_slots=2,
    )
    assert p.frames_remaining == 5 and p.cost_remaining == Decimal("0.05") and p.seconds_remaining == 6.0
    assert (
        costs.project_remaining(
            placements_needed=0, instances_per_frame=0, cost_per_frame=None, wall_s_per_frame=None, parallel_slots=0
        ).frames_remaining
        == 0
    )
