"""``python -m render`` in a subprocess: files, preview, one-line errors with exit status 2."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
TINY = ["--width", "64", "--height", "48", "--spp", "2"]


def _run(*args: str, timeout: float = 180) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run(
        [sys.executable, "-m", "render", *args], cwd=ROOT, env=env, capture_output=True, text=True, timeout=timeout
    )


def test_cli_writes_frame_files_and_preview(tmp_path):
    out = tmp_path / "frame"
    done = _run("--seed", "3", "--out", str(out), "--classes", "chair=2,wall_clock=1", *TINY, "--preview")
    assert done.returncode == 0, done.stderr
    for name in ("rgb.png", "instances.png", "depth.npy", "labels.json", "scene.json", "timings.json", "preview.png"):
        assert (out / name).is_file(), name
    labels = json.loads((out / "labels.json").read_text())
    assert len(labels["instances"]) == 3
    assert json.loads((out / "scene.json").read_text())["composition"] == {"chair": 2, "wall_clock": 1}
    for stage in ("spec", "scene_build", "render", "label_pass", "labels", "encode", "total"):
        assert any(line.split()[:1] == [stage] for line in done.stdout.splitlines()), stage


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--classes", "unicorn=1"], "unknown class 'unicorn'"),
        (["--classes", "chair=-2"], "negative"),
        (["--classes", "chair"], "expected name=count"),
        (["--classes", "chair=two"], "not a whole number"),
        (["--spp", "0"], "render.spp"),
        (["--budget", "/nonexistent/budget.json"], "budget file"),
        (["--classes", "bed=6,sofa=6"], ""),  # impossible layout (LayoutError)
        (["--seed", "x"], "seed"),
        (["--variant", "cuda_rgb"], "variant"),
    ],
)
def test_cli_bad_arguments_exit_2_with_one_line(tmp_path, args, message):
    base = ["--seed", "1", "--out", str(tmp_path / "f")]
    if args[0] == "--seed":
        base = ["--out", str(tmp_path / "f")]
    budget = tmp_path / "small_room.json"
    budget.write_text(json.dumps({"room": {"width_m": [2.0, 2.0], "depth_m": [2.0, 2.0]}}))
    if args[:2] == ["--classes", "bed=6,sofa=6"]:
        args = [*args, "--budget", str(budget)]
    done = _run(*base, *TINY, *args, timeout=60)
    assert done.returncode == 2, (done.stdout, done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert lines[0].startswith("error: ") and message in lines[0]
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "f" / "labels.json").exists()


# --- contact sheet ----------------------------------------------------------------------------------------------

SHEET_TINY = ["--width", "32", "--height", "24", "--spp", "1"]


def _tile(sheet, position: int, columns: int, width: int, height: int):
    """The frame's pixels of one tile (the label strip below it excluded)."""
    from render.cli import SHEET_GAP_PX, label_strip_height_px

    row, col = divmod(position, columns)
    x = SHEET_GAP_PX + col * (width + SHEET_GAP_PX)
    y = SHEET_GAP_PX + row * (height + label_strip_height_px(width) + SHEET_GAP_PX)
    return sheet[y : y + height, x : x + width]


def test_contact_sheet_tiles_are_the_frames_rendered_alone(tmp_path, capsys):
    import numpy as np
    from PIL import Image

    from render.budget import normalize_budget
    from render.cli import (
        SHEET_BACKGROUND_RGB,
        SHEET_GAP_PX,
        default_composition,
        draw_tile,
        label_strip_height_px,
        main,
        tile_caption,
    )
    from render.frame import ACCEPTED_RGB, REJECTED_RGB, render_frame
    from render.spec import make_spec

    out = tmp_path / "sheet.png"
    # In this process, so the sheet and the frames below are rendered by the same loaded code.
    assert main(["--seed", "7", "--contact-sheet", "3", "--out", str(out), *SHEET_TINY]) == 0
    assert out.is_file() and sorted(p.name for p in tmp_path.iterdir()) == ["sheet.png"]  # no partial file left
    assert "contact sheet: 3 frames (2×2" in capsys.readouterr().out
    sheet = np.asarray(Image.open(out).convert("RGB"))
    strip = label_strip_height_px(32)
    # 3 tiles → ceil(sqrt(3)) = 2 columns, 2 rows, gaps between the tiles and around the sheet.
    assert sheet.shape == (2 * (24 + strip) + 3 * SHEET_GAP_PX, 2 * 32 + 3 * SHEET_GAP_PX, 3)
    assert (_tile(sheet, 3, 2, 32, 24) == SHEET_BACKGROUND_RGB).all()  # the fourth cell stays empty

    budget = normalize_budget({"render": {"width_px": 32, "height_px": 24, "spp": 1}})
    results = []
    for position, seed in enumerate((7, 8, 9)):
        spec = make_spec(budget, default_composition(), seed)
        result = render_frame(spec)
        results.append((spec, result))
        tile = _tile(sheet, position, 2, 32, 24).astype(int)
        difference = np.abs(tile - result.rgb.astype(int))
        # Threaded renders of one seed agree to ~1e-6 in radiance: at most one 8-bit step, in rare pixels.
        assert difference.max() <= 1, (seed, difference.max())
        assert (difference == 0).mean() > 0.99, seed
        assert (tile != SHEET_BACKGROUND_RGB).any(axis=-1).mean() > 0.5  # a picture, not the background

    # --boxes: every box outline in a class colour, the last one drawn (accepted go on top) wholly in its own, and
    # the frame unchanged off the outlines.
    canvas = Image.new("RGB", (3 * 40, 24 + strip + 10), SHEET_BACKGROUND_RGB)
    boxed_any = False
    for position, (spec, result) in enumerate(results):
        draw_tile(canvas, position, 3, result.rgb, result.labels, tile_caption(spec, result.labels), boxes=True)
        tile = _tile(np.asarray(canvas), position, 3, 32, 24)
        outline = np.zeros((24, 32), bool)
        last = None
        for item in sorted(result.labels["instances"], key=lambda i: bool(i.get("accepted"))):
            if not item.get("bbox"):
                continue
            x, y, w, h = item["bbox"]
            x0, y0 = round(x), round(y)
            x1, y1 = max(x0, round(x + w) - 1), max(y0, round(y + h) - 1)
            box = np.zeros((24, 32), bool)
            box[y0, x0 : x1 + 1] = box[y1, x0 : x1 + 1] = box[y0 : y1 + 1, x0] = box[y0 : y1 + 1, x1] = True
            outline |= box
            last = (box, ACCEPTED_RGB if item.get("accepted") else REJECTED_RGB)
        if last is None:
            continue
        boxed_any = True
        assert (tile[last[0]] == last[1]).all()
        drawn = tile[outline]
        assert ((drawn == ACCEPTED_RGB).all(axis=-1) | (drawn == REJECTED_RGB).all(axis=-1)).all()
        assert (tile[~outline] == result.rgb[~outline]).all()
    assert boxed_any, "no frame had a visible box: the --boxes check checked nothing"


def test_contact_sheet_into_a_folder_with_columns_and_boxes(tmp_path):
    from PIL import Image

    from render.cli import CONTACT_SHEET_NAME, SHEET_GAP_PX, label_strip_height_px

    out = tmp_path / "sheets"  # does not exist yet: a folder
    done = _run("--seed", "2", "--contact-sheet", "2", "--columns", "1", "--boxes", "--out", str(out), *SHEET_TINY)
    assert done.returncode == 0, done.stderr
    with Image.open(out / CONTACT_SHEET_NAME) as sheet:
        assert sheet.size == (32 + 2 * SHEET_GAP_PX, 2 * (24 + label_strip_height_px(32)) + 3 * SHEET_GAP_PX)
    assert [line.split(":")[0] for line in done.stdout.splitlines()[:2]] == ["frame 1/2 seed 2", "frame 2/2 seed 3"]


@pytest.mark.parametrize(
    ("args", "out_name", "message"),
    [
        (["--contact-sheet", "0"], "sheet.png", "between 1 and 400"),
        (["--contact-sheet", "401"], "sheet.png", "between 1 and 400"),
        (["--contact-sheet", "-3"], "sheet.png", "between 1 and 400"),
        (["--contact-sheet", "two"], "sheet.png", "contact-sheet"),
        (["--contact-sheet", "2"], "notes.txt", "existing file that is not a .png"),
        (["--contact-sheet", "2"], "sheet.jpg", "written as PNG"),
        (["--contact-sheet", "2"], "notes.txt/sheet.png", "is a file, not a folder"),
        (["--contact-sheet", "2", "--columns", "0"], "sheet.png", "--columns must be at least 1"),
        (["--contact-sheet", "2", "--preview"], "sheet.png", "--boxes"),
        (["--columns", "2"], "frame", "contact sheet only"),
        (["--boxes"], "frame", "contact sheet only"),
        (["--contact-sheet", "2", "--classes", "unicorn=1"], "sheet.png", "unknown class 'unicorn'"),
        (["--contact-sheet", "400", "--width", "4096", "--height", "4096"], "sheet.png", "megapixels"),
    ],
)
def test_contact_sheet_bad_input_exits_2_and_writes_nothing(tmp_path, args, out_name, message):
    (tmp_path / "notes.txt").write_text("not an image\n")
    before = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*"))
    done = _run("--seed", "1", "--out", str(tmp_path / out_name), *SHEET_TINY, *args, timeout=60)
    assert done.returncode == 2, (done.stdout, done.stderr)
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and message in lines[0], done.stderr
    assert sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*")) == before
    assert (tmp_path / "notes.txt").read_text() == "not an image\n"


def test_contact_sheet_layout_error_on_a_later_seed_writes_nothing(tmp_path):
    budget = tmp_path / "small_room.json"
    budget.write_text(json.dumps({"room": {"width_m": [2.0, 2.0], "depth_m": [2.0, 2.0]}}))
    out = tmp_path / "sheet.png"
    done = _run(
        "--seed",
        "1",
        "--contact-sheet",
        "3",
        "--classes",
        "bed=6,sofa=6",
        "--budget",
        str(budget),
        "--out",
        str(out),
        *SHEET_TINY,
        timeout=60,
    )
    assert done.returncode == 2 and done.stderr.startswith("error: "), done.stderr
    assert "frame 1/3" not in done.stdout  # every spec is made before the first render
    assert not out.exists()
