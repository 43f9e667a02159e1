"""Developer tool: sign in and take full-page screenshots of dashboard pages with headless Chromium.

.venv/bin/python scripts/screenshot.py --user demo --password ... --out /tmp/shots /health/ /campaigns/
"""

from __future__ import annotations

import argparse
from pathlib import Path

from playwright.sync_api import sync_playwright

CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-quic",
]


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("paths", nargs="+")
    parser.add_argument("--base", default="http://127.0.0.1:8000")
    parser.add_argument("--user", required=True)
    parser.add_argument("--password", required=True)
    parser.add_argument("--out", default="/tmp/evenframe-shots")
    parser.add_argument("--width", type=int, default=1366)
    parser.add_argument("--height", type=int, default=800)
    args = parser.parse_args()
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path="/usr/bin/chromium", args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": args.width, "height": args.height})
        page.goto(args.base + "/login/")
        page.screenshot(path=str(out / "login.png"))
        page.fill("#id_username", args.user)
        page.fill("#id_password", args.password)
        page.click("button[type=submit]")
        page.wait_for_load_state("networkidle")
        for path in args.paths:
            page.goto(args.base + path)
            page.wait_for_load_state("networkidle")
            name = path.strip("/").replace("/", "_") or "home"
            page.screenshot(path=str(out / f"{name}.png"), full_page=True)
            print(out / f"{name}.png")
        browser.close()


if __name__ == "__main__":
    main()
