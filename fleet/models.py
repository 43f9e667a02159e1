from __future__ import annotations

from datetime import timedelta

from django.conf import settings
from django.db import models
from django.utils import timezone


class WorkerHeartbeat(models.Model):
    """One row per Celery worker node; refreshed every few seconds while it runs."""

    hostname = models.CharField(max_length=255, unique=True, help_text="Celery node name, e.g. render@machine-a")
    machine = models.CharField(max_length=255, help_text="Host the worker runs on")
    pid = models.IntegerField()
    concurrency = models.PositiveIntegerField(default=1)
    renderer_variant = models.CharField(max_length=32, blank=True)
    renderer_reason = models.CharField(max_length=255, blank=True)
    started_at = models.DateTimeField(default=timezone.now)
    last_seen = models.DateTimeField(default=timezone.now, db_index=True)
    stopped_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["hostname"]

    def __str__(self) -> str:
        return self.hostname

    @property
    def is_live(self) -> bool:
        return self.stopped_at is None and self.last_seen >= timezone.now() - timedelta(
            seconds=settings.WORKER_LIVE_WINDOW_S
        )


def live_workers() -> models.QuerySet[WorkerHeartbeat]:
    cutoff = timezone.now() - timedelta(seconds=settings.WORKER_LIVE_WINDOW_S)
    return WorkerHeartbeat.objects.filter(stopped_at__isnull=True, last_seen__gte=cutoff)
