from django.urls import path

from campaigns import views

app_name = "campaigns"
urlpatterns = [
    path("", views.campaign_list, name="list"),
]
