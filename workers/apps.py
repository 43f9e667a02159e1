from django.apps import AppConfig


class WorkersConfig(AppConfig):
    name = "workers"
    verbose_name = "Render workers"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        from workers import heartbeat  # noqa: F401  (connects the Celery worker signals)
