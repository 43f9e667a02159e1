"""Download of a campaign's dataset as a streamed zip (login is required site-wide by the middleware)."""

from __future__ import annotations

from django.http import (
    Http404,
    HttpRequest,
    HttpResponseBadRequest,
    StreamingHttpResponse,
)
from django.http.response import HttpResponseBase
from django.shortcuts import get_object_or_404
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


@require_GET
def download_dataset_zip(request: HttpRequest, campaign_id: int) -> HttpResponseBase:
    """``GET …/export.zip?splits=0.8,0.1,0.1&format=coco|yolo|both&rejected=ignore|label|drop&yolo_ignore=fill|skip|keep
    &background_below=16`` → the export, streamed (``accepted_only=1``, from before ignore regions: ``rejected=drop``).

    Options are checked before the first byte is sent, so bad ones give a 400, not a broken download.
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
        return HttpResponseBadRequest(f"{exc}\n")
    response = StreamingHttpResponse(
        stream_dataset_zip(campaign=campaign, options=options), content_type="application/zip"
    )
    response["Content-Disposition"] = f'attachment; filename="evenframe-campaign-{campaign.pk}.zip"'
    response["Cache-Control"] = "no-store"
    response["X-Accel-Buffering"] = "no"  # let a proxy pass the stream through instead of buffering it
    return response
