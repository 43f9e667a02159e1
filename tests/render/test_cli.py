"""``python -m workers.render`` in a subprocess: files, preview, one-line errors with exit status 2."""

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
    return subprocess.run([sys.executable, "-m", "workers.render", *args], cwd=ROOT, env=env, capture_output=True,
                          text=True, timeout=timeout)


def test_cli_writes_frame_files_and_preview(tmp_path):
    out = tmp_path / "frame"
    done = _run("--seed", "3", "--out", str(out), "--classes", "chair=2,wall_clock=1", *TINY, "--preview")
    assert done.returncode == 0, done.stderr
    for name in ("rgb.png", "instances.png", "depth.npy", "labels.json", "scene.json", "timings.json",
                 "preview.png"):
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
