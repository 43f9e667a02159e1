"""Command line: render one frame to a directory, or a contact sheet of consecutive seeds.

``python -m render --seed N --out DIR [--budget FILE] [--classes chair=2,wall_clock=1]
[--width W --height H --spp S] [--variant scalar_rgb|llvm_ad_rgb] [--threads T] [--preview]``

Writes the files of :func:`render.frame.render_frame` (plus ``preview.png`` with
``--preview``) and prints the per-stage timings.

``python -m render --seed N --contact-sheet COUNT --out PATH [--columns C] [--boxes] [...]``

Renders COUNT frames (seeds N, N+1, …, every other option as for one frame) and writes one PNG
grid: PATH itself when it ends in ``.png``, else ``PATH/contact_sheet.png``. Each tile is the frame
exactly as rendered, above a strip with its seed, its light kinds and its accepted / total
instances (and its distractors, if any); ``--boxes`` draws the accepted boxes green and the
rejected ones red. Columns default to ``ceil(sqrt(COUNT))``. All specs are made before the first render, so a seed whose layout
cannot fit fails at once, and the sheet is written only when every frame rendered.

Bad input (unknown class, negative count, malformed ``--classes``, budget errors, a layout that
cannot fit, a contact-sheet count outside 1–400, an ``--out`` that is an existing non-PNG file)
exits with status 2, one line on stderr, and nothing written.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from collections import Counter
from collections.abc import Mapping
from pathlib import Path
from typing import Any, NoReturn

import numpy as np

from .budget import load_budget_file, normalize_budget
from .images import write_image

EXIT_BAD_INPUT = 2
EXIT_WRITE_FAILED = 1
# Contact sheets: at most a 20 × 20 grid, and a bounded image (about 3 bytes per pixel in memory).
MAX_CONTACT_SHEET_FRAMES = 400
MAX_CONTACT_SHEET_MEGAPIXELS = 100
CONTACT_SHEET_NAME = "contact_sheet.png"
SHEET_GAP_PX = 4  # between tiles and around the sheet
SHEET_BACKGROUND_RGB = (17, 17, 17)
LABEL_STRIP_RGB = (34, 34, 34)
LABEL_TEXT_RGB = (235, 235, 235)
LABEL_DETAIL_RGB = (170, 170, 170)
# Suffixes that say "an image file", so a missing path ending in one is not taken for a folder name.
_OTHER_IMAGE_SUFFIXES = {".jpg", ".jpeg", ".tif", ".tiff", ".bmp", ".gif", ".webp", ".exr", ".ppm"}
# A small mix of floor and wall items; every name must be in assets.CLASSES (checked at run time).
DEFAULT_CLASSES: dict[str, int] = {"chair": 2, "coffee_table": 1, "potted_plant": 1, "wall_clock": 1}


class CliError(Exception):
    """Bad command-line input: reported as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> NoReturn:  # one line, no usage block
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
    parser = _Parser(prog="python -m render", description="Render one synthetic frame with labels.")
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
    parser.add_argument(
        "--view-slot",
        type=int,
        help="this view's index among its layout's views: the pose is drawn apart from the "
        "layout's earlier slots (with --layout-seed, one layout from several sides)",
    )
    parser.add_argument("--variant", choices=("scalar_rgb", "llvm_ad_rgb"), help="Mitsuba variant")
    parser.add_argument("--threads", type=int, help="render threads")
    parser.add_argument("--preview", action="store_true", help="also write preview.png with the boxes drawn")
    parser.add_argument(
        "--contact-sheet",
        type=int,
        metavar="COUNT",
        help=f"render COUNT frames (seeds --seed, --seed+1, ...; 1-{MAX_CONTACT_SHEET_FRAMES}) "
        "into one PNG grid; --out is then a .png path or a folder for contact_sheet.png",
    )
    parser.add_argument("--columns", type=int, help="contact-sheet columns (default: ceil(sqrt(COUNT)))")
    parser.add_argument(
        "--boxes", action="store_true", help="contact sheet: draw accepted boxes (green) and rejected ones (red)"
    )
    return parser


def default_composition() -> dict[str, int]:
    from .assets import CLASSES  # deferred: the render core loads after the arguments are checked

    mix = {name: count for name, count in DEFAULT_CLASSES.items() if name in CLASSES}
    if not mix:  # the asset library changed: take the first three classes
        mix = {name: 1 for name in sorted(CLASSES)[:3]}
    return mix


def _budget(args: argparse.Namespace) -> dict[str, Any]:
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
    if args.contact_sheet is not None:
        return run_contact_sheet(args)
    for flag, given in (("--columns", args.columns is not None), ("--boxes", args.boxes)):
        if given:
            raise CliError(f"{flag} applies to a contact sheet only (add --contact-sheet COUNT)")
    import time

    # deferred: the render core loads after the arguments are checked
    from .frame import draw_preview, render_frame
    from .spec import make_spec  # deferred: the render core loads after the arguments are checked

    start = time.perf_counter()
    try:
        budget = _budget(args)
        composition = parse_classes(args.classes) if args.classes else default_composition()
        spec = make_spec(
            budget,
            composition,
            args.seed,
            layout_seed=args.layout_seed,
            lighting_seed=args.lighting_seed,
            camera_seed=args.camera_seed,
            view_slot=args.view_slot,
        )
    except ValueError as exc:  # BudgetError, LayoutError and composition errors are ValueErrors
        raise CliError(" ".join(str(exc).split()) or type(exc).__name__) from None
    spec_s = time.perf_counter() - start
    result = render_frame(spec, out_dir=args.out, variant=args.variant, threads=args.threads, spec_s=spec_s)
    if args.preview:
        write_image(args.out / "preview.png", draw_preview(result.rgb, result.labels))
    instances = result.labels.get("instances", [])
    accepted = sum(1 for instance in instances if instance.get("accepted"))
    exposure = result.labels.get("exposure", {})
    print(
        f"frame seed {args.seed}: {result.rgb.shape[1]}x{result.rgb.shape[0]}, {len(instances)} instances "
        f"({accepted} accepted), shutter {exposure.get('shutter_s')} s, ISO {exposure.get('iso')}, "
        f"variant {result.labels.get('variant')} -> {args.out}"
    )
    print(format_timings(result.timings_s))
    return 0


# --- contact sheet -------------------------------------------------------------------------------------------


def contact_sheet_path(out: Path) -> Path:
    """Where the sheet goes: ``out`` when it ends in ``.png``, else ``out/contact_sheet.png``.

    Raises :class:`CliError` for an existing file that is not a PNG, a missing path with another image
    suffix, or a path below an existing file or in a folder that cannot be written; nothing is created here.
    """
    out = Path(out)
    if out.is_dir():
        target = out / CONTACT_SHEET_NAME
    elif out.exists():
        if out.suffix.lower() != ".png":
            raise CliError(f"--out {out} is an existing file that is not a .png; give a .png path or a folder")
        target = out
    elif out.suffix.lower() == ".png":
        target = out
    elif out.suffix.lower() in _OTHER_IMAGE_SUFFIXES:
        raise CliError(f"--out {out}: a contact sheet is written as PNG; give a path ending in .png or a folder")
    else:
        target = out / CONTACT_SHEET_NAME
    existing = target.parent
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise CliError(f"--out {out}: {existing} is a file, not a folder")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise CliError(f"--out {out}: cannot write into {existing}")
    return target


def sheet_grid(count: int, columns: int | None = None) -> tuple[int, int]:
    """(columns, rows) of a sheet of ``count`` tiles: ``ceil(sqrt(count))`` columns unless given (at most ``count``)."""
    columns = math.ceil(math.sqrt(count)) if columns is None else min(columns, count)
    return columns, math.ceil(count / columns)


def label_font_sizes_px(tile_width_px: int) -> tuple[int, int]:
    """(seed line, detail lines) font sizes: readable on a 320 px tile, never huge on a 4096 px one."""
    detail = max(9, min(14, tile_width_px // 24))
    return detail + 3, detail


def label_strip_height_px(tile_width_px: int) -> int:
    """Height of the strip under each tile: one seed line and two detail lines with padding."""
    seed_px, detail_px = label_font_sizes_px(tile_width_px)
    return seed_px + 2 * detail_px + 12


def sheet_size_px(count: int, width_px: int, height_px: int, columns: int | None = None) -> tuple[int, int]:
    """(width, height) of the sheet in pixels."""
    cols, rows = sheet_grid(count, columns)
    cell_h = height_px + label_strip_height_px(width_px)
    return cols * width_px + (cols + 1) * SHEET_GAP_PX, rows * cell_h + (rows + 1) * SHEET_GAP_PX


def tile_origin_px(position: int, width_px: int, height_px: int, columns: int) -> tuple[int, int]:
    """(x, y) of the top-left pixel of tile ``position`` (row-major) in a sheet of ``columns`` columns."""
    row, col = divmod(position, columns)
    cell_h = height_px + label_strip_height_px(width_px)
    return SHEET_GAP_PX + col * (width_px + SHEET_GAP_PX), SHEET_GAP_PX + row * (cell_h + SHEET_GAP_PX)


def light_kinds_text(lights: list[Mapping[str, Any]]) -> str:
    """``"2 panels, sun, dome"``: each light kind once, in the spec's order, with its count when above one.

    Plain ASCII: the label font has no multiplication sign.
    """
    counts = Counter(str(light.get("kind", "?")) for light in lights)
    return ", ".join(kind if n == 1 else f"{n} {kind}s" for kind, n in counts.items()) or "no lights"


def tile_caption(spec: Mapping[str, Any], labels: Mapping[str, Any]) -> tuple[str, str, str]:
    """(seed line, light kinds, instances line) under one tile; the distractors, when the spec has any."""
    instances = labels.get("instances", [])
    accepted = sum(1 for item in instances if item.get("accepted"))
    counts = f"{accepted}/{len(instances)} instances accepted"
    distractors = len(spec.get("distractors") or [])
    if distractors:
        counts += f", {distractors} distractor{'s' if distractors != 1 else ''}"
    return f"seed {spec['seed']}", light_kinds_text(spec.get("lights", [])), counts


def draw_tile(
    sheet: Any,
    position: int,
    columns: int,
    rgb: np.ndarray,
    labels: Mapping[str, Any],
    caption: tuple[str, str, str],
    *,
    boxes: bool = False,
) -> None:
    """Paste one frame (and its label strip) into ``sheet`` (a PIL RGB image), boxes drawn on the tile if asked.

    Boxes are 1-pixel outlines of the visible box, drawn without anti-aliasing so their colour is exact:
    rejected first, accepted on top.
    """
    from PIL import Image, ImageDraw, ImageFont

    from .frame import ACCEPTED_RGB, REJECTED_RGB  # deferred: the render core loads after the arguments are checked

    height_px, width_px = rgb.shape[:2]
    x, y = tile_origin_px(position, width_px, height_px, columns)
    tile = Image.fromarray(np.ascontiguousarray(rgb, dtype=np.uint8), mode="RGB")
    if boxes:
        pen = ImageDraw.Draw(tile)
        ordered = sorted(labels.get("instances", []), key=lambda item: bool(item.get("accepted")))
        for item in ordered:
            box = item.get("bbox")
            if not box:
                continue
            bx, by, bw, bh = (float(v) for v in box)
            x0, y0 = int(round(bx)), int(round(by))
            x1, y1 = max(x0, int(round(bx + bw)) - 1), max(y0, int(round(by + bh)) - 1)
            pen.rectangle((x0, y0, x1, y1), outline=ACCEPTED_RGB if item.get("accepted") else REJECTED_RGB, width=1)
    sheet.paste(tile, (x, y))
    strip_h = label_strip_height_px(width_px)
    strip = Image.new("RGB", (width_px, strip_h), LABEL_STRIP_RGB)
    pen = ImageDraw.Draw(strip)
    seed_px, detail_px = label_font_sizes_px(width_px)
    seed_line, lights_line, instances_line = caption
    pen.text((4, 3), seed_line, fill=LABEL_TEXT_RGB, font=ImageFont.load_default(size=seed_px))
    detail_font = ImageFont.load_default(size=detail_px)
    pen.text((4, 6 + seed_px), lights_line, fill=LABEL_DETAIL_RGB, font=detail_font)
    pen.text((4, 8 + seed_px + detail_px), instances_line, fill=LABEL_DETAIL_RGB, font=detail_font)
    sheet.paste(strip, (x, y + height_px))


def _write_sheet(sheet: Any, target: Path) -> None:
    """Write the sheet (a PIL image) atomically: an interrupted write leaves no half PNG."""
    target.parent.mkdir(parents=True, exist_ok=True)
    write_image(target, np.asarray(sheet.convert("RGB")))


def run_contact_sheet(args: argparse.Namespace) -> int:
    """``--contact-sheet COUNT``: validate everything, make every spec, render each frame into the grid, write once."""
    import time

    count = args.contact_sheet
    if not 1 <= count <= MAX_CONTACT_SHEET_FRAMES:
        raise CliError(f"--contact-sheet must be between 1 and {MAX_CONTACT_SHEET_FRAMES} frames, got {count}")
    if args.columns is not None and args.columns < 1:
        raise CliError(f"--columns must be at least 1, got {args.columns}")
    if args.preview:
        raise CliError("--preview writes one frame's files; with --contact-sheet use --boxes")
    target = contact_sheet_path(args.out)

    from PIL import Image

    from .frame import render_frame  # deferred: the render core loads after the arguments are checked
    from .spec import make_spec  # deferred: the render core loads after the arguments are checked

    try:
        budget = _budget(args)
        width_px, height_px = int(budget["render"]["width_px"]), int(budget["render"]["height_px"])
        sheet_w, sheet_h = sheet_size_px(count, width_px, height_px, args.columns)
        if sheet_w * sheet_h > MAX_CONTACT_SHEET_MEGAPIXELS * 1_000_000:
            raise CliError(
                f"the sheet would be {sheet_w}×{sheet_h} px, over {MAX_CONTACT_SHEET_MEGAPIXELS} "
                "megapixels; lower --contact-sheet or --width/--height"
            )
        composition = parse_classes(args.classes) if args.classes else default_composition()
        specs = [
            make_spec(
                budget,
                composition,
                args.seed + offset,
                layout_seed=args.layout_seed,
                lighting_seed=args.lighting_seed,
                camera_seed=args.camera_seed,
                view_slot=None if args.view_slot is None else args.view_slot + offset,
            )
            for offset in range(count)
        ]
    except CliError:
        raise
    except ValueError as exc:  # BudgetError, LayoutError and composition errors are ValueErrors
        raise CliError(" ".join(str(exc).split()) or type(exc).__name__) from None

    columns, rows = sheet_grid(count, args.columns)
    sheet = Image.new("RGB", (sheet_w, sheet_h), SHEET_BACKGROUND_RGB)
    start = time.perf_counter()
    accepted_total = instances_total = 0
    for position, spec in enumerate(specs):
        frame_start = time.perf_counter()
        result = render_frame(spec, variant=args.variant, threads=args.threads)
        caption = tile_caption(spec, result.labels)
        draw_tile(sheet, position, columns, result.rgb, result.labels, caption, boxes=args.boxes)
        instances = result.labels.get("instances", [])
        accepted_total += sum(1 for item in instances if item.get("accepted"))
        instances_total += len(instances)
        print(
            f"frame {position + 1}/{count} seed {spec['seed']}: {caption[2]}, lights {caption[1]}, "
            f"{time.perf_counter() - frame_start:.2f} s",
            flush=True,
        )
    try:
        _write_sheet(sheet, target)
    except OSError as exc:
        print(f"error: could not write {target}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_WRITE_FAILED
    print(
        f"contact sheet: {count} frames ({columns}×{rows}, {width_px}×{height_px} px each), "
        f"{accepted_total}/{instances_total} instances accepted, {time.perf_counter() - start:.1f} s -> {target}"
    )
    return 0


def main(argv: list[str] | None = None) -> int:
    try:
        return run(argv)
    except CliError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
