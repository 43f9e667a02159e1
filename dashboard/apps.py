from django.apps import AppConfig


class DashboardConfig(AppConfig):
    """The browser dashboard: pages, forms, templates, static files and the protected media view.

    Entry points only: reads go through ``campaigns.selectors``, writes through ``campaigns.services`` and the
    scheduler, permissions through ``teams.permissions``. No models.
    """

    name = "dashboard"
