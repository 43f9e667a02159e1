"""Faults with real processes: kill -9, a crashing renderer, broker and database outages, disk full.

After each fault the campaign finishes and its counters equal a recount from the frame and instance rows
(campaigns.integrity.recount). Frames are 64×48 px, 4 spp; each test takes well under a minute.
"""

from __future__ import annotations

import subprocess
import time

import pytest
from django.db import connection
from django.utils import timezone

from campaigns.models import Campaign, Frame, FrameEvent
from tests.reliability.conftest import assert_counters_exact, settled, wait_for

pytestmark = [pytest.mark.worker, pytest.mark.django_db(transaction=True)]


def _status(campaign) -> str:
    return Campaign.objects.values_list("status", flat=True).get(pk=campaign.pk)


def _running_on(campaign, worker):
    return Frame.objects.filter(campaign=campaign, state="running", worker_host=worker.name).first()


def _kill_mid_frame_then_recover(fault_worker, make_campaign, media_root, *, env: dict | None = None):
    # Worker A takes a frame and stays in it (the injected delay); B renders normally.
    slow = fault_worker(faults={"render_delay_s": 60}, env=env)
    campaign = make_campaign(quotas={"chair": 4, "ottoman": 2}, start=True)
    frame = wait_for(lambda: _running_on(campaign, slow), timeout_s=60, what="a frame running on A", workers=[slow])
    # B takes 3 s a frame: with frames as fast as the tiny budget's, B could fill the quotas before A is seen dead
    # (4 s after its last beat), and the campaign would then rightly revoke A's frame instead of rerunning it.
    fast = fault_worker(faults={"render_delay_s": 3}, env=env)
    slow.kill()
    wait_for(lambda: _status(campaign) == "completed", timeout_s=120, what="the campaign to complete", workers=[fast])
    wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=[fast])
    frame.refresh_from_db()
    assert frame.state == "done" and frame.worker_host == fast.name
    assert frame.attempts == 2  # the killed attempt and the one that finished
    assert FrameEvent.objects.filter(frame=frame, to_state="done").count() == 1
    assert_counters_exact(campaign, media_root=media_root)
    return frame


def test_kill_9_mid_frame_the_frame_is_rerun_by_another_worker_and_counted_once(
    fault_worker, make_campaign, media_root
):
    """Both transports: the heartbeat sweep takes the dead worker's frame back under a new dispatch number."""
    frame = _kill_mid_frame_then_recover(fault_worker, make_campaign, media_root)
    events = list(FrameEvent.objects.filter(frame=frame).values_list("from_state", "to_state", "detail"))
    assert any(f == "running" and t == "queued" and "no heartbeat" in d for f, t, d in events), events
    assert frame.dispatch_count == 2  # the dead worker's message, were it redelivered, is stale


def test_kill_9_on_redis_is_redelivered_after_the_visibility_timeout(fault_worker, make_campaign, media_root, settings):
    """Redis alone (sweep off): acks_late keeps the message unacked, and it comes back after the timeout."""
    if not settings.CELERY_BROKER_URL.startswith("redis://"):
        pytest.skip("visibility timeout: Redis only (the file-system transport deletes a taken message)")
    env = {"EVENFRAME_WORKER_SWEEP_S": "0", "EVENFRAME_BROKER_VISIBILITY_TIMEOUT_S": "8"}
    frame = _kill_mid_frame_then_recover(fault_worker, make_campaign, media_root, env=env)
    assert frame.dispatch_count == 1  # the same message, delivered again
    events = list(FrameEvent.objects.filter(frame=frame).values_list("to_state", "detail"))
    assert ("running", "attempt 2 (redelivered)") in events, events


def test_a_frame_that_always_crashes_the_renderer_is_dead_after_its_retries(fault_worker, make_campaign, media_root):
    """Frame 0 raises in the render core every time; frame 1 aborts its process (like a segfault)."""
    worker = fault_worker(faults={"crash_frames": [0], "abort_frames": [1]})
    campaign = make_campaign(quotas={"chair": 4, "ottoman": 2}, max_attempts=2, start=True)
    wait_for(lambda: _status(campaign) == "completed", timeout_s=150, what="the campaign to complete", workers=[worker])
    wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=[worker])
    crashed, aborted = Frame.objects.get(campaign=campaign, index=0), Frame.objects.get(campaign=campaign, index=1)
    assert crashed.state == "dead" and crashed.attempts == 2 and "InjectedRenderCrash" in crashed.error
    # The aborted process never reports; Celery requeues the message (reject_on_worker_lost) and the claim
    # ends it once the attempts are used.
    assert aborted.state == "dead" and aborted.attempts == 2
    assert FrameEvent.objects.filter(frame=aborted, to_state="dead", detail__contains="attempt limit").exists()
    campaign.refresh_from_db()
    assert campaign.frames_dead == 2 and campaign.frames_done >= 1
    assert_counters_exact(campaign, media_root=media_root)


def _mount_tmpfs(path, *, size: str) -> None:
    path.mkdir(parents=True, exist_ok=True)
    result = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(path)], capture_output=True)
    if result.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs for the disk-full test: {result.stderr.decode().strip()}")


def _fill(path) -> None:
    """Write until the file system is full (a real ENOSPC for the next writer)."""
    for name, chunk in (("filler", 65536), ("filler-tail", 512)):  # then the last partial block
        with open(path / name, "wb", buffering=0) as handle:
            try:
                while True:
                    handle.write(b"\0" * chunk)
            except OSError:
                pass


def _failure_with(campaign, text: str) -> bool:
    return FrameEvent.objects.filter(campaign=campaign, to_state__in=("failed", "dead"), detail__contains=text).exists()


def test_read_only_then_full_media_fail_frames_with_the_reason_and_nothing_half_written_counts(
    fault_worker, make_campaign, tmp_path
):
    """A real file system: a tmpfs mounted read-only, then full; the frames fail with the OS's reason."""
    media = tmp_path / "media-tmpfs"
    _mount_tmpfs(media, size="4m")
    try:
        (media / "campaigns").mkdir()
        subprocess.run(["mount", "-o", "remount,ro", str(media)], check=True)
        worker = fault_worker(env={"EVENFRAME_MEDIA_ROOT": str(media)})
        campaign = make_campaign(quotas={"chair": 4, "ottoman": 2}, max_attempts=6, start=True)
        wait_for(
            lambda: _failure_with(campaign, "Read-only file system"),
            timeout_s=60,
            what="a frame failing on the read-only media",
            workers=[worker],
        )
        subprocess.run(["mount", "-o", "remount,rw", str(media)], check=True)
        _fill(media)
        wait_for(
            lambda: _failure_with(campaign, "No space left on device"),
            timeout_s=60,
            what="a frame failing on the full media",
            workers=[worker],
        )
        assert not Frame.objects.filter(campaign=campaign, state="done").exists()
        # What a failed write left (the partial folder) is gone; nothing was counted.
        campaign.refresh_from_db()
        assert campaign.frames_done == 0 and campaign.instances_accepted == 0
        for name in ("filler", "filler-tail"):
            (media / name).unlink()
        wait_for(
            lambda: _status(campaign) == "completed", timeout_s=150, what="the campaign to complete", workers=[worker]
        )
        wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=[worker])
        assert_counters_exact(campaign, media_root=media)
        failed = Frame.objects.filter(campaign=campaign, events__to_state="failed").distinct()
        assert failed.exists() and all(f.state in ("done", "dead", "revoked") for f in failed)
        worker.stop()
    finally:
        subprocess.run(["umount", "-l", str(media)], capture_output=True)


def test_redis_stop_and_restart_mid_campaign(fault_worker, make_campaign, media_root, private_redis):
    """Every message is lost with the server (no persistence); workers reconnect and the sweep resends."""
    env = {"CELERY_BROKER_URL": private_redis.url}
    workers = [fault_worker(env=env), fault_worker(env=env)]
    campaign = make_campaign(quotas={"chair": 40, "ottoman": 15}, start=True)
    wait_for(
        lambda: Frame.objects.filter(campaign=campaign, state="done").exists(),
        timeout_s=90,
        what="a first frame",
        workers=workers,
    )
    private_redis.stop()
    time.sleep(5)
    # Frames already delivered finish during the outage; the quotas need frames sent after the restart.
    assert _status(campaign) == "running", "the quotas filled during the outage: make them larger"
    restarted = timezone.now()
    private_redis.start()
    wait_for(
        lambda: _status(campaign) == "completed",
        timeout_s=180,
        what="the campaign to complete after the restart",
        workers=workers,
    )
    wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=workers)
    assert_counters_exact(campaign, media_root=media_root)
    assert Frame.objects.filter(campaign=campaign, state="done", queued_at__gt=restarted).exists()
    for worker in workers:
        assert worker.proc.poll() is None, worker.log()  # the workers survived the outage


def _outage(*, seconds: float) -> int:
    """Refuse new connections to the test database and drop every open one but this test's own (a
    server-side disconnect, as a restart does), for ``seconds``; returns how many connections were dropped.

    Run from a second connection to the maintenance database: PostgreSQL will not let a session disallow
    connections to the database it is in."""
    import psycopg

    database = connection.settings_dict["NAME"]
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_backend_pid()")
        ours = cursor.fetchone()[0]
    s = connection.settings_dict
    admin = psycopg.connect(
        host=s.get("HOST") or "127.0.0.1",
        port=s.get("PORT") or 5432,
        user=s.get("USER"),
        password=s.get("PASSWORD") or None,
        dbname="postgres",
        autocommit=True,
    )
    dropped = 0
    try:
        admin.execute(f'ALTER DATABASE "{database}" ALLOW_CONNECTIONS false')
        deadline = time.monotonic() + seconds
        while time.monotonic() < deadline:
            dropped += admin.execute(
                "SELECT count(pg_terminate_backend(pid)) FROM pg_stat_activity WHERE datname = %s AND pid <> %s",
                [database, ours],
            ).fetchone()[0]
            time.sleep(0.5)
    finally:
        admin.execute(f'ALTER DATABASE "{database}" ALLOW_CONNECTIONS true')
        admin.close()
    return dropped


def test_database_outage_mid_campaign(fault_worker, make_campaign, media_root):
    """PostgreSQL only: workers lose their connections, cannot reconnect for 8 s, then carry on."""
    if connection.vendor != "postgresql":
        pytest.skip("database outage: PostgreSQL only (SQLite is a local file)")
    workers = [fault_worker(), fault_worker()]
    campaign = make_campaign(quotas={"chair": 10, "ottoman": 4}, start=True)
    wait_for(
        lambda: Frame.objects.filter(campaign=campaign, state="done").exists(),
        timeout_s=90,
        what="a first frame",
        workers=workers,
    )
    dropped = _outage(seconds=8)
    assert dropped >= 2  # at least each worker's heartbeat connection
    wait_for(
        lambda: _status(campaign) == "completed",
        timeout_s=180,
        what="the campaign to complete after the outage",
        workers=workers,
    )
    wait_for(lambda: settled(campaign), timeout_s=60, what="in-flight frames to finish", workers=workers)
    assert_counters_exact(campaign, media_root=media_root)
    for worker in workers:
        assert worker.proc.poll() is None, worker.log()
    assert any("database unavailable" in w.log() or "heartbeat for" in w.log() for w in workers)
