"""The planner against uniform sampling on real scene sampling (render core label pass), small version.

``manage.py bench_planner`` runs the full comparison on the demo campaign; this checks the same code path for
correctness on a much smaller, still skewed (10×) campaign.
"""

from __future__ import annotations

from campaigns import sampling
from campaigns.management.commands.seed_demo import DEMO_BUDGET
from campaigns.services import normalize_campaign_budget


def test_planner_beats_uniform_on_real_sampling():
    budget = normalize_campaign_budget(DEMO_BUDGET)
    quotas = {
        "chair": sampling.QuotaRule(20, 0.3, 6.0),
        "ottoman": sampling.QuotaRule(4, 0.3, 6.0),
        "wall_clock": sampling.QuotaRule(2, 0.3, 6.0),
    }
    results = {
        strategy: sampling.simulate(
            strategy=strategy,
            quotas=quotas,
            budget=budget,
            campaign_seed=5,
            label_width_px=64,
            label_height_px=48,
            max_frames=200,
        )
        for strategy in ("planner", "uniform")
    }
    planner, uniform = results["planner"], results["uniform"]
    assert planner.filled and uniform.filled
    assert planner.frames < uniform.frames
    assert planner.surplus <= uniform.surplus
    # Met quotas are not placed for quota reasons: wall clocks stop once two are accepted (plus what was in flight).
    assert planner.placed["wall_clock"] < uniform.placed["wall_clock"]
    assert all(t > 0 for t in planner.frame_cpu_s)


def test_room_density_limit_comes_from_the_layout_seed():
    from campaigns import planner

    budget = normalize_campaign_budget(DEMO_BUDGET)
    limits = set()
    for layout in range(12):
        seeds = planner.frame_seeds(campaign_seed=1, index=layout, layout_index=layout, lighting_index=0, view_index=0)
        area = sampling.room_floor_area_m2(budget=budget, seeds=seeds)
        assert 9.0 <= area <= 25.0  # rooms of 3–5 m × 3–5 m
        limit = sampling.max_objects_for_frame(budget=budget, seeds=seeds)
        assert limit == min(12, int(area * 0.5))
        limits.add(limit)
    assert len(limits) > 1
