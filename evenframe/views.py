from __future__ import annotations

from pathlib import Path

from django.conf import settings
from django.http import FileResponse, Http404, HttpRequest, HttpResponse, JsonResponse
from django.shortcuts import redirect, render
from django.views.decorators.cache import never_cache

from evenframe.health import run_checks


def home(request: HttpRequest) -> HttpResponse:
    return redirect("campaigns:list")


@never_cache
def health_page(request: HttpRequest) -> HttpResponse:
    result = run_checks()
    return render(request, "health.html", {"health": result}, status=200 if result["ok"] else 503)


@never_cache
def health_json(request: HttpRequest) -> JsonResponse:
    result = run_checks()
    return JsonResponse(result, status=200 if result["ok"] else 503)


def protected_media(request: HttpRequest, path: str) -> FileResponse:
    root = Path(settings.MEDIA_ROOT).resolve()
    target = (root / path).resolve()
    # Refuse anything that escapes the media root (../, absolute paths, symlinks out).
    if root not in target.parents or not target.is_file():
        raise Http404("no such file")
    return FileResponse(open(target, "rb"))
