from django.apps import AppConfig


class FleetConfig(AppConfig):
    """Worker heartbeats, live workers, the render_worker command, fault injection.

    The app label stays ``workers`` (the name of this app before it was called fleet), so the
    ``workers_workerheartbeat`` table, the migration history and the admin's URLs are unchanged.
    """

    name = "fleet"
    label = "workers"
    verbose_name = "Render workers"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        # deferred: heartbeat imports fleet.models, which load after apps.py
        from fleet import heartbeat  # noqa: F401 - importing it connects the Celery worker signals
