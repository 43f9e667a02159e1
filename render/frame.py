"""One frame end to end: spec → scene → path-traced RGB + label pass → labels → files.

Stages (``FrameResult.timings_s`` has exactly these keys, seconds):

``spec``
    sampling the spec (only in :func:`render_frame_from_inputs`; else 0);
``scene_build``
    procedural meshes, BSDFs, emitters, ``mi.load_dict`` (acceleration structure);
``render``
    Mitsuba's ``mi.render`` of the RGB pass (plus the sun's own pass when the sky enters through
    window portals);
``label_pass``
    the ``aov`` render (shape index + depth) and its mapping to instance ids / z-depth;
``denoise``
    Intel Open Image Denoise on the linear radiance (0 when the budget turns it off);
``labels``
    per-instance boxes, visibility, truncation, RLE;
``encode``
    exposure (metering, auto-ISO), sensor noise, sRGB OETF, 8-bit quantization, the per-instance
    photometric visibility (contrast) and, with ``out_dir``, the files.

The image pipeline: path-traced linear radiance (box filter, sky through window portals) →
denoise (linear HDR, with albedo and shading-normal images) → exposure → sensor noise → sRGB
8-bit. Denoising comes before exposure and noise so that the sensor noise stays a physical,
seeded randomization on top of a clean image.

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

from . import camera as cam
from . import labels as labels_module
from . import scene as scene_module
from .backend import init_renderer
from .denoise import DenoiserUnavailable, denoise
from .images import write_image
from .labels import thresholds_for_class
from .reasons import contrast_reason
from .rounding import round_floats
from .scene import build_scene, render_label_and_aux, render_radiance, render_window_view
from .spec import axis_rng, make_spec, spec_to_json
from .visibility import instance_contrasts, noise_sigma_lightness

STAGES: tuple[str, ...] = ("spec", "scene_build", "render", "window_view", "label_pass", "denoise", "labels", "encode")
# Shutter dials step in thirds of a stop (1/125, 1/100, 1/80 s ...); common practice.
SHUTTER_STOPS_PER_EV = 3
OUTPUT_FILES: tuple[str, ...] = ("rgb.png", "instances.png", "depth.npy", "labels.json", "scene.json", "timings.json")


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


def auto_exposure(mean_luminance_cd_m2: float, camera: dict[str, Any]) -> dict[str, Any]:
    """Shutter time and ISO a camera in program mode with auto-ISO picks for a scene of this mean luminance.

    The meter (ISO 2720, K = 12.5) asks for ``t = K N² 2^EC / (L S)`` at the sampled ISO S, snapped to
    the 1/3-stop shutter grid. When that time is outside the budget's shutter limits, the ISO moves
    first — up when the longest shutter is too short, *down* when the shortest shutter is too long —
    to the nearest marked 1/3-stop speed (ISO 12232) inside the budget's ISO range that brings the
    time back inside; only what the ISO range cannot absorb is left to the shutter clamp. The
    residual ``exposure_error_ev`` = log2(t_used / t_metered at the final ISO) is recorded (positive:
    over-exposed). With the ISO range allowing it, |error| ≤ 1/6 stop (the snapping).

    Returns ``shutter_s``, ``metered_shutter_s`` (at the final ISO, before the clamp), ``iso``,
    ``exposure_error_ev`` and ``limited_by`` (None, ``"shortest shutter"`` or ``"longest shutter"``).

    References
    ----------
    ISO 2720:1974 (reflected-light meter, K = 12.5); ISO 12232:2019 (speed series in 1/3 stops).
    """

    f_number = float(camera["f_number"])
    iso = float(camera["iso"])
    compensation_ev = float(camera.get("exposure_compensation_ev", 0.0))
    lo_s, hi_s = (float(v) for v in camera["shutter_limits_s"])
    iso_lo, iso_hi = (float(v) for v in camera.get("iso_limits", (iso, iso)))

    def meter(speed: float) -> float:
        return snap_shutter_s(
            cam.metered_shutter_s(
                mean_luminance_cd_m2, f_number, speed, compensation_ev=compensation_ev, shutter_limits_s=(1e-300, 1e300)
            )
        )

    if not mean_luminance_cd_m2 > 0:
        return {
            "shutter_s": hi_s,
            "metered_shutter_s": hi_s,
            "iso": iso,
            "exposure_error_ev": 0.0,
            "limited_by": "longest shutter",
        }
    metered = meter(iso)
    # Step along the 1/3-stop series away from the sampled ISO (up when the longest shutter is too
    # short, down when the shortest is too long) and stop at the first speed whose snapped time fits.
    if metered > hi_s and iso < iso_hi:
        speeds = [*cam.nominal_iso_values(iso, iso_hi), iso_hi]
    elif metered < lo_s and iso > iso_lo:
        speeds = [*reversed(cam.nominal_iso_values(iso_lo, iso)), iso_lo]
    else:
        speeds = []
    for speed in speeds:
        iso, metered = float(speed), meter(speed)
        if lo_s <= metered <= hi_s:
            break
    shutter_s = min(max(metered, lo_s), hi_s)
    limited_by = "shortest shutter" if metered < lo_s else "longest shutter" if metered > hi_s else None
    return {
        "shutter_s": shutter_s,
        "metered_shutter_s": metered,
        "iso": iso,
        "exposure_error_ev": math.log2(shutter_s / metered),
        "limited_by": limited_by,
    }


def expose(
    radiance_rgb: np.ndarray, camera: dict[str, Any], *, rng: np.random.Generator, noise: bool = True
) -> tuple[np.ndarray, dict[str, Any]]:
    """Meter, expose, add sensor noise, clip and sRGB-encode a linear render (Y in cd/m²).

    The meter reads the log-average luminance (:func:`render.camera.metered_luminance_cd_m2`:
    lamps and sun patches in view do not darken the room); exposure is :func:`auto_exposure`; sensor
    noise (shot + read, EMVA 1288 model) is added when ``noise`` and the camera's ``sensor_noise``
    switch (default on) are both true. Returns the uint8
    (H, W, 3) image and the exposure actually used (``shutter_s``, ``metered_shutter_s``,
    ``exposure_error_ev``, ``limited_by``, ``ev100``, ``iso``, ``iso_sampled``, ``f_number``,
    ``exposure_compensation_ev``, ``sensor_noise``). Every stored number derives from the snapped
    shutter time and the spec, never from the raw float mean.

    References
    ----------
    ISO 2720:1974 (meter, K = 12.5), ISO 12232:2019 (saturation-based speed), IEC 61966-2-1 (sRGB OETF),
    EMVA 1288 (noise model) — see :mod:`render.camera`.
    """

    f_number = float(camera["f_number"])
    chosen = auto_exposure(cam.metered_luminance_cd_m2(radiance_rgb), camera)
    shutter_s, iso = chosen["shutter_s"], chosen["iso"]
    scale = cam.exposure_scale(f_number, shutter_s, iso)
    signal = np.asarray(radiance_rgb, dtype=np.float32)[..., :3] * np.float32(scale)
    with_noise = bool(noise) and bool(camera.get("sensor_noise", True))
    if with_noise:
        signal = cam.apply_sensor_noise(
            signal,
            iso,
            full_well_electrons=float(camera["full_well_electrons"]),
            read_noise_electrons=float(camera["read_noise_electrons"]),
            rng=rng,
        )
    rgb = cam.encode_srgb_8bit(signal)
    exposure = {
        "shutter_s": round(shutter_s, 9),
        "metered_shutter_s": round(chosen["metered_shutter_s"], 9),
        "exposure_error_ev": round(chosen["exposure_error_ev"], 6),
        "limited_by": chosen["limited_by"],
        "ev100": round(cam.ev100(f_number, shutter_s, iso), 6),
        "iso": iso,
        "iso_sampled": float(camera["iso"]),
        "f_number": f_number,
        "exposure_compensation_ev": float(camera.get("exposure_compensation_ev", 0.0)),
        "sensor_noise": with_noise,
        "metering": "log-average luminance, ISO 2720 K=12.5, 1/3-stop, auto-ISO up and down",
    }
    return rgb, exposure


def _dump_json(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def write_frame_files(result: FrameResult, out_dir: Path, *, spec_json: str | None = None) -> dict[str, Path]:
    """Write rgb.png, instances.png (16-bit), depth.npy, labels.json, scene.json, timings.json."""

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files = {name: out_dir / name for name in OUTPUT_FILES}
    write_image(files["rgb.png"], result.rgb)
    write_image(files["instances.png"], result.instance_ids.astype(np.uint16))
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
    window_light: str = "portal",
) -> FrameResult:
    """Render a spec from :func:`render.spec.make_spec` (or its JSON read back).

    Parameters
    ----------
    spec : dict
        The frame spec.
    out_dir : Path, optional
        Directory for the output files (see :data:`OUTPUT_FILES`).
    variant : str, optional
        ``scalar_rgb`` or ``llvm_ad_rgb``; default: :func:`render.backend.choose_backend`.
    threads : int, optional
        Dr.Jit thread-pool size.
    spec_s : float
        Time already spent making the spec, reported as the ``spec`` stage.
    window_light : str
        ``portal`` (default) or ``dome``: how sky light enters (see :func:`render.scene.build_scene`).
    """

    timings = dict.fromkeys(STAGES, 0.0)
    timings["spec"] = float(spec_s)
    render = spec["render"]
    # Specs written before the denoiser existed have no switch: they render as they did, raw.
    wants_denoise = bool(render.get("denoise", False))

    start = time.perf_counter()
    choice = init_renderer(variant=variant, threads=threads)
    built = build_scene(spec, window_light=window_light)
    timings["scene_build"] = time.perf_counter() - start

    start = time.perf_counter()
    radiance_pass = render_radiance(built, seed=spec["sub_seeds"]["noise"])
    timings["render"] = time.perf_counter() - start

    # The outdoor scene the camera sees through the windows (render.backdrop), added to the raw render before the
    # denoiser: the view pass traces the frame's own camera rays, so the sum is exactly a render of windows showing
    # the outdoor scene, window edges included. (Added after the denoiser, edges the denoiser had sharpened along
    # its albedo image met the view pass's softer ones and left a coloured fringe.)
    start = time.perf_counter()
    window_view = render_window_view(built, seed=spec["sub_seeds"]["noise"])
    if window_view is not None:
        radiance_pass.radiance_rgb = np.maximum(radiance_pass.radiance_rgb + window_view, 0.0)
    timings["window_view"] = time.perf_counter() - start

    start = time.perf_counter()
    label_pass = render_label_and_aux(built)
    instance_ids, depth_m = label_pass.instance_ids, label_pass.depth_m
    radiance_pass.albedo_rgb, radiance_pass.normal_xyz = label_pass.albedo_rgb, label_pass.normal_xyz
    timings["label_pass"] = time.perf_counter() - start

    start = time.perf_counter()
    radiance_out, render_info = denoise_radiance(radiance_pass, wanted=wants_denoise, threads=threads)
    render_info.update(
        {
            "spp": int(render["spp"]),
            "window_light": built.window_light,
            "sun_pass": built.sun_scene is not None,
            "reconstruction_filter": "box",
        }
    )
    if built.sun_scene is not None:
        render_info["sun_pass_spp"] = int(render["spp"]) * scene_module.SUN_PASS_SPP_FACTOR
    if window_view is not None:
        render_info["outdoor_view"] = True
    timings["denoise"] = time.perf_counter() - start

    start = time.perf_counter()
    triangles_world = {
        instance_id: np.concatenate([vertices[faces] for vertices, faces in parts])
        for instance_id, parts in built.instance_triangles.items()
        if parts
    }
    instances = labels_module.instance_labels(
        instance_ids,
        spec["objects"],
        triangles_world,
        built.rotation,
        built.translation,
        built.k_matrix,
        spec["thresholds"],
    )
    timings["labels"] = time.perf_counter() - start

    start = time.perf_counter()
    rgb, exposure = expose(radiance_out, spec["camera"], rng=axis_rng(spec["sub_seeds"], "noise"))
    instances = judge_visibility(rgb, instance_ids, instances, spec["thresholds"])
    labels = round_floats(
        {
            "image": {"width_px": built.width_px, "height_px": built.height_px},
            "camera": {
                "K": built.k_matrix,
                "R": built.rotation,
                "t": built.translation,
                "convention": "OpenCV: X_cam = R X_world + t; pixel centres at integer + 0.5",
            },
            "exposure": exposure,
            "render": render_info,
            "instances": instances,
            "seed": spec["seed"],
            "sub_seeds": spec["sub_seeds"],
            "variant": choice.variant,
        }
    )
    result = FrameResult(
        rgb=rgb,
        instance_ids=instance_ids,
        depth_m=depth_m,
        labels=labels,
        timings_s=timings,
        spec=spec,
        radiance_rgb=radiance_out,
    )
    if out_dir is not None:
        result.files = write_frame_files(result, Path(out_dir))
    timings["encode"] = time.perf_counter() - start
    if out_dir is not None:
        # stage order, not sorted
        timings_json = json.dumps({k: round(v, 6) for k, v in timings.items()}, separators=(",", ":"))
        result.files["timings.json"].write_text(timings_json + "\n", encoding="utf-8")
    return result


def denoise_radiance(
    radiance_pass: Any, *, wanted: bool, threads: int | None = None
) -> tuple[np.ndarray, dict[str, Any]]:
    """(radiance to expose, the labels' ``render`` record): denoised when ``wanted`` and the library loads.

    The record says ``denoised`` (bool) and ``denoiser`` (what ran, or why nothing did). A denoiser that
    cannot load leaves the frame raw and says so, rather than failing the frame.
    """

    if not wanted:
        return radiance_pass.radiance_rgb, {"denoised": False, "denoiser": "off (budget render.denoise is false)"}
    try:
        radiance = denoise(
            radiance_pass.radiance_rgb,
            albedo_rgb=radiance_pass.albedo_rgb,
            normal_xyz=radiance_pass.normal_xyz,
            hdr=True,
            threads=threads,
        )
    except DenoiserUnavailable as exc:
        return radiance_pass.radiance_rgb, {"denoised": False, "denoiser": f"unavailable, frame left raw: {exc}"}
    return radiance, {"denoised": True, "denoiser": DENOISER_NAME}


DENOISER_NAME = "Intel Open Image Denoise 1.4.3, RT filter, HDR, albedo + normal"


def judge_visibility(
    rgb: np.ndarray, instance_ids: np.ndarray, instances: list[dict[str, Any]], thresholds: Mapping[str, Any]
) -> list[dict[str, Any]]:
    """Add each instance's photometric ``contrast`` (and ``delta_e``, ``lightness``) and apply ``min_contrast``.

    Measured on the final 8-bit image (after exposure and sensor noise): what the detector will
    see. Instances already not visible geometrically keep contrast 0 and no extra reason.
    See :mod:`render.visibility` for the measure.
    """

    noise_sigma = noise_sigma_lightness(rgb)
    visible_ids = [int(item["instance_id"]) for item in instances if item.get("mask_area_px")]
    measured = instance_contrasts(rgb, instance_ids, visible_ids, noise_sigma=noise_sigma) if visible_ids else {}
    out = []
    for item in instances:
        item = dict(item)
        values = measured.get(int(item["instance_id"]), {"contrast": 0.0, "delta_e": 0.0, "lightness": 0.0})
        item["contrast"] = float(values["contrast"])
        item["delta_e"] = float(values["delta_e"])
        item["lightness"] = float(values["lightness"])
        item["noise_sigma_lightness"] = round(float(noise_sigma), 4)
        min_contrast = thresholds_for_class(item.get("class_name", ""), thresholds)["min_contrast"]
        reason = contrast_reason(item, min_contrast=min_contrast)
        if reason:
            item["reject_reasons"] = [*item.get("reject_reasons", []), reason]
            item["accepted"] = False
        out.append(item)
    return out


def render_frame_from_inputs(
    budget: dict[str, Any] | None,
    composition: dict[str, int],
    seed: int,
    *,
    layout_seed: int | None = None,
    lighting_seed: int | None = None,
    camera_seed: int | None = None,
    view_slot: int | None = None,
    out_dir: Path | None = None,
    variant: str | None = None,
    threads: int | None = None,
    user_assets: Mapping[str, Sequence[Mapping[str, Any]]] | None = None,
) -> FrameResult:
    """:func:`render.spec.make_spec` then :func:`render_frame`, timing the spec stage too."""

    start = time.perf_counter()
    spec = make_spec(
        budget,
        composition,
        seed,
        layout_seed=layout_seed,
        lighting_seed=lighting_seed,
        camera_seed=camera_seed,
        view_slot=view_slot,
        user_assets=user_assets,
    )
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
