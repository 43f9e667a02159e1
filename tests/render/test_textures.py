"""Procedural textures: determinism, seamless tiling, value ranges, physical scale, texture variation, disk cache."""

from __future__ import annotations

import functools
import json
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

import numpy as np
import pytest
from PIL import Image
from scipy import ndimage

from render import textures
from render.textures import cache, maps, noise
from render.textures.registry import TextureParamError

FAMILIES = sorted(textures.FAMILIES)
RESOLUTION_PX = 128


@functools.cache
def _sampled(family: str, seed: int, resolution_px: int = RESOLUTION_PX) -> maps.TextureMaps:
    """A texture with parameters drawn from the family's ranges (the draw seeded by ``seed`` too)."""
    params = textures.sample_texture_params(family, np.random.default_rng(seed))
    return textures.generate_texture(family, params, seed, resolution_px=resolution_px)


def _luminance(srgb8: np.ndarray) -> np.ndarray:
    """Rec. 709 luma of 8-bit sRGB, in 8-bit levels."""
    return srgb8.astype(np.float64) @ np.array([0.2126, 0.7152, 0.0722])


# ---------------------------------------------------------------------------
# Registry and parameters
# ---------------------------------------------------------------------------


def test_every_family_declares_size_colour_jitter_and_known_slot_kinds():
    expected = {
        "wood",
        "parquet",
        "ceramic_tile",
        "stone_tile",
        "carpet",
        "rug",
        "fabric",
        "leather",
        "marble",
        "plaster",
        "wallpaper",
        "brushed_metal",
        "concrete",
    }
    assert set(textures.FAMILIES) == expected
    for name, family in textures.FAMILIES.items():
        assert family.name == name
        for param in ("tile_size_m", "palette", "hue_jitter_deg", "saturation_jitter", "value_jitter"):
            assert param in family.params, (name, param)
        assert family.params["tile_size_m"].unit == "m"
        assert family.params["hue_jitter_deg"].unit == "deg"
        assert family.slot_kinds and set(family.slot_kinds) <= set(textures.SLOT_KINDS)
        assert family.material_kind in ("diffuse", "plastic", "varnish", "metal")
        for pname, param in family.params.items():
            if isinstance(param, textures.ParamRange):
                assert param.low < param.high and param.unit, (name, pname)


def test_every_slot_kind_has_families():
    for slot_kind in textures.SLOT_KINDS:
        assert textures.families_for_slot(slot_kind), slot_kind
    assert textures.families_for_slot("rug") == ("rug",)
    assert "parquet" in textures.families_for_slot("floor")
    with pytest.raises(TextureParamError) as caught:
        textures.families_for_slot("roof")
    assert set(caught.value.errors) == {"slot_kind"}


@pytest.mark.parametrize("family", FAMILIES)
def test_sampled_params_stay_inside_their_ranges(family):
    spec = textures.FAMILIES[family]
    rng = np.random.default_rng(7)
    for _ in range(25):
        params = textures.sample_texture_params(family, rng)
        assert list(params) == sorted(spec.params)
        for name, value in params.items():
            assert spec.params[name].error(value) is None, (name, value)
        assert textures.canonical_params(family, params) == params


def test_invalid_params_are_reported_per_field():
    with pytest.raises(TextureParamError) as caught:
        textures.canonical_params("parquet", {"board_width_m": 0.5, "palette": "zebra", "colour": 1})
    assert set(caught.value.errors) == {"board_width_m", "palette", "colour"}
    with pytest.raises(TextureParamError) as caught:
        textures.generate_texture("parquet", None, -1, resolution_px=8)
    assert set(caught.value.errors) == {"seed", "resolution_px"}
    with pytest.raises(TextureParamError) as caught:
        textures.generate_texture("velvet")
    assert set(caught.value.errors) == {"family"}


# ---------------------------------------------------------------------------
# Determinism, ranges, seams, variation (every family)
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("family", FAMILIES)
def test_same_seed_is_byte_identical_and_another_seed_differs(family):
    params = textures.sample_texture_params(family, np.random.default_rng(3))
    first = textures.generate_texture(family, params, 11, resolution_px=96)
    again = textures.generate_texture(family, dict(reversed(list(params.items()))), 11, resolution_px=96)
    other = textures.generate_texture(family, params, 12, resolution_px=96)
    for name in ("base_color_srgb8", "roughness", "normal"):
        assert getattr(first, name).tobytes() == getattr(again, name).tobytes(), name
    assert first.base_color_srgb8.tobytes() != other.base_color_srgb8.tobytes()
    assert first.info == again.info


@pytest.mark.parametrize("family", FAMILIES)
def test_value_ranges_and_encodings(family):
    result = _sampled(family, 0)
    n = RESOLUTION_PX
    assert result.base_color_srgb8.dtype == np.uint8 and result.base_color_srgb8.shape == (n, n, 3)
    assert result.roughness.dtype == np.float32 and result.roughness.shape == (n, n)
    assert result.roughness.min() >= 0.0 and result.roughness.max() <= 1.0
    assert result.normal.dtype == np.float32 and result.normal.shape == (n, n, 3)
    np.testing.assert_allclose(np.linalg.norm(result.normal, axis=-1), 1.0, atol=1e-5)
    assert result.normal[..., 2].min() > 0.0  # never facing into the surface
    # 8-bit encoding: each component off by at most 1/255, so the length by at most √3/255.
    decoded = maps.decode_normal8(maps.encode_normal8(result.normal))
    np.testing.assert_allclose(np.linalg.norm(decoded, axis=-1), 1.0, atol=np.sqrt(3) / 255 + 1e-6)
    assert result.info["family"] == family and result.info["resolution_px"] == n


def _seam_steps(image: np.ndarray, axis: int) -> tuple[float, np.ndarray]:
    """The step across the wrap edge and the steps between neighbouring interior lines, along ``axis``.

    For each pair of neighbouring columns (axis 1) or rows (axis 0): the
    median over the other axis of the absolute difference, so that a single
    joint or scratch landing on a line does not look like a seam. Returns
    (wrap pair's value, the n − 1 interior pairs' values).
    """
    values = image.astype(np.float64).reshape(image.shape[0], image.shape[1], -1)
    steps = np.abs(np.diff(values, axis=axis, append=np.take(values, [0], axis=axis))).mean(axis=2)
    per_pair = np.median(steps, axis=1 - axis)
    return float(per_pair[-1]), per_pair[:-1]


SEAM_RATIO_MAX = 2.0


def _seam(image: np.ndarray) -> str | None:
    """A description of the seam if there is one: on an axis where the wrap step is both more than
    ``SEAM_RATIO_MAX`` × the median interior step (plus one quantisation level, so flat 8-bit areas do not
    divide by zero) and larger than every interior step. Either alone is not a seam: straight features
    (grain lines, joints) legitimately land on the wrap line as often as on any other."""
    quantum = 1.0 if image.dtype == np.uint8 else 1.0 / 255.0
    for axis in (0, 1):
        wrap, interior = _seam_steps(image, axis)
        typical = float(np.median(interior)) + quantum
        if wrap > SEAM_RATIO_MAX * typical and wrap > interior.max():
            return (
                f"axis {axis}: wrap step {wrap:.3g} = {wrap / typical:.1f} × typical, max interior {interior.max():.3g}"
            )
    return None


def test_seam_check_catches_a_texture_that_does_not_tile():
    """The check itself: a window of a periodic field that is not the whole period does not tile."""
    field = noise.periodic_noise(np.random.default_rng(0), 256, 1.0, largest_m=0.5, smallest_m=0.02)
    assert _seam(field[:128, :128]) is not None
    assert _seam(field) is None
    ramp = np.tile(np.arange(128, dtype=np.uint8), (128, 1))
    assert _seam(ramp) is not None


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("seed", [0, 1])
def test_every_map_tiles_seamlessly(family, seed):
    result = _sampled(family, seed)
    for name, image in (
        ("base colour", result.base_color_srgb8),
        ("roughness", result.roughness),
        ("normal", result.normal),
    ):
        seam = _seam(image)
        assert seam is None, f"{family} {name}: {seam}"


# A 5×5 neighbourhood whose luma standard deviation is under half an 8-bit level looks flat.
FLAT_STD_LEVELS = 0.5


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("seed", [0, 1])
def test_base_colour_is_not_flat(family, seed):
    luma = _luminance(_sampled(family, seed).base_color_srgb8)
    mean = ndimage.uniform_filter(luma, 5, mode="wrap")
    mean_sq = ndimage.uniform_filter(luma**2, 5, mode="wrap")
    local_std = np.sqrt(np.clip(mean_sq - mean**2, 0.0, None))
    assert (local_std > FLAT_STD_LEVELS).mean() > 0.5


def test_periodic_noise_is_normalised_and_stretched_along_its_angle():
    rng = np.random.default_rng(1)
    field = noise.periodic_noise(rng, 128, 1.0, largest_m=0.5, smallest_m=0.02, stretch=8.0, angle_deg=0.0)
    assert abs(float(field.mean())) < 1e-5 and float(field.std()) == pytest.approx(1.0, abs=1e-5)

    def lag_correlation(axis: int) -> float:
        return float(np.mean(field * np.roll(field, 4, axis=axis)))

    assert lag_correlation(1) > lag_correlation(0) + 0.2  # longer along x (columns) than along y


def test_worley_distances_are_ordered_and_wrap():
    f1, f2, ids = noise.worley(np.random.default_rng(2), 64, 8)
    assert (f1 <= f2).all() and f1.max() < 1.5 and ids.max() < 64
    # Wrap-around: the nearest-point distance is continuous across the image edge like anywhere else.
    assert np.abs(f1[:, 0] - f1[:, -1]).max() <= np.abs(np.diff(f1, axis=1)).max() + 1e-6


# ---------------------------------------------------------------------------
# Physical scale
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(("tile_size_m", "board_width_m"), [(1.2, 0.1), (1.0, 0.125), (0.84, 0.07)])
def test_parquet_shows_its_board_period(tile_size_m, board_width_m):
    # Reference: geometry alone — boards w wide across an image S wide give S / w rows per image,
    # i.e. the joints repeat at S / w cycles per image along the across-board axis (y).
    expected_cycles = round(tile_size_m / board_width_m)
    params = {
        "tile_size_m": tile_size_m,
        "board_width_m": board_width_m,
        "board_length_m": tile_size_m / 2,
        "joint_width_m": 0.002,
    }
    result = textures.generate_texture("parquet", params, 5, resolution_px=RESOLUTION_PX)
    assert result.info["geometry"]["board_width_m"] == pytest.approx(board_width_m, rel=1e-6)
    # Across the boards (y): the mean over x of |∂luma/∂y| peaks at every long joint (the dark joint and the
    # tone step between rows of boards), whatever the rows' own tones.
    luma = _luminance(result.base_color_srgb8)
    profile = np.abs(np.roll(luma, -1, axis=0) - luma).mean(axis=1)
    power = np.abs(np.fft.rfft(profile - profile.mean())) ** 2
    harmonics = np.arange(expected_cycles, power.size, expected_cycles)
    others = np.setdiff1d(np.arange(1, power.size), harmonics)
    assert power[expected_cycles] > 3 * power[others].max()


@pytest.mark.parametrize(("aspect", "layout"), [(1, "grid"), (2, "grid"), (2, "running_bond")])
def test_tile_grout_lines_sit_at_the_predicted_pixels(aspect, layout):
    # Reference: geometry — 0.512 m at 128 px is 4 mm per pixel; pieces 0.128 m high (× aspect long) with the
    # image origin at a piece centre put joints at 16 + 32 k px down and 16·aspect + 32·aspect k px across
    # (running bond: odd rows shifted by half a piece, joints at 32·aspect k); 8 mm grout centred on a joint
    # at pixel edge p covers exactly the pixels p − 1 and p (mod 128).
    n, pitch = RESOLUTION_PX, 32
    params = {
        "tile_size_m": 0.512,
        "piece_width_m": 0.128,
        "piece_aspect": aspect,
        "layout": layout,
        "grout_width_m": 0.008,
        "grout": "charcoal",
        "palette": "white",
        "glaze_mottle": 0.0,
        "piece_tone_variation": 0.0,
    }
    luma = _luminance(textures.generate_texture("ceramic_tile", params, 2, resolution_px=n).base_color_srgb8)
    dark = luma < 0.5 * (luma.max() + luma.min())

    def predicted(first_px: int, step_px: int) -> set[int]:
        lines = range(first_px, first_px + n, step_px)
        return {(p - 1) % n for p in lines} | {p % n for p in lines}

    assert set(np.flatnonzero(dark.mean(axis=1) > 0.9)) == predicted(pitch // 2, pitch)
    across = pitch * aspect
    # Inside row 0 (centred on y = 0) and row 1 (centred on y = 32), away from the horizontal grout.
    assert set(np.flatnonzero(dark[4])) == predicted(across // 2, across)
    row1_first = 0 if layout == "running_bond" else across // 2
    assert set(np.flatnonzero(dark[pitch])) == predicted(row1_first, across)


def test_normals_follow_the_height_gradient_analytically():
    # A plane rising 0.5 m per metre along +u has the normal (−0.5, 0, 1) / √1.25; along +v, (0, −0.5, 1) / √1.25.
    n, pixel_m = 16, 0.01
    rows, cols = np.indices((n, n)).astype(np.float32)
    # Periodic sawtooth: check away from its drop.
    normal_u = maps.height_to_normal(0.5 * cols * pixel_m, pixel_m)[:, 4:12]
    normal_v = maps.height_to_normal(0.5 * rows * pixel_m, pixel_m)[4:12, :]
    np.testing.assert_allclose(
        normal_u, np.broadcast_to([-0.5 / 1.25**0.5, 0.0, 1 / 1.25**0.5], normal_u.shape), atol=1e-6
    )
    np.testing.assert_allclose(
        normal_v, np.broadcast_to([0.0, -0.5 / 1.25**0.5, 1 / 1.25**0.5], normal_v.shape), atol=1e-6
    )


def test_srgb_encoding_matches_the_standard():
    # IEC 61966-2-1: linear 0.5 encodes to 0.7354 (188/255); 0.0031308 is the linear/power joint.
    assert maps.linear_to_srgb8(np.array([0.0, 0.5, 1.0])).tolist() == [0, 188, 255]
    levels = np.arange(256, dtype=np.uint8)
    assert np.array_equal(maps.linear_to_srgb8(maps.srgb8_to_linear(levels)), levels)


def test_colour_jitter_rotates_hue_and_scales_value():
    red = maps.jitter_colour((0.8, 0.2, 0.2), hue_jitter_deg=120.0, saturation_jitter=0.0, value_jitter=0.0)
    np.testing.assert_allclose(red, maps.srgb_to_linear((0.2, 0.8, 0.2)), atol=1e-6)
    darker = maps.jitter_colour((0.8, 0.2, 0.2), hue_jitter_deg=0.0, saturation_jitter=0.0, value_jitter=-0.5)
    np.testing.assert_allclose(darker, maps.srgb_to_linear((0.4, 0.1, 0.1)), atol=1e-6)


# ---------------------------------------------------------------------------
# Disk cache
# ---------------------------------------------------------------------------

CACHE_PARAMS = {"tile_size_m": 1.0, "board_width_m": 0.1}


def _check_files(paths: cache.TextureSetPaths, expected: maps.TextureMaps) -> None:
    assert np.array_equal(np.asarray(Image.open(paths.base_color)), expected.base_color_srgb8)
    assert np.array_equal(np.asarray(Image.open(paths.roughness)), maps.encode_roughness8(expected.roughness))
    assert np.array_equal(np.asarray(Image.open(paths.normal)), maps.encode_normal8(expected.normal))
    info = json.loads(paths.info.read_text())
    assert info == json.loads(json.dumps(expected.info))
    assert not [p for p in paths.base_color.parent.iterdir() if p.name.endswith(".tmp")]


def test_cache_hit_does_not_regenerate(tmp_path, monkeypatch):
    calls = []
    real = cache.generate_texture

    def counting(*args, **kwargs):
        calls.append(args)
        return real(*args, **kwargs)

    monkeypatch.setattr(cache, "generate_texture", counting)
    first = textures.texture_set("parquet", CACHE_PARAMS, 4, tmp_path, resolution_px=64)
    mtimes = [p.stat().st_mtime_ns for p in first.all()]
    second = textures.texture_set("parquet", dict(CACHE_PARAMS), 4, tmp_path, resolution_px=64)
    assert second == first and len(calls) == 1
    assert [p.stat().st_mtime_ns for p in second.all()] == mtimes
    _check_files(first, textures.generate_texture("parquet", CACHE_PARAMS, 4, resolution_px=64))
    # Anything that changes the content changes the key.
    keys = {
        first.key,
        textures.texture_set("parquet", CACHE_PARAMS, 5, tmp_path, resolution_px=64).key,
        textures.texture_set("parquet", CACHE_PARAMS, 4, tmp_path, resolution_px=32).key,
        textures.texture_set("parquet", {**CACHE_PARAMS, "board_width_m": 0.11}, 4, tmp_path, resolution_px=64).key,
    }
    assert len(keys) == 4 and len(calls) == 4
    # Defaults spelled out give the same key as defaults left out.
    assert (
        textures.texture_key("parquet", textures.canonical_params("parquet", CACHE_PARAMS), 4, resolution_px=64)
        == first.key
    )


def test_a_partial_set_is_regenerated(tmp_path):
    paths = textures.texture_set("leather", None, 1, tmp_path, resolution_px=32)
    paths.normal.unlink()
    again = textures.texture_set("leather", None, 1, tmp_path, resolution_px=32)
    _check_files(again, textures.generate_texture("leather", None, 1, resolution_px=32))


def _cached_in_worker(cache_dir: str) -> str:
    return str(textures.texture_set("concrete", None, 9, cache_dir, resolution_px=64).base_color)


def test_concurrent_writers_leave_valid_files(tmp_path):
    expected = textures.generate_texture("concrete", None, 9, resolution_px=64)
    with ThreadPoolExecutor(max_workers=6) as pool:
        thread_results = set(pool.map(_cached_in_worker, [str(tmp_path / "threads")] * 12))
    context = multiprocessing.get_context("fork") if "fork" in multiprocessing.get_all_start_methods() else None
    with ProcessPoolExecutor(max_workers=2, mp_context=context) as pool:
        process_results = set(pool.map(_cached_in_worker, [str(tmp_path / "processes")] * 4))
    for results, folder in ((thread_results, "threads"), (process_results, "processes")):
        assert len(results) == 1
        key = os.path.basename(results.pop()).split("_")[0]
        _check_files(cache.paths_for(tmp_path / folder, "concrete", key), expected)
