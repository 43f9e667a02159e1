"""Shared fixtures: real render worker processes against the test database and broker; headless Chromium."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM_PATH = "/usr/bin/chromium"  # Debian's package: Playwright's own browser downloads are not used
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]


def _database_url_for_tests() -> str:
    """A DATABASE_URL that points a separate process at the database the tests use right now."""
    from django.db import connection

    s = connection.settings_dict
    if connection.vendor == "sqlite":
        return f"sqlite:///{Path(s['NAME']).resolve()}"
    if connection.vendor == "postgresql":
        user = s.get("USER") or ""
        password = f":{s['PASSWORD']}" if s.get("PASSWORD") else ""
        auth = f"{user}{password}@" if user else ""
        host = s.get("HOST") or "127.0.0.1"
        port = f":{s['PORT']}" if s.get("PORT") else ""
        return f"postgres://{auth}{host}{port}/{s['NAME']}"
    raise RuntimeError(f"no worker support for database vendor {connection.vendor}")


class WorkerProcess:
    def __init__(self, proc: subprocess.Popen, name: str, log_path: Path) -> None:
        self.proc = proc
        self.name = name
        self.log_path = log_path

    @property
    def pid(self) -> int:
        return self.proc.pid

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-6000:]
        except OSError:
            return ""

    def stop(self, timeout_s: float = 30) -> None:
        if self.proc.poll() is not None:
            return
        # Warm shutdown (SIGTERM) lets the worker finish and ack; then force.
        os.killpg(self.proc.pid, signal.SIGTERM)
        try:
            self.proc.wait(timeout_s)
        except subprocess.TimeoutExpired:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)

    def kill(self) -> None:
        """kill -9 the whole worker (main process and pool children)."""
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)


@pytest.fixture
def media_root(settings, tmp_path) -> Path:
    """A private, empty MEDIA_ROOT for this test."""
    settings.MEDIA_ROOT = tmp_path / "media"
    settings.MEDIA_ROOT.mkdir(exist_ok=True)
    return settings.MEDIA_ROOT


@pytest.fixture
def render_worker_factory(transactional_db, tmp_path):
    """Start `manage.py render_worker` subprocesses that use the test database; stop them afterwards.

    Usage: ``worker = render_worker_factory(concurrency=1)``; it returns once the worker's
    heartbeat is in the database (so it is live for the scheduler).
    """
    from django.conf import settings

    from evenframe.celery import ensure_broker_folders
    from fleet.models import WorkerHeartbeat

    ensure_broker_folders()
    started: list[WorkerProcess] = []
    database_url = _database_url_for_tests()

    def start(
        *, concurrency: int = 1, threads: int = 1, extra_env: dict | None = None, ready_timeout_s: float = 90
    ) -> WorkerProcess:
        name = f"test-{uuid.uuid4().hex[:8]}@{os.uname().nodename}"
        env = {
            **os.environ,
            "DATABASE_URL": database_url,
            "CELERY_BROKER_URL": settings.CELERY_BROKER_URL,
            "EVENFRAME_MEDIA_ROOT": str(settings.MEDIA_ROOT),
            "EVENFRAME_DATA_DIR": str(settings.DATA_DIR),
            "EVENFRAME_WORKER_HEARTBEAT_S": "1",
            "PYTHONUNBUFFERED": "1",
            **(extra_env or {}),
        }
        if settings.CELERY_RESULT_BACKEND:
            env["CELERY_RESULT_BACKEND"] = settings.CELERY_RESULT_BACKEND
        log_path = tmp_path / f"worker-{name.split('@')[0]}.log"
        handle = open(log_path, "wb")
        proc = subprocess.Popen(
            [
                sys.executable,
                str(ROOT / "manage.py"),
                "render_worker",
                f"--concurrency={concurrency}",
                f"--threads={threads}",
                f"--name={name}",
                "--loglevel=INFO",
            ],
            cwd=ROOT,
            env=env,
            stdout=handle,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        worker = WorkerProcess(proc, name, log_path)
        started.append(worker)
        deadline = time.monotonic() + ready_timeout_s
        while time.monotonic() < deadline:
            if proc.poll() is not None:
                raise RuntimeError(f"worker exited with {proc.returncode}:\n{worker.log()}")
            if WorkerHeartbeat.objects.filter(hostname=name, stopped_at__isnull=True).exists():
                return worker
            time.sleep(0.2)
        worker.stop()
        raise RuntimeError(f"worker {name} sent no heartbeat within {ready_timeout_s} s:\n{worker.log()}")

    yield start
    for worker in started:
        worker.stop()


@pytest.fixture(scope="session", autouse=True)
def _purge_stale_broker_messages(django_db_blocker):
    """Messages left in the broker by an earlier, interrupted run must not reach this run's workers."""
    from evenframe.celery import app, ensure_broker_folders

    ensure_broker_folders()
    try:
        app.control.purge()
    except Exception:  # noqa: BLE001 - an unreachable broker fails the tests that need it, with their own message
        pass
    yield


@pytest.fixture
def chromium_context(monkeypatch) -> Iterator[Any]:
    """A fresh Playwright browser context (1366×900, 30 s default timeout) in headless Debian Chromium.

    Skips when Playwright or ``/usr/bin/chromium`` is missing. Open pages with ``chromium_context.new_page()``.
    """
    # Playwright's sync API runs an event loop in this thread; Django's async-safety check would refuse the ORM
    # calls a test makes between browser steps. Set for these tests only, never for the whole session.
    monkeypatch.setenv("DJANGO_ALLOW_ASYNC_UNSAFE", "true")
    playwright = pytest.importorskip("playwright.sync_api")
    if not os.path.exists(CHROMIUM_PATH):
        pytest.skip("Debian chromium is not installed")
    with playwright.sync_playwright() as p:
        # Inside Playwright's event loop Django hands out context-local connections, which can outlive a test:
        # one opened by an earlier browser test and cut by the database-outage test (PostgreSQL) would fail the
        # next query. Close them so that the next query opens a fresh one.
        from django.db import connections

        connections.close_all()
        browser = p.chromium.launch(executable_path=CHROMIUM_PATH, args=CHROMIUM_ARGS)
        context = browser.new_context(viewport={"width": 1366, "height": 900})
        context.set_default_timeout(30_000)
        yield context
        browser.close()


def _wait_until(predicate: Callable[[], Any], timeout_s: float, what: str, *, poll_s: float = 0.3) -> Any:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(poll_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


@pytest.fixture
def wait_until() -> Callable[..., Any]:
    """``wait_until(predicate, timeout_s, what)``: poll until ``predicate()`` is truthy and return it; fail the
    test naming ``what`` after ``timeout_s`` seconds."""
    return _wait_until


# Fixtures that give a test the database (and with it the configured broker): a test that asks for none of them,
# and has no django_db mark, cannot touch either, so it checks the same thing under every configuration.
DATABASE_FIXTURES = ("db", "transactional_db", "live_server")


def uses_configuration(item: pytest.Item) -> bool:
    """Whether a test can see the configuration (database, broker): it is marked django_db or ``configuration``,
    or uses a database fixture. (``django_db_blocker`` is not one: an autouse session fixture of this file takes it for every test.)"""
    fixtures = getattr(item, "fixturenames", ())
    marked = any(item.get_closest_marker(name) is not None for name in ("django_db", "configuration"))
    return marked or any(f in fixtures for f in DATABASE_FIXTURES)


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """``EVENFRAME_CONFIGURATION_TESTS_ONLY=1``: run only the tests that see the configuration. CI's second run (the
    embedded default after PostgreSQL + Redis) uses it: the others already ran and would check nothing new."""
    if os.environ.get("EVENFRAME_CONFIGURATION_TESTS_ONLY") != "1":
        return
    kept = [item for item in items if uses_configuration(item)]
    dropped = [item for item in items if not uses_configuration(item)]
    if dropped:
        config.hook.pytest_deselected(items=dropped)
        items[:] = kept
