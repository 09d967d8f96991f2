"""Tests for augplan.measure.factors against published definitions and reference libraries."""

import colorsys

import numpy as np
import pytest
import scipy.ndimage
import scipy.stats
import skimage.color
import skimage.data
import skimage.transform

from augplan.measure import factors


def _srgb_decode(code):
    # IEC 61966-2-1:1999 section 5.2, written out here independently of augplan.colour.
    v = np.asarray(code, dtype=np.float64) / 255.0
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _luminance_reference(images):
    # ITU-R BT.709-6 item 3.2 weights on linear light.
    lin = _srgb_decode(images)
    return 0.2126 * lin[..., 0] + 0.7152 * lin[..., 1] + 0.0722 * lin[..., 2]


def _uniform(rgb, size=8):
    return np.broadcast_to(np.array(rgb, dtype=np.uint8), (1, size, size, 3)).copy()


def _astronaut_batch(size=64):
    # skimage ships this sample image; no download.
    image = skimage.transform.resize(skimage.data.astronaut(), (size, size), anti_aliasing=True)
    image = (image * 255).round().astype(np.uint8)
    return np.stack([image, image[::-1], image[:, ::-1]])


def _random_batch(seed=0, n=4, size=32):
    return np.random.default_rng(seed).integers(0, 256, (n, size, size, 3), dtype=np.uint8)


COLOURS = [(0, 0, 0), (255, 255, 255), (128, 128, 128), (255, 0, 0), (0, 255, 0),
           (0, 0, 255), (10, 200, 90), (250, 128, 3)]


@pytest.mark.parametrize("rgb", COLOURS, ids=[f"rgb{c}" for c in COLOURS])
def test_brightness_of_uniform_colour_matches_srgb_bt709(rgb):
    expected = _luminance_reference(np.array(rgb))
    # factors work in float32: a luminance <= 1 within a few ulp (1.2e-7 each).
    assert factors.brightness(_uniform(rgb))[0] == pytest.approx(float(expected), abs=1e-6)


def test_skimage_rgb2gray_is_weights_on_encoded_values_and_differs_from_luminance():
    # skimage.color.rgb2gray documents Y = 0.2125 R + 0.7154 G + 0.0721 B applied
    # to the encoded values with no sRGB decoding; check that relation numerically.
    batch = np.concatenate([_uniform(c) for c in COLOURS])
    gray = skimage.color.rgb2gray(batch)[:, 0, 0]
    encoded = batch[:, 0, 0].astype(np.float64) / 255.0
    assert gray == pytest.approx(encoded @ np.array([0.2125, 0.7154, 0.0721]), abs=1e-6)
    # For greys, decoding rgb2gray's value gives our relative luminance exactly.
    grey = _uniform((128, 128, 128))
    assert factors.brightness(grey)[0] == pytest.approx(
        float(_srgb_decode(skimage.color.rgb2gray(grey)[0, 0, 0] * 255.0)), abs=1e-6)
    # For a mid red the missing linearisation matters: 0.2125 * 0.502 vs 0.2126 * 0.2158.
    red = _uniform((128, 0, 0))
    assert skimage.color.rgb2gray(red)[0, 0, 0] - factors.brightness(red)[0] > 0.05


def test_colourfulness_of_grey_is_zero():
    batch = np.concatenate([_uniform((g, g, g)) for g in (0, 77, 255)])
    assert factors.colourfulness(batch) == pytest.approx([0.0, 0.0, 0.0], abs=1e-9)


def test_colourfulness_two_colour_image_matches_hand_computation():
    # Half pure red (255, 0, 0), half pure blue (0, 0, 255); Hasler & Suesstrunk 2003, eq. (3):
    # rg = R - G: 255 (red), 0 (blue) -> mean 127.5, var 127.5**2 = 16256.25
    # yb = (R + G)/2 - B: 127.5 (red), -255 (blue) -> mean -63.75, var 191.25**2 = 36576.5625
    # sigma_rgyb = sqrt(16256.25 + 36576.5625) = sqrt(52832.8125) = 229.854...
    # mu_rgyb = sqrt(127.5**2 + 63.75**2) = sqrt(20320.3125) = 142.549...
    # M = sigma_rgyb + 0.3 mu_rgyb = 272.619...
    image = np.zeros((1, 4, 4, 3), dtype=np.uint8)
    image[0, :, :2, 0] = 255
    image[0, :, 2:, 2] = 255
    expected = np.sqrt(52832.8125) + 0.3 * np.sqrt(20320.3125)
    assert factors.colourfulness(image)[0] == pytest.approx(expected, rel=1e-6)
    assert expected == pytest.approx(272.619, abs=1e-3)


@pytest.mark.parametrize("source", ["astronaut", "random"])
def test_rms_contrast_is_std_of_luminance(source):
    batch = _astronaut_batch() if source == "astronaut" else _random_batch()
    # Peli 1990: RMS contrast = sqrt(mean((Y - mean Y)^2)), Y normalised to [0, 1].
    lum = _luminance_reference(batch)
    expected = np.sqrt(((lum - lum.mean(axis=(1, 2), keepdims=True)) ** 2).mean(axis=(1, 2)))
    # float32 squares summed over 4,096 pixels against float64: sqrt(n) * eps
    # relative is ~1e-5; 1e-4 leaves margin for the two passes (mean, then spread).
    assert factors.rms_contrast(batch) == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize("source", ["astronaut", "random"])
def test_sharpness_is_variance_of_scipy_laplacian(source):
    batch = _astronaut_batch() if source == "astronaut" else _random_batch()
    # Pech-Pacheco et al. 2000: focus measure = variance of the Laplacian.
    expected = [np.var(scipy.ndimage.laplace(lum)) for lum in _luminance_reference(batch)]
    # float32 Laplacian (differences of neighbours lose digits) then a variance
    # over 4,096 pixels, against float64: 1e-3 relative.
    assert factors.sharpness(batch) == pytest.approx(expected, rel=1e-3)


def test_blur_lowers_sharpness():
    batch = _astronaut_batch()
    blurred = scipy.ndimage.gaussian_filter(batch, sigma=(0, 1.5, 1.5, 0))
    assert np.all(factors.sharpness(blurred) < 0.5 * factors.sharpness(batch))


def test_hue_of_fully_saturated_pixels_matches_scipy_circmean():
    rng = np.random.default_rng(3)
    # Fully saturated colours (one channel 255, one 0) all have weight 1, so the
    # weighted mean is the plain circular mean of the hue angles.
    ramp = rng.integers(0, 256, 64)
    pixels = np.zeros((64, 3), dtype=np.uint8)
    pixels[:, 0] = 255
    pixels[:, 1] = ramp
    pixels[32:] = pixels[32:, [1, 0, 2]]  # swap into the yellow-green sextant
    pixels[48:] = pixels[48:, [2, 1, 0]]  # and into green-cyan
    image = pixels.reshape(1, 8, 8, 3)
    # colorsys (the standard library's HSV) gives the reference hue angles.
    angles = [colorsys.rgb_to_hsv(*(p / 255.0))[0] * 360.0 for p in pixels]
    expected = scipy.stats.circmean(angles, high=360.0, low=0.0)
    assert factors.hue(image)[0] == pytest.approx(expected, abs=1e-3)


def test_hue_wraps_around_red_and_is_nan_for_grey():
    image = np.zeros((2, 4, 4, 3), dtype=np.uint8)
    image[0, :, :2] = (255, 0, 26)  # hue ~354
    image[0, :, 2:] = (255, 26, 0)  # hue ~6
    image[1] = 90
    values = factors.hue(image)
    assert min(values[0], 360.0 - values[0]) < 1e-3
    assert np.isnan(values[1])


def _stripes(angle, size=96, period=10.0):
    # Sinusoidal stripes whose luminance gradient points at `angle` degrees
    # counterclockwise from the x axis (y up), drawn here for the test.
    rows, cols = np.mgrid[0:size, 0:size].astype(np.float64)
    t = np.radians(angle)
    phase = (cols * np.cos(t) - rows * np.sin(t)) * 2 * np.pi / period
    value = (127.5 + 100 * np.sin(phase)).round().astype(np.uint8)
    return np.repeat(value[..., None], 3, axis=2)


ANGLES = [0, 15, 33, 45, 72, 90, 118, 135, 164, 179]


def test_orientation_of_rotated_stripes_within_two_degrees():
    batch = np.stack([_stripes(a) for a in ANGLES])
    measured = factors.orientation(batch)
    error = (measured - np.array(ANGLES) + 90.0) % 180.0 - 90.0
    assert np.all(np.abs(error) < 2.0), error
    assert np.all(factors.coherence(batch) > 0.95)


def test_orientation_follows_skimage_rotation():
    # skimage.transform.rotate turns content counterclockwise by the angle given.
    base = _stripes(20, size=160)
    turned = skimage.transform.rotate(base, 40, mode="reflect", preserve_range=True)
    crop = turned[40:120, 40:120].round().astype(np.uint8)
    assert factors.orientation(crop[None])[0] == pytest.approx(60.0, abs=2.0)


def test_noise_has_low_coherence_and_flat_image_no_orientation():
    batch = np.concatenate([_random_batch(n=1, size=64), _uniform((40, 40, 40), size=64)])
    pose = factors.pose_factors(batch)
    assert pose["coherence"][0] < 0.1
    assert np.isnan(pose["orientation"][1]) and pose["coherence"][1] == 0.0


def test_asymmetry_zero_for_mirror_symmetric_and_one_for_half_split():
    symmetric = _astronaut_batch()[:1]
    symmetric = np.concatenate([symmetric[:, :, :32], symmetric[:, :, :32][:, :, ::-1]], axis=2)
    split = np.zeros((1, 64, 64, 3), dtype=np.uint8)
    split[0, :, :32] = 255
    values = factors.asymmetry(np.concatenate([symmetric, split]))
    assert values[0] == pytest.approx(0.0, abs=1e-7)
    # Left white, right black: |Y - mirror| = 1 everywhere, mean |Y - 0.5| = 0.5.
    assert values[1] == pytest.approx(1.0)


@pytest.mark.parametrize("polarity", ["bright-object", "dark-object"])
def test_framing_of_a_square_object(polarity):
    image = np.full((1, 40, 40, 3), 30 if polarity == "bright-object" else 220, dtype=np.uint8)
    image[0, 4:14, 20:36] = 220 if polarity == "bright-object" else 30
    frame = factors.framing_factors(image)
    assert frame["area"][0] == pytest.approx(160 / 1600)
    assert frame["centroid_x"][0] == pytest.approx(28 / 40)  # columns 20..35, centre 28.0
    assert frame["centroid_y"][0] == pytest.approx(9 / 40)


def test_measure_factors_matches_each_function_and_registry():
    batch = np.concatenate([_astronaut_batch(), _random_batch(n=2, size=64)])
    measured = factors.measure_factors(batch)
    assert list(measured) == list(factors.FACTORS)
    for name, factor in factors.FACTORS.items():
        # Same float32 code on the same chunked input: equal to the last bit.
        np.testing.assert_allclose(measured[name], factor.function(batch), rtol=1e-12,
                                   equal_nan=True, err_msg=name)
    assert factors.FACTORS["orientation"].period == 180.0
    assert factors.FACTORS["hue"].period == 360.0


@pytest.mark.parametrize("bad", [np.zeros((4, 4, 3), np.uint8), np.zeros((1, 4, 4, 3), np.float32),
                                 np.zeros((1, 4, 4, 4), np.uint8), [[1, 2, 3]]],
                         ids=["single-image", "float", "rgba", "list"])
def test_bad_batch_is_rejected_with_shape_and_dtype(bad):
    with pytest.raises(ValueError, match="images must"):
        factors.measure_factors(bad)


def _hasler_suesstrunk(pixels):
    # Hasler & Suesstrunk 2003, eq. (3), in float64 on the 0-255 codes.
    pixels = pixels.reshape(-1, 3).astype(np.float64)
    rg = pixels[:, 0] - pixels[:, 1]
    yb = (pixels[:, 0] + pixels[:, 1]) / 2.0 - pixels[:, 2]
    return np.hypot(rg.std(), yb.std()) + 0.3 * np.hypot(rg.mean(), yb.mean())


def test_colourfulness_at_64_px_or_more_uses_every_second_pixel_and_stays_near_all_pixels():
    # scikit-image's astronaut at 128 x 128: at sides of REDUCE_FROM or more the
    # statistic runs over image[::2, ::2] (a quarter of the pixels).
    batch = _astronaut_batch(size=128)
    assert min(batch.shape[1:3]) >= factors.REDUCE_FROM
    value = factors.colourfulness(batch)[0]
    # float32 opponent planes, float64 moments: far below 1e-4 relative.
    assert value == pytest.approx(_hasler_suesstrunk(batch[0, ::2, ::2]), rel=1e-4)
    # The docstring's bound on the difference from all pixels: 6.3 %.
    assert value == pytest.approx(_hasler_suesstrunk(batch[0]), rel=0.063)
    small = _astronaut_batch(size=factors.REDUCE_FROM - 1)
    assert factors.colourfulness(small)[0] == pytest.approx(_hasler_suesstrunk(small[0]), rel=1e-4)


def _weighted_mean_hue(pixels):
    # colorsys (the standard library's HSV) gives each pixel's hue and saturation.
    hsv = np.array([colorsys.rgb_to_hsv(*(p / 255.0)) for p in pixels.reshape(-1, 3)])
    angle = hsv[:, 0] * 2 * np.pi
    return np.degrees(np.arctan2((hsv[:, 1] * np.sin(angle)).sum(), (hsv[:, 1] * np.cos(angle)).sum())) % 360.0


def test_hue_at_64_px_or_more_uses_every_second_pixel_and_stays_near_all_pixels():
    batch = _astronaut_batch(size=64)
    value = factors.hue(batch)[0]
    # float32 HSV against float64 colorsys: within 1e-3 degrees.
    assert abs((value - _weighted_mean_hue(batch[0, ::2, ::2]) + 180) % 360 - 180) < 1e-3
    # The docstring's bound on the difference from all pixels: 7.2 degrees.
    assert abs((value - _weighted_mean_hue(batch[0]) + 180) % 360 - 180) <= 7.2


def test_framing_thresholds_are_skimage_otsu_to_the_bit():
    # skimage.filters.threshold_otsu is the reference; the batch computation
    # promises its thresholds bit for bit. scikit-image's sample photographs
    # (crops of 48 x 48 over several scales and positions) and images of four
    # grey levels, whose pixels sit exactly on histogram edges.
    from skimage.filters import threshold_otsu
    from augplan.imaging.colour import relative_luminance

    crops = [np.ascontiguousarray(source[top:top + 48, left:left + 48])
             for source in (skimage.data.astronaut(), skimage.data.coffee(), skimage.data.chelsea())
             for top, left in ((0, 0), (100, 37), (200, 150), (250, 251))]
    levels = np.random.default_rng(5).integers(0, 4, (4, 48, 48, 3)).astype(np.uint8) * 60
    lum = relative_luminance(np.concatenate([np.stack(crops), levels]))
    expected = np.array([threshold_otsu(image) for image in lum])
    assert np.array_equal(factors._otsu_thresholds(lum), expected)
