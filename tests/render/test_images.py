"""The one image writer (render.images): lossless PNG round trips read back by an independent decoder (Pillow;
PNG is lossless, ISO/IEC 15948), the channel order, JPEG closeness, and clear errors that leave nothing behind."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from render.images import encode_image, write_image


def _read(path) -> np.ndarray:
    with Image.open(path) as image:
        return np.asarray(image)


@pytest.mark.parametrize(
    "shape",
    [(24, 32), (24, 32, 3), (24, 32, 4)],
    ids=["grey", "rgb", "rgba"],
)
def test_png_round_trips_exactly_in_rgb_order(tmp_path, shape):
    rng = np.random.default_rng(1)
    image = rng.integers(0, 256, size=shape, dtype=np.uint8)
    image[0, 0, ...] = 0
    if len(shape) == 3:
        image[0, 1] = [255, 0, 0, 255][: shape[2]]  # pure red stays red: no BGR mix-up
    path = tmp_path / "x.png"
    write_image(path, image)
    back = _read(path)
    assert back.shape == image.shape and np.array_equal(back, image)


def test_sixteen_bit_instance_images_round_trip(tmp_path):
    ids = np.arange(24 * 32, dtype=np.uint16).reshape(24, 32) * 80  # up to 61 360: needs 16 bits
    path = tmp_path / "instances.png"
    write_image(path, ids)
    with Image.open(path) as image:
        back = np.asarray(image, dtype=np.uint16)
    assert np.array_equal(back, ids)


def test_jpeg_is_close_and_keeps_the_colour_order(tmp_path):
    image = np.zeros((32, 32, 3), np.uint8)
    image[..., 0] = 220  # red
    image[16:, ..., 2] = 180  # lower half magenta
    path = tmp_path / "thumb.jpg"
    write_image(path, image, jpeg_quality=90)
    back = _read(path).astype(int)
    assert np.abs(back - image.astype(int)).mean() < 4
    assert back[4, 4, 0] > 200 and back[4, 4, 2] < 30


@pytest.mark.parametrize(
    ("image", "name", "message"),
    [
        (np.zeros((4, 4, 3), np.float32), "a.png", "float32"),
        (np.zeros((4, 4, 3), np.uint16), "a.png", "uint16"),
        (np.zeros((4, 4), np.uint16), "a.jpg", "uint16"),
        (np.zeros((4, 4, 4), np.uint8), "a.jpg", "shape"),
        (np.zeros((4, 4, 3), np.uint8), "a.gif", "unsupported"),
    ],
)
def test_bad_images_are_refused_and_nothing_is_written(tmp_path, image, name, message):
    with pytest.raises(ValueError, match=message):
        write_image(tmp_path / name, image)
    assert list(tmp_path.iterdir()) == []


def test_an_unwritable_place_raises_and_leaves_no_partial_file(tmp_path):
    with pytest.raises(OSError):
        write_image(tmp_path / "missing" / "a.png", np.zeros((4, 4, 3), np.uint8))
    assert list(tmp_path.iterdir()) == []
    assert encode_image(np.zeros((4, 4, 3), np.uint8))[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature
