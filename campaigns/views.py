from __future__ import annotations

from django.http import HttpRequest, HttpResponse
from django.shortcuts import render


def campaign_list(request: HttpRequest) -> HttpResponse:
    return render(request, "campaigns/list.html", {})
