"""Command line: render one frame to a directory.

``python -m workers.render --seed N --out DIR [--budget FILE] [--classes chair=2,wall_clock=1]
[--width W --height H --spp S] [--variant scalar_rgb|llvm_ad_rgb] [--threads T] [--preview]``

Writes the files of :func:`workers.render.frame.render_frame` (plus ``preview.png`` with
``--preview``) and prints the per-stage timings. Bad input (unknown class, negative count,
malformed ``--classes``, budget errors, a layout that cannot fit) exits with status 2 and one
line on stderr.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

EXIT_BAD_INPUT = 2
# A small mix of floor and wall items; every name must be in assets.CLASSES (checked at run time).
DEFAULT_CLASSES: dict[str, int] = {"chair": 2, "coffee_table": 1, "potted_plant": 1, "wall_clock": 1}


class CliError(Exception):
    """Bad command-line input: reported as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, no usage block
        raise CliError(message)


def parse_classes(text: str) -> dict[str, int]:
    """``"chair=2,wall_clock=1"`` → ``{"chair": 2, "wall_clock": 1}``; syntax errors raise :class:`CliError`."""
    composition: dict[str, int] = {}
    for item in text.split(","):
        item = item.strip()
        if not item:
            continue
        name, sep, count = item.partition("=")
        name, count = name.strip(), count.strip()
        if not sep or not name or not count:
            raise CliError(f"--classes: expected name=count, got {item!r}")
        try:
            value = int(count)
        except ValueError:
            raise CliError(f"--classes: count of {name!r} is not a whole number: {count!r}") from None
        if name in composition:
            raise CliError(f"--classes: {name!r} is given twice")
        composition[name] = value
    if not composition:
        raise CliError("--classes: no classes given")
    return composition


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="python -m workers.render", description="Render one synthetic frame with labels.")
    parser.add_argument("--seed", type=int, required=True, help="frame seed (non-negative integer)")
    parser.add_argument("--out", type=Path, required=True, help="output directory")
    parser.add_argument("--budget", help="randomization budget JSON file (partial; merged over the defaults)")
    parser.add_argument("--classes", help="composition, e.g. chair=2,wall_clock=1 (default: a small mix)")
    parser.add_argument("--width", type=int, help="image width in pixels")
    parser.add_argument("--height", type=int, help="image height in pixels")
    parser.add_argument("--spp", type=int, help="path-tracing samples per pixel")
    parser.add_argument("--layout-seed", type=int, help="fix the layout sub-seed")
    parser.add_argument("--lighting-seed", type=int, help="fix the lighting sub-seed")
    parser.add_argument("--camera-seed", type=int, help="fix the camera sub-seed")
    parser.add_argument("--variant", choices=("scalar_rgb", "llvm_ad_rgb"), help="Mitsuba variant")
    parser.add_argument("--threads", type=int, help="render threads")
    parser.add_argument("--preview", action="store_true", help="also write preview.png with the boxes drawn")
    return parser


def default_composition() -> dict[str, int]:
    from .assets import CLASSES

    mix = {name: count for name, count in DEFAULT_CLASSES.items() if name in CLASSES}
    if not mix:  # the asset library changed: take the first three classes
        mix = {name: 1 for name in sorted(CLASSES)[:3]}
    return mix


def _budget(args: argparse.Namespace) -> dict[str, Any]:
    from .budget import load_budget_file, normalize_budget

    budget = load_budget_file(args.budget) if args.budget else normalize_budget()
    for key, value in (("width_px", args.width), ("height_px", args.height), ("spp", args.spp)):
        if value is not None:
            budget["render"][key] = value
    return normalize_budget(budget)


def format_timings(timings_s: dict[str, float]) -> str:
    """A per-stage table with the total."""
    lines = [f"{'stage':<12} {'seconds':>9}"]
    lines += [f"{stage:<12} {seconds:>9.3f}" for stage, seconds in timings_s.items()]
    lines.append(f"{'total':<12} {sum(timings_s.values()):>9.3f}")
    return "\n".join(lines)


def run(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.seed < 0:
        raise CliError(f"--seed must be non-negative, got {args.seed}")
    if args.threads is not None and args.threads < 1:
        raise CliError(f"--threads must be at least 1, got {args.threads}")
    import time

    from .frame import _write_png, draw_preview, render_frame
    from .spec import make_spec

    start = time.perf_counter()
    try:
        budget = _budget(args)
        composition = parse_classes(args.classes) if args.classes else default_composition()
        spec = make_spec(budget, composition, args.seed, layout_seed=args.layout_seed,
                         lighting_seed=args.lighting_seed, camera_seed=args.camera_seed)
    except ValueError as exc:  # BudgetError, LayoutError and composition errors are ValueErrors
        raise CliError(" ".join(str(exc).split()) or type(exc).__name__) from None
    spec_s = time.perf_counter() - start
    result = render_frame(spec, out_dir=args.out, variant=args.variant, threads=args.threads, spec_s=spec_s)
    if args.preview:
        _write_png(args.out / "preview.png", draw_preview(result.rgb, result.labels))
    instances = result.labels.get("instances", [])
    accepted = sum(1 for instance in instances if instance.get("accepted"))
    exposure = result.labels.get("exposure", {})
    print(f"frame seed {args.seed}: {result.rgb.shape[1]}x{result.rgb.shape[0]}, {len(instances)} instances "
          f"({accepted} accepted), shutter {exposure.get('shutter_s')} s, ISO {exposure.get('iso')}, "
          f"variant {result.labels.get('variant')} -> {args.out}")
    print(format_timings(result.timings_s))
    return 0


def main(argv: list[str] | None = None) -> int:
    try:
        return run(argv)
    except CliError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
