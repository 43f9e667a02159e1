"""Worker heartbeats: each Celery worker node upserts a row every few seconds.

This works on every broker (the file-system transport has no remote
control), and the dashboard reads live workers from the database.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time

from celery import signals
from django.conf import settings
from django.db import close_old_connections
from django.utils import timezone

from fleet import hooks
from fleet.models import WorkerHeartbeat

log = logging.getLogger("evenframe.workers")
_stop = threading.Event()
_state: dict = {}


def _beat(hostname: str, concurrency: int) -> None:
    # deferred: keeps the render core out of Django start-up (fleet.apps.ready imports this)
    from render.backend import choose_backend

    try:
        choice = choose_backend()
        variant, reason = choice.variant, choice.reason
    except RuntimeError as exc:
        variant, reason = "", str(exc)
    log.info("worker %s: renderer variant %s (%s)", hostname, variant, reason)
    defaults = {
        "machine": socket.gethostname(),
        "pid": os.getpid(),
        "concurrency": concurrency,
        "renderer_variant": variant,
        "renderer_reason": reason[:255],
        "started_at": timezone.now(),
        "stopped_at": None,
    }
    first = True
    healthy_since: float | None = None
    last_sweep = time.monotonic()
    while not _stop.is_set():
        try:
            close_old_connections()
            if first:
                WorkerHeartbeat.objects.update_or_create(
                    hostname=hostname, defaults={**defaults, "last_seen": timezone.now()}
                )
                first = False
            else:
                WorkerHeartbeat.objects.filter(hostname=hostname).update(last_seen=timezone.now(), stopped_at=None)
            healthy_since = healthy_since if healthy_since is not None else time.monotonic()
        except Exception:  # noqa: BLE001 - a database blip must not kill the worker; retry next beat
            log.warning("heartbeat for %s failed; retrying", hostname, exc_info=True)
            first = True
            healthy_since = None
        # The recovery sweep needs no beat process: every live worker runs it. Only after this worker's own
        # beats have gone through for a whole live window: after a database outage every heartbeat is old, and
        # a worker that came back first must not take the running frames of workers that are about to beat.
        now = time.monotonic()
        if (
            settings.WORKER_SWEEP_S > 0
            and now - last_sweep >= settings.WORKER_SWEEP_S
            and healthy_since is not None
            and now - healthy_since >= settings.WORKER_LIVE_WINDOW_S
        ):
            last_sweep = now
            _sweep()
        _stop.wait(settings.WORKER_HEARTBEAT_S)


def _sweep() -> None:
    try:
        counts = hooks.run_sweep()
        if counts and any(counts.get(k) for k in ("requeued", "dead", "revoked")):
            log.warning("recovery sweep: %s", counts)
    except Exception:  # noqa: BLE001 - the next sweep tries again
        log.warning("recovery sweep failed; retrying at the next one", exc_info=True)


def _mark_stopped(hostname: str) -> None:
    try:
        close_old_connections()
        WorkerHeartbeat.objects.filter(hostname=hostname).update(stopped_at=timezone.now())
    except Exception:  # noqa: BLE001
        log.warning("could not mark %s stopped", hostname, exc_info=True)


@signals.worker_ready.connect
def _start_heartbeat(sender=None, **_kwargs) -> None:
    hostname = getattr(sender, "hostname", None) or socket.gethostname()
    concurrency = int(getattr(getattr(sender, "controller", None), "concurrency", 0) or 1)
    _stop.clear()
    thread = threading.Thread(target=_beat, args=(hostname, concurrency), name="evenframe-heartbeat", daemon=True)
    _state["hostname"], _state["thread"] = hostname, thread
    thread.start()


@signals.worker_shutdown.connect
def _stop_heartbeat(**_kwargs) -> None:
    _stop.set()
    thread, hostname = _state.get("thread"), _state.get("hostname")
    if thread is not None:
        thread.join(timeout=5)
    if hostname:
        # Written here, not by the daemon thread, because the process may exit before that thread wakes.
        _mark_stopped(hostname)
