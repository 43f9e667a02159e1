"""Scene spec: everything needed to render (and re-render) one frame, as plain JSON.

``make_spec(budget, composition, seed)`` normalizes the budget, derives one
sub-seed per randomization axis and samples the room, the assets and their
placement (layout stream), the lights (lighting stream) and the camera
(camera stream); the noise sub-seed drives the path tracer's sampler and the
sensor noise. Giving ``layout_seed`` (or ``lighting_seed``, ``camera_seed``)
fixes that axis independently of ``seed``, so a campaign's variation budget
(layouts × lighting variants × camera views) is a matter of which sub-seeds a
frame shares with its neighbours.

The spec is returned exactly as :func:`spec_from_json` would read it back
(floats rounded to 6 decimals, tuples as lists), so rendering the in-memory
spec and rendering its JSON later give the same frame.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from .appearance import assign_textures
from .assets import CLASSES, sample_asset, user_asset_spec
from .backdrop import sample_backdrop
from .budget import normalize_budget
from .camera import sample_camera
from .distractors import clear_of_camera_and_lights, sample_distractors
from .layout import choose_layout_mode, place_objects, sample_room
from .lights import sample_lights
from .rounding import round_floats

SPEC_FORMAT_VERSION = 1
AXES: tuple[str, ...] = ("layout", "lighting", "camera", "noise")
# Spawn key of the appearance stream (textures), derived from the layout sub-seed: frames that share a
# layout share its surfaces, without a draw taken from the layout stream itself.
_APPEARANCE_SPAWN_KEY = (len(AXES), 1)
# Spawn key of the distractor stream (unlabelled clutter), also derived from the layout sub-seed: the labelled
# objects, lights and camera of a seed stay what they were, and frames that share a layout share their clutter.
_DISTRACTOR_SPAWN_KEY = (len(AXES), 2)
# The outdoor scene through the windows (render.backdrop): a stream of its own, keyed by the layout.
_BACKDROP_SPAWN_KEY = (len(AXES), 3)
# A sub-seed is a 32-bit unsigned integer: exact in JSON and in JavaScript.
_SEED_MAX = 2**32


class SpecError(ValueError):
    """Bad spec inputs that retrying cannot fix: composition (unknown class, bad count), seeds, spec version."""


def spec_to_json(spec: dict[str, Any]) -> str:
    """Canonical JSON text: sorted keys, compact separators, floats rounded. Same spec → same bytes."""
    return json.dumps(round_floats(spec), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def spec_from_json(text: str) -> dict[str, Any]:
    """Read a spec written by :func:`spec_to_json`; refuses other format versions."""
    spec = json.loads(text)
    if not isinstance(spec, dict) or spec.get("format_version") != SPEC_FORMAT_VERSION:
        found = spec.get("format_version") if isinstance(spec, dict) else None
        raise SpecError(f"spec: format_version {found!r} is not supported (expected {SPEC_FORMAT_VERSION})")
    return spec


def _check_seed(name: str, value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise SpecError(f"{name}: expected a non-negative integer, got {value!r}")
    return int(value)


def derive_sub_seeds(
    seed: int, *, layout_seed: int | None = None, lighting_seed: int | None = None, camera_seed: int | None = None
) -> dict[str, int]:
    """One 32-bit sub-seed per axis, from ``numpy.random.SeedSequence(seed).spawn``; overrides win."""
    children = np.random.SeedSequence(_check_seed("seed", seed)).spawn(len(AXES))
    derived = {
        axis: int(child.generate_state(1, dtype=np.uint32)[0]) for axis, child in zip(AXES, children, strict=True)
    }
    overrides = {"layout": layout_seed, "lighting": lighting_seed, "camera": camera_seed}
    for axis, value in overrides.items():
        if value is not None:
            derived[axis] = _check_seed(f"{axis}_seed", value) % _SEED_MAX
    return derived


def axis_rng(sub_seeds: dict[str, int], axis: str) -> np.random.Generator:
    """The generator of one axis. The axis index is in the spawn key, so equal sub-seeds on two
    axes still give independent streams."""
    return np.random.default_rng(np.random.SeedSequence(sub_seeds[axis], spawn_key=(AXES.index(axis),)))


def validate_composition(composition: Any) -> dict[str, int]:
    """``{class_name: count}`` with known classes and non-negative whole counts, sorted by class."""
    if not isinstance(composition, dict):
        raise SpecError(f"composition: expected {{class_name: count}}, got {type(composition).__name__}")
    clean: dict[str, int] = {}
    for name, count in composition.items():
        if name not in CLASSES:
            raise SpecError(f"composition: unknown class {name!r} (known: {', '.join(sorted(CLASSES))})")
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)):
            raise SpecError(f"composition: count of {name!r} must be a whole number, got {count!r}")
        if count < 0:
            raise SpecError(f"composition: count of {name!r} is negative ({count})")
        clean[str(name)] = int(count)
    return dict(sorted(clean.items()))


def _render_settings(budget: dict[str, Any]) -> dict[str, Any]:
    render = budget["render"]
    settings: dict[str, Any] = {key: int(render[key]) for key in ("width_px", "height_px", "spp", "max_depth")}
    settings["denoise"] = bool(render.get("denoise", False))
    return settings


def make_spec(
    budget: dict[str, Any] | None,
    composition: dict[str, int],
    seed: int,
    *,
    layout_seed: int | None = None,
    lighting_seed: int | None = None,
    camera_seed: int | None = None,
    user_assets: Mapping[str, Sequence[Mapping[str, Any]]] | None = None,
    view_slot: int | None = None,
) -> dict[str, Any]:
    """Sample a complete frame spec.

    Parameters
    ----------
    budget : dict or None
        A (partial) randomization budget; merged over the defaults and validated
        (:class:`render.budget.BudgetError` on bad input).
    composition : dict
        ``{class_name: count}``; unknown classes or negative counts raise ``ValueError``.
    seed : int
        The frame seed; each axis's sub-seed derives from it unless overridden.
    layout_seed, lighting_seed, camera_seed : int, optional
        Fix one axis: two specs with the same ``layout_seed`` (and budget and
        composition) have the same room and objects.
    user_assets : mapping, optional
        ``{class_name: [entry, ...]}`` of uploaded meshes, each entry ``{"asset_id", "mesh_path", "unit",
        "up_axis", "placement"}`` and optionally ``"front"`` (the file axis the model faces, ±x/±y/±z) and
        ``"look"`` ("keep" the model's materials or "randomize", the default). Each instance of a class with entries picks uniformly (layout stream) among
        the procedural generator and the entries; a picked entry becomes a
        :func:`render.assets.user_asset_spec` carrying the entry's ``asset_id`` (and its mesh path, so
        the spec re-renders from its JSON). None or no entries for a class: that class samples exactly as before.
    view_slot : int, optional
        This view's index among the views of its layout (lighting index × views per lighting + view index).
        Given, the camera pose is drawn apart from the layout's earlier views
        (:func:`render.camera.sample_camera`); None draws it from the camera stream alone.

    Returns
    -------
    dict
        JSON-able spec: ``format_version``, ``seed``, ``sub_seeds``, ``budget``, ``composition``,
        ``render``, ``room``, ``layout_mode`` ("free" or "home", :func:`render.layout.choose_layout_mode`),
        ``objects``, ``lights``, ``camera``, ``thresholds``; ``distractors`` (unlabelled
        clutter, :mod:`render.distractors`) only when there are any.

    Raises
    ------
    ValueError
        Bad composition or seeds; ``layout.LayoutError`` (a ValueError) when the objects do not fit.
    """
    normalized = normalize_budget(budget)
    clean_composition = validate_composition(composition)
    sub_seeds = derive_sub_seeds(seed, layout_seed=layout_seed, lighting_seed=lighting_seed, camera_seed=camera_seed)
    if view_slot is not None:
        _check_seed("view_slot", view_slot)

    layout_rng = axis_rng(sub_seeds, "layout")
    room = round_floats(sample_room(normalized, layout_rng))
    clean_user_assets = _clean_user_assets(user_assets, clean_composition)
    asset_specs = [
        _sample_object(name, layout_rng, clean_user_assets.get(name, ()))
        for name, count in clean_composition.items()
        for _ in range(count)
    ]
    # One draw on the layout stream picks free placement or a home arrangement (layout.choose_layout_mode).
    layout_mode = choose_layout_mode(normalized["room"]["free_placement_probability"], layout_rng)
    objects = place_objects(
        room, asset_specs, layout_rng, max_objects_per_m2=normalized["room"]["max_objects_per_m2"], mode=layout_mode
    )
    objects = round_floats(objects)
    # Distractors (unlabelled clutter) go in after the labelled objects, on a stream of their own keyed by the
    # layout; with distractor_count [0, 0] nothing is drawn and the spec is what it was without them.
    distractor_rng = np.random.default_rng(np.random.SeedSequence(sub_seeds["layout"], spawn_key=_DISTRACTOR_SPAWN_KEY))
    distractors = round_floats(sample_distractors(room, objects, normalized["appearance"], distractor_rng))
    # Textures draw on a stream of their own, keyed by the layout: the room, objects, lights and camera of a
    # seed stay as they were, and frames that share a layout share their surfaces.
    appearance_rng = np.random.default_rng(np.random.SeedSequence(sub_seeds["layout"], spawn_key=_APPEARANCE_SPAWN_KEY))
    assign_textures(room, objects, normalized["appearance"], appearance_rng, distractors=distractors)
    room, objects, distractors = round_floats(room), round_floats(objects), round_floats(distractors)

    if room.get("windows"):
        backdrop_rng = np.random.default_rng(np.random.SeedSequence(sub_seeds["layout"], spawn_key=_BACKDROP_SPAWN_KEY))
        if backdrop_rng.random() < float(normalized["room"]["outdoor_view_probability"]):
            room["backdrop"] = round_floats(sample_backdrop(backdrop_rng))

    lights = round_floats(sample_lights(normalized, room, objects, axis_rng(sub_seeds, "lighting")))
    camera = round_floats(sample_camera(normalized, room, objects, axis_rng(sub_seeds, "camera"), view_slot=view_slot))
    distractors = clear_of_camera_and_lights(distractors, camera, lights)

    spec = {
        "format_version": SPEC_FORMAT_VERSION,
        "seed": _check_seed("seed", seed),
        "sub_seeds": sub_seeds,
        "budget": normalized,
        "composition": clean_composition,
        "render": _render_settings(normalized),
        "room": room,
        "layout_mode": layout_mode,
        "objects": objects,
        "lights": lights,
        "camera": camera,
        "thresholds": dict(normalized["thresholds"]),
    }
    if distractors:
        # Only when there are any, so specs without clutter keep their bytes.
        spec["distractors"] = distractors
    if clean_user_assets:
        # Only when there are uploads, so specs without them keep their bytes.
        spec["user_assets"] = {name: [dict(e) for e in entries] for name, entries in clean_user_assets.items()}
    # The returned spec is exactly what its JSON reads back as.
    return spec_from_json(spec_to_json(spec))


_USER_ENTRY_KEYS = ("asset_id", "mesh_path", "unit", "up_axis", "placement", "front", "look")
_USER_LOOKS = ("keep", "randomize")


def _clean_user_assets(
    user_assets: Mapping[str, Sequence[Mapping[str, Any]]] | None, composition: dict[str, int]
) -> dict[str, list[dict[str, str]]]:
    """The entries of the classes in the composition (with at least one instance), in a fixed order.

    ``front`` and ``look`` are kept only when they differ from the defaults (no front: the up axis's default;
    look "randomize"), so the specs of entries made before they existed keep their bytes."""
    if not user_assets:
        return {}
    clean: dict[str, list[dict[str, str]]] = {}
    for name in sorted(user_assets):
        entries = user_assets[name]
        if not composition.get(name) or not entries:
            continue
        rows = []
        for entry in entries:
            if not entry.get("asset_id") or not entry.get("mesh_path"):
                raise SpecError(f"user_assets: an entry of {name!r} needs an asset_id and a mesh_path")
            unknown = set(entry) - set(_USER_ENTRY_KEYS)
            if unknown:
                raise SpecError(
                    f"user_assets: unknown key(s) {', '.join(sorted(map(str, unknown)))} in an entry of "
                    f"{name!r} (known: {', '.join(_USER_ENTRY_KEYS)})"
                )
            look = str(entry.get("look") or "randomize")
            if look not in _USER_LOOKS:
                raise SpecError(f"user_assets: look {look!r} of {name!r} is not one of {', '.join(_USER_LOOKS)}")
            row = {
                "asset_id": str(entry["asset_id"]),
                "mesh_path": str(entry["mesh_path"]),
                "unit": str(entry.get("unit") or "auto"),
                "up_axis": str(entry.get("up_axis") or "z"),
                "placement": str(entry.get("placement") or "floor"),
            }
            if entry.get("front"):
                row["front"] = str(entry["front"])
            if look != "randomize":
                row["look"] = look
            rows.append(row)
        clean[str(name)] = rows
    return clean


def _sample_object(class_name: str, rng: np.random.Generator, entries: Sequence[dict[str, str]]) -> dict[str, Any]:
    """One asset spec: the procedural generator, or (uniformly among generator and uploads) a user mesh."""
    if not entries:
        return sample_asset(class_name, rng)  # no extra draw: specs without uploads keep their bytes
    pick = int(rng.integers(len(entries) + 1))
    if pick == 0:
        return sample_asset(class_name, rng)
    entry = entries[pick - 1]
    spec = user_asset_spec(
        entry["mesh_path"],
        class_name,
        entry["placement"],
        rng,
        unit=entry["unit"],
        up_axis=entry["up_axis"],
        front=entry.get("front") or None,
        look=entry.get("look", "randomize"),
    )
    spec["asset_id"] = entry["asset_id"]
    return spec
