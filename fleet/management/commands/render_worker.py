"""Start a render worker on this machine; it joins the fleet of the configured broker and database."""

from __future__ import annotations

import os
import socket

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError

from evenframe.celery import app


class Command(BaseCommand):
    help = (
        "Start a render worker (a Celery worker with Evenframe's settings). Any machine with the same "
        "DATABASE_URL, CELERY_BROKER_URL and EVENFRAME_MEDIA_ROOT joins the same fleet."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument("--concurrency", type=int, default=1, help="Frames rendered at once on this machine.")
        parser.add_argument(
            "--threads",
            type=int,
            default=0,
            help="Renderer threads per frame (default: CPU cores / concurrency, so workers do not oversubscribe).",
        )
        parser.add_argument("--name", default="", help="Node name (default render-<pid>@<host>).")
        parser.add_argument("--loglevel", default="INFO")
        parser.add_argument("--max-tasks-per-child", type=int, default=0)

    def handle(self, *args, **options) -> None:
        concurrency = options["concurrency"]
        if concurrency < 1:
            raise CommandError("--concurrency must be at least 1")
        threads = options["threads"] or max(1, (os.cpu_count() or 1) // concurrency)
        os.environ["EVENFRAME_RENDER_THREADS"] = str(threads)
        if settings.CELERY_BROKER_URL.startswith("filesystem://"):
            for folder in settings.CELERY_BROKER_TRANSPORT_OPTIONS.values():
                if isinstance(folder, str):
                    os.makedirs(folder, exist_ok=True)
        os.makedirs(settings.MEDIA_ROOT, exist_ok=True)
        name = options["name"] or f"render-{os.getpid()}@{socket.gethostname()}"
        argv = [
            "worker",
            f"--hostname={name}",
            f"--concurrency={concurrency}",
            f"--loglevel={options['loglevel']}",
            f"--queues={settings.CELERY_TASK_DEFAULT_QUEUE}",
            "--pool=prefork",
            "--without-gossip",
            "--without-mingle",
        ]
        if options["max_tasks_per_child"]:
            argv.append(f"--max-tasks-per-child={options['max_tasks_per_child']}")
        self.stdout.write(f"render worker {name}: concurrency {concurrency}, {threads} renderer thread(s) per frame")
        app.worker_main(argv)
