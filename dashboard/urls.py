from django.urls import path, re_path

from dashboard import views

# The namespace stays "campaigns": links and bookmarks made before the dashboard had its own app keep working.
app_name = "campaigns"
urlpatterns = [
    path("", views.campaign_list, name="list"),
    path("live.json", views.campaign_list_live, name="list-live"),
    path("new/", views.campaign_create, name="create"),
    path("estimate.json", views.estimate_json, name="estimate"),
    path("plotly-<str:version>.min.js", views.plotly_js, name="plotly"),
    path("assets/", views.asset_library, name="assets"),
    path("assets/<int:asset_id>/preview.png", views.asset_preview, name="asset-preview"),
    path("<int:campaign_id>/", views.campaign_detail, name="detail"),
    path("<int:campaign_id>/edit/", views.campaign_edit, name="edit"),
    path("<int:campaign_id>/copy/", views.campaign_copy, name="copy"),
    path("<int:campaign_id>/extend/", views.campaign_extend, name="extend"),
    path("<int:campaign_id>/notifications/", views.campaign_notifications, name="notifications"),
    path("<int:campaign_id>/live.json", views.campaign_live, name="live"),
    path("<int:campaign_id>/statistics/", views.campaign_statistics, name="statistics"),
    path("<int:campaign_id>/delete/", views.campaign_delete, name="delete"),
    path("<int:campaign_id>/failed/", views.failed_jobs, name="failed"),
    re_path(r"^(?P<campaign_id>[0-9]+)/(?P<action>start|pause|resume|cancel)/$", views.campaign_action, name="action"),
    re_path(r"^(?P<campaign_id>[0-9]+)/failed/(?P<action>retry|ignore)/$", views.failed_action, name="failed-action"),
    path("<int:campaign_id>/frames/", views.frame_gallery, name="gallery"),
    path("<int:campaign_id>/frames/<int:index>/", views.frame_detail, name="frame"),
    path("<int:campaign_id>/frames/<int:index>/rerender/", views.frame_rerender, name="rerender"),
    path("<int:campaign_id>/frames/exclude/", views.frames_exclude, name="frames-exclude"),
    path("<int:campaign_id>/frames/<int:index>/include/", views.frame_include, name="frame-include"),
    path("<int:campaign_id>/frames/<int:index>/<str:name>", views.frame_file, name="frame-file"),
]
