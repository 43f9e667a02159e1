"""Fixtures for the campaigns tests: a demo user, object classes, tiny campaigns and captured task messages."""

from __future__ import annotations

from decimal import Decimal

import pytest

# 64×48 px, 4 spp, small rooms: a frame renders in well under a second on one core.
TINY_BUDGET = {
    "render": {"width_px": 64, "height_px": 48, "spp": 4, "max_depth": 3},
    "room": {"width_m": [3.0, 3.5], "depth_m": [3.0, 3.5], "max_objects_per_m2": 0.5},
    "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
    "variation": {"layouts": 1000, "lighting_per_layout": 1, "views_per_lighting": 1},
}


@pytest.fixture
def user(transactional_db, django_user_model):
    return django_user_model.objects.create_user(username="ana", password="not-used-123")


@pytest.fixture
def classes(transactional_db):
    from assets import services as asset_services

    names = ("chair", "armchair", "side_table", "ottoman", "wall_clock", "sofa")
    out = {}
    for name in names:
        oc = asset_services.ensure_object_class(name=name)
        asset_services.ensure_procedural_asset(object_class=oc, name=f"procedural {name}", creation_cost="1.00")
        out[name] = oc
    return out


@pytest.fixture
def make_campaign(user, classes):
    from campaigns import services

    counter = {"n": 0}

    def make(
        *,
        quotas: dict[str, int] | None = None,
        cost_budget: str = "100",
        price: str = "0.05",
        setup_cost: str = "0",
        weight: int = 1,
        max_attempts: int = 3,
        budget: dict | None = None,
        seed: int = 11,
        start: bool = False,
        name: str | None = None,
    ):
        counter["n"] += 1
        campaign = services.create_campaign(
            owner=user,
            name=name or f"tiny {counter['n']}",
            quotas=[services.QuotaInput(k, v) for k, v in (quotas or {"chair": 3, "ottoman": 2}).items()],
            budget=budget or TINY_BUDGET,
            cost_budget=Decimal(cost_budget),
            price_per_cpu_hour=Decimal(price),
            setup_cost=Decimal(setup_cost),
            weight=weight,
            max_attempts=max_attempts,
            seed=seed,
        )
        if start:
            services.start_campaign(campaign_id=campaign.pk)
            campaign.refresh_from_db()
        return campaign

    return make


class Outbox(list):
    """Messages the scheduler would have put on the broker: dicts of frame_id, dispatch_no, task_id, countdown_s."""

    def deliver(self, message: dict) -> dict:
        from campaigns.tasks import render_frame

        kwargs = {k: message[k] for k in ("frame_id", "dispatch_no", "campaign_uid")}
        result = render_frame.apply(kwargs=kwargs, task_id=message["task_id"])
        return result.get(propagate=True)

    def take(self) -> list[dict]:
        taken = list(self)
        self.clear()
        return taken


@pytest.fixture
def outbox(monkeypatch):
    """Capture task messages instead of sending them, so a test delivers them (once, twice, or never)."""
    from campaigns import messaging

    box = Outbox()

    def capture(*, frame_id: int, dispatch_no: int, campaign_uid: str, task_id: str, countdown_s: float = 0.0) -> None:
        box.append(
            {
                "frame_id": frame_id,
                "dispatch_no": dispatch_no,
                "campaign_uid": campaign_uid,
                "task_id": task_id,
                "countdown_s": countdown_s,
            }
        )

    monkeypatch.setattr(messaging, "send_frame_task", capture)
    return box


@pytest.fixture
def live_worker_rows(transactional_db):
    """Pretend heartbeats (no process): the scheduler sizes in-flight work from these."""
    from fleet.models import WorkerHeartbeat

    def make(*concurrencies: int):
        return [
            WorkerHeartbeat.objects.create(hostname=f"fake-{i}@test", machine="test", pid=1000 + i, concurrency=c)
            for i, c in enumerate(concurrencies)
        ]

    return make


class FakeResult:
    def __init__(self, composition: dict[str, int], accept: bool = True) -> None:
        self.timings_s = {"render": 0.0}
        instances = []
        next_id = 1
        for name, count in sorted(composition.items()):
            for _ in range(count):
                instances.append(
                    {
                        "instance_id": next_id,
                        "class_name": name,
                        "asset_id": f"{name}-{next_id}",
                        "bbox": [1.0, 1.0, 20.0, 20.0] if accept else None,
                        "amodal_bbox": [1.0, 1.0, 20.0, 20.0],
                        "mask_area_px": 400 if accept else 0,
                        "visible_fraction": 1.0 if accept else 0.0,
                        "truncation_fraction": 0.0,
                        "segmentation": None,
                        "accepted": accept,
                        "reject_reasons": [],
                    }
                )
                next_id += 1
        self.labels = {"instances": instances}


@pytest.fixture
def fake_render(monkeypatch):
    """Replace the render core call in the task by labels where every placed instance is accepted.

    ``fake_render.fail = n`` makes the next n calls raise; ``fake_render.calls`` counts calls.
    """
    import campaigns.tasks

    class Fake:
        def __init__(self) -> None:
            self.fail = 0
            self.calls = 0
            self.error: Exception = RuntimeError("transient: renderer ran out of memory")

        def __call__(self, *, budget, composition, seeds, out_dir, user_assets=None):
            self.calls += 1
            if self.fail > 0:
                self.fail -= 1
                raise self.error
            return FakeResult(composition)

    fake = Fake()
    monkeypatch.setattr(campaigns.tasks, "render_frame_files", fake)
    return fake
