"""``manage.py export_dataset CAMPAIGN --out DIR [--splits 0.8,0.1,0.1] [--format coco|yolo|both]
[--rejected ignore|label|drop] [--yolo-ignore fill|skip|keep] [--background-below 16,CLASS=PX]``."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError, CommandParser

from datasets.errors import ExportError
from datasets.options import (
    DEFAULT_BACKGROUND_BELOW_PX,
    REJECTED_MODES,
    YOLO_IGNORE_MODES,
    ExportOptions,
    parse_background_below,
    parse_formats,
    parse_split_ratios,
)
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
            "--rejected",
            default="ignore",
            choices=REJECTED_MODES,
            help="Visible instances the quota rules did not accept: ignore regions (COCO iscrowd 1; default), "
            "labelled as objects, or left out (background)",
        )
        parser.add_argument(
            "--yolo-ignore",
            default="fill",
            choices=YOLO_IGNORE_MODES,
            help="YOLO has no ignore regions: fill them with a neutral colour in the images (default), skip frames "
            "that have one, or keep them unlabelled (listed in yolo_unlabelled.txt)",
        )
        parser.add_argument(
            "--background-below",
            default=str(DEFAULT_BACKGROUND_BELOW_PX),
            help="Visible pixels below which a not-accepted instance is background, not an ignore region: PX, "
            f"optionally with per-class values, e.g. 16,wall_clock=40 (default {DEFAULT_BACKGROUND_BELOW_PX})",
        )
        parser.add_argument(
            "--accepted-only",
            action="store_true",
            help="Same as --rejected drop (kept for scripts written before ignore regions)",
        )
        parser.add_argument("--splits", default="0.8,0.1,0.1", help="train,val,test ratios (default 0.8,0.1,0.1)")
        parser.add_argument("--format", default="coco", help="coco (default), yolo or both")
        parser.add_argument("--media-root", help="Where the frames are (default: MEDIA_ROOT)")

    def handle(self, *args, **options) -> None:
        try:
            background_px, background_by_class = parse_background_below(options["background_below"])
            export_options = ExportOptions(
                ratios=parse_split_ratios(options["splits"]),
                formats=parse_formats(options["format"]),
                rejected="drop" if options["accepted_only"] else options["rejected"],
                yolo_ignore=options["yolo_ignore"],
                background_below_px=background_px,
                background_below_px_by_class=background_by_class,
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
