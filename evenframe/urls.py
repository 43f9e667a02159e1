from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path

from dashboard import views as dashboard_views
from evenframe import views

urlpatterns = [
    path("", dashboard_views.home, name="home"),
    path("login/", auth_views.LoginView.as_view(template_name="registration/login.html"), name="login"),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("health/", views.health_page, name="health"),
    path("health.json", views.health_json, name="health-json"),
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
    path("profile/tokens/", dashboard_views.api_tokens, name="api-tokens"),
    path("profile/tokens/<int:token_id>/revoke/", dashboard_views.api_token_revoke, name="api-token-revoke"),
    path("campaigns/", include("dashboard.urls")),
    path("campaigns/", include("datasets.urls")),
    # Media (rendered frames) behind login; in a real deployment a proxy may serve them instead.
    path("media/<path:path>", dashboard_views.protected_media, name="media"),
]
