"""Celery tasks, thin: claim a frame, call the render core, hand the result to a campaigns service.

Registered when ``evenframe.celery`` autodiscovers ``campaigns``.
"""

from __future__ import annotations

import logging
import os
import shutil
import socket
import time
import traceback as traceback_module
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

from celery import shared_task
from django.conf import settings
from django.core.mail import send_mail

from campaigns import notify, planner, scheduler, selectors, services
from campaigns.frame_files import frame_output_dir, publish_frame_dir, remove_partial_folders
from campaigns.models import Notification
from fleet import faults

log = logging.getLogger("evenframe.workers")
T = TypeVar("T")


def render_frame_files(
    *,
    budget: dict[str, Any],
    composition: dict[str, int],
    seeds: Any,
    out_dir: Path,
    user_assets: dict[str, list[dict[str, str]]] | None = None,
) -> Any:
    """Call the render core (imported here, in the worker process, never at Django load).

    ``user_assets`` are the campaign's uploaded meshes (``campaigns.selectors.campaign_user_mesh_entries``).
    """
    # deferred: render-core entry point stays a call-time import (workers load the renderer late)
    from render.frame import render_frame_from_inputs

    threads = int(os.environ.get("EVENFRAME_RENDER_THREADS", "0") or 0) or None
    return render_frame_from_inputs(
        budget,
        composition,
        seeds.seed,
        layout_seed=seeds.layout_seed,
        lighting_seed=seeds.lighting_seed,
        camera_seed=seeds.camera_seed,
        view_slot=getattr(seeds, "view_slot", None),
        out_dir=out_dir,
        threads=threads,
        user_assets=user_assets or None,
    )


def _is_permanent(exc: BaseException) -> bool:
    """Errors that the same inputs would raise again: no point retrying."""
    try:
        from render.budget import BudgetError  # deferred: ImportError fallback below
        from render.layout import LayoutError  # deferred: ImportError fallback below
        from render.meshes import MeshError  # deferred: ImportError fallback below
        from render.spec import SpecError  # deferred: ImportError fallback below
    except ImportError:  # render core incomplete: treat everything as transient
        return False
    return isinstance(exc, (LayoutError, BudgetError, SpecError, MeshError))


def with_database_retry(call: Callable[[], T], *, what: str) -> T:
    """Run a database call, retrying through an outage (restart, failover, dropped connections).

    Each service call is one transaction and conditional on the frame's state, so running it again after a
    lost connection is safe: a result whose commit went through before the connection dropped is found done
    and not counted again. Gives up after EVENFRAME_DATABASE_RETRY_S seconds.
    """
    from django.conf import settings
    from django.db import InterfaceError, OperationalError, connection

    deadline = time.monotonic() + settings.DATABASE_RETRY_S
    pause_s = 0.5
    while True:
        try:
            return call()
        except (OperationalError, InterfaceError) as exc:
            if time.monotonic() + pause_s > deadline:
                raise
            log.warning("%s: database unavailable (%s); retrying in %.1f s", what, exc, pause_s)
            try:
                connection.close()  # a broken connection is not reused; the next call opens a new one
            except Exception:  # noqa: BLE001 - closing a dead connection may raise too
                pass
            time.sleep(pause_s)
            pause_s = min(5.0, pause_s * 2)


@shared_task(name="evenframe.render_frame", bind=True, acks_late=True, ignore_result=True)
def render_frame(self, frame_id: int, dispatch_no: int, campaign_uid: str | None = None) -> dict:
    """Render one campaign frame. Safe to deliver twice: the claim and the result are conditional on the frame.

    Files are written into a hidden partial folder beside the frame's folder and renamed into place only after
    the render succeeded; the result is recorded only after that, so a failure (disk full, read-only media,
    a crash) never leaves a counted frame with missing or half-written files.
    """
    host = getattr(self.request, "hostname", None) or socket.gethostname()
    claim = with_database_retry(
        lambda: services.claim_frame(
            frame_id=frame_id,
            dispatch_no=dispatch_no,
            worker_host=host,
            task_id=getattr(self.request, "id", None) or "",
            campaign_uid=campaign_uid,
        ),
        what=f"frame {frame_id} claim",
    )
    if not claim.ok:
        log.info("frame %s (dispatch %s) not rendered: %s", frame_id, dispatch_no, claim.reason)
        if claim.frame is not None and claim.frame.state == "dead":
            remove_partial_folders(frame_output_dir(campaign_id=claim.frame.campaign_id, index=claim.frame.index)[0])
        return {"frame_id": frame_id, "skipped": claim.reason}
    frame, campaign = claim.frame, claim.campaign
    if frame is None or campaign is None:  # claim_frame() returns both with every successful claim
        raise RuntimeError(f"frame {frame_id}: the claim succeeded without its frame and campaign")
    views_per_lighting = int((campaign.budget.get("variation") or {}).get("views_per_lighting", 1))
    seeds = planner.frame_seeds(
        campaign_seed=campaign.seed,
        index=frame.index,
        layout_index=frame.layout_index,
        lighting_index=frame.lighting_index,
        view_index=frame.view_index,
        views_per_lighting=views_per_lighting,
    )
    out_dir, relative = frame_output_dir(campaign_id=campaign.pk, index=frame.index)
    partial = out_dir.with_name(f".{out_dir.name}.partial-d{dispatch_no}-a{frame.attempts}-{os.getpid()}")
    # process_time counts every thread of this process, Dr.Jit's render threads included.
    cpu_start, wall_start = time.process_time(), time.perf_counter()
    try:
        shutil.rmtree(partial, ignore_errors=True)
        partial.mkdir(parents=True)
        faults.before_render(campaign_id=campaign.pk, index=frame.index, attempt=frame.attempts)
        user_assets = with_database_retry(
            lambda: selectors.campaign_user_mesh_entries(campaign=campaign), what=f"frame {frame_id} assets"
        )
        result = render_frame_files(
            budget=campaign.budget, composition=frame.composition, seeds=seeds, out_dir=partial, user_assets=user_assets
        )
        publish_frame_dir(partial=partial, final=out_dir)
    except Exception as exc:  # noqa: BLE001 - every failure is recorded on the frame, then retried or dead
        cpu_s, wall_s = time.process_time() - cpu_start, time.perf_counter() - wall_start
        shutil.rmtree(partial, ignore_errors=True)
        error, trace, permanent = f"{type(exc).__name__}: {exc}", traceback_module.format_exc(), _is_permanent(exc)
        state = with_database_retry(
            lambda: services.record_failure(
                frame_id=frame_id,
                dispatch_no=dispatch_no,
                error=error,
                traceback=trace,
                cpu_s=cpu_s,
                wall_s=wall_s,
                permanent=permanent,
                worker_host=host,
            ),
            what=f"frame {frame_id}",
        )
        log.warning("frame %s failed (%s): %s", frame_id, state, exc)
        _dispatch_after(scheduler, campaign.pk)
        return {"frame_id": frame_id, "state": state, "error": str(exc)}
    cpu_s, wall_s = time.process_time() - cpu_start, time.perf_counter() - wall_start
    recorded = with_database_retry(
        lambda: services.record_result(
            frame_id=frame_id,
            dispatch_no=dispatch_no,
            labels=result.labels.get("instances", []),
            cpu_s=cpu_s,
            wall_s=wall_s,
            timings_s=result.timings_s,
            output_dir=relative,
            worker_host=host,
        ),
        what=f"frame {frame_id}",
    )
    _dispatch_after(scheduler, campaign.pk)
    return {"frame_id": frame_id, "recorded": recorded, "cpu_s": round(cpu_s, 3), "wall_s": round(wall_s, 3)}


def _dispatch_after(scheduler: Any, campaign_id: int) -> None:
    """Top up after a frame; a failure here (database or broker down) is left to the heartbeat sweep."""
    try:
        scheduler.dispatch(campaign_id=campaign_id)
    except Exception:  # noqa: BLE001 - the frame's own outcome is recorded; topping up can wait for the sweep
        log.warning("dispatch after campaign %s's frame failed; the next sweep tops up", campaign_id, exc_info=True)


@shared_task(name="evenframe.deliver_notification", ignore_result=True)
def deliver_notification(notification_id: int) -> str:
    """One delivery attempt of a notification (webhook POST or e-mail); the service counts it and schedules the
    retry. Returns the notification's state after the attempt."""
    return deliver(notification_id=notification_id)


def deliver(*, notification_id: int) -> str:
    """The task's body, callable in-process (tests, ``manage.py campaign tick``)."""
    row = selectors.notification_to_send(notification_id=notification_id)
    if row is None:
        return "not pending"
    if row.channel == Notification.Channel.WEBHOOK:
        attempt = _post(row)
    else:
        attempt = _mail(row)
    if not attempt.ok:
        log.warning("notification %s (%s, %s) failed: %s", row.pk, row.event, row.channel, attempt.error)
    return services.record_notification_attempt(notification_id=row.pk, attempt=attempt)


def _post(row: Notification) -> notify.Attempt:
    if settings.WEBHOOK_BLOCK_PRIVATE:
        refused = notify.private_target(row.target)
        if refused:
            return notify.Attempt(False, None, f"refused: {refused} (EVENFRAME_WEBHOOK_BLOCK_PRIVATE)")
    return notify.post_webhook(
        url=row.target,
        event=row.event,
        delivery_id=str(row.delivery_id),
        secret=row.campaign.notify_secret,
        payload=row.payload,
    )


def _mail(row: Notification) -> notify.Attempt:
    subject, body = notify.email_text(row.payload)
    try:
        send_mail(subject, body, None, row.target.split(), fail_silently=False)
    except Exception as exc:  # noqa: BLE001 - any mail failure (SMTP, DNS, refused) is a failed attempt to retry
        return notify.Attempt(False, None, f"{type(exc).__name__}: {exc}"[: notify.ERROR_TEXT_LIMIT])
    return notify.Attempt(True, None, "")
