"""Health checks shared by the health page, its JSON twin and ``manage.py healthcheck``."""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass

from django.conf import settings
from django.db import connection

from evenframe.celery import app
from fleet.models import live_workers


@dataclass
class Check:
    name: str
    ok: bool
    detail: str


def check_database() -> Check:
    try:
        with connection.cursor() as cursor:
            cursor.execute("SELECT 1")
            cursor.fetchone()
        vendor = connection.vendor
        if vendor == "sqlite":
            with connection.cursor() as cursor:
                cursor.execute("PRAGMA journal_mode")
                mode = cursor.fetchone()[0]
            return Check("database", True, f"sqlite ({mode}) at {connection.settings_dict['NAME']}")
        return Check("database", True, f"{vendor} {connection.settings_dict.get('HOST') or 'socket'}")
    except Exception as exc:  # noqa: BLE001 - any failure is the health answer
        return Check("database", False, f"{type(exc).__name__}: {exc}")


def check_broker() -> Check:
    url = settings.CELERY_BROKER_URL
    shown = url.split("@")[-1] if "@" in url else url
    try:
        with app.connection_for_write() as conn:
            conn.ensure_connection(max_retries=1, timeout=3)
            transport = conn.transport_cls
        return Check("broker", True, f"{transport} ({shown})")
    except Exception as exc:  # noqa: BLE001
        return Check("broker", False, f"{shown}: {type(exc).__name__}: {exc}")


def check_workers() -> Check:
    try:
        workers = list(live_workers())
    except Exception as exc:  # noqa: BLE001
        return Check("workers", False, f"{type(exc).__name__}: {exc}")
    if not workers:
        return Check(
            "workers", False, f"no worker has sent a heartbeat in the last {settings.WORKER_LIVE_WINDOW_S:g} s"
        )
    names = ", ".join(f"{w.hostname} ({w.renderer_variant}, {w.concurrency}×)" for w in workers)
    return Check("workers", True, f"{len(workers)} live: {names}")


def check_renderer() -> Check:
    from render.backend import choose_backend  # deferred: keeps the render core out of the web process

    try:
        choice = choose_backend()
    except RuntimeError as exc:
        return Check("renderer", False, str(exc))
    return Check("renderer", True, f"{choice.variant} ({choice.reason})")


def run_checks() -> dict:
    started = time.monotonic()
    checks = [check_database(), check_broker(), check_workers(), check_renderer()]
    return {
        "ok": all(c.ok for c in checks),
        "checks": [asdict(c) for c in checks],
        "elapsed_s": round(time.monotonic() - started, 3),
    }
