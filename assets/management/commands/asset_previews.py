"""``manage.py asset_previews``: render the missing 128×128 asset previews on this machine (operator command)."""

from __future__ import annotations

from django.core.management.base import BaseCommand

from assets.files import preview_path, render_preview_for
from assets.models import Asset


class Command(BaseCommand):
    help = "Render missing asset previews here (normally a render worker does it, task evenframe.asset_preview)."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--all", action="store_true", help="Render again even where a preview exists")

    def handle(self, *args, **options) -> None:
        for asset in Asset.objects.select_related("object_class"):
            if options["all"] or not preview_path(asset.pk).exists():
                try:
                    path = render_preview_for(asset)
                except Exception as exc:  # noqa: BLE001 - one broken asset must not stop the others
                    self.stderr.write(f"asset {asset.pk} {asset}: {type(exc).__name__}: {exc}")
                    continue
                self.stdout.write(f"asset {asset.pk} {asset}: {path}")
