"""Dashboard tasks run by the render workers (registered when ``evenframe.celery`` autodiscovers ``campaigns``)."""

from __future__ import annotations

from celery import shared_task


@shared_task(name="evenframe.asset_preview", ignore_result=True)
def asset_preview(asset_pk: int) -> str:
    """Render an asset's 128×128 preview (campaigns.asset_files.render_asset_preview)."""
    from campaigns.asset_files import render_preview_for
    from campaigns.models import Asset

    asset = Asset.objects.select_related("object_class").filter(pk=asset_pk).first()
    if asset is None:
        return "no such asset"
    return str(render_preview_for(asset))
