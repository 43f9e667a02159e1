from django.apps import AppConfig


class AssetsConfig(AppConfig):
    name = "assets"
    verbose_name = "Assets"
    default_auto_field = "django.db.models.BigAutoField"
