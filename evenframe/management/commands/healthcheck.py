"""Print the health checks; with --wait, poll until all are green (make demo uses this)."""

from __future__ import annotations

import time
import urllib.error
import urllib.request

from django.core.management.base import BaseCommand, CommandError

from evenframe.health import run_checks


class Command(BaseCommand):
    help = "Check database, broker, live workers and renderer; optionally wait until they are all green."

    def add_arguments(self, parser) -> None:
        parser.add_argument("--wait", type=float, default=0, help="Seconds to keep polling until healthy.")
        parser.add_argument(
            "--url", default="", help="Also require this web server URL to answer (e.g. the login page)."
        )

    def _web_ok(self, url: str) -> tuple[bool, str]:
        try:
            with urllib.request.urlopen(url, timeout=3) as response:  # noqa: S310 - operator-given local URL
                return response.status < 400, f"HTTP {response.status}"
        except (urllib.error.URLError, OSError) as exc:
            return False, str(getattr(exc, "reason", exc))

    def handle(self, *args, **options) -> None:
        deadline = time.monotonic() + options["wait"]
        while True:
            result = run_checks()
            checks = list(result["checks"])
            if options["url"]:
                ok, detail = self._web_ok(options["url"])
                checks.append({"name": "web", "ok": ok, "detail": f"{options['url']}: {detail}"})
            healthy = all(c["ok"] for c in checks)
            if healthy or time.monotonic() >= deadline:
                break
            time.sleep(1)
        for c in checks:
            self.stdout.write(f"{'ok  ' if c['ok'] else 'FAIL'} {c['name']:<9} {c['detail']}")
        if not healthy:
            raise CommandError("not healthy")
