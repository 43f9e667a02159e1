"""Fixtures: a small campaign of real rendered frames (render core, 64×48, 4 spp) recorded through the services."""

from __future__ import annotations

from decimal import Decimal
from pathlib import Path

import pytest

from tests.frames import record_frames as record_plan
from tests.frames import render_frame_plan

CAMPAIGN_SEED = 23
TINY_BUDGET = {
    "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
    "room": {"width_m": [3.0, 3.5], "depth_m": [3.0, 3.5], "max_objects_per_m2": 0.6},
    "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
    "variation": {"layouts": 1000, "lighting_per_layout": 1, "views_per_lighting": 2},
}
CLASSES = ("chair", "armchair", "side_table", "ottoman", "sofa", "wall_clock")
# (index, layout, view, composition): four layouts, two views each.
FRAME_PLAN = [
    (2 * layout + view, layout, view, composition)
    for layout, composition in enumerate(
        [
            {"chair": 2, "ottoman": 1, "side_table": 1},
            {"chair": 1, "armchair": 1, "wall_clock": 1},
            {"sofa": 1, "chair": 2},
            {"armchair": 1, "ottoman": 1, "side_table": 1, "chair": 1},
        ]
    )
    for view in (0, 1)
]


@pytest.fixture(scope="session")
def rendered_frames(tmp_path_factory) -> dict[int, Path]:
    """Render FRAME_PLAN once per session with the seeds a worker would use; index → folder of its files."""
    return render_frame_plan(
        FRAME_PLAN, budget=TINY_BUDGET, campaign_seed=CAMPAIGN_SEED, root=tmp_path_factory.mktemp("rendered")
    )


@pytest.fixture
def owner(db, django_user_model):
    return django_user_model.objects.create_user(username="ana", password="ana-password-123")


@pytest.fixture
def object_classes(db):
    from assets import services as asset_services

    return {name: asset_services.ensure_object_class(name=name) for name in CLASSES}


@pytest.fixture
def make_campaign(owner, object_classes):
    from campaigns import services

    def make(name: str = "export tiny", seed: int = CAMPAIGN_SEED):
        return services.create_campaign(
            owner=owner,
            name=name,
            quotas=[services.QuotaInput(n, 10_000) for n in CLASSES],
            budget=TINY_BUDGET,
            cost_budget=Decimal("1000"),
            price_per_cpu_hour=Decimal("0.05"),
            seed=seed,
            asset_ids=[],
        )

    return make


def record_frames(campaign, rendered: dict[int, Path], plan, media_root: Path) -> None:
    record_plan(campaign, rendered, plan, media_root, worker_host="test", task_id_prefix="export-test")


@pytest.fixture
def real_campaign(make_campaign, rendered_frames, media_root):
    """A running campaign whose eight frames were rendered by the render core and recorded by the services."""
    from campaigns import services

    campaign = make_campaign()
    services.start_campaign(campaign_id=campaign.pk)
    record_frames(campaign, rendered_frames, FRAME_PLAN, media_root)
    campaign.refresh_from_db()
    assert campaign.frames_done == len(FRAME_PLAN)
    return campaign
