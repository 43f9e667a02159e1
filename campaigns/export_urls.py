"""Dataset export URLs (download of a campaign's dataset), included under /campaigns/ by evenframe/urls.py."""

from django.urls import path

from campaigns import export_views

urlpatterns = [
    path("<int:campaign_id>/export.zip", export_views.download_dataset_zip, name="campaign-export-zip"),
]
