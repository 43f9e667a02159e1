"""Celery tasks. Thin: claim, call the render core, hand the result to a campaigns service."""

from __future__ import annotations

import logging
import os
import socket
import time
import traceback as traceback_module
from pathlib import Path
from typing import Any

from celery import shared_task

log = logging.getLogger("evenframe.workers")


@shared_task(name="evenframe.ping")
def ping(token: str) -> dict:
    """Answer with where it ran: used by tests and the health tooling to prove a real worker runs tasks."""
    return {"token": token, "pid": os.getpid(), "host": socket.gethostname()}


def frame_output_dir(*, campaign_id: int, index: int) -> tuple[Path, str]:
    """Absolute directory for a frame's files and the same path relative to MEDIA_ROOT."""
    from django.conf import settings

    relative = f"campaigns/{campaign_id}/frames/{index}"
    return Path(settings.MEDIA_ROOT) / relative, relative


def render_frame_files(*, budget: dict[str, Any], composition: dict[str, int], seeds: Any, out_dir: Path) -> Any:
    """Call the render core (imported here, in the worker process, never at Django load)."""
    from workers.render.frame import render_frame_from_inputs

    threads = int(os.environ.get("EVENFRAME_RENDER_THREADS", "0") or 0) or None
    return render_frame_from_inputs(budget, composition, seeds.seed, layout_seed=seeds.layout_seed,
                                    lighting_seed=seeds.lighting_seed, camera_seed=seeds.camera_seed,
                                    out_dir=out_dir, threads=threads)


def _is_permanent(exc: BaseException) -> bool:
    """Errors that the same inputs would raise again: no point retrying."""
    try:
        from workers.render.budget import BudgetError
        from workers.render.layout import LayoutError
        from workers.render.meshes import MeshError
        from workers.render.spec import SpecError
    except ImportError:  # render core incomplete: treat everything as transient
        return False
    return isinstance(exc, (LayoutError, BudgetError, SpecError, MeshError))


@shared_task(name="evenframe.render_frame", bind=True, acks_late=True, ignore_result=True)
def render_frame(self, frame_id: int, dispatch_no: int, campaign_uid: str | None = None) -> dict:
    """Render one campaign frame. Safe to deliver twice: the claim and the result are conditional on the frame."""
    from campaigns import planner, scheduler, services

    host = getattr(self.request, "hostname", None) or socket.gethostname()
    claim = services.claim_frame(frame_id=frame_id, dispatch_no=dispatch_no, worker_host=host,
                                 task_id=getattr(self.request, "id", None) or "", campaign_uid=campaign_uid)
    if not claim.ok:
        log.info("frame %s (dispatch %s) not rendered: %s", frame_id, dispatch_no, claim.reason)
        return {"frame_id": frame_id, "skipped": claim.reason}
    frame, campaign = claim.frame, claim.campaign
    seeds = planner.frame_seeds(campaign_seed=campaign.seed, index=frame.index, layout_index=frame.layout_index,
                                lighting_index=frame.lighting_index, view_index=frame.view_index)
    out_dir, relative = frame_output_dir(campaign_id=campaign.pk, index=frame.index)
    # process_time counts every thread of this process, Dr.Jit's render threads included.
    cpu_start, wall_start = time.process_time(), time.perf_counter()
    try:
        result = render_frame_files(budget=campaign.budget, composition=frame.composition, seeds=seeds,
                                    out_dir=out_dir)
    except Exception as exc:  # noqa: BLE001 - every failure is recorded on the frame, then retried or dead
        cpu_s, wall_s = time.process_time() - cpu_start, time.perf_counter() - wall_start
        state = services.record_failure(
            frame_id=frame_id, dispatch_no=dispatch_no, error=f"{type(exc).__name__}: {exc}",
            traceback=traceback_module.format_exc(), cpu_s=cpu_s, wall_s=wall_s, permanent=_is_permanent(exc),
            worker_host=host,
        )
        log.warning("frame %s failed (%s): %s", frame_id, state, exc)
        scheduler.dispatch(campaign_id=campaign.pk)
        return {"frame_id": frame_id, "state": state, "error": str(exc)}
    cpu_s, wall_s = time.process_time() - cpu_start, time.perf_counter() - wall_start
    recorded = services.record_result(
        frame_id=frame_id, dispatch_no=dispatch_no, labels=result.labels.get("instances", []), cpu_s=cpu_s,
        wall_s=wall_s, timings_s=result.timings_s, output_dir=relative, worker_host=host,
    )
    scheduler.dispatch(campaign_id=campaign.pk)
    return {"frame_id": frame_id, "recorded": recorded, "cpu_s": round(cpu_s, 3), "wall_s": round(wall_s, 3)}
