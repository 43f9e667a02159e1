"""Fault injection for the reliability tests and ``manage.py bench_soak``: off unless EVENFRAME_FAULTS is set.

``EVENFRAME_FAULTS`` holds a JSON object; every key is optional:

* ``crash_frames``: frame indices whose render always raises :class:`InjectedRenderCrash` (a renderer that
  crashes on one scene: retried, then dead);
* ``abort_frames``: frame indices whose render calls ``os.abort()`` in the pool process (a segfaulting renderer:
  the worker loses the task, Celery requeues it, and the attempt limit ends it);
* ``transient_p``: probability that an attempt raises :class:`InjectedTransientError` (retried with backoff);
* ``render_delay_s``: seconds every render sleeps first (so a test can kill a worker in the middle of a frame);
* ``seed``: seed of the transient draws (each draw is a function of seed, campaign, frame and attempt, so a
  soak run is reproducible).

The variable is read on every call, so only processes started with it are affected; production workers never
set it. Nothing here imports Django.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from typing import Any

FAULTS_ENV = "EVENFRAME_FAULTS"


class InjectedRenderCrash(RuntimeError):
    """The render core crashed on this frame (injected; the same frame crashes every time)."""


class InjectedTransientError(RuntimeError):
    """A one-off renderer failure (injected); the next attempt may succeed."""


def active_faults() -> dict[str, Any]:
    raw = os.environ.get(FAULTS_ENV, "")
    if not raw:
        return {}
    value = json.loads(raw)
    if not isinstance(value, dict):
        raise ValueError(f"{FAULTS_ENV} must be a JSON object, got {raw!r}")
    return value


def _unit_draw(*parts: object) -> float:
    """A uniform number in [0, 1) from the parts (stable across processes, unlike ``hash``)."""
    digest = hashlib.sha256(":".join(str(p) for p in parts).encode()).digest()
    return int.from_bytes(digest[:8], "big") / 2**64


def before_render(*, campaign_id: int, index: int, attempt: int) -> None:
    """Called by the render task just before the render core; does nothing unless faults are configured."""
    faults = active_faults()
    if not faults:
        return
    delay_s = float(faults.get("render_delay_s", 0) or 0)
    if delay_s > 0:
        time.sleep(delay_s)
    if index in {int(i) for i in faults.get("abort_frames", [])}:
        os.abort()  # SIGABRT, like a segfault in native code: no Python cleanup, no result
    if index in {int(i) for i in faults.get("crash_frames", [])}:
        raise InjectedRenderCrash(f"injected renderer crash on frame {index}")
    probability = float(faults.get("transient_p", 0) or 0)
    if probability > 0 and _unit_draw(faults.get("seed", 0), campaign_id, index, attempt) < probability:
        raise InjectedTransientError(f"injected transient error on frame {index}, attempt {attempt}")
