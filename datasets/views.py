"""Download of a campaign's dataset as a streamed zip (login is required site-wide by the middleware)."""

from __future__ import annotations

from django.http import (
    Http404,
    HttpRequest,
    HttpResponse,
    HttpResponseBadRequest,
    StreamingHttpResponse,
)
from django.http.response import HttpResponseBase
from django.shortcuts import get_object_or_404, render
from django.views.decorators.http import require_GET

from campaigns.models import Campaign
from datasets.errors import ExportError
from datasets.options import (
    REJECTED_MODES,
    YOLO_IGNORE_MODES,
    ExportOptions,
    parse_background_below,
    parse_choice,
    parse_formats,
    parse_split_ratios,
)
from datasets.permissions import can_export
from datasets.writer import stream_dataset_zip

EXPORT_FIELDS = ("splits", "format", "rejected", "yolo_ignore", "background_below")


def _wants_html(request: HttpRequest) -> bool:
    return "text/html" in request.headers.get("Accept", "")


def _form_with_error(request: HttpRequest, campaign: Campaign, message: str) -> HttpResponse:
    """The download form again, with the message beside it and the values as they were entered (status 400)."""
    values = {name: request.GET.get(name, "") for name in EXPORT_FIELDS}
    if request.GET.get("accepted_only", "").lower() in ("1", "true", "yes", "on"):
        values["rejected"] = "drop"
    context = {"c": campaign, "export": values, "export_error": message}
    return render(request, "datasets/export_error.html", context, status=400)


@require_GET
def download_dataset_zip(request: HttpRequest, campaign_id: int) -> HttpResponseBase:
    """``GET …/export.zip?splits=0.8,0.1,0.1&format=coco|yolo|both&rejected=ignore|label|drop&yolo_ignore=fill|skip|keep
    &background_below=16`` → the export, streamed (``accepted_only=1``, from before ignore regions: ``rejected=drop``).

    Options are checked before the first byte is sent, so bad ones give a 400, not a broken download: for a
    browser (``Accept: text/html``, the campaign page's form) an HTML page with the form, the message and the values
    as entered; for a script a one-line plain-text message.
    """
    campaign = get_object_or_404(Campaign.objects.select_related("owner"), pk=campaign_id)
    if not can_export(user=request.user, campaign=campaign):
        raise Http404("no such campaign")  # outsiders must not learn that the campaign exists (teams rule)
    try:
        accepted_only = request.GET.get("accepted_only", "").lower() in ("1", "true", "yes", "on")
        background_px, background_by_class = parse_background_below(request.GET.get("background_below") or "")
        options = ExportOptions(
            ratios=parse_split_ratios(request.GET.get("splits") or "0.8,0.1,0.1"),
            formats=parse_formats(request.GET.get("format") or "coco"),
            rejected="drop"
            if accepted_only
            else parse_choice(request.GET.get("rejected") or "ignore", REJECTED_MODES, "rejected"),
            yolo_ignore=parse_choice(request.GET.get("yolo_ignore") or "fill", YOLO_IGNORE_MODES, "yolo_ignore"),
            background_below_px=background_px,
            background_below_px_by_class=background_by_class,
        )
    except ExportError as exc:
        if _wants_html(request):
            return _form_with_error(request, campaign, str(exc))
        return HttpResponseBadRequest(f"{exc}\n", content_type="text/plain; charset=utf-8")
    response = StreamingHttpResponse(
        stream_dataset_zip(campaign=campaign, options=options), content_type="application/zip"
    )
    response["Content-Disposition"] = f'attachment; filename="evenframe-campaign-{campaign.pk}.zip"'
    response["Cache-Control"] = "no-store"
    response["X-Accel-Buffering"] = "no"  # let a proxy pass the stream through instead of buffering it
    return response
