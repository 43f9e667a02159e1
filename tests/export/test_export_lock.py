"""One export at a time into a folder: the lock beside it, under racing threads and processes."""

from __future__ import annotations

import fcntl
import multiprocessing
import os
import time
from pathlib import Path

import pytest

from datasets import writer
from datasets.errors import ExportError


def _hold(path: Path):
    """Lock a lock file the way an export in another process does."""
    handle = open(path, "a")  # noqa: SIM115 - the test closes it
    fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
    return handle


def test_a_starter_that_locks_a_just_released_file_does_not_run_beside_a_third(tmp_path, monkeypatch):
    # The race: B opens the lock file, A finishes and releases it, B locks it, C starts. Before the fix A removed
    # the file on release, so B held a removed file while C created and locked a new one: two writers.
    out = tmp_path / "dataset"
    a = writer._export_lock(out)
    a.__enter__()
    real_flock = fcntl.flock
    calls = {"n": 0}

    class SlowStarter:
        """fcntl as seen by B: A's release happens between B's open and B's flock."""

        LOCK_EX, LOCK_NB = fcntl.LOCK_EX, fcntl.LOCK_NB

        @staticmethod
        def flock(handle, flags):
            calls["n"] += 1
            if calls["n"] == 1:
                a.__exit__(None, None, None)
            return real_flock(handle, flags)

    monkeypatch.setattr(writer, "fcntl", SlowStarter)
    b = writer._export_lock(out)
    b.__enter__()  # B gets the lock, on the file the path names now
    monkeypatch.setattr(writer, "fcntl", fcntl)
    assert calls["n"] == 2  # B noticed it had locked a removed file and locked the current one instead
    with pytest.raises(ExportError, match="another export into it is running"):
        with writer._export_lock(out):  # C
            pass
    b.__exit__(None, None, None)
    assert list(tmp_path.iterdir()) == []  # no lock file left behind
    with writer._export_lock(out):
        pass


@pytest.mark.django_db
def test_a_refused_export_leaves_the_running_exports_lock_alone(make_campaign, tmp_path):
    # Before the fix a refused export removed the lock file of the running one on its way out, so the next export
    # created a new lock file and ran beside it.
    campaign = make_campaign()
    out = tmp_path / "dataset"
    holder = _hold(tmp_path / ".dataset.evenframe-lock")
    try:
        for _ in range(2):
            with pytest.raises(ExportError, match="another export into it is running"):
                writer.export_dataset(campaign_id=campaign.pk, out_dir=out)
        assert (tmp_path / ".dataset.evenframe-lock").exists()
        assert not out.exists()
    finally:
        holder.close()


def _contend(out: str, log: str, until: float) -> None:
    """Take the lock again and again until ``until`` (monotonic s); log each stay inside it."""
    path = Path(out)
    while time.monotonic() < until:
        try:
            with writer._export_lock(path):
                fd = os.open(log, os.O_WRONLY | os.O_APPEND)
                try:
                    os.write(fd, f"in {os.getpid()}\n".encode())
                    time.sleep(0.002)
                    os.write(fd, f"out {os.getpid()}\n".encode())
                finally:
                    os.close(fd)
        except ExportError:
            pass


def test_three_processes_never_hold_the_lock_at_once(tmp_path):
    out = tmp_path / "dataset"
    log = tmp_path / "log"
    log.touch()
    context = multiprocessing.get_context("fork")  # the lock is pure file-system code: no database in the children
    until = time.monotonic() + 1.5
    workers = [context.Process(target=_contend, args=(str(out), str(log), until)) for _ in range(3)]
    for worker in workers:
        worker.start()
    for worker in workers:
        worker.join(30)
        assert worker.exitcode == 0
    lines = log.read_text().splitlines()
    inside = None
    stays: dict[str, int] = {}
    for line in lines:
        kind, pid = line.split()
        if kind == "in":
            assert inside is None, f"{pid} entered while {inside} held the lock"
            inside = pid
            stays[pid] = stays.get(pid, 0) + 1
        else:
            assert inside == pid
            inside = None
    assert inside is None
    assert len(stays) >= 2 and sum(stays.values()) > 20  # the processes really did take turns
    assert list(p.name for p in tmp_path.iterdir()) == ["log"]  # and left no lock file
