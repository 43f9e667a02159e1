"""Dataset export URLs (download of a campaign's dataset), included under /campaigns/ by evenframe/urls.py.

No ``app_name``: the route keeps its un-namespaced name ``campaign-export-zip`` (templates and links use it).
"""

from django.urls import path

from datasets import views

urlpatterns = [
    path("<int:campaign_id>/export.zip", views.download_dataset_zip, name="campaign-export-zip"),
]
