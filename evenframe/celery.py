"""The Celery application shared by the web server, the scheduler and the workers."""

from __future__ import annotations

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "evenframe.settings")

app = Celery("evenframe")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks(["fleet", "assets", "campaigns"])


def ensure_broker_folders() -> None:
    """The file-system broker and result store need their folders before the first message."""
    from django.conf import settings

    if not settings.CELERY_BROKER_URL.startswith("filesystem://"):
        return
    for folder in settings.CELERY_BROKER_TRANSPORT_OPTIONS.values():
        if isinstance(folder, str):
            os.makedirs(folder, exist_ok=True)
    backend = settings.CELERY_RESULT_BACKEND
    if backend.startswith("file://"):
        os.makedirs(backend[len("file://") :], exist_ok=True)


@app.on_after_configure.connect
def _prepare(sender, **_kwargs) -> None:
    ensure_broker_folders()
