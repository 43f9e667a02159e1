"""Fixtures for the dashboard tests: a team with a viewer, a planner and an admin, an outsider, object classes,
and campaigns with frames recorded through the services (real render-core files for the frame pages)."""

from __future__ import annotations

from decimal import Decimal
from pathlib import Path

import pytest

from tests.frames import record_frames as record_plan
from tests.frames import render_frame_plan

TINY_BUDGET = {
    "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
    "room": {"width_m": [3.0, 3.5], "depth_m": [3.0, 3.5], "max_objects_per_m2": 0.5},
    "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
    "variation": {"layouts": 1000, "lighting_per_layout": 1, "views_per_lighting": 2},
}
CLASSES = ("chair", "armchair", "ottoman", "wall_clock")
PASSWORD = "dash-password-123"
SEED = 31
PLAN = [
    (0, 0, 0, {"chair": 2, "ottoman": 1}),
    (1, 0, 1, {"chair": 2, "ottoman": 1}),
    (2, 1, 0, {"armchair": 1, "wall_clock": 1, "chair": 1}),
]


@pytest.fixture(scope="session")
def rendered_frames(tmp_path_factory) -> dict[int, Path]:
    """Real render-core frames (64×48, 4 spp) with the seeds a worker would use, rendered once per session."""
    return render_frame_plan(
        PLAN, budget=TINY_BUDGET, campaign_seed=SEED, root=tmp_path_factory.mktemp("dash-rendered")
    )


@pytest.fixture
def people(db, django_user_model):
    from teams.models import Membership, Team

    team = Team.objects.create(name="Studio North")
    other = Team.objects.create(name="Elsewhere Ltd")
    users = {}
    for name, role in (("vera", "viewer"), ("pia", "planner"), ("ada", "admin")):
        users[name] = django_user_model.objects.create_user(username=name, password=PASSWORD)
        Membership.objects.create(team=team, user=users[name], role=role)
    users["otto"] = django_user_model.objects.create_user(username="otto", password=PASSWORD)
    Membership.objects.create(team=other, user=users["otto"], role="admin")
    return {"team": team, "other_team": other, **users}


@pytest.fixture
def object_classes(db):
    from assets import services as asset_services

    out = {}
    for name in CLASSES:
        oc = asset_services.ensure_object_class(name=name)
        asset_services.ensure_procedural_asset(object_class=oc, name=f"procedural {name}", creation_cost="2.00")
        out[name] = oc
    return out


@pytest.fixture
def make_campaign(people, object_classes):
    from campaigns import services

    def make(
        name: str = "tiny", *, quotas: dict[str, int] | None = None, start: bool = False, cost_budget: str = "100"
    ):
        campaign = services.create_campaign(
            owner=people["pia"],
            team=people["team"],
            name=name,
            quotas=[services.QuotaInput(k, v) for k, v in (quotas or {"chair": 20, "ottoman": 5}).items()],
            budget=TINY_BUDGET,
            cost_budget=Decimal(cost_budget),
            price_per_cpu_hour=Decimal("0.05"),
            manual_labelling_rate_per_hour=Decimal("12"),
            seed=SEED,
        )
        if start:
            services.start_campaign(campaign_id=campaign.pk)
            campaign.refresh_from_db()
        return campaign

    return make


@pytest.fixture
def outbox(monkeypatch):
    """Capture the scheduler's task messages instead of sending them."""
    from campaigns import messaging

    box: list[dict] = []
    monkeypatch.setattr(messaging, "send_frame_task", lambda **kw: box.append(kw))
    return box


def record_frames(campaign, rendered, media_root: Path, plan=PLAN) -> list:
    return record_plan(campaign, rendered, plan, media_root, worker_host="w1@test", task_id_prefix="dash")


def fail_frame(campaign, *, index: int, error: str, permanent: bool = True, traceback: str = "Traceback ...\n"):
    from django.db import transaction

    from campaigns import services

    with transaction.atomic():
        frame = services.create_frame(
            campaign=campaign,
            index=index,
            coordinates=(50 + index, 0, 0),
            composition={"chair": 1},
            expected_cpu_s=0.5,
            task_id_prefix="dash",
        )
    assert services.claim_frame(frame_id=frame.pk, dispatch_no=1, worker_host="w2@test").ok
    services.record_failure(
        frame_id=frame.pk,
        dispatch_no=1,
        error=error,
        traceback=traceback,
        cpu_s=0.1,
        permanent=permanent,
        worker_host="w2@test",
    )
    frame.refresh_from_db()
    return frame


@pytest.fixture
def done_campaign(make_campaign, rendered_frames, media_root, outbox):
    """A running campaign with three real done frames and two dead ones (two error kinds)."""
    campaign = make_campaign("with frames", start=True)
    record_frames(campaign, rendered_frames, media_root)
    fail_frame(campaign, index=10, error="LayoutError: the objects do not fit in the room\nmore detail")
    fail_frame(
        campaign,
        index=11,
        error="RuntimeError: renderer ran out of memory",
        traceback='Traceback (most recent call last):\n  File "x.py", line 1\nRuntimeError: renderer ran out',
    )
    campaign.refresh_from_db()
    return campaign


CUBE_OBJ_TEXT = (
    "\n".join(
        ["# a 0.5 m box"]
        + [f"v {x} {y} {z}" for x in (0, 0.5) for y in (0, 0.5) for z in (0, 0.5)]
        + [
            "f 1 2 4",
            "f 1 4 3",
            "f 5 7 8",
            "f 5 8 6",
            "f 1 5 6",
            "f 1 6 2",
            "f 3 4 8",
            "f 3 8 7",
            "f 1 3 7",
            "f 1 7 5",
            "f 2 6 8",
            "f 2 8 4",
        ]
    )
    + "\n"
)
