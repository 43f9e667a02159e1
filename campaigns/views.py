"""Thin views: read through selectors, render. The full dashboard is a later issue."""

from __future__ import annotations

from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, render

from campaigns import selectors
from campaigns.models import Campaign


def campaign_list(request: HttpRequest) -> HttpResponse:
    return render(request, "campaigns/list.html", {"campaigns": selectors.campaign_list()})


def campaign_detail(request: HttpRequest, campaign_id: int) -> HttpResponse:
    campaign = get_object_or_404(Campaign, pk=campaign_id)
    return render(request, "campaigns/detail.html", {"s": selectors.campaign_summary(campaign=campaign)})
