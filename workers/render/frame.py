"""One frame end to end: spec → scene → path-traced RGB + label pass → labels → files.

Stages (``FrameResult.timings_s`` has exactly these keys, seconds):

``spec``
    sampling the spec (only in :func:`render_frame_from_inputs`; else 0);
``scene_build``
    procedural meshes, BSDFs, emitters, ``mi.load_dict`` (acceleration structure);
``render``
    Mitsuba's ``mi.render`` of the RGB pass, alone;
``label_pass``
    the ``aov`` render (shape index + depth) and its mapping to instance ids / z-depth;
``labels``
    per-instance boxes, visibility, truncation, RLE;
``encode``
    exposure (metering), sensor noise, sRGB OETF, 8-bit quantization and, with ``out_dir``, the files.

Exposure: the HDR render's Y channel is luminance in cd/m². The shutter time is
metered from its mean with the ISO 2720 reflected-light equation
(``camera.metered_shutter_s``, K = 12.5), snapped to the 1/3-stop grid of
camera shutter dials and only then clamped to the budget's limits, so float
noise at the 1e-6 level of a threaded render cannot change the stored value.
"""

from __future__ import annotations

import json
import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .rounding import round_floats

STAGES: tuple[str, ...] = ("spec", "scene_build", "render", "label_pass", "labels", "encode")
# PNG zlib level 1 (fast). Measured at 640×480: the noisy RGB frame compresses best *and* fastest
# with the Huffman-only strategy (15 ms, 420 KB vs 19 ms, 497 KB at the default strategy); the
# instance image is mostly runs, where the default strategy is already 4 ms and 5 KB.
PNG_COMPRESSION_LEVEL = 1
# Shutter dials step in thirds of a stop (1/125, 1/100, 1/80 s ...); common practice.
SHUTTER_STOPS_PER_EV = 3
OUTPUT_FILES: tuple[str, ...] = ("rgb.png", "instances.png", "depth.npy", "labels.json", "scene.json",
                                 "timings.json")


@dataclass
class FrameResult:
    """Everything a rendered frame produced.

    ``rgb`` (H, W, 3) uint8 sRGB; ``instance_ids`` (H, W) uint16 (0 = background: room,
    lights); ``depth_m`` (H, W) float32 z-depth along the optical axis (0 = no hit);
    ``labels`` JSON-able dict; ``timings_s`` per stage; ``radiance_rgb`` the linear HDR render
    (Y in cd/m²) before exposure.
    """

    rgb: np.ndarray
    instance_ids: np.ndarray
    depth_m: np.ndarray
    labels: dict[str, Any]
    timings_s: dict[str, float]
    spec: dict[str, Any]
    radiance_rgb: np.ndarray | None = None
    files: dict[str, Path] = field(default_factory=dict)


def snap_shutter_s(shutter_s: float, stops_per_ev: int = SHUTTER_STOPS_PER_EV) -> float:
    """Round a shutter time to the nearest 1/``stops_per_ev`` stop: ``2^(round(n·log2 t)/n)``, 6 significant figures.

    References
    ----------
    ISO 2720:1974 / common camera practice: shutter speeds in 1/3-EV steps.
    """
    step = round(stops_per_ev * math.log2(shutter_s))
    return float(f"{2.0 ** (step / stops_per_ev):.6g}")


def expose(radiance_rgb: np.ndarray, camera: dict[str, Any], *, rng: np.random.Generator,
           noise: bool = True) -> tuple[np.ndarray, dict[str, Any]]:
    """Meter, expose, add sensor noise, clip and sRGB-encode a linear render (Y in cd/m²).

    Returns the uint8 (H, W, 3) image and the exposure actually used (``shutter_s``,
    ``metered_shutter_s`` before the limits, ``ev100``, ``iso``, ``f_number``,
    ``exposure_compensation_ev``). Every stored number derives from the snapped shutter time and
    the spec, never from the raw float mean.

    References
    ----------
    ISO 2720:1974 (meter, K = 12.5), ISO 12232:2019 (saturation-based speed), IEC 61966-2-1 (sRGB OETF),
    EMVA 1288 (noise model) — see :mod:`workers.render.camera`.
    """
    from . import camera as cam

    f_number = float(camera["f_number"])
    iso = float(camera["iso"])
    compensation_ev = float(camera.get("exposure_compensation_ev", 0.0))
    lo_s, hi_s = (float(v) for v in camera["shutter_limits_s"])
    mean_luminance = float(cam.luminance_cd_m2(radiance_rgb).mean(dtype=np.float64))
    iso_lo, iso_hi = (float(v) for v in camera.get("iso_limits", (iso, iso)))
    if mean_luminance > 0:
        metered = cam.metered_shutter_s(mean_luminance, f_number, iso, compensation_ev=compensation_ev,
                                        shutter_limits_s=(1e-300, 1e300))
        metered = snap_shutter_s(metered)
        if metered > hi_s and iso < iso_hi:
            # Auto-ISO, as cameras do: the longest allowed shutter is not enough, so raise the
            # sensitivity (in marked 1/3-stop steps, up to the budget's limit) before underexposing.
            needed = min(iso * metered / hi_s, iso_hi)
            candidates = [v for v in cam.nominal_iso_values(iso, iso_hi) if v >= needed] or [iso_hi]
            iso = float(min(candidates))
            metered = snap_shutter_s(cam.metered_shutter_s(mean_luminance, f_number, iso,
                                                           compensation_ev=compensation_ev,
                                                           shutter_limits_s=(1e-300, 1e300)))
    else:
        metered = hi_s
    shutter_s = min(max(metered, lo_s), hi_s)
    scale = cam.exposure_scale(f_number, shutter_s, iso)
    signal = np.asarray(radiance_rgb, dtype=np.float32)[..., :3] * np.float32(scale)
    if noise:
        signal = cam.apply_sensor_noise(signal, iso, full_well_electrons=float(camera["full_well_electrons"]),
                                        read_noise_electrons=float(camera["read_noise_electrons"]), rng=rng)
    rgb = cam.encode_srgb_8bit(signal)
    exposure = {
        "shutter_s": round(shutter_s, 9),
        "metered_shutter_s": round(metered, 9),
        "ev100": round(cam.ev100(f_number, shutter_s, iso), 6),
        "iso": iso,
        "iso_sampled": float(camera["iso"]),
        "f_number": f_number,
        "exposure_compensation_ev": compensation_ev,
        "metering": "ISO 2720 average, K=12.5, 1/3-stop, auto-ISO",
    }
    return rgb, exposure


def _write_png(path: Path, image: np.ndarray) -> None:
    import cv2

    params = [cv2.IMWRITE_PNG_COMPRESSION, PNG_COMPRESSION_LEVEL]
    if image.ndim == 3:
        image = np.ascontiguousarray(image[..., ::-1])  # RGB → BGR for OpenCV
        params += [cv2.IMWRITE_PNG_STRATEGY, cv2.IMWRITE_PNG_STRATEGY_HUFFMAN_ONLY]
    # Encode in memory and write with Python: cv2.imwrite only returns False, which would hide the reason
    # (no space left on device, read-only file system) that the frame's error must show.
    ok, encoded = cv2.imencode(".png", image, params)
    if not ok:
        raise ValueError(f"could not encode {path.name} as PNG")
    Path(path).write_bytes(encoded.tobytes())


def _dump_json(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def write_frame_files(result: FrameResult, out_dir: Path, *, spec_json: str | None = None) -> dict[str, Path]:
    """Write rgb.png, instances.png (16-bit), depth.npy, labels.json, scene.json, timings.json."""
    from .spec import spec_to_json

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files = {name: out_dir / name for name in OUTPUT_FILES}
    _write_png(files["rgb.png"], result.rgb)
    _write_png(files["instances.png"], result.instance_ids.astype(np.uint16))
    np.save(files["depth.npy"], result.depth_m.astype(np.float32))
    files["labels.json"].write_text(_dump_json(result.labels) + "\n", encoding="utf-8")
    files["scene.json"].write_text((spec_json or spec_to_json(result.spec)) + "\n", encoding="utf-8")
    return files


def render_frame(
    spec: dict[str, Any],
    *,
    out_dir: Path | None = None,
    variant: str | None = None,
    threads: int | None = None,
    spec_s: float = 0.0,
) -> FrameResult:
    """Render a spec from :func:`workers.render.spec.make_spec` (or its JSON read back).

    Parameters
    ----------
    spec : dict
        The frame spec.
    out_dir : Path, optional
        Directory for the output files (see :data:`OUTPUT_FILES`).
    variant : str, optional
        ``scalar_rgb`` or ``llvm_ad_rgb``; default: :func:`workers.render.backend.choose_backend`.
    threads : int, optional
        Dr.Jit thread-pool size.
    spec_s : float
        Time already spent making the spec, reported as the ``spec`` stage.
    """
    from . import labels as labels_module
    from .backend import init_renderer
    from .scene import build_scene, render_label_pass, render_rgb
    from .spec import axis_rng

    timings = dict.fromkeys(STAGES, 0.0)
    timings["spec"] = float(spec_s)

    start = time.perf_counter()
    choice = init_renderer(variant=variant, threads=threads)
    built = build_scene(spec)
    timings["scene_build"] = time.perf_counter() - start

    start = time.perf_counter()
    radiance = render_rgb(built, seed=spec["sub_seeds"]["noise"])
    timings["render"] = time.perf_counter() - start

    start = time.perf_counter()
    instance_ids, depth_m = render_label_pass(built)
    timings["label_pass"] = time.perf_counter() - start

    start = time.perf_counter()
    triangles_world = {instance_id: np.concatenate([vertices[faces] for vertices, faces in parts])
                       for instance_id, parts in built.instance_triangles.items() if parts}
    instances = labels_module.instance_labels(instance_ids, spec["objects"], triangles_world, built.rotation,
                                              built.translation, built.k_matrix, spec["thresholds"])
    timings["labels"] = time.perf_counter() - start

    start = time.perf_counter()
    rgb, exposure = expose(radiance, spec["camera"], rng=axis_rng(spec["sub_seeds"], "noise"))
    labels = round_floats({
        "image": {"width_px": built.width_px, "height_px": built.height_px},
        "camera": {"K": built.k_matrix, "R": built.rotation, "t": built.translation,
                   "convention": "OpenCV: X_cam = R X_world + t; pixel centres at integer + 0.5"},
        "exposure": exposure,
        "instances": instances,
        "seed": spec["seed"],
        "sub_seeds": spec["sub_seeds"],
        "variant": choice.variant,
    })
    result = FrameResult(rgb=rgb, instance_ids=instance_ids, depth_m=depth_m, labels=labels, timings_s=timings,
                         spec=spec, radiance_rgb=radiance)
    if out_dir is not None:
        result.files = write_frame_files(result, Path(out_dir))
    timings["encode"] = time.perf_counter() - start
    if out_dir is not None:
        # stage order, not sorted
        timings_json = json.dumps({k: round(v, 6) for k, v in timings.items()}, separators=(",", ":"))
        result.files["timings.json"].write_text(timings_json + "\n", encoding="utf-8")
    return result


def render_frame_from_inputs(
    budget: dict[str, Any] | None,
    composition: dict[str, int],
    seed: int,
    *,
    layout_seed: int | None = None,
    lighting_seed: int | None = None,
    camera_seed: int | None = None,
    out_dir: Path | None = None,
    variant: str | None = None,
    threads: int | None = None,
    user_assets: Mapping[str, Sequence[Mapping[str, Any]]] | None = None,
) -> FrameResult:
    """:func:`workers.render.spec.make_spec` then :func:`render_frame`, timing the spec stage too."""
    from .spec import make_spec

    start = time.perf_counter()
    spec = make_spec(budget, composition, seed, layout_seed=layout_seed, lighting_seed=lighting_seed,
                     camera_seed=camera_seed, user_assets=user_assets)
    spec_s = time.perf_counter() - start
    return render_frame(spec, out_dir=out_dir, variant=variant, threads=threads, spec_s=spec_s)


# Preview colours (BGR is not used: images here are RGB).
ACCEPTED_RGB = (40, 220, 60)
REJECTED_RGB = (235, 60, 40)


def _overlaps(a: tuple[int, int, int, int], b: tuple[int, int, int, int]) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def draw_preview(rgb: np.ndarray, labels: dict[str, Any]) -> np.ndarray:
    """A copy of ``rgb`` with each instance's visible box and class name: green accepted, red rejected.

    Rejected instances also show their first reject reason. A caption goes above its box, else
    inside its top edge, else below it, whichever does not cover an earlier caption.
    """
    import cv2

    image = np.ascontiguousarray(rgb.copy())
    height, width = image.shape[:2]
    scale = max(0.35, height / 1000.0)
    font = cv2.FONT_HERSHEY_SIMPLEX
    captions: list[tuple[tuple[int, int, int, int], tuple[int, int, int], str]] = []
    for instance in labels.get("instances", []):
        box = instance.get("bbox")
        if not box:
            continue
        x, y, w, h = (float(v) for v in box)
        colour = ACCEPTED_RGB if instance.get("accepted") else REJECTED_RGB
        x0, y0 = int(round(x)), int(round(y))
        x1, y1 = int(round(x + w)) - 1, int(round(y + h)) - 1
        cv2.rectangle(image, (x0, y0), (x1, y1), colour, 1, cv2.LINE_AA)
        text = f"{instance.get('class_name', '?')} #{instance.get('instance_id', '?')}"
        reasons = instance.get("reject_reasons") or []
        if not instance.get("accepted") and reasons:
            text += f" ({reasons[0]})"
        (text_w, text_h), baseline = cv2.getTextSize(text, font, scale, 1)
        box_h = text_h + baseline + 2
        left = min(max(x0, 0), max(width - text_w - 2, 0))
        candidates = [y0 - box_h, y0 + 1, y1 + 1]
        placed = [rect for rect, _, _ in captions]
        top = candidates[-1]
        for candidate in candidates:
            rect = (left, candidate, left + text_w + 2, candidate + box_h)
            if candidate >= 0 and candidate + box_h <= height and not any(_overlaps(rect, r) for r in placed):
                top = candidate
                break
        top = min(max(top, 0), max(height - box_h, 0))
        captions.append(((left, top, left + text_w + 2, top + box_h), colour, text))
    for (left, top, right, bottom), colour, text in captions:
        cv2.rectangle(image, (left, top), (right, bottom), colour, -1)
        (_, text_h), _ = cv2.getTextSize(text, font, scale, 1)
        cv2.putText(image, text, (left + 1, top + text_h + 1), font, scale, (0, 0, 0), 1, cv2.LINE_AA)
    return image
