"""Test helpers shared by the dashboard and export tests: real render-core frames recorded through the services."""

from __future__ import annotations

import json
import shutil
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

# (index, layout index, view index, composition)
FramePlan = Sequence[tuple[int, int, int, dict[str, int]]]


def render_frame_plan(plan: FramePlan, *, budget: Mapping[str, Any], campaign_seed: int, root: Path) -> dict[int, Path]:
    """Render each planned frame with the seeds a worker would use; index → folder of its files."""
    from campaigns import planner
    from campaigns.services import normalize_campaign_budget
    from render.frame import render_frame_from_inputs

    normalized = normalize_campaign_budget(budget)
    out = {}
    for index, layout, view, composition in plan:
        seeds = planner.frame_seeds(
            campaign_seed=campaign_seed, index=index, layout_index=layout, lighting_index=0, view_index=view
        )
        folder = root / str(index)
        render_frame_from_inputs(
            normalized,
            composition,
            seeds.seed,
            layout_seed=seeds.layout_seed,
            lighting_seed=seeds.lighting_seed,
            camera_seed=seeds.camera_seed,
            out_dir=folder,
            threads=2,
        )
        out[index] = folder
    return out


def record_frames(
    campaign: Any,
    rendered: Mapping[int, Path],
    plan: FramePlan,
    media_root: Path,
    *,
    worker_host: str,
    task_id_prefix: str,
) -> list:
    """Create, claim and record frames through the services, with the render core's files in MEDIA_ROOT."""
    from django.db import transaction

    from campaigns import services
    from campaigns.frame_files import frame_output_dir

    frames = []
    for index, layout, view, composition in plan:
        with transaction.atomic():
            frame = services.create_frame(
                campaign=campaign,
                index=index,
                coordinates=(layout, 0, view),
                composition=composition,
                expected_cpu_s=0.5,
                task_id_prefix=task_id_prefix,
            )
        claim = services.claim_frame(frame_id=frame.pk, dispatch_no=frame.dispatch_count, worker_host=worker_host)
        assert claim.ok, claim.reason
        absolute, relative = frame_output_dir(campaign_id=campaign.pk, index=index)
        assert Path(absolute).is_relative_to(media_root)
        shutil.copytree(rendered[index], absolute)
        labels = json.loads((Path(absolute) / "labels.json").read_text())
        assert services.record_result(
            frame_id=frame.pk,
            dispatch_no=frame.dispatch_count,
            labels=labels["instances"],
            cpu_s=0.4,
            wall_s=0.5,
            output_dir=relative,
            worker_host=worker_host,
        )
        frames.append(frame)
    return frames
