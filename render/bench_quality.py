"""Image-quality benchmark: default frames against high-spp references, and quality per CPU-second.

``python -m render.bench_quality [--per-kind 3] [--width 320 --height 240] [--reference-spp 2048]``

1. Seeds: the first ``--per-kind`` seeds (default composition) of each lighting kind — ``lamp``
   (no window), ``window`` (sky through a window brings more flux than the lamps, no sun) and
   ``sun`` (sunlight through a window).
2. Reference per seed: the same scene at ``--reference-spp`` samples per pixel, denoiser and sensor
   noise off, sky through window portals (unbiased; ``tests/render/test_image_quality.py``
   checks it against brute force). Its linear radiance is cached under ``--cache`` by the spec's bytes and the
   render core's source (:func:`render_code_digest`), so
   reruns are quick; it is exposed like any frame (sensor noise off) each run.
3. Default frame: the campaign default budget (only the resolution changed), end to end through
   :func:`render.frame.render_frame`, timed in process CPU seconds (all threads). PSNR and
   SSIM (scikit-image ``metrics``) of its 8-bit image against the reference's: once with the
   default's sensor noise (what the dataset gets; the noise is a deliberate randomization) and once
   with sensor noise off (the render's own error).
4. Raw at equal CPU: the previous pipeline (sky found by brute force, no denoiser, sensor noise off, the sun
   at the frame's own samples per pixel: :data:`PREVIOUS_SUN_PASS_SPP_FACTOR`)
   at the sample count whose CPU time matches the default frame's, scored the same way.
5. Reference passes: the reference is the mean radiance of ``--reference-passes`` (2) independent passes of
   ``--reference-spp`` each, ``--sun-passes`` (4) for sunlit rooms — lit mostly by light bouncing off sun
   patches, they are still grainy after one 2048-spp pass. The first two passes' PSNR says how converged one
   pass is, and with it the no-SN frame's PSNR against the converged image is estimated (:func:`truth_psnr`).
6. CPU per frame at ``--cpu-width`` × ``--cpu-height`` (640×480), end to end, the new default
   against the previous default (32 spp, no denoiser, brute-force sky), over the same seeds, in two
   passes: *first sight* (each frame's render kernels are compiled, as for the first frame of its
   structure on a worker) and *repeat* (the kernels are in memory, as for the later frames of a
   campaign on a long-running worker). The benchmark runs with an empty kernel cache of its own
   (``DRJIT_CACHE_DIR``), so first sight is a true compile.

The quality section's CPU seconds are repeat-pass figures: a 1-spp render of the same scene compiles the
kernels the default frame then reuses, and the raw render at equal CPU is timed after its probe the same way.

Goals (printed, not asserted): median PSNR ≥ 32 dB, worst seed ≥ 28 dB, median SSIM ≥ 0.9; new
default CPU ≤ 1/3 of the previous default's at 640×480; default ≥ 8 dB above the raw render at
equal CPU time.
"""

from __future__ import annotations

import argparse
import contextlib
import copy
import functools
import hashlib
import math
import os
import statistics
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any, TypedDict

import numpy as np

# None of these loads Dr.Jit: it loads in init_renderer, after main() has pointed DRJIT_CACHE_DIR at a fresh folder.
from . import scene as scene_module
from .backend import init_renderer
from .budget import DEFAULT_BUDGET
from .cli import default_composition
from .denoise import denoiser_status
from .frame import expose, render_frame
from .spec import axis_rng, make_spec, spec_to_json

GOAL_MEDIAN_PSNR_DB = 32.0
GOAL_WORST_PSNR_DB = 28.0
GOAL_MEDIAN_SSIM = 0.9
GOAL_CPU_RATIO = 1 / 3
GOAL_EQUAL_CPU_GAIN_DB = 8.0
KINDS = ("lamp", "window", "sun")


class _RenderDefault(TypedDict):
    spp: int
    denoise: bool
    window_light: str


#: The default before denoising and portals (for the CPU comparison).
PREVIOUS_DEFAULT: _RenderDefault = {"spp": 32, "denoise": False, "window_light": "dome"}
#: The previous pipeline rendered the sun with the other lights, at the frame's samples per pixel: its stand-in here
#: renders the sun pass at the same count (factor 1), never at the new default's larger sun-pass factor.
PREVIOUS_SUN_PASS_SPP_FACTOR = 1


@contextlib.contextmanager
def _sun_pass_factor(factor: int) -> Iterator[None]:
    """Render with another :data:`render.scene.SUN_PASS_SPP_FACTOR` (the previous pipeline's, see above)."""
    saved = scene_module.SUN_PASS_SPP_FACTOR
    scene_module.SUN_PASS_SPP_FACTOR = int(factor)
    try:
        yield
    finally:
        scene_module.SUN_PASS_SPP_FACTOR = saved


def lighting_kind(spec: dict[str, Any]) -> str | None:
    """``lamp``, ``window`` or ``sun`` for a spec (None: a window room where the lamps outshine the sky)."""
    lights = spec["lights"]
    windows = spec["room"].get("windows") or []
    if any(light["kind"] == "sun" for light in lights):
        return "sun"
    if not windows:
        return "lamp"
    window_area_m2 = sum(float(w["width_m"]) * float(w["height_m"]) for w in windows)
    sky_lm = sum(float(light["illuminance_lux"]) for light in lights if light["kind"] == "dome") * window_area_m2
    lamp_lm = sum(float(light.get("flux_lm", 0.0)) for light in lights if light["kind"] in ("panel", "point", "spot"))
    return "window" if sky_lm > lamp_lm else None


def pick_seeds(
    budget: dict[str, Any], composition: dict[str, int], per_kind: int, *, limit: int = 500
) -> list[tuple[int, str]]:

    chosen: dict[str, list[int]] = {kind: [] for kind in KINDS}
    for seed in range(limit):
        try:
            kind = lighting_kind(make_spec(budget, composition, seed))
        except ValueError:
            continue
        if kind and len(chosen[kind]) < per_kind:
            chosen[kind].append(seed)
        if all(len(v) >= per_kind for v in chosen.values()):
            break
    return [(seed, kind) for kind in KINDS for seed in chosen[kind]]


def _budget(width_px: int, height_px: int, **render: Any) -> dict[str, Any]:

    budget = copy.deepcopy(DEFAULT_BUDGET)
    budget["render"].update(width_px=width_px, height_px=height_px, **render)
    return budget


def _render(spec: dict[str, Any], *, window_light: str = "portal", threads: int | None = None) -> tuple[Any, float]:

    start = time.process_time()
    result = render_frame(spec, window_light=window_light, threads=threads)
    return result, time.process_time() - start


def _with(
    spec: dict[str, Any], *, spp: int | None = None, denoise: bool | None = None, sensor_noise: bool | None = None
) -> dict[str, Any]:
    spec = copy.deepcopy(spec)
    if spp is not None:
        spec["render"]["spp"] = int(spp)
    if denoise is not None:
        spec["render"]["denoise"] = bool(denoise)
    if sensor_noise is not None:
        spec["camera"]["sensor_noise"] = bool(sensor_noise)
    return spec


@functools.lru_cache(maxsize=1)
def render_code_digest() -> str:
    """SHA-256 of the render core's source (every ``render/**/*.py`` but the benchmarks and the CLI): part of a
    reference's cache key, so a change to how scenes are built or rendered never compares frames with a reference
    of the old code, whose spec bytes may be the same."""
    root = Path(__file__).resolve().parent
    digest = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        if path.name.startswith("bench") or path.name == "cli.py":
            continue
        digest.update(str(path.relative_to(root)).encode())
        digest.update(path.read_bytes())
    return digest.hexdigest()


#: Sampler-seed offset between independent reference passes of one scene.
PASS_SEED_OFFSET = 1_000_003


def reference_radiance(
    spec: dict[str, Any], reference_spp: int, cache: Path, *, threads: int | None = None, pass_index: int = 0
) -> np.ndarray:
    """One reference pass of ``spec``: its linear radiance at ``reference_spp``, denoiser and sensor noise
    off, cached on disk by the pass's spec bytes. Pass ``k`` uses other path-tracing samples than pass 0
    (the noise sub-seed, which seeds the sampler, is offset by ``k`` × :data:`PASS_SEED_OFFSET`), so
    passes are independent estimates of the same image.
    """

    reference = _with(spec, spp=reference_spp, denoise=False, sensor_noise=False)
    if pass_index:
        reference["sub_seeds"]["noise"] = int(reference["sub_seeds"]["noise"]) + PASS_SEED_OFFSET * int(pass_index)
    key = hashlib.sha256((spec_to_json(reference) + render_code_digest()).encode()).hexdigest()[:20]
    path = cache / f"reference-radiance-{key}.npy"
    if path.is_file():
        return np.load(path)
    result, cpu_s = _render(reference, threads=threads)
    radiance = np.asarray(result.radiance_rgb, dtype=np.float32)
    cache.mkdir(parents=True, exist_ok=True)
    np.save(path, radiance)
    print(
        f"    (reference pass {pass_index}: {reference_spp} spp, {cpu_s:.0f} CPU s, cached as {path.name})", flush=True
    )
    return radiance


def expose_reference(spec: dict[str, Any], radiance: np.ndarray) -> np.ndarray:
    """A reference radiance exposed by today's :func:`render.frame.expose`, sensor noise off.

    The cache holds radiance, not the 8-bit image, so a change to exposure or encoding never compares
    default frames with a reference exposed the old way.
    """

    camera = _with(spec, sensor_noise=False)["camera"]
    rgb, _ = expose(radiance, camera, rng=axis_rng(spec["sub_seeds"], "noise"), noise=False)
    return rgb


def reference_rgb(
    spec: dict[str, Any], reference_spp: int, cache: Path, *, threads: int | None = None, passes: int = 1
) -> tuple[np.ndarray, list[np.ndarray]]:
    """The reference 8-bit image of ``spec`` and its passes' own 8-bit images.

    The reference is the mean linear radiance of ``passes`` independent passes of ``reference_spp`` each
    (``passes`` × ``reference_spp`` samples per pixel in all), exposed once; the mean of independent
    unbiased estimates is unbiased with 1/``passes`` of their variance.
    """
    radiances = [reference_radiance(spec, reference_spp, cache, threads=threads, pass_index=k) for k in range(passes)]
    mean = np.mean(np.stack(radiances), axis=0) if passes > 1 else radiances[0]
    return expose_reference(spec, mean), [expose_reference(spec, r) for r in radiances]


def _mse(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.mean((a.astype(np.float64) - b.astype(np.float64)) ** 2))


def truth_psnr(reference: np.ndarray, pass_a: np.ndarray, pass_b: np.ndarray, image: np.ndarray, passes: int) -> float:
    """PSNR (dB, 8-bit) of ``image`` against the converged image, estimated from a finite-spp reference.

    ``reference`` is the mean of ``passes`` independent passes, of which ``pass_a`` and ``pass_b`` are two.
    For independent zero-mean errors, E|image − ref|² = E|image − truth|² + E|ref − truth|²; one pass has
    E|pass − truth|² = σ² = E|pass_a − pass_b|² / 2, and the mean of ``passes`` has σ² / ``passes``. So
    MSE(image, truth) ≈ MSE(image, ref) − MSE(pass_a, pass_b) / (2 · passes). (Variance decomposition of
    independent errors; exact in linear radiance, approximate on 8-bit images, where clipping and the sRGB
    curve bend it.) Floored at 0.01 of the raw MSE.
    """
    raw = _mse(image, reference)
    corrected = max(raw - _mse(pass_a, pass_b) / (2.0 * passes), 0.01 * raw)
    return 10.0 * math.log10(255.0**2 / corrected) if corrected > 0 else 99.0


def scores(reference: np.ndarray, image: np.ndarray) -> tuple[float, float]:
    """(PSNR dB, SSIM) of two 8-bit RGB images, scikit-image ``metrics``."""
    from skimage.metrics import peak_signal_noise_ratio, structural_similarity

    psnr = float(peak_signal_noise_ratio(reference, image, data_range=255))
    ssim = float(structural_similarity(reference, image, channel_axis=2, data_range=255))
    return (psnr if math.isfinite(psnr) else 99.0), ssim


def _verdict(ok: bool) -> str:
    return "meets" if ok else "MISSES"


def _pipeline_cpu(
    pipeline: str, seeds: list[int], width_px: int, height_px: int, threads: int | None
) -> dict[str, list[float]]:
    """CPU seconds per frame of one pipeline over ``seeds``: a first-sight pass, then a repeat pass.

    Runs in a process of its own (see :func:`cpu_per_frame`), so nothing compiled before counts.
    """

    composition = default_composition()
    specs = [make_spec(_budget(width_px, height_px), composition, seed) for seed in seeds]
    if pipeline == "previous":
        specs = [_with(spec, spp=PREVIOUS_DEFAULT["spp"], denoise=PREVIOUS_DEFAULT["denoise"]) for spec in specs]
    window_light = PREVIOUS_DEFAULT["window_light"] if pipeline == "previous" else "portal"
    factor = PREVIOUS_SUN_PASS_SPP_FACTOR if pipeline == "previous" else scene_module.SUN_PASS_SPP_FACTOR
    with _sun_pass_factor(factor):
        return {
            sight: [_render(spec, window_light=window_light, threads=threads)[1] for spec in specs]
            for sight in ("first sight", "repeat")
        }


def cpu_per_frame(args: argparse.Namespace, seeds: list[int], default_render: dict[str, Any]) -> None:
    """Print CPU seconds per frame at the CPU resolution: new and previous default, first sight and repeat.

    Each pipeline runs in a fresh process with an empty kernel cache, so its first-sight pass pays
    every compile (none is inherited from the quality section or from the other pipeline).
    """
    import json
    import subprocess

    cpu: dict[str, dict[str, list[float]]] = {}
    for pipeline in ("previous", "new"):
        command = [
            sys.executable,
            "-m",
            "render.bench_quality",
            "--cpu-pipeline",
            pipeline,
            "--cpu-seeds",
            ",".join(map(str, seeds)),
            "--cpu-width",
            str(args.cpu_width),
            "--cpu-height",
            str(args.cpu_height),
            "--variant",
            args.variant,
        ]
        if args.threads:
            command += ["--threads", str(args.threads)]
        done = subprocess.run(command, capture_output=True, text=True, check=False)
        if done.returncode != 0:
            raise RuntimeError(f"CPU run of the {pipeline} pipeline failed:\n{done.stderr[-2000:]}")
        cpu[pipeline] = json.loads(done.stdout.strip().splitlines()[-1])
    print(
        f"\nCPU per frame at {args.cpu_width}x{args.cpu_height}, end to end (process CPU s of all threads; "
        f"median of seeds {', '.join(map(str, seeds))}):"
    )
    new_label = f"new ({default_render['spp']} spp, denoiser, portals)"
    print(f"{'':<11} {'previous (32 spp, no denoiser, brute-force sky)':>48} {new_label:>34} {'ratio':>7}")
    for sight in ("first sight", "repeat"):
        old_s, new_s = statistics.median(cpu["previous"][sight]), statistics.median(cpu["new"][sight])
        print(f"{sight:<11} {old_s:>48.2f} {new_s:>34.2f} {new_s / old_s:>7.3f}")
    for sight in ("first sight", "repeat"):
        print(
            f"  {sight}, per seed: new "
            + ", ".join(f"{v:.2f}" for v in cpu["new"][sight])
            + "; previous "
            + ", ".join(f"{v:.2f}" for v in cpu["previous"][sight])
        )
    # What a campaign pays is the mean: sunlit frames (a sun pass of their own) weigh in it more than in the median.
    mean_ratio = statistics.fmean(cpu["new"]["first sight"]) / statistics.fmean(cpu["previous"]["first sight"])
    print(f"mean, first sight: new {mean_ratio:.3f} x previous (these seeds are one third sunlit)")
    ratio = statistics.median(cpu["new"]["first sight"]) / statistics.median(cpu["previous"]["first sight"])
    print(
        f"goal new <= {GOAL_CPU_RATIO:.3f} x previous (first sight, the stricter case): {ratio:.3f} "
        f"({_verdict(ratio <= GOAL_CPU_RATIO)})"
    )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m render.bench_quality", description=__doc__.split("\n\n")[0])
    parser.add_argument("--per-kind", type=int, default=3, help="seeds per lighting kind (lamp, window, sun)")
    parser.add_argument("--width", type=int, default=320)
    parser.add_argument("--height", type=int, default=240)
    parser.add_argument("--reference-spp", type=int, default=2048)
    parser.add_argument("--cpu-width", type=int, default=640)
    parser.add_argument("--cpu-height", type=int, default=480)
    parser.add_argument("--skip-cpu", action="store_true", help="skip the 640×480 CPU comparison")
    parser.add_argument(
        "--reference-passes",
        type=int,
        default=2,
        help="independent reference passes per seed, each at --reference-spp; the reference is their mean. "
        "With 2 or more, the first two passes' PSNR says how converged one pass is, and the default frame's "
        "PSNR against the converged image is estimated",
    )
    parser.add_argument(
        "--sun-passes",
        type=int,
        default=4,
        help="reference passes for sunlit seeds (lit mostly by light bounced off sun patches, they converge slowest)",
    )
    parser.add_argument("--cache", type=Path, default=Path("data/bench_quality"))
    parser.add_argument("--variant", default="llvm_ad_rgb", choices=("llvm_ad_rgb", "scalar_rgb"))
    parser.add_argument("--threads", type=int)
    parser.add_argument("--cpu-pipeline", choices=("new", "previous"), help=argparse.SUPPRESS)
    parser.add_argument("--cpu-seeds", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if min(args.per_kind, args.reference_spp, args.reference_passes, args.sun_passes) < 1:
        parser.error("--per-kind, --reference-spp, --reference-passes and --sun-passes must be at least 1")

    # An empty kernel cache of our own: "first sight" CPU figures then include the compile, whatever
    # earlier runs on this machine left in the user's cache. Must be set before Dr.Jit loads.
    kernel_cache = tempfile.TemporaryDirectory(prefix="evenframe-bench-kernels-")
    os.environ["DRJIT_CACHE_DIR"] = kernel_cache.name

    choice = init_renderer(variant=args.variant, threads=args.threads)
    if args.cpu_pipeline:
        import json

        seeds_cpu = [int(seed) for seed in args.cpu_seeds.split(",")]
        print(json.dumps(_pipeline_cpu(args.cpu_pipeline, seeds_cpu, args.cpu_width, args.cpu_height, args.threads)))
        kernel_cache.cleanup()
        return 0
    status = denoiser_status()
    composition = default_composition()
    default_render = DEFAULT_BUDGET["render"]
    budget = _budget(args.width, args.height)
    seeds = pick_seeds(budget, composition, args.per_kind)
    print(
        f"bench_quality: {args.width}x{args.height}, variant {choice.variant}, default {default_render['spp']} spp, "
        f"denoise {default_render['denoise']}, reference {args.reference_spp} spp; denoiser: {status or 'loaded'}"
    )
    print(f"seeds: {', '.join(f'{s} ({k})' for s, k in seeds)}")
    # Warm-up: JIT compilation of the kernels each configuration uses (excluded from the timings).
    warm = make_spec(_budget(48, 36), composition, seeds[0][0])
    for window_light in ("portal", "dome"):
        _render(warm, window_light=window_light, threads=args.threads)

    header = (
        f"{'seed':>5} {'kind':<7} {'PSNR dB':>8} {'SSIM':>6} {'PSNR no-SN':>10} {'SSIM no-SN':>10} "
        f"{'CPU s':>6} {'raw spp':>7} {'raw CPU s':>9} {'raw PSNR':>8} {'gain dB':>7} {'ref self':>8} {'est. truth':>10}"
    )
    print(header)
    rows = []
    for seed, kind in seeds:
        spec = make_spec(budget, composition, seed)
        passes = max(args.reference_passes, args.sun_passes) if kind == "sun" else args.reference_passes
        reference, pass_images = reference_rgb(
            spec, args.reference_spp, args.cache, threads=args.threads, passes=passes
        )
        # Compile this scene's kernels first (1 spp; the kernels do not depend on the sample count), so the
        # timings below are repeat-pass figures whether or not the reference came from the cache.
        _render(_with(spec, spp=1), threads=args.threads)
        default, cpu_s = _render(spec, threads=args.threads)
        psnr, ssim = scores(reference, default.rgb)
        clean, _ = _render(_with(spec, sensor_noise=False), threads=args.threads)
        psnr_clean, ssim_clean = scores(reference, clean.rgb)
        # Raw (previous pipeline) at the CPU time of the default frame: CPU per sample from a probe render.
        probe_spp = 8
        with _sun_pass_factor(PREVIOUS_SUN_PASS_SPP_FACTOR):
            _, probe_cpu_s = _render(
                _with(spec, spp=probe_spp, denoise=False, sensor_noise=False), window_light="dome", threads=args.threads
            )
            raw_spp = max(1, round(probe_spp * cpu_s / probe_cpu_s))
            raw, raw_cpu_s = _render(
                _with(spec, spp=raw_spp, denoise=False, sensor_noise=False), window_light="dome", threads=args.threads
            )
        psnr_raw, _ = scores(reference, raw.rgb)
        ref_self, truth = float("nan"), float("nan")
        if passes >= 2:
            ref_self = scores(pass_images[0], pass_images[1])[0]
            truth = truth_psnr(reference, pass_images[0], pass_images[1], clean.rgb, passes)
        rows.append(
            {
                "psnr": psnr,
                "ssim": ssim,
                "psnr_clean": psnr_clean,
                "ssim_clean": ssim_clean,
                "cpu_s": cpu_s,
                "raw_cpu_s": raw_cpu_s,
                "psnr_raw": psnr_raw,
                "gain": psnr_clean - psnr_raw,
                "ref_self": ref_self,
                "truth": truth,
            }
        )
        print(
            f"{seed:>5} {kind:<7} {psnr:>8.2f} {ssim:>6.3f} {psnr_clean:>10.2f} {ssim_clean:>10.3f} {cpu_s:>6.2f} "
            f"{raw_spp:>7} {raw_cpu_s:>9.2f} {psnr_raw:>8.2f} {psnr_clean - psnr_raw:>7.2f} {ref_self:>8.2f} "
            f"{truth:>10.2f}",
            flush=True,
        )

    def median(key: str) -> float:
        return statistics.median(r[key] for r in rows)

    print(
        f"{'median':>13} {median('psnr'):>8.2f} {median('ssim'):>6.3f} {median('psnr_clean'):>10.2f} "
        f"{median('ssim_clean'):>10.3f} {median('cpu_s'):>6.2f} {'':>7} {median('raw_cpu_s'):>9.2f} "
        f"{median('psnr_raw'):>8.2f} {median('gain'):>7.2f}"
    )
    worst = min(r["psnr"] for r in rows)
    worst_clean = min(r["psnr_clean"] for r in rows)
    print("\nPSNR / SSIM: scikit-image metrics on the 8-bit images; 'no-SN' = the same frame with sensor noise off.")
    if any(math.isfinite(r["truth"]) for r in rows):
        print(
            "'ref self' = PSNR of two independent reference passes against each other (how far one pass is from "
            "converged: each is about 3 dB closer to the truth than to the other, and the mean of n passes another "
            "10·log10(n) dB closer); 'est. truth' = the no-SN frame's PSNR against the converged image, estimated "
            "(see truth_psnr)."
        )
        worst_truth = min(r["truth"] for r in rows)
        print(
            f"worst seed against the converged image (estimate, no sensor noise): {worst_truth:.2f} dB "
            f"({_verdict(worst_truth >= GOAL_WORST_PSNR_DB)} the {GOAL_WORST_PSNR_DB:g} dB goal); lowest 'ref self' "
            f"{min(r['ref_self'] for r in rows):.2f} dB"
        )
    print(
        f"goal median PSNR >= {GOAL_MEDIAN_PSNR_DB:g} dB: {median('psnr'):.2f} dB with sensor noise "
        f"({_verdict(median('psnr') >= GOAL_MEDIAN_PSNR_DB)}), {median('psnr_clean'):.2f} dB without "
        f"({_verdict(median('psnr_clean') >= GOAL_MEDIAN_PSNR_DB)})"
    )
    print(
        f"goal worst seed >= {GOAL_WORST_PSNR_DB:g} dB: {worst:.2f} dB with sensor noise "
        f"({_verdict(worst >= GOAL_WORST_PSNR_DB)}), {worst_clean:.2f} dB without "
        f"({_verdict(worst_clean >= GOAL_WORST_PSNR_DB)})"
    )
    print(
        f"goal median SSIM >= {GOAL_MEDIAN_SSIM:g}: {median('ssim'):.3f} with sensor noise "
        f"({_verdict(median('ssim') >= GOAL_MEDIAN_SSIM)}), {median('ssim_clean'):.3f} without "
        f"({_verdict(median('ssim_clean') >= GOAL_MEDIAN_SSIM)})"
    )
    print(
        f"goal >= {GOAL_EQUAL_CPU_GAIN_DB:g} dB above the raw render at equal CPU time: median gain "
        f"{median('gain'):.2f} dB, smallest {min(r['gain'] for r in rows):.2f} dB "
        f"({_verdict(median('gain') >= GOAL_EQUAL_CPU_GAIN_DB)})"
    )

    if not args.skip_cpu:
        cpu_per_frame(args, [seed for seed, _ in seeds], default_render)
    kernel_cache.cleanup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
