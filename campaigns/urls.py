from django.urls import path

from campaigns import views

app_name = "campaigns"
urlpatterns = [
    path("", views.campaign_list, name="list"),
    path("<int:campaign_id>/", views.campaign_detail, name="detail"),
]
