"""Fleet tasks: a ping that proves a real worker runs tasks (tests and the health tooling)."""

from __future__ import annotations

import os
import socket

from celery import shared_task


@shared_task(name="evenframe.ping")
def ping(token: str) -> dict:
    """Answer with where it ran: used by tests and the health tooling to prove a real worker runs tasks."""
    return {"token": token, "pid": os.getpid(), "host": socket.gethostname()}
