"""``manage.py verify_dataset DIR``: re-hash an export against its manifest; exit 1 naming every problem."""

from __future__ import annotations

import time

from django.core.management.base import BaseCommand, CommandError, CommandParser

from datasets.verify import verify_dataset


class Command(BaseCommand):
    help = "Check an exported dataset against its manifest: every missing, altered or unlisted file is named."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("directory", help="Export folder (the one holding manifest.jsonl)")

    def handle(self, *args, **options) -> None:
        start = time.perf_counter()
        report = verify_dataset(directory=options["directory"])
        seconds = time.perf_counter() - start
        for problem in report.problems:
            self.stderr.write(problem)
        if not report.ok:
            raise CommandError(f"{report.directory}: {len(report.problems)} problem(s) in {report.files} listed files")
        self.stdout.write(
            f"{report.directory}: OK, {report.files} files, {report.bytes_checked / 1e6:.1f} MB "
            f"match the manifest ({seconds:.1f} s)"
        )
