"""Quota-aware composition planner: pure functions, no Django, no renderer (of the render core, only the pure
reject-reason wording of :mod:`render.reasons`).

Each next frame's class composition comes from the remaining deficits and the
accepted yield observed per class. The yield of class *c* (the probability
that one placed instance ends up accepted) is estimated with a Beta prior,

    yield_c = (accepted_c + prior_mean · prior_strength) / (placed_c + prior_strength),

the posterior mean of a Beta-Binomial model (Gelman et al., *Bayesian Data
Analysis*, 3rd ed., §2.4 — from memory), so a class seen few times stays
near the prior and a class often rejected (occluded, too small) is placed
more often. The placements a class still needs are

    need_c = max(0, deficit_c − in_flight_c · yield_c) / yield_c,

where ``in_flight_c`` are instances of *c* in frames dispatched but not yet
finished (so that several frames in flight do not all chase the same last
instances). A frame's slots (the density limit × the room's floor area) are
shared in proportion to ``need_c``, so every quota is expected to fill at
the same frame; a class whose quota is met has ``need_c = 0`` and is no
longer placed.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from render.reasons import box_reason, contrast_reason, visible_fraction_reason  # one wording for reject reasons

PRIOR_YIELD = 0.5  # common practice: an uninformative-ish prior mean for "accepted"
PRIOR_STRENGTH = 4.0  # pseudo-placements; small so observations dominate after a few frames


@dataclass(frozen=True)
class ClassProgress:
    """What the planner knows about one class of a campaign."""

    name: str
    target_accepted: int
    accepted: int = 0
    placed: int = 0
    in_flight_placed: int = 0

    @property
    def deficit(self) -> int:
        return max(0, self.target_accepted - self.accepted)


def posterior_yield(
    *, accepted: int, placed: int, prior_mean: float = PRIOR_YIELD, prior_strength: float = PRIOR_STRENGTH
) -> float:
    """Posterior mean accepted-yield per placed instance (Beta-Binomial); in (0, 1]."""
    if placed < 0 or accepted < 0:
        raise ValueError("accepted and placed must be non-negative")
    value = (accepted + prior_mean * prior_strength) / (placed + prior_strength)
    # A floor keeps need_c finite for a class that has never been accepted yet.
    return float(min(1.0, max(0.02, value)))


def max_objects_for_room(*, floor_area_m2: float, max_objects_per_m2: float, cap: int | None = None) -> int:
    """Density limit: the most instances a room of this floor area may hold (at least one)."""
    if floor_area_m2 <= 0:
        raise ValueError(f"floor area must be positive, got {floor_area_m2} m²")
    limit = max(1, math.floor(floor_area_m2 * max_objects_per_m2))
    return min(limit, cap) if cap else limit


def placements_needed(
    progress: Sequence[ClassProgress], *, prior_mean: float = PRIOR_YIELD, prior_strength: float = PRIOR_STRENGTH
) -> dict[str, float]:
    """Expected placements each class still needs, after counting what is in flight."""
    needs: dict[str, float] = {}
    for item in progress:
        y = posterior_yield(
            accepted=item.accepted, placed=item.placed, prior_mean=prior_mean, prior_strength=prior_strength
        )
        remaining = item.deficit - item.in_flight_placed * y
        needs[item.name] = max(0.0, remaining) / y
    return needs


def plan_composition(
    progress: Sequence[ClassProgress],
    *,
    max_objects: int,
    prior_mean: float = PRIOR_YIELD,
    prior_strength: float = PRIOR_STRENGTH,
) -> dict[str, int]:
    """The next frame's composition {class name: instances}; empty when nothing more is needed now.

    When the classes together need more placements than the frame holds,
    slots are shared in proportion to need (largest-remainder rounding, no
    class above ``ceil(need)``). In the last frames, when everything fits,
    each class gets ``round(need)`` so that the expected accepted count
    matches the deficit instead of overshooting it.
    """
    if max_objects < 1:
        raise ValueError("max_objects must be at least 1")
    needs = placements_needed(progress, prior_mean=prior_mean, prior_strength=prior_strength)
    deficits = {p.name: p.deficit for p in progress}
    in_flight = {p.name: p.in_flight_placed for p in progress}
    total = sum(needs.values())
    if total <= 0:
        return {}
    if total <= max_objects:
        composition = {name: int(math.floor(need + 0.5)) for name, need in needs.items()}
        for name, need in needs.items():
            # A class still short with nothing in flight always gets one try.
            if composition[name] == 0 and deficits[name] > 0 and in_flight[name] == 0 and need > 0:
                composition[name] = 1
        while sum(composition.values()) > max_objects:  # the "at least one" rule may overfill by a few
            largest = max(composition, key=lambda n: (composition[n] - needs[n], composition[n]))
            composition[largest] -= 1
        return {n: c for n, c in sorted(composition.items()) if c > 0}
    shares = {name: max_objects * need / total for name, need in needs.items()}
    composition = {name: min(int(math.floor(share)), math.ceil(needs[name])) for name, share in shares.items()}
    spare = max_objects - sum(composition.values())
    order = sorted(shares, key=lambda n: (-(shares[n] - math.floor(shares[n])), n))
    while spare > 0:
        progressed = False
        for name in order:
            if spare == 0:
                break
            if composition[name] < math.ceil(needs[name]):
                composition[name] += 1
                spare -= 1
                progressed = True
        if not progressed:
            break
    return {n: c for n, c in sorted(composition.items()) if c > 0}


def uniform_composition(class_names: Sequence[str], *, max_objects: int, rng: np.random.Generator) -> dict[str, int]:
    """Baseline: ``max_objects`` instances, each class drawn uniformly at random (with replacement)."""
    names = sorted(class_names)
    if not names:
        return {}
    draws = rng.integers(0, len(names), size=max_objects)
    counts = np.bincount(draws, minlength=len(names))
    return {name: int(count) for name, count in zip(names, counts, strict=True) if count > 0}


def composition_still_useful(
    composition: Mapping[str, int], needs: Mapping[str, float], *, min_useful_fraction: float = 0.75
) -> bool:
    """Whether another view of an existing layout still serves the quotas.

    True when at least ``min_useful_fraction`` of its placements are still
    needed (``needs`` already discounts frames in flight); otherwise the
    scheduler moves on to a new layout rather than render surplus.
    """
    total = sum(max(0, int(c)) for c in composition.values())
    if total == 0:
        return False
    useful = sum(min(max(0, int(c)), needs.get(name, 0.0)) for name, c in composition.items())
    return useful >= min_useful_fraction * total


# --- frame coordinates and seeds ----------------------------------------------------------------


@dataclass(frozen=True)
class FrameSeeds:
    seed: int
    layout_seed: int
    lighting_seed: int
    camera_seed: int
    # The view's place among its layout's views (lighting × views_per_lighting + view): the render core keeps
    # the views of one layout apart by it (``render.spec.make_spec(view_slot=…)``). None: not kept apart.
    view_slot: int | None = None


def _derive(*words: int) -> int:
    return int(
        np.random.SeedSequence([int(w) & 0xFFFFFFFF for w in words]).generate_state(1, dtype=np.uint64)[0]
        & 0x7FFFFFFFFFFFFFFF
    )


def frame_seeds(
    *,
    campaign_seed: int,
    index: int,
    layout_index: int,
    lighting_index: int,
    view_index: int,
    views_per_lighting: int | None = None,
) -> FrameSeeds:
    """Sub-seeds per axis: frames sharing a layout index share the room and furniture, and so on down.

    Derived with :class:`numpy.random.SeedSequence` from the campaign seed, so
    they are reproducible on any machine.
    """
    root = int(campaign_seed)
    return FrameSeeds(
        seed=_derive(root, 0, index),
        layout_seed=_derive(root, 1, layout_index),
        lighting_seed=_derive(root, 2, layout_index, lighting_index),
        camera_seed=_derive(root, 3, layout_index, lighting_index, view_index),
        view_slot=None
        if views_per_lighting is None
        else int(lighting_index) * int(views_per_lighting) + int(view_index),
    )


def next_coordinates(
    previous: tuple[int, int, int] | None,
    *,
    lighting_per_layout: int,
    views_per_lighting: int,
    layouts: int,
    continue_layout: bool,
) -> tuple[int, int, int]:
    """(layout, lighting, view) of the next frame.

    The variation budget walks views within a lighting variant, lighting
    variants within a layout, then the next layout; ``continue_layout=False``
    (the layout's composition no longer serves any quota) jumps to the next
    layout. Layout indices wrap at ``layouts``.
    """
    if previous is None:
        return (0, 0, 0)
    layout, lighting, view = previous
    if continue_layout:
        if view + 1 < views_per_lighting:
            return (layout, lighting, view + 1)
        if lighting + 1 < lighting_per_layout:
            return (layout, lighting + 1, 0)
    return ((layout + 1) % max(1, layouts), 0, 0)


# --- acceptance -----------------------------------------------------------------------------------


def accept_instance(
    label: Mapping, *, min_visible_fraction: float, min_box_px: float, min_contrast: float = 0.0
) -> tuple[bool, list[str]]:
    """Accept one label row of the render core by its class quota's own thresholds.

    The render core judges with the budget's global thresholds; a quota may
    be stricter or looser per class, so visibility, the visible box's
    shorter side (``bbox`` is COCO ``[x, y, w, h]`` in pixels) and the
    photometric ``contrast`` (unitless: ΔE*ab against a ring around the
    object ÷ the image's noise) are judged again here. Returns (accepted,
    reasons) with the same reason wording as the render core. Labels without
    ``contrast`` (frames from before the measure, or label-pass-only frames)
    and ``min_contrast`` 0 are not judged on contrast.

    References
    ----------
    The wording of every reason: :mod:`render.reasons`.
    """
    box = label.get("bbox")
    area_px = int(label.get("mask_area_px") or 0)
    if not box or area_px == 0:
        return False, ["not visible"]
    candidates = (
        visible_fraction_reason(float(label.get("visible_fraction") or 0.0), min_visible_fraction=min_visible_fraction),
        box_reason(min(float(box[2]), float(box[3])), min_box_px=min_box_px),
        contrast_reason(label, min_contrast=min_contrast),
    )
    reasons = [reason for reason in candidates if reason]
    return not reasons, reasons
