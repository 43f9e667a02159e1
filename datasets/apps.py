from django.apps import AppConfig


class DatasetsConfig(AppConfig):
    """Dataset export: no models; export state lives in the export folder (manifest, splits.json)."""

    name = "datasets"
    verbose_name = "Datasets"
