"""The one sRGB transfer function (``render.srgb``) against colour-science and the standard's own numbers."""

from __future__ import annotations

import numpy as np
import pytest

from render import srgb

CODES = np.linspace(0.0, 1.0, 2001)


def test_decode_matches_colour_science():
    colour = pytest.importorskip("colour")
    # Reference library: colour-science's sRGB CCTF (IEC 61966-2-1:1999). Its decoding puts the break at
    # encode(0.0031308) = 0.040449936 instead of the standard's rounded 0.04045; both segments agree there to
    # about 1e-9, hence the tolerance.
    expected = colour.cctf_decoding(CODES, function="sRGB")
    np.testing.assert_allclose(srgb.decode(CODES), expected, rtol=0, atol=1e-8)


def test_encode_matches_colour_science():
    colour = pytest.importorskip("colour")
    linear = CODES**3  # dense near black, where the linear segment and the break point are
    expected = colour.cctf_encoding(linear, function="sRGB")  # colour-science, IEC 61966-2-1:1999
    np.testing.assert_allclose(srgb.encode(linear), expected, rtol=0, atol=1e-8)


def test_worked_values_of_the_standard():
    # IEC 61966-2-1:1999 clause 5: the break points 0.04045 (encoded) and 0.0031308 (linear) map onto each other,
    # and mid-grey code 0.5 is 21.4 % linear light ((0.555 / 1.055) ** 2.4 = 0.21404, computed by hand).
    assert srgb.decode(0.5) == pytest.approx(0.21404, abs=5e-5)
    assert srgb.decode(0.04045) == pytest.approx(0.0031308, abs=1e-7)
    assert srgb.encode(0.0031308) == pytest.approx(0.04045, abs=1e-6)
    assert srgb.encode(0.21404) == pytest.approx(0.5, abs=1e-4)
    assert srgb.decode(1.0) == pytest.approx(1.0, abs=1e-12)
    assert srgb.encode(1.0) == pytest.approx(1.0, abs=1e-12)
    # 8-bit code 128 is linear 0.2158605 (computed by hand from clause 5.3: ((128/255 + 0.055) / 1.055) ** 2.4).
    assert srgb.decode(128 / 255) == pytest.approx(0.2158605, abs=1e-6)


def test_every_8bit_code_survives_a_round_trip():
    codes = np.arange(256)
    back = np.round(srgb.encode(srgb.decode(codes / 255.0)) * 255.0).astype(int)
    assert np.array_equal(back, codes)


def test_keeps_float32_and_promotes_integers():
    x32 = np.array([0.0, 0.02, 0.5, 1.0], dtype=np.float32)
    assert srgb.decode(x32).dtype == np.float32
    assert srgb.encode(x32).dtype == np.float32
    assert srgb.decode(np.array([0, 1])).dtype == np.float64
    assert srgb.decode(np.array([0, 1])).tolist() == [0.0, 1.0]
    np.testing.assert_allclose(srgb.decode(x32), srgb.decode(x32.astype(np.float64)), rtol=1e-6, atol=1e-7)


def test_callers_use_the_shared_function():
    # The per-module copies are gone: each entry point now agrees with the shared function bit for bit.
    from render import assets, camera, visibility
    from render.textures import maps

    levels = np.linspace(0.0, 1.0, 1001)
    assert np.array_equal(assets.srgb_to_linear(levels), srgb.decode(levels))
    assert np.array_equal(maps.srgb_to_linear(levels), srgb.decode(levels.astype(np.float32)))
    assert np.array_equal(visibility._LINEAR_OF_CODE, srgb.decode(np.arange(256) / 255.0).astype(np.float32))
    expected8 = np.round(srgb.encode(levels.astype(np.float32)) * 255.0).astype(np.uint8)
    assert np.array_equal(camera.encode_srgb_8bit(levels), expected8)
    assert np.array_equal(maps.linear_to_srgb8(levels), expected8)
