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
    """Files under MEDIA_ROOT, for members of the owning team only.

    ``campaigns/<id>/...`` belongs to that campaign's team; ``assets/...`` to the uploading asset's team
    (shared procedural previews are readable by every signed-in user). Anything else is not served.
    """
    from campaigns.models import Asset, Campaign
    from teams.permissions import VIEWER, has_role

    root = Path(settings.MEDIA_ROOT).resolve()
    target = (root / path).resolve()
    # Refuse anything that escapes the media root (../, absolute paths, symlinks out).
    if root not in target.parents or not target.is_file():
        raise Http404("no such file")
    parts = target.relative_to(root).parts
    allowed = False
    if len(parts) >= 3 and parts[0] == "campaigns" and parts[1].isdigit():
        team_id = Campaign.objects.filter(pk=int(parts[1])).values_list("team_id", flat=True).first()
        allowed = team_id is not None and has_role(user=request.user, team=team_id, role=VIEWER)
    elif parts and parts[0] == "assets":
        relative = "/".join(parts)
        asset = Asset.objects.filter(mesh_file=relative).values("team_id").first()
        if asset is not None:
            allowed = asset["team_id"] is None or has_role(user=request.user, team=asset["team_id"], role=VIEWER)
        else:
            allowed = bool(getattr(request.user, "is_superuser", False))
    elif getattr(request.user, "is_superuser", False):
        allowed = True
    if not allowed:
        raise Http404("no such file")  # outsiders must not learn that the file exists
    return FileResponse(open(target, "rb"))
