"""``manage.py export_dataset CAMPAIGN --out DIR [--accepted-only] [--splits 0.8,0.1,0.1] [--format coco|yolo|both]``."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError, CommandParser

from datasets.errors import ExportError
from datasets.options import ExportOptions, parse_formats, parse_split_ratios
from datasets.writer import export_dataset


class Command(BaseCommand):
    help = (
        "Export a campaign's done frames as a dataset: images, instance masks, COCO (and/or YOLO) labels, "
        "scene specs, campaign settings, software versions, class statistics, splits and a SHA-256 manifest. "
        "Re-exporting into the same folder reuses unchanged files."
    )

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("campaign", help="Campaign id or name")
        parser.add_argument("--out", required=True, help="Export folder (created, or replaced as a whole)")
        parser.add_argument(
            "--accepted-only",
            action="store_true",
            help="Only instances the quota rules accepted (default: every visible instance)",
        )
        parser.add_argument("--splits", default="0.8,0.1,0.1", help="train,val,test ratios (default 0.8,0.1,0.1)")
        parser.add_argument("--format", default="coco", help="coco (default), yolo or both")
        parser.add_argument("--media-root", help="Where the frames are (default: MEDIA_ROOT)")

    def handle(self, *args, **options) -> None:
        try:
            export_options = ExportOptions(
                accepted_only=options["accepted_only"],
                ratios=parse_split_ratios(options["splits"]),
                formats=parse_formats(options["format"]),
            )
            verbosity = options["verbosity"]

            def progress(done: int, total: int) -> None:
                if verbosity >= 2:
                    self.stderr.write(f"  {done} / {total} frames")

            summary = export_dataset(
                campaign_id=options["campaign"],
                out_dir=options["out"],
                options=export_options,
                media_root=options.get("media_root"),
                progress=progress,
            )
        except ExportError as exc:
            raise CommandError(str(exc)) from exc
        for line in summary.lines():
            self.stdout.write(line)
