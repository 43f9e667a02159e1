"""Photometric visibility checks against colour-science, Immerkær's estimator and images of known L*a*b*."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from render import visibility

with warnings.catch_warnings():  # colour-science warns at import that matplotlib is absent
    warnings.simplefilter("ignore")
    import colour


def _reference_lab(rgb: np.ndarray) -> np.ndarray:
    """CIELAB of 8-bit sRGB by colour-science (IEC 61966-2-1 sRGB, CIE 15:2004 Lab, both D65)."""
    return colour.XYZ_to_Lab(colour.sRGB_to_XYZ(np.asarray(rgb, dtype=float) / 255.0))


def _srgb8_from_lab(lab) -> np.ndarray:
    """8-bit sRGB codes of L*a*b* values (D65), by colour-science's inverse conversion, rounded and clipped."""
    srgb = colour.XYZ_to_sRGB(colour.Lab_to_XYZ(np.asarray(lab, dtype=float)))
    return np.clip(np.round(srgb * 255.0), 0, 255).astype(np.uint8)


def _grey_image(lightness: np.ndarray) -> np.ndarray:
    """(H, W, 3) uint8 grey image whose pixels have the given L* (a* = b* = 0), clipped to 0..100."""
    lab = np.zeros(lightness.shape + (3,))
    lab[..., 0] = np.clip(lightness, 0.0, 100.0)
    return _srgb8_from_lab(lab)


def _square_scene(size: int = 96, lo: int = 32, hi: int = 64) -> np.ndarray:
    """Instance-id image with instance 1 on the square [lo, hi)² and background 0 elsewhere."""
    ids = np.zeros((size, size), dtype=np.uint16)
    ids[lo:hi, lo:hi] = 1
    return ids


# ---------------------------------------------------------------------------------------------------------------------
# 1. CIELAB conversion
# ---------------------------------------------------------------------------------------------------------------------


def test_lab_conversion_matches_colour_science():
    rng = np.random.default_rng(1)
    rgb = rng.integers(0, 256, size=(40, 50, 3), dtype=np.uint8)
    ours = visibility._srgb8_to_lab(rgb)
    # Reference: colour-science XYZ_to_Lab(sRGB_to_XYZ(rgb / 255)), D65 (IEC 61966-2-1 + CIE 15:2004).
    delta_e = np.linalg.norm(ours - _reference_lab(rgb), axis=-1)
    assert delta_e.max() < 0.5
    # Reference: CIE 15:2004 — the white point is L* = 100, a* = b* = 0 and black is L* = 0.
    ends = visibility._srgb8_to_lab(np.array([[[255, 255, 255], [0, 0, 0]]], dtype=np.uint8))[0]
    np.testing.assert_allclose(ends, [[100.0, 0.0, 0.0], [0.0, 0.0, 0.0]], atol=1e-3)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_delta_e_and_lightness_of_flat_regions_match_colour_science(seed):
    rng = np.random.default_rng(seed)
    inner, outer = rng.integers(0, 256, size=(2, 3), dtype=np.uint8)
    ids = _square_scene(64, 20, 44)
    rgb = np.empty((64, 64, 3), dtype=np.uint8)
    rgb[...] = outer
    rgb[ids == 1] = inner
    got = visibility.instance_contrasts(rgb, ids, [1])[1]
    ref_in, ref_out = _reference_lab(inner), _reference_lab(outer)
    # Reference: colour-science delta_E(method="CIE 1976") = Euclidean distance in CIELAB (CIE 15:2004).
    assert got["delta_e"] == pytest.approx(float(colour.delta_E(ref_in, ref_out, method="CIE 1976")), abs=0.5)
    assert got["lightness"] == pytest.approx(float(ref_in[0]), abs=0.5)


# ---------------------------------------------------------------------------------------------------------------------
# 2. Noise estimate
# ---------------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("sigma", [2.0, 5.0])
def test_noise_sigma_recovers_known_gaussian_sigma_in_lstar(sigma):
    rng = np.random.default_rng(7)
    rgb = _grey_image(50.0 + sigma * rng.standard_normal((128, 128)))
    # Reference: Immerkær 1996 — unbiased for additive white Gaussian noise on a flat image (8-bit quantization adds
    # about 0.4 / sqrt(12) ≈ 0.1 L* at L* 50, negligible here).
    assert visibility.noise_sigma_lightness(rgb) == pytest.approx(sigma, rel=0.15)


def test_noise_sigma_of_single_impulse_follows_immerkaer_normalisation():
    rgb = np.zeros((20, 30, 3), dtype=np.uint8)
    rgb[10, 15] = 128
    impulse_lstar = float(_reference_lab(rgb[10, 15])[0])
    # Reference: Immerkær 1996 formula; an interior impulse v gives sum |I * N| = v · (1+2+1+2+4+2+1+2+1) = 16 v.
    expected = math.sqrt(math.pi / 2.0) / (6.0 * 28 * 18) * 16.0 * impulse_lstar
    assert visibility.noise_sigma_lightness(rgb) == pytest.approx(expected, rel=1e-3)


def test_noise_sigma_of_noise_free_smooth_gradients_is_small():
    y, x = np.mgrid[0:128, 0:96]
    ramp = np.round(255.0 * (x + y) / (127 + 95)).astype(np.uint8)
    grey = np.repeat(ramp[..., None], 3, axis=2)
    colourful = np.stack([ramp, np.round(255.0 * x / 95).astype(np.uint8), 255 - ramp], axis=2)
    # Reference: Immerkær 1996 — N annihilates linear intensity, so only curvature and quantization remain.
    assert visibility.noise_sigma_lightness(grey) < 0.5
    assert visibility.noise_sigma_lightness(colourful) < 0.5


# ---------------------------------------------------------------------------------------------------------------------
# 3.–4. A square of known L* on a background of known L*
# ---------------------------------------------------------------------------------------------------------------------


def test_noise_free_square_delta_e_is_lightness_step_and_contrast_uses_the_floor():
    ids = _square_scene()
    rgb = _grey_image(np.where(ids == 1, 60.0, 40.0))
    sigma = visibility.noise_sigma_lightness(rgb)
    got = visibility.instance_contrasts(rgb, ids, [1])[1]
    # Reference: CIE 15:2004 — for two greys ΔE*ab = |ΔL*| (a* = b* = 0); the quantized codes stay within 0.5.
    assert got["delta_e"] == pytest.approx(20.0, abs=0.5)
    assert got["lightness"] == pytest.approx(60.0, abs=0.5)
    # Reference: the module's definition — only the square's edges respond to N, far below the 1 L* floor.
    assert sigma < visibility.NOISE_FLOOR_LSTAR
    assert got["contrast"] == pytest.approx(got["delta_e"] / visibility.NOISE_FLOOR_LSTAR, abs=1e-4)


def test_noisy_square_contrast_is_delta_e_over_sigma():
    sigma = 5.0
    ids = _square_scene()
    rng = np.random.default_rng(11)
    rgb = _grey_image(np.where(ids == 1, 60.0, 40.0) + sigma * rng.standard_normal(ids.shape))
    got = visibility.instance_contrasts(rgb, ids, [1])[1]
    # Reference: the means of ~900 inside and ~280 ring pixels carry noise of ~0.2 and ~0.3 L*.
    assert got["delta_e"] == pytest.approx(20.0, abs=1.5)
    # Reference: the module's formula contrast = ΔE*ab / max(σ, 1) with the known σ of the added noise.
    assert got["contrast"] == pytest.approx(got["delta_e"] / sigma, rel=0.20)


def test_explicit_noise_sigma_is_used_and_floored():
    ids = _square_scene()
    rgb = _grey_image(np.where(ids == 1, 60.0, 40.0))
    delta_e = visibility.instance_contrasts(rgb, ids, [1])[1]["delta_e"]
    # Reference: the module's formula contrast = ΔE*ab / max(noise_sigma, NOISE_FLOOR_LSTAR).
    assert visibility.instance_contrasts(rgb, ids, [1], noise_sigma=10.0)[1]["contrast"] == pytest.approx(
        delta_e / 10.0, abs=1e-4
    )
    assert visibility.instance_contrasts(rgb, ids, [1], noise_sigma=0.25)[1]["contrast"] == pytest.approx(
        delta_e / visibility.NOISE_FLOOR_LSTAR, abs=1e-4
    )


# ---------------------------------------------------------------------------------------------------------------------
# 5.–6. Chroma counts; dark on dark is invisible, bright on dark is not
# ---------------------------------------------------------------------------------------------------------------------


def test_equal_lightness_different_chroma_gives_large_delta_e():
    red = np.array([200, 40, 40], dtype=np.uint8)
    red_lab = _reference_lab(red)
    greys = np.repeat(np.arange(256, dtype=np.uint8)[:, None], 3, axis=1)
    grey = greys[np.argmin(np.abs(_reference_lab(greys)[:, 0] - red_lab[0]))]
    grey_lab = _reference_lab(grey)
    assert abs(grey_lab[0] - red_lab[0]) < 0.5  # same lightness by construction

    ids = _square_scene(64, 20, 44)
    rgb = np.empty((64, 64, 3), dtype=np.uint8)
    rgb[...] = grey
    rgb[ids == 1] = red
    got = visibility.instance_contrasts(rgb, ids, [1])[1]
    # Reference: colour-science delta_E CIE 1976 between the two colours (≈ 63, almost all of it chroma).
    expected = float(colour.delta_E(red_lab, grey_lab, method="CIE 1976"))
    assert expected > 40.0
    assert got["delta_e"] == pytest.approx(expected, abs=0.5)
    assert got["contrast"] > 40.0


def test_dark_object_on_dark_wall_is_low_contrast_and_bright_object_is_high():
    sigma = 2.0
    rng = np.random.default_rng(5)
    ids = _square_scene()
    noise = sigma * rng.standard_normal(ids.shape)
    dark = visibility.instance_contrasts(_grey_image(np.where(ids == 1, 3.0, 4.0) + noise), ids, [1])[1]
    clean_dark = visibility.instance_contrasts(_grey_image(np.where(ids == 1, 3.0, 4.0)), ids, [1])[1]
    bright_rgb = _grey_image(np.where(ids == 1, 70.0, 4.0) + noise)
    bright = visibility.instance_contrasts(bright_rgb, ids, [1])[1]
    # Reference: CIE 15:2004 ΔE*ab of L* 3 vs 4 is 1 (quantized codes: within 0.5), at most ~1 noise σ or floor.
    assert clean_dark["delta_e"] == pytest.approx(1.0, abs=0.5)
    assert clean_dark["contrast"] < 2.0
    assert dark["contrast"] < 2.0
    # Reference: ΔE*ab of L* 70 vs 4 is 66; divided by the estimated noise (≈ σ = 2, L* 4 clips a little at 0).
    assert bright["delta_e"] == pytest.approx(66.0, abs=1.5)
    assert bright["contrast"] == pytest.approx(
        bright["delta_e"] / visibility.noise_sigma_lightness(bright_rgb), abs=1e-3
    )
    assert bright["contrast"] > 20.0


# ---------------------------------------------------------------------------------------------------------------------
# 7. Degenerate cases
# ---------------------------------------------------------------------------------------------------------------------


def test_absent_ids_full_masks_and_empty_id_list():
    ids = _square_scene(64, 20, 44)
    rgb = _grey_image(np.where(ids == 1, 60.0, 40.0))
    got = visibility.instance_contrasts(rgb, ids, [5, 70000])
    # Reference: the module's definition — ids absent from the image report zeros.
    assert got == {
        5: {"contrast": 0.0, "delta_e": 0.0, "lightness": 0.0},
        70000: {"contrast": 0.0, "delta_e": 0.0, "lightness": 0.0},
    }
    assert visibility.instance_contrasts(rgb, ids, []) == {}

    full = np.full((32, 48), 3, dtype=np.uint16)
    flat = _grey_image(np.full((32, 48), 55.0))
    got_full = visibility.instance_contrasts(flat, full, [3])[3]
    # Reference: the module's definition — no ring around a mask that fills the image: contrast and ΔE 0, but the
    # lightness of the inside (L* 55, quantized: within 0.5).
    assert got_full["contrast"] == 0.0 and got_full["delta_e"] == 0.0
    assert got_full["lightness"] == pytest.approx(55.0, abs=0.5)


@pytest.mark.parametrize("shape", [(1, 1), (2, 9)])
def test_tiny_objects_fall_back_to_the_uneroded_mask(shape):
    ids = np.zeros((48, 48), dtype=np.uint16)
    ids[24 : 24 + shape[0], 20 : 20 + shape[1]] = 4
    rgb = _grey_image(np.where(ids == 4, 70.0, 30.0))
    got = visibility.instance_contrasts(rgb, ids, [4])[4]
    # Reference: the module's definition — erosion by 1 px empties a 1- or 2-px-thin mask, so the mask itself is
    # the inside: ΔE*ab = |70 − 30| (CIE 15:2004, greys), within 0.5 of quantization.
    assert got["lightness"] == pytest.approx(70.0, abs=0.5)
    assert got["delta_e"] == pytest.approx(40.0, abs=0.5)
    assert got["contrast"] == pytest.approx(got["delta_e"] / max(visibility.noise_sigma_lightness(rgb), 1.0), abs=1e-3)


# ---------------------------------------------------------------------------------------------------------------------
# 8. Ring geometry
# ---------------------------------------------------------------------------------------------------------------------


def test_ring_skips_the_mixed_edges_and_includes_other_instances():
    size, lo, hi = 64, 16, 48
    r = visibility.ring_width_px(size, size)
    assert r == 2  # max(2, round(0.01 · 64))
    ids = np.zeros((size, size), dtype=np.uint16)
    ids[lo - 1 - r : hi + 1 + r, lo - 1 - r : hi + 1 + r] = 2  # another instance all around the object ...
    ids[lo:hi, lo:hi] = 1  # ... the object itself
    lstar = np.full((size, size), 80.0)  # background (id 0) beyond the ring: must not count
    lstar[ids == 2] = 20.0  # the other instance, in the ring: must count
    lstar[lo - 1 : hi + 1, lo - 1 : hi + 1] = 100.0  # mixed pixels: the 1-px band outside and the mask's own edge layer
    lstar[lo + 1 : hi - 1, lo + 1 : hi - 1] = 50.0  # the eroded inside
    rgb = _grey_image(lstar)
    got = visibility.instance_contrasts(rgb, ids, [1])[1]
    # Reference: by construction, inside = L* 50 only and ring = chessboard distances 2..1+r = the other instance's
    # L* 20 only; any white edge pixel (L* 100) or background beyond the ring (L* 80) would move the means.
    assert got["lightness"] == pytest.approx(50.0, abs=0.5)
    assert got["delta_e"] == pytest.approx(30.0, abs=0.5)


def test_ring_is_clipped_at_the_image_border():
    ids = np.zeros((40, 40), dtype=np.uint16)
    ids[0:10, 0:10] = 6  # object in the top-left corner: the ring exists only on two sides
    rgb = _grey_image(np.where(ids == 6, 30.0, 75.0))
    got = visibility.instance_contrasts(rgb, ids, [6])[6]
    # Reference: CIE 15:2004 greys — ΔE*ab = |75 − 30|; the image edge is not eroded as an object edge, and no
    # wrapped-around or out-of-image pixels enter the ring.
    assert got["delta_e"] == pytest.approx(45.0, abs=0.5)
    assert got["lightness"] == pytest.approx(30.0, abs=0.5)


def test_ring_width_grows_with_the_image():
    # Reference: the module's definition r = max(2, round(0.01 · min(H, W))).
    assert visibility.ring_width_px(48, 64) == 2
    assert visibility.ring_width_px(480, 640) == 5
    assert visibility.ring_width_px(1080, 1920) == 11


def test_rejects_mismatched_shapes():
    with pytest.raises(ValueError):
        visibility.instance_contrasts(np.zeros((8, 8, 3), np.uint8), np.zeros((8, 9), np.uint16), [1])
    with pytest.raises(ValueError):
        visibility.noise_sigma_lightness(np.zeros((8, 8, 3), np.float32))
