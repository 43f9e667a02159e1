"""Dataset export URLs (download of a finished campaign's dataset). Filled in by campaigns/export_views.py."""

urlpatterns: list = []
