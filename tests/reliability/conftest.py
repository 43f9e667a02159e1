"""Fixtures for the fault tests: workers with a fast recovery sweep, a private Redis, helpers to wait and recount.

Everything here runs real processes: ``manage.py render_worker`` subprocesses (tests/conftest.py), a private
``redis-server`` on a free port (never the machine's Redis on 6379, which other suites use), and server-side
disconnects on the test database (never a restart of the machine's PostgreSQL).
"""

from __future__ import annotations

import json
import socket
import subprocess
import time
from pathlib import Path

import pytest

# The campaigns suite's fixtures (user, classes, make_campaign, media_root) and its 64×48 px, 4 spp budget.
from tests.campaigns.conftest import TINY_BUDGET, classes, make_campaign, user  # noqa: F401

# Workers in these tests notice a dead peer within seconds: heartbeat every 1 s (set by the factory), a peer
# is dead 4 s after its last beat, and every worker sweeps every second.
FAST_RECOVERY_ENV = {
    "EVENFRAME_WORKER_LIVE_WINDOW_S": "4",
    "EVENFRAME_WORKER_SWEEP_S": "1",
    "EVENFRAME_STALE_QUEUED_S": "15",
    "EVENFRAME_DATABASE_RETRY_S": "120",
}


def wait_for(predicate, *, timeout_s: float, what: str, workers=(), interval_s: float = 0.2):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(interval_s)
    logs = "\n".join(f"--- {w.name}\n{w.log()}" for w in workers)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}\n{logs}")


def faults_env(**faults) -> dict[str, str]:
    return {"EVENFRAME_FAULTS": json.dumps(faults)}


@pytest.fixture
def fault_worker(render_worker_factory, media_root):  # noqa: F811 - media_root is the imported fixture
    """``fault_worker(faults={...}, env={...}, concurrency=1)``: a render worker with the fast recovery settings."""

    def start(*, faults: dict | None = None, env: dict | None = None, concurrency: int = 1):
        extra = {**FAST_RECOVERY_ENV, "EVENFRAME_MEDIA_ROOT": str(media_root), **(env or {})}
        if faults:
            extra.update(faults_env(**faults))
        return render_worker_factory(concurrency=concurrency, threads=1, extra_env=extra)

    return start


def assert_counters_exact(campaign, *, media_root: Path | None = None) -> None:  # noqa: F811 - a folder
    """Counters equal a recount from frame and instance rows; done frames have all their files, no partials."""
    from campaigns import integrity

    result = integrity.recount(campaign=campaign)
    assert result.ok, (result.mismatches, result.double_counted_frames, result.stray_instances)
    if media_root is not None:
        assert integrity.missing_frame_files(campaign=campaign, media_root=media_root) == []
        assert integrity.partial_folders(campaign=campaign, media_root=media_root) == []


def settled(campaign) -> bool:
    from campaigns.models import Frame

    return not Frame.objects.filter(campaign=campaign, state__in=("queued", "running", "failed")).exists()


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class PrivateRedis:
    """A redis-server this test owns (no persistence: a restart loses every message, the worst case)."""

    def __init__(self, port: int, log_path: Path) -> None:
        self.port = port
        self.log_path = log_path
        self.proc: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> None:
        handle = open(self.log_path, "ab")
        self.proc = subprocess.Popen(
            [
                "redis-server",
                "--port",
                str(self.port),
                "--bind",
                "127.0.0.1",
                "--save",
                "",
                "--appendonly",
                "no",
                "--daemonize",
                "no",
            ],
            stdout=handle,
            stderr=subprocess.STDOUT,
        )
        import redis

        client = redis.Redis(host="127.0.0.1", port=self.port)
        wait_for(lambda: self._ping(client), timeout_s=10, what=f"redis-server on port {self.port}")

    @staticmethod
    def _ping(client) -> bool:
        try:
            return bool(client.ping())
        except Exception:  # noqa: BLE001 - not up yet
            return False

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            self.proc.wait(10)
        self.proc = None


@pytest.fixture
def private_redis(tmp_path, settings, monkeypatch):
    """Start a private Redis and make this process's scheduler send to it; skipped on the file-system broker."""
    if not settings.CELERY_BROKER_URL.startswith("redis://"):
        pytest.skip("Redis restart test: the suite runs on the embedded file-system broker")
    from celery import Celery

    from campaigns import messaging

    server = PrivateRedis(free_port(), tmp_path / "redis.log")
    server.start()
    # Not the current app: shared tasks (ping, render_frame) must keep using the project's app and its
    # result backend in the tests that run after this one.
    app = Celery("evenframe-private-redis", set_as_current=False)
    app.conf.update(
        broker_url=server.url,
        task_default_queue=settings.CELERY_TASK_DEFAULT_QUEUE,
        task_serializer="json",
        accept_content=["json"],
        broker_connection_retry_on_startup=True,
    )

    def send(*, frame_id: int, dispatch_no: int, campaign_uid: str, task_id: str, countdown_s: float = 0.0) -> None:
        app.send_task(
            messaging.TASK_NAME,
            kwargs={"frame_id": frame_id, "dispatch_no": dispatch_no, "campaign_uid": campaign_uid},
            task_id=task_id,
            countdown=countdown_s if countdown_s > 0 else None,
        )

    monkeypatch.setattr(messaging, "send_frame_task", send)
    yield server
    server.stop()
    from evenframe.celery import app as project_app

    project_app.set_current()
