"""Tests for augplan.data.decoding: every image mode to RGB uint8, limits, loading at a side."""

import numpy as np
import pytest
from PIL import Image, ImageOps
from skimage.util import img_as_ubyte

from augplan.data import (
    load_images,
    open_dataset,
    read_image,
)
from augplan.errors import BadInputError
from image_files import make_layout as _make_layout, save_image as _save, solid as _solid


# --------------------------------------------------------------------------
# Image modes


def _black_background_reference(rgba_image):
    # Outside reference: Pillow's own alpha compositing over an opaque black canvas.
    black = Image.new("RGBA", rgba_image.size, (0, 0, 0, 255))
    return np.asarray(Image.alpha_composite(black, rgba_image.convert("RGBA")).convert("RGB"))


def _mode_cases():
    palette_image = Image.new("P", (4, 2))
    palette_image.putpalette([0, 0, 0, 10, 20, 30, 250, 5, 100] + [0] * (256 * 3 - 9))
    palette_image.putdata([1, 1, 2, 2, 0, 0, 1, 2])
    transparent_palette = palette_image.copy()
    transparent_palette.info["transparency"] = 2

    bilevel = Image.new("1", (3, 2))
    bilevel.putdata([0, 1, 1, 0, 1, 0])

    return [
        pytest.param("1", bilevel, "PNG",
                     np.repeat(np.array([[0, 255, 255], [0, 255, 0]], np.uint8)[..., None], 3, 2),
                     id="bilevel"),
        pytest.param("L", Image.new("L", (3, 2), 77), "PNG", _solid((77, 77, 77), (2, 3)), id="grey"),
        pytest.param("LA", Image.new("LA", (3, 2), (200, 128)), "PNG", "composite", id="grey-alpha"),
        pytest.param("P", palette_image, "PNG",
                     np.array([[[10, 20, 30], [10, 20, 30], [250, 5, 100], [250, 5, 100]],
                               [[0, 0, 0], [0, 0, 0], [10, 20, 30], [250, 5, 100]]], np.uint8),
                     id="palette"),
        pytest.param("P", transparent_palette, "PNG",
                     np.array([[[10, 20, 30], [10, 20, 30], [0, 0, 0], [0, 0, 0]],
                               [[0, 0, 0], [0, 0, 0], [10, 20, 30], [0, 0, 0]]], np.uint8),
                     id="palette-transparent"),
        pytest.param("RGB", Image.new("RGB", (3, 2), (12, 34, 56)), "PNG",
                     _solid((12, 34, 56), (2, 3)), id="rgb"),
        pytest.param("RGBA", Image.new("RGBA", (3, 2), (200, 100, 50, 128)), "PNG", "composite",
                     id="rgba"),
        pytest.param("CMYK", Image.new("CMYK", (3, 2), (255, 0, 0, 0)), "TIFF", "pillow-rgb",
                     id="cmyk-cyan"),
    ]


@pytest.mark.parametrize("mode, image, fmt, expected", _mode_cases())
def test_every_mode_becomes_rgb_uint8(tmp_path, mode, image, fmt, expected):
    path = _save(tmp_path / f"x.{fmt.lower()}", image, fmt)
    with Image.open(path) as reopened:
        assert reopened.mode == mode
        if isinstance(expected, str) and expected == "composite":
            expected = _black_background_reference(reopened)
        elif isinstance(expected, str) and expected == "pillow-rgb":
            # Outside reference: Pillow's own CMYK -> RGB conversion.
            expected = np.asarray(reopened.convert("RGB"))
    result = read_image(path)
    assert result.dtype == np.uint8 and result.ndim == 3 and result.shape[2] == 3
    if mode in ("LA", "RGBA"):
        np.testing.assert_allclose(result.astype(int), expected.astype(int), atol=1)
    else:
        np.testing.assert_array_equal(result, expected)


def test_cmyk_pure_cyan_is_cyan(tmp_path):
    path = _save(tmp_path / "c.tiff", Image.new("CMYK", (2, 2), (255, 0, 0, 0)), "TIFF")
    # Pillow's naive CMYK conversion (R = 255 - C - K ...) makes pure cyan (0, 255, 255).
    np.testing.assert_array_equal(read_image(path)[0, 0], [0, 255, 255])


def test_rgba_fully_transparent_pixel_is_black(tmp_path):
    pixels = np.array([[[255, 255, 255, 0], [255, 0, 0, 255]]], np.uint8)
    path = _save(tmp_path / "a.png", Image.fromarray(pixels, "RGBA"))
    np.testing.assert_array_equal(read_image(path), [[[0, 0, 0], [255, 0, 0]]])


@pytest.mark.parametrize("mode", ["I;16", "I"], ids=["I16-png", "I32-tiff"])
def test_16bit_scaled_by_bit_depth(tmp_path, mode):
    values = np.array([[0, 257, 32768, 65535]], dtype=np.uint16)
    if mode == "I;16":
        path = _save(tmp_path / "deep.png", Image.fromarray(values))
    else:
        path = _save(tmp_path / "deep.tiff", Image.fromarray(values.astype(np.int32), "I"), "TIFF")
    with Image.open(path) as reopened:
        assert reopened.mode.startswith("I")
    result = read_image(path)
    # Bit-depth scaling, not clipping: full scale maps to full scale.
    np.testing.assert_array_equal(result[0, :, 0], [0, 1, 128, 255])
    assert (result[..., 0] == result[..., 1]).all() and (result[..., 0] == result[..., 2]).all()


def test_16bit_matches_scikit_image_within_one_code(tmp_path):
    values = np.arange(0, 65536, 37, dtype=np.uint16)[None, :]
    path = _save(tmp_path / "ramp.png", Image.fromarray(values))
    # Outside reference: scikit-image's img_as_ubyte (it floors, we round: <= 1 code apart).
    reference = img_as_ubyte(values)
    difference = np.abs(read_image(path)[..., 0].astype(int) - reference.astype(int))
    assert difference.max() <= 1


@pytest.mark.parametrize("values, expected", [
    pytest.param([0.0, 0.5, 1.0], "skimage", id="within-unit-range"),
    pytest.param([-2.0, 0.0, 6.0], [0, 64, 255], id="min-max"),
])
def test_float_images(tmp_path, values, expected):
    array = np.array([values], dtype=np.float32)
    path = _save(tmp_path / "f.tiff", Image.fromarray(array, "F"), "TIFF")
    result = read_image(path)[0, :, 0]
    if expected == "skimage":
        # Outside reference: scikit-image's float -> uint8 conversion.
        np.testing.assert_allclose(result.astype(int), img_as_ubyte(array)[0].astype(int), atol=1)
        assert result[0] == 0 and result[-1] == 255
    else:
        np.testing.assert_array_equal(result, expected)


@pytest.mark.parametrize("orientation", [6, 8], ids=["exif-6", "exif-8"])
def test_exif_orientation_applied_like_pillow(tmp_path, orientation):
    pixels = np.zeros((16, 32, 3), np.uint8)
    pixels[:8, :16] = (255, 0, 0)
    pixels[8:, 16:] = (0, 0, 255)
    exif = Image.Exif()
    exif[0x0112] = orientation
    path = _save(tmp_path / "o.jpg", pixels, "JPEG", exif=exif.tobytes(), quality=95)
    result = read_image(path)
    assert result.shape == (32, 16, 3)  # the non-square shape swaps
    with Image.open(path) as reopened:
        # Outside reference: Pillow's ImageOps.exif_transpose.
        reference = np.asarray(ImageOps.exif_transpose(reopened).convert("RGB"))
    np.testing.assert_array_equal(result, reference)
    # Orientation 6 is turned 90 degrees clockwise for display (EXIF 2.3 tag 0x0112).
    k = -1 if orientation == 6 else 1
    red_corner = np.rot90(pixels, k=k)[..., 0] > 128
    assert np.mean((result[..., 0] > 128) == red_corner) > 0.95


def test_decompression_bomb_is_bad_input(tmp_path, monkeypatch):
    path = _save(tmp_path / "big.png", _solid((1, 2, 3), (40, 40)))
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 1000)  # 1600 pixels exceed it
    with pytest.raises(BadInputError, match="big.png.*decompression bomb"):
        read_image(path)


def test_max_side_downsizes_jpeg_while_reading(tmp_path):
    rng = np.random.default_rng(3)
    pixels = np.repeat(np.repeat(rng.integers(0, 256, (25, 50, 3), dtype=np.uint8), 16, 0), 16, 1)
    path = _save(tmp_path / "wide.jpg", pixels, "JPEG", quality=95)
    small = read_image(path, max_side=50)
    assert small.shape == (25, 50, 3)
    full = read_image(path)
    assert full.shape == (400, 800, 3)
    reference = np.asarray(Image.fromarray(full).resize((50, 25), Image.Resampling.BOX))
    assert np.abs(small.astype(int) - reference.astype(int)).mean() < 6


def test_read_image_errors_name_the_file(tmp_path):
    text = tmp_path / "notes.png"
    text.write_text("not an image")
    with pytest.raises(BadInputError, match="notes.png"):
        read_image(text)
    with pytest.raises(BadInputError, match="missing.png.*not found"):
        read_image(tmp_path / "missing.png")


# --------------------------------------------------------------------------
# load_images


def test_load_images_squares_and_values(tmp_path):
    first = _save(tmp_path / "a.png", _solid((10, 200, 30), (20, 40)))
    second = _save(tmp_path / "b.jpg", _solid((90, 90, 90), (300, 100)), "JPEG", quality=95)
    batch = load_images([first, second], size=8)
    assert batch.shape == (2, 8, 8, 3) and batch.dtype == np.uint8
    assert (batch[0] == (10, 200, 30)).all()
    assert np.abs(batch[1].astype(int) - 90).max() <= 2  # JPEG rounding


def test_load_images_decode_failure_names_file(tmp_path):
    _make_layout(tmp_path)
    dataset = open_dataset(tmp_path)
    victim = dataset.split("train")[0]
    victim.path.write_bytes(victim.path.read_bytes()[:30])  # damaged after the scan
    with pytest.raises(BadInputError, match=victim.path.name):
        load_images(dataset.split("train"), size=4)


def test_records_carrying_bytes_read_without_the_files(tmp_path):
    # --ship-images: workers decode the bytes the record carries, so the
    # data folder may be out of their reach. Reference: the same records read
    # from their files before the folder went away.
    root = _make_layout(tmp_path / "DATA")
    dataset = open_dataset(root)
    from_files = load_images(dataset.records, size=4)
    shipped = dataset.with_image_bytes()
    assert [r.data for r in shipped.records] == [r.path.read_bytes() for r in dataset.records]
    assert shipped.records == dataset.records  # the bytes are not part of a record's identity
    assert all(r.data is None for r in dataset.records)  # the opened data set is left as it was
    root.rename(tmp_path / "moved")
    np.testing.assert_array_equal(load_images(shipped.records, size=4), from_files)
    with pytest.raises(BadInputError, match="not found"):
        load_images(dataset.records[:1], size=4)


def test_file_changed_before_shipping_is_named(tmp_path):
    dataset = open_dataset(_make_layout(tmp_path))
    victim = dataset.split("val")[1]
    _save(victim.path, _solid((1, 2, 3)))
    with pytest.raises(BadInputError, match=f"{victim.path}: the file changed"):
        dataset.with_image_bytes()
