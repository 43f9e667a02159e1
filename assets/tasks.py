"""Celery task of the asset library: an asset's preview, rendered by a render worker.

Registered when ``evenframe.celery`` autodiscovers ``assets``; the task name predates the app and is kept, so
messages queued before an upgrade still find it.
"""

from __future__ import annotations

from celery import shared_task

from assets.files import render_preview_for
from assets.models import Asset


@shared_task(name="evenframe.asset_preview", ignore_result=True)
def asset_preview(asset_pk: int) -> str:
    """Render an asset's 128×128 preview (:func:`assets.files.render_asset_preview`)."""
    asset = Asset.objects.select_related("object_class").filter(pk=asset_pk).first()
    if asset is None:
        return "no such asset"
    return str(render_preview_for(asset))
