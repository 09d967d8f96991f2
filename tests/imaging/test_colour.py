"""Tests for augplan.imaging.colour against IEC 61966-2-1, ITU-R BT.709, colorsys and scikit-image."""

import colorsys

import numpy as np
import pytest
from skimage.color import rgb2hsv

from augplan.imaging.colour import (
    SRGB_TO_LINEAR_LUT,
    check_image,
    check_rgb_image,
    encode_linear_image,
    encode_linear_to_uint8,
    hsv_to_rgb,
    linear_to_srgb,
    linear_tone_lut,
    mean_relative_luminance,
    relative_luminance,
    rgb_to_hsv,
    srgb_to_linear,
)


def iec_decode(v):
    """IEC 61966-2-1:1999 section 5.2, written out independently for the tests."""
    return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4


def iec_encode(lin):
    """IEC 61966-2-1:1999 section 5.3, written out independently for the tests."""
    return 12.92 * lin if lin <= 0.0031308 else 1.055 * lin ** (1 / 2.4) - 0.055


@pytest.mark.parametrize("code", [0, 10, 11, 128, 255], ids=lambda c: f"code{c}")
def test_decode_matches_iec_formula(code):
    # IEC 61966-2-1: code 10 (10/255 = 0.0392) is on the linear segment,
    # code 11 (0.0431) on the power segment.
    expected = iec_decode(code / 255)
    assert srgb_to_linear(np.float64(code / 255)) == pytest.approx(expected, rel=1e-12, abs=1e-15)
    # The table is float32: storing the float64 value costs at most half an
    # ulp, 6e-8 relative; 1e-6 leaves room for a float32 evaluation.
    assert SRGB_TO_LINEAR_LUT[code] == pytest.approx(expected, rel=1e-6, abs=1e-9)


def test_decode_known_values():
    # IEC 61966-2-1 endpoints: black decodes to 0, white to 1; code 128 is
    # ((128/255 + 0.055) / 1.055) ** 2.4 = 0.2158605 (computed from the
    # standard's formula to 7 digits; it lies near the 0.2140 often quoted for
    # mid-grey 0.5, recalled from memory, no source).
    assert srgb_to_linear(0.0) == 0.0
    assert srgb_to_linear(1.0) == pytest.approx(1.0, abs=1e-7)
    assert srgb_to_linear(np.float64(128 / 255)) == pytest.approx(0.2158605, abs=1e-6)


def test_decode_and_encode_breakpoints_are_continuous():
    # IEC 61966-2-1: the two segments meet at 0.04045 (encoded) and 0.0031308
    # (linear); both pieces agree there to within the standard's rounding.
    below = srgb_to_linear(np.float64(0.04045))
    above = ((0.04045 + 0.055) / 1.055) ** 2.4
    assert below == pytest.approx(0.04045 / 12.92, rel=1e-12)
    assert below == pytest.approx(above, rel=1e-4)
    assert linear_to_srgb(np.float64(0.0031308)) == pytest.approx(0.0031308 * 12.92, rel=1e-12)
    assert linear_to_srgb(np.float64(0.0031308)) == pytest.approx(
        1.055 * 0.0031308 ** (1 / 2.4) - 0.055, rel=1e-4
    )


@pytest.mark.parametrize("lin", [0.0, 0.001, 0.0031308, 0.01, 0.2, 0.5, 1.0])
def test_encode_matches_iec_formula(lin):
    assert linear_to_srgb(np.float64(lin)) == pytest.approx(iec_encode(lin), rel=1e-12, abs=1e-15)


def test_round_trip_all_256_codes():
    codes = np.arange(256, dtype=np.uint8)
    assert np.array_equal(encode_linear_to_uint8(SRGB_TO_LINEAR_LUT), codes)
    floats = codes / 255.0
    assert np.allclose(linear_to_srgb(srgb_to_linear(floats)), floats, atol=1e-12)


def test_float32_in_float32_out_and_clipping():
    values = np.array([-0.5, 0.5, 1.5], dtype=np.float32)
    assert srgb_to_linear(values).dtype == np.float32
    assert linear_to_srgb(values).dtype == np.float32
    assert srgb_to_linear(values)[0] == 0.0 and srgb_to_linear(values)[2] == pytest.approx(1.0)


def test_linear_tone_lut_identity_and_doubling():
    assert np.array_equal(linear_tone_lut(1.0), np.arange(256))
    lut = linear_tone_lut(2.0)
    # Doubling linear light, computed with the IEC formulas directly.
    expected = [round(255 * iec_encode(min(2 * iec_decode(c / 255), 1.0))) for c in range(256)]
    assert np.array_equal(lut, expected)


def test_relative_luminance_bt709_coefficients():
    # ITU-R BT.709-6 item 3.2: pure primaries at full code give their weights.
    image = np.array([[[255, 0, 0], [0, 255, 0], [0, 0, 255], [255, 255, 255]]], dtype=np.uint8)
    y = relative_luminance(image)
    assert y.dtype == np.float32 and y.shape == (1, 4)
    # float32: three rounded products and two sums of values <= 1 stay within
    # a few ulp of 1.0 (1.2e-7 each), under 1e-6.
    assert np.allclose(y[0], [0.2126, 0.7152, 0.0722, 1.0], rtol=0, atol=1e-6)


@pytest.mark.parametrize("code", [0, 7, 60, 128, 200, 255])
def test_uniform_grey_luminance_equals_decoded_value(code):
    # BT.709 weights sum to 1, so a neutral grey's luminance is its decoded
    # value (IEC 61966-2-1).
    image = np.full((4, 5, 3), code, dtype=np.uint8)
    # float32 luminance: a few ulp of 1.0 (1.2e-7 each), as above.
    assert np.allclose(relative_luminance(image), iec_decode(code / 255), rtol=0, atol=1e-6)
    assert mean_relative_luminance(image) == pytest.approx(iec_decode(code / 255), abs=1e-6)


def test_relative_luminance_random_pixels_and_mean():
    rng = np.random.default_rng(3)
    image = rng.integers(0, 256, (16, 12, 3), dtype=np.uint8)
    decoded = np.vectorize(iec_decode)(image / 255.0)
    expected = decoded @ np.array([0.2126, 0.7152, 0.0722])  # ITU-R BT.709-6
    # float32 luminance against float64: a few ulp of 1.0 (1.2e-7 each).
    assert np.allclose(relative_luminance(image), expected, rtol=0, atol=1e-6)
    assert mean_relative_luminance(image) == pytest.approx(expected.mean(), abs=1e-6)


def test_rgb_to_hsv_matches_colorsys():
    # colorsys (Python stdlib) is the reference for the hexcone model.
    rng = np.random.default_rng(5)
    rgb = rng.random((500, 3))
    rgb[:20] = np.round(rgb[:20] * 4) / 4  # ties between channels and greys
    expected = np.array([colorsys.rgb_to_hsv(*p) for p in rgb])
    got = rgb_to_hsv(rgb)
    # Hue is circular: compare the shortest distance around the turn.
    dh = np.abs(got[:, 0] - expected[:, 0])
    assert np.all(np.minimum(dh, 1 - dh) < 1e-12)
    assert np.allclose(got[:, 1:], expected[:, 1:], atol=1e-12)
    assert np.all((got[:, 0] >= 0) & (got[:, 0] < 1))


def test_rgb_to_hsv_matches_skimage_on_image():
    rng = np.random.default_rng(6)
    rgb = rng.random((20, 30, 3)).astype(np.float32)
    expected = rgb2hsv(rgb)  # scikit-image reference implementation
    got = rgb_to_hsv(rgb)
    assert got.dtype == np.float32
    dh = np.abs(got[..., 0] - expected[..., 0])
    # float32 input and arithmetic: a hue is a ratio of differences of
    # channels, which can lose a few digits of float32's ~7; 1e-5 of a turn.
    assert np.all(np.minimum(dh, 1 - dh) < 1e-5)
    assert np.allclose(got[..., 1:], expected[..., 1:], rtol=0, atol=1e-5)


def test_hsv_to_rgb_matches_colorsys_and_round_trips():
    rng = np.random.default_rng(7)
    hsv = rng.random((500, 3))
    expected = np.array([colorsys.hsv_to_rgb(*p) for p in hsv])  # Python stdlib
    assert np.allclose(hsv_to_rgb(hsv), expected, atol=1e-12)
    rgb = rng.random((500, 3))
    assert np.allclose(hsv_to_rgb(rgb_to_hsv(rgb)), rgb, atol=1e-12)


@pytest.mark.parametrize(
    "bad, message",
    [(np.zeros((4, 4), np.uint8), r"\(H, W, 3\)"), (np.zeros((4, 4, 3), np.float32), "dtype uint8"),
     (np.zeros((4, 4, 4), np.uint8), r"\(H, W, 3\)"), ([[1, 2, 3]], r"\(H, W, 3\)")],
    ids=["grey", "float", "rgba", "list"],
)
def test_check_rgb_image_rejects(bad, message):
    with pytest.raises(ValueError, match=message):
        check_rgb_image(bad)


def test_relative_luminance_rejects_float():
    with pytest.raises(ValueError, match="uint8"):
        relative_luminance(np.zeros((2, 2, 3), np.float32))


@pytest.mark.parametrize("bad, message", [(np.zeros((4, 4, 3), np.float64), r"dtype uint8.*np\.round\(image \* 255\)"),
                                          (np.zeros((4, 4, 2), np.uint8), r"\(H, W, 3\), \(H, W, 1\) or \(H, W\)"),
                                          (np.zeros((0, 4), np.uint8), "at least one pixel"),
                                          ([[1, 2]], "numpy array")],
                         ids=["float", "two-channel", "empty", "list"])
def test_check_image_rejects_saying_what_to_pass(bad, message):
    with pytest.raises(ValueError, match=message):
        check_image(bad)


@pytest.mark.parametrize("shape", [(4, 5), (4, 5, 1), (4, 5, 3)])
def test_check_image_accepts_grey_and_rgb(shape):
    image = np.zeros(shape, np.uint8)
    assert check_image(image) is image


def test_encode_linear_image_matches_iec_encoding():
    # IEC 61966-2-1:1999 section 5.3, evaluated in float64 per value.
    linear = np.random.default_rng(3).uniform(-0.1, 1.1, (64, 64, 3)).astype(np.float32)
    clipped = np.clip(linear.astype(np.float64), 0.0, 1.0)
    exact = 255 * np.where(clipped <= 0.0031308, 12.92 * clipped, 1.055 * clipped ** (1 / 2.4) - 0.055)
    # Half a code of rounding plus the 16-bit linear step at the steepest
    # point of the curve (12.92 * 255 / 65535 / 2 = 0.025 code).
    assert np.abs(encode_linear_image(linear) - exact).max() <= 0.5 + 0.026
