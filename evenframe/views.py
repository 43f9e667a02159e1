from __future__ import annotations

from django.http import HttpRequest, HttpResponse, JsonResponse
from django.shortcuts import render
from django.views.decorators.cache import never_cache

from evenframe.health import run_checks


@never_cache
def health_page(request: HttpRequest) -> HttpResponse:
    result = run_checks()
    return render(request, "health.html", {"health": result}, status=200 if result["ok"] else 503)


@never_cache
def health_json(request: HttpRequest) -> JsonResponse:
    result = run_checks()
    return JsonResponse(result, status=200 if result["ok"] else 503)
