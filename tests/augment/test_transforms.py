"""Tests for augplan.augment.transforms against scikit-image, colorsys, scipy.stats and IEC 61966-2-1."""

import colorsys

import numpy as np
import pytest
from scipy import stats
from skimage import data
from skimage import filters as skfilters
from skimage import transform as sktransform

from augplan.imaging.colour import relative_luminance
from augplan.recipe.parse import Recipe, Transform
from augplan.augment.transforms import (
    OPS,
    apply_recipe,
    blur,
    brightness,
    contrast,
    flip,
    hue,
    magnitude_grid,
    noise,
    params_at,
    rotate,
    sample_params,
    saturation,
    shift,
    zoom,
)


@pytest.fixture(scope="module")
def astronaut():
    # skimage.data.astronaut() ships with scikit-image; downsized 4x to 128x128.
    return np.ascontiguousarray(data.astronaut()[::4, ::4])


# OpenCV 5's 8-bit warps and separable filters sum in float32 and round once:
# half a code of rounding plus float32 error far below 1e-3 code.
ROUNDED = 0.5 + 1e-3


def rng(seed=0):
    return np.random.default_rng(seed)


def interior_mad(a, b, margin):
    a = np.asarray(a, dtype=np.float64)[margin:-margin, margin:-margin]
    b = np.asarray(b, dtype=np.float64)[margin:-margin, margin:-margin]
    return np.abs(a - b).mean()


def example_params(name, fill="reflect"):
    spec = OPS[name]
    if spec.magnitude is None:
        return {"axis": "horizontal"}
    value = {"degrees": 17.0, "factor": 1.3, "fraction": 0.08, "sigma": 0.9}[spec.magnitude]
    if name == "noise":
        value = 0.03
    params = {spec.magnitude: value}
    if spec.geometric:
        params["fill"] = fill
    return params


# ---------------------------------------------------------------- shape, dtype, validation


@pytest.mark.parametrize("name", sorted(OPS))
def test_op_keeps_shape_and_dtype_and_input(name, astronaut):
    image = astronaut[:100, :70].copy()  # not square, to catch row/col mix-ups
    before = image.copy()
    out = OPS[name].function(image, example_params(name), rng())
    assert out.shape == image.shape and out.dtype == np.uint8
    assert np.array_equal(image, before)  # pure: the input is untouched
    assert not np.shares_memory(out, image)


@pytest.mark.parametrize("name", sorted(OPS))
@pytest.mark.parametrize("bad, message", [(np.zeros((8, 8, 3), np.float32), r"uint8.*np\.round\(image \* 255\)"),
                                          (np.zeros((8, 8, 4), np.uint8), r"\(H, W, 3\), \(H, W, 1\) or \(H, W\)")],
                         ids=["float32", "rgba"])
def test_op_rejects_float_and_rgba_saying_what_to_pass(name, bad, message):
    with pytest.raises(ValueError, match=message):
        OPS[name].function(bad, example_params(name), rng())


@pytest.mark.parametrize("name", sorted(OPS))
@pytest.mark.parametrize("grey_shape", ["2d", "1-channel"])
def test_op_takes_grey_and_returns_its_shape(name, grey_shape, astronaut):
    plane = np.ascontiguousarray(astronaut[:100, :70, 1])
    grey = plane if grey_shape == "2d" else plane[..., None].copy()
    out = OPS[name].function(grey, example_params(name), rng(2))
    assert out.shape == grey.shape and out.dtype == np.uint8
    if name != "noise":  # noise draws one value per channel value: its own stream
        # A grey image is treated as an RGB image with three equal channels.
        rgb = OPS[name].function(np.repeat(plane[..., None], 3, axis=-1), example_params(name), rng(2))
        assert np.array_equal(out.reshape(plane.shape), rgb[..., 0])


@pytest.mark.parametrize("name", ["rotate", "zoom", "shift"])
def test_geometric_ops_reject_unknown_fill(name, astronaut):
    with pytest.raises(ValueError, match="fill"):
        OPS[name].function(astronaut, example_params(name, fill="wrap"), rng())


@pytest.mark.parametrize("name", [n for n in sorted(OPS) if OPS[n].magnitude])
def test_op_rejects_missing_magnitude(name, astronaut):
    with pytest.raises(ValueError, match=OPS[name].magnitude):
        OPS[name].function(astronaut, {"fill": "reflect"}, rng())


@pytest.mark.parametrize("name", [n for n in sorted(OPS) if OPS[n].magnitude])
@pytest.mark.parametrize("fill", ["reflect", "constant", "edge"])
def test_identity_magnitude_leaves_image_unchanged(name, fill, astronaut):
    spec = OPS[name]
    params = {spec.magnitude: spec.identity, "fill": fill}
    assert np.array_equal(spec.function(astronaut, params, rng()), astronaut)


# ---------------------------------------------------------------- geometric ops


def test_flip_twice_is_identity_and_matches_numpy(astronaut):
    for axis, reference in (("horizontal", np.fliplr), ("vertical", np.flipud)):
        once = flip(astronaut, {"axis": axis})
        assert np.array_equal(once, reference(astronaut))
        assert np.array_equal(flip(once, {"axis": axis}), astronaut)
    with pytest.raises(ValueError, match="axis"):
        flip(astronaut, {"axis": "diagonal"})


@pytest.mark.parametrize("degrees", [-25.0, 10.0, 90.0])
def test_rotate_matches_skimage(degrees, astronaut):
    # skimage.transform.rotate: positive angle = counterclockwise, about the
    # centre; its "reflect" mode (edge pixel not repeated) is ours.
    ours = rotate(astronaut, {"degrees": degrees, "fill": "reflect"}, rng())
    ref = sktransform.rotate(astronaut, degrees, order=1, mode="reflect", preserve_range=True)
    # OpenCV 5 blends 8-bit pixels in float32 at unquantised positions: the float64 reference rounded.
    assert np.abs(ours - ref).max() <= ROUNDED
    # The opposite direction must be far off, so the check can fail.
    wrong = sktransform.rotate(astronaut, -degrees, order=1, mode="reflect", preserve_range=True)
    assert interior_mad(ours, wrong, 16) > 10.0


def test_rotate_constant_fill_blackens_corners(astronaut):
    out = rotate(astronaut, {"degrees": 45.0, "fill": "constant"}, rng())
    assert out[0, 0].max() == 0 and out[-1, -1].max() == 0


@pytest.mark.parametrize("factor", [0.8, 1.25, 2.0])
def test_zoom_matches_skimage_warp(factor, astronaut):
    # skimage.transform.warp with an inverse map scaling about the centre
    # (x, y) = ((W-1)/2, (H-1)/2): input = centre + (output - centre) / factor.
    h, w = astronaut.shape[:2]
    centre = np.array([(w - 1) / 2, (h - 1) / 2])
    inverse = sktransform.AffineTransform(scale=1 / factor, translation=centre - centre / factor)
    ref = sktransform.warp(astronaut, inverse, order=1, mode="reflect", preserve_range=True)
    ours = zoom(astronaut, {"factor": factor, "fill": "reflect"}, rng())
    assert np.abs(ours - ref).max() <= ROUNDED  # the float64 reference rounded (see ROUNDED)


def test_zoom_enlarges_content(astronaut):
    # A centred bright square grows with factor 2 (common sense ground truth).
    image = np.zeros((64, 64, 3), np.uint8)
    image[24:40, 24:40] = 255
    out = zoom(image, {"factor": 2.0, "fill": "constant"}, rng())
    assert (out[..., 0] > 127).sum() == pytest.approx(4 * 16 * 16, rel=0.1)


def test_zoom_matches_skimage_rescale_centre(astronaut):
    # skimage.transform.rescale then a centre crop is the same zoom by 2.
    big = sktransform.rescale(astronaut, 2.0, order=1, channel_axis=-1, preserve_range=True)
    h, w = astronaut.shape[:2]
    crop = big[h // 2 : h // 2 + h, w // 2 : w // 2 + w]
    ours = zoom(astronaut, {"factor": 2.0, "fill": "reflect"}, rng())
    # Every pixel is the float64 reference rounded (see ROUNDED); an unzoomed
    # image is about 80 codes away, so the check can fail.
    assert np.abs(ours - crop).max() <= ROUNDED
    assert interior_mad(astronaut, crop, 16) > 10.0


@pytest.mark.parametrize("fraction", [(0.1, 0.0), (0.0, -0.15), (0.07, 0.05)], ids=str)
def test_shift_matches_skimage_warp(fraction, astronaut):
    h, w = astronaut.shape[:2]
    fx, fy = fraction
    # skimage.transform.warp's inverse map: input (x, y) = output - (fx W, fy H).
    inverse = sktransform.AffineTransform(translation=(-fx * w, -fy * h))
    ref = sktransform.warp(astronaut, inverse, order=1, mode="reflect", preserve_range=True)
    ours = shift(astronaut, {"fraction": fraction, "fill": "reflect"}, rng())
    assert np.abs(ours - ref).max() <= ROUNDED  # the float64 reference rounded (see ROUNDED)


@pytest.mark.parametrize("fill", ["reflect", "edge", "constant"])
@pytest.mark.parametrize("op, params", [("zoom", {"factor": 0.7}), ("zoom", {"factor": 1.45}),
                                        ("shift", {"fraction": (0.13, -0.21)}),
                                        ("rotate", {"degrees": 33.0}), ("rotate", {"degrees": -150.0})],
                         ids=str)
def test_warps_match_scipy_affine_transform(op, params, fill, astronaut):
    # scipy.ndimage.affine_transform (order 1, modes mirror / nearest /
    # grid-constant), computed in float64, is the reference for every
    # geometric op at every pixel, borders included. Tolerance: OpenCV 5's
    # 8-bit bilinear warp blends in float32 at unquantised positions (see the
    # next test), so ours is the reference rounded (ROUNDED).
    from scipy import ndimage

    image = astronaut[:96, :80]  # not square: rows and columns must not be swapped
    h, w = image.shape[:2]
    if op == "zoom":
        matrix, translation = np.eye(2) / params["factor"], np.zeros(2)
    elif op == "rotate":
        theta = np.radians(params["degrees"])  # inverse map of a counterclockwise turn, rows down
        matrix = np.array([[np.cos(theta), np.sin(theta)], [-np.sin(theta), np.cos(theta)]])
        translation = np.zeros(2)
    else:
        fx, fy = params["fraction"]
        matrix, translation = np.eye(2), np.array([-fy * h, -fx * w])
    centre = np.array([(h - 1) / 2, (w - 1) / 2])
    offset = centre - matrix @ centre + translation
    # Our "reflect" does not repeat the edge pixel: scipy's "mirror".
    mode = {"reflect": "mirror", "edge": "nearest", "constant": "grid-constant"}[fill]
    reference = np.stack([ndimage.affine_transform(image[..., k].astype(np.float64), matrix, offset,
                                                   order=1, mode=mode, prefilter=False)
                          for k in range(3)], axis=-1)
    ours = OPS[op].function(image, {**params, "fill": fill}, rng())
    assert np.abs(ours - reference).max() <= ROUNDED


@pytest.mark.parametrize("dx", [1 / 128, 1 / 64 - 1e-4, 3 / 64 + 1e-4, 0.1, 0.37])
def test_warp_positions_are_not_quantised_to_fifths_of_a_bit(dx):
    # OpenCV 4's 8-bit bilinear warp rounded source positions to 1/32 pixel
    # (INTER_BITS = 5), which would put up to 255/64 = 4 codes of error on a
    # step edge. The tolerance above relies on OpenCV 5 not doing so: a
    # sub-pixel shift of a 0 | 255 step must give the exact blend, rounded.
    step = np.zeros((4, 16, 3), np.uint8)
    step[:, 8:] = 255
    out = shift(step, {"fraction": (-dx / 16, 0.0), "fill": "edge"}, rng())
    assert abs(int(out[0, 7, 0]) - 255 * dx) <= 0.5 + 1e-3


def test_shift_whole_pixels_moves_right_and_down(astronaut):
    out = shift(astronaut, {"fraction": (0.125, 0.25), "fill": "edge"}, rng())  # 16 right, 32 down
    assert np.array_equal(out[32:, 16:], astronaut[:-32, :-16])
    assert np.array_equal(out[:32, 16:], np.broadcast_to(astronaut[:1, :-16], (32, 112, 3)))


# ---------------------------------------------------------------- tone and colour ops


def iec_decode(v):  # IEC 61966-2-1:1999 section 5.2
    return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4


def iec_encode(lin):  # IEC 61966-2-1:1999 section 5.3
    lin = min(max(lin, 0.0), 1.0)
    return 12.92 * lin if lin <= 0.0031308 else 1.055 * lin ** (1 / 2.4) - 0.055


def test_brightness_factor_one_is_identity(astronaut):
    assert np.array_equal(brightness(astronaut, {"factor": 1.0}, rng()), astronaut)


@pytest.mark.parametrize("factor", [0.5, 1.7])
def test_brightness_scales_linear_light(factor):
    codes = np.arange(256, dtype=np.uint8)
    image = np.stack([codes, codes[::-1], np.roll(codes, 50)], axis=-1)[None]
    out = brightness(image, {"factor": factor}, rng())
    exact = np.vectorize(lambda c: 255 * iec_encode(factor * iec_decode(c / 255)))(image)
    diff = np.abs(out - np.floor(exact + 0.5))
    # Codes agree except where the exact value sits on a rounding tie
    # (float32 tables may fall either side of it).
    assert diff.max() <= 1
    assert np.all(np.abs(exact[diff > 0] % 1 - 0.5) < 1e-4)


def test_contrast_keeps_mean_luminance_and_scales_spread(astronaut):
    # Mid-range image so nothing clips: codes 60..190.
    image = (60 + (astronaut.astype(np.uint16) * 130) // 255).astype(np.uint8)
    y_in = relative_luminance(image)  # ITU-R BT.709 luminance
    for factor in (0.6, 1.3):
        y_out = relative_luminance(contrast(image, {"factor": factor}, rng()))
        assert y_out.mean() == pytest.approx(y_in.mean(), abs=2e-3)
        assert y_out.std() == pytest.approx(factor * y_in.std(), rel=0.03)


def test_contrast_zero_gives_uniform_grey(astronaut):
    out = contrast(astronaut, {"factor": 0.0}, rng())
    assert np.ptp(out) == 0
    assert relative_luminance(out).mean() == pytest.approx(relative_luminance(astronaut).mean(), abs=3e-3)


def test_saturation_zero_is_grey_with_same_luminance(astronaut):
    out = saturation(astronaut, {"factor": 0.0}, rng())
    assert np.array_equal(out[..., 0], out[..., 1]) and np.array_equal(out[..., 1], out[..., 2])
    # Each pixel's grey is its own relative luminance, re-encoded: worked out
    # here in float64 from the published formulas, not the package's own
    # float32 code. ITU-R BT.709-6 item 3.3 weights linear R, G, B by
    # 0.2126, 0.7152, 0.0722; IEC 61966-2-1 decodes and re-encodes.
    linear = np.vectorize(iec_decode)(astronaut.astype(np.float64) / 255)
    y = linear @ np.array([0.2126, 0.7152, 0.0722])
    exact = np.vectorize(iec_encode)(y) * 255
    distance_to_tie = np.abs(exact % 1 - 0.5)
    # Linear light returns to codes through 16-bit levels: at most
    # 12.92 * 255 / 65535 / 2 = 0.025 code off (the steepest point of the
    # sRGB curve) plus float32 error well under 1e-3. Away from a half code
    # by more than that it must round to the same code; nearer, either way.
    margin = 0.026
    clear = distance_to_tie > margin
    assert np.array_equal(out[..., 0][clear], np.floor(exact[clear] + 0.5))
    assert np.abs(out[..., 0][~clear] - exact[~clear]).max(initial=0.0) <= 0.5 + margin


def test_saturation_keeps_luminance_and_increases_chroma(astronaut):
    image = (60 + (astronaut.astype(np.uint16) * 130) // 255).astype(np.uint8)
    out = saturation(image, {"factor": 1.4}, rng())
    y_in, y_out = relative_luminance(image), relative_luminance(out)
    assert np.abs(y_out - y_in).mean() < 2e-3
    chroma = lambda im: (im.max(-1).astype(int) - im.min(-1)).mean()  # noqa: E731
    assert chroma(out) > 1.2 * chroma(image)


@pytest.mark.parametrize("degrees", [-37.0, 15.0, 200.0, 359.0])
def test_hue_matches_colorsys(degrees):
    # colorsys (Python stdlib) as the reference HSV implementation.
    gen = rng(11)
    image = gen.integers(0, 256, (20, 25, 3), dtype=np.uint8)
    out = hue(image, {"degrees": degrees}, gen)
    expected = np.empty(image.shape)
    for idx in np.ndindex(image.shape[:2]):
        h, s, v = colorsys.rgb_to_hsv(*(image[idx] / 255.0))
        expected[idx] = colorsys.hsv_to_rgb((h + degrees / 360.0) % 1.0, s, v)
    # OpenCV's float32 HSV round trip, rounded once: the exact value rounded.
    assert np.abs(out - expected * 255).max() <= ROUNDED


def test_hue_within_one_code_of_colorsys_over_a_colour_lattice():
    # colorsys (Python stdlib) as the reference HSV implementation, on every
    # colour of a 16-step lattice of the RGB cube (ends 0 and 255 included,
    # so pure, grey and near-grey colours are all there) at turns that land
    # in every sextant. The result is the exact value rounded (half a code)
    # up to float32 error; the bound asked of the op is one code.
    levels = np.arange(0, 256, 17, dtype=np.uint8)
    image = np.stack(np.meshgrid(levels, levels, levels, indexing="ij"), axis=-1).reshape(16, -1, 3)
    unit = image.reshape(-1, 3) / 255.0
    for degrees in (-179.0, -61.0, 7.5, 60.0, 133.0, 180.0):
        out = hue(image, {"degrees": degrees}, rng()).reshape(-1, 3)
        expected = np.array([colorsys.hsv_to_rgb((h + degrees / 360.0) % 1.0, s, v)
                             for h, s, v in (colorsys.rgb_to_hsv(*pixel) for pixel in unit)]) * 255
        assert np.abs(out - expected).max() <= 1.0, degrees
        assert np.abs(out - expected).max() <= ROUNDED, degrees


def test_hue_full_turn_is_identity(astronaut):
    assert np.array_equal(hue(astronaut, {"degrees": 360.0}, rng()), astronaut)
    # A small round trip stays within rounding.
    back = hue(hue(astronaut, {"degrees": 40.0}, rng()), {"degrees": -40.0}, rng())
    assert np.abs(back.astype(int) - astronaut).max() <= 2


def test_hue_plus_120_takes_red_to_green_to_blue():
    primaries = np.array([[[255, 0, 0], [0, 255, 0], [0, 0, 255]]], np.uint8)
    out = hue(primaries, {"degrees": 120.0}, rng())
    assert out.tolist() == [[[0, 255, 0], [0, 0, 255], [255, 0, 0]]]


def test_blur_sigma_zero_is_identity_and_matches_skimage(astronaut):
    assert np.array_equal(blur(astronaut, {"sigma": 0.0}, rng()), astronaut)
    # skimage.filters.gaussian (mode="reflect", truncate 4) as the reference.
    ref = skfilters.gaussian(
        astronaut.astype(np.float64), sigma=1.5, mode="reflect", truncate=4.0,
        channel_axis=-1, preserve_range=True,
    )
    out = blur(astronaut, {"sigma": 1.5}, rng())
    assert np.abs(out - ref).max() <= ROUNDED  # sepFilter2D sums in float32, rounds once


@pytest.mark.parametrize("sigma", [0.3, 1.0, 2.2])
def test_blur_matches_scipy_gaussian_filter(sigma, astronaut):
    # scipy.ndimage.gaussian_filter (mode "reflect" = half-sample symmetric,
    # truncate 4): the same kernel radius int(4 sigma + 0.5) and border.
    from scipy import ndimage

    ref = ndimage.gaussian_filter(astronaut.astype(np.float64), (sigma, sigma, 0), mode="reflect", truncate=4.0)
    assert np.abs(blur(astronaut, {"sigma": sigma}, rng()) - ref).max() <= ROUNDED  # float32 sums, one rounding


def test_blur_keeps_flat_image_and_its_mean():
    flat = np.full((20, 30, 3), 77, np.uint8)
    assert np.array_equal(blur(flat, {"sigma": 2.0}, rng()), flat)


def test_noise_same_seed_is_byte_identical_and_different_seed_differs(astronaut):
    a = noise(astronaut, {"sigma": 0.05}, rng(3))
    b = noise(astronaut, {"sigma": 0.05}, rng(3))
    c = noise(astronaut, {"sigma": 0.05}, rng(4))
    assert a.tobytes() == b.tobytes()
    assert a.tobytes() != c.tobytes()


def test_noise_sigma_is_fraction_of_full_scale():
    grey = np.full((100, 100, 3), 128, np.uint8)
    out = noise(grey, {"sigma": 0.04}, rng(5)).astype(np.float64) - 128
    # Normal with sd 0.04 * 255 = 10.2 codes; rounding adds 1/12 variance.
    assert out.std() == pytest.approx(np.sqrt(10.2**2 + 1 / 12), rel=0.03)
    assert abs(out.mean()) < 0.3
    with pytest.raises(ValueError, match="Generator"):
        noise(grey, {"sigma": 0.04}, None)


# ---------------------------------------------------------------- sampling and recipes


def test_log_uniform_sampling_centred_on_one():
    step = Transform(op="brightness", params={"factor": [0.5, 2.0]})
    gen = rng(21)
    draws = np.array([sample_params(step, "reflect", gen)["factor"] for _ in range(4000)])
    assert draws.min() >= 0.5 and draws.max() <= 2.0
    assert abs(np.median(draws) - 1.0) < 0.04
    # scipy.stats.loguniform is the reference distribution.
    assert stats.kstest(draws, stats.loguniform(0.5, 2.0).cdf).pvalue > 0.001
    assert stats.kstest(draws, stats.uniform(0.5, 1.5).cdf).pvalue < 1e-6


def test_uniform_sampling_for_linear_ops_and_degenerate_range():
    gen = rng(22)
    step = Transform(op="rotate", params={"degrees": [-10, 30]})
    draws = np.array([sample_params(step, "edge", gen)["degrees"] for _ in range(3000)])
    assert stats.kstest(draws, stats.uniform(-10, 40).cdf).pvalue > 0.001  # scipy.stats reference
    assert sample_params(step, "edge", gen)["fill"] == "edge"
    fixed = Transform(op="zoom", params={"factor": 1.2})
    assert sample_params(fixed, "reflect", gen) == {"factor": 1.2, "fill": "reflect"}


def test_shift_draws_x_and_y_independently():
    gen = rng(23)
    step = Transform(op="shift", params={"fraction": [-0.1, 0.1]})
    pairs = np.array([sample_params(step, "reflect", gen)["fraction"] for _ in range(2000)])
    assert pairs.shape == (2000, 2)
    assert abs(np.corrcoef(pairs.T)[0, 1]) < 0.08
    assert np.all(np.abs(pairs) <= 0.1)


def test_flip_params_carry_axis():
    step = Transform(op="flip", params={"axis": "vertical"})
    assert sample_params(step, "reflect", rng()) == {"axis": "vertical"}
    assert magnitude_grid(step, 5).size == 0


def test_magnitude_grid_linear_log_and_degenerate():
    lin = magnitude_grid(Transform(op="rotate", params={"degrees": [-10, 10]}), 5)
    assert lin.tolist() == [-10.0, -5.0, 0.0, 5.0, 10.0]
    log = magnitude_grid(Transform(op="zoom", params={"factor": [0.5, 2.0]}), 5)
    assert log[0] == 0.5 and log[-1] == 2.0
    assert np.allclose(log[1:] / log[:-1], np.sqrt(2))
    assert magnitude_grid(Transform(op="blur", params={"sigma": 1.5}), 7).tolist() == [1.5]
    greyscale = magnitude_grid(Transform(op="saturation", params={"factor": [0.0, 1.0]}), 3)
    assert greyscale.tolist() == [0.0, 0.5, 1.0]


def test_params_at():
    step = Transform(op="rotate", params={"degrees": [-10, 10]})
    assert params_at(step, 4, "constant") == {"degrees": 4.0, "fill": "constant"}


def test_apply_recipe_scope_relabel_probability(astronaut):
    swap = Transform(
        op="flip", params={"axis": "horizontal"}, only=("left", "right"),
        relabel={"left": "right", "right": "left"},
    )
    never = Transform(op="brightness", params={"factor": 2.0}, probability=0.0)
    recipe = Recipe(name="t", transforms=(swap, never))
    out, label = apply_recipe(astronaut, recipe, rng(), label="left")
    assert label == "right" and np.array_equal(out, np.fliplr(astronaut))
    out, label = apply_recipe(astronaut, recipe, rng(), label="other")
    assert label == "other" and np.array_equal(out, astronaut)
    out, label = apply_recipe(astronaut, recipe, rng(), label=None)
    assert label is None and np.array_equal(out, astronaut)


def test_apply_recipe_probability_rate_and_determinism(astronaut):
    half = Transform(op="flip", params={"axis": "vertical"}, probability=0.3)
    recipe = Recipe(name="t", transforms=(half,))
    gen = rng(8)
    small = astronaut[:8, :8]
    applied = sum(not np.array_equal(apply_recipe(small, recipe, gen)[0], small) for _ in range(1000))
    # Binomial(1000, 0.3): sd 14.5; 5 sd bounds (scipy.stats.binom would agree).
    assert 300 - 73 < applied < 300 + 73
    full = Recipe(
        name="t",
        transforms=tuple(Transform(op=n, params={OPS[n].magnitude: example_params(n)[OPS[n].magnitude]})
                         for n in sorted(OPS) if OPS[n].magnitude),
    )
    a, _ = apply_recipe(astronaut, full, rng(9))
    b, _ = apply_recipe(astronaut, full, rng(9))
    assert a.tobytes() == b.tobytes() and not np.array_equal(a, astronaut)


# ---------------------------------------------------------------- batches


@pytest.mark.parametrize("name", sorted(OPS))
def test_apply_op_batch_equals_the_op_image_by_image(name, astronaut):
    from augplan.augment.transforms import apply_op_batch

    batch = np.stack([astronaut[:40, :48], astronaut[40:80, 30:78], astronaut[80:120, 60:108]])
    params = example_params(name)
    out = apply_op_batch(batch, name, params, rng(5))
    gen = rng(5)
    expected = np.stack([OPS[name].function(image, params, gen) for image in batch])
    assert out.tobytes() == expected.tobytes()


def test_apply_op_batch_checks_params_and_images(astronaut):
    from augplan.augment.transforms import apply_op_batch

    with pytest.raises(ValueError, match="'factor' must be greater than 0"):
        apply_op_batch(astronaut[None], "zoom", {"factor": 0.0, "fill": "reflect"}, rng())
    with pytest.raises(ValueError, match=r"\(N, H, W, 3\)"):
        apply_op_batch(astronaut, "flip", {"axis": "horizontal"}, rng())


def test_augment_batch_equals_apply_recipe_in_order(astronaut):
    from augplan.augment.transforms import augment_batch

    recipe = Recipe(name="t", transforms=(
        Transform(op="rotate", params={"degrees": [-20, 20]}),
        Transform(op="noise", params={"sigma": [0.0, 0.05]}, probability=0.5),
        Transform(op="flip", params={"axis": "horizontal"}, only=("left",), relabel={"left": "right"})))
    images = np.stack([astronaut[:32, :32], astronaut[32:64, 32:64]])
    labels = ["left", "other"]
    out, new_labels = augment_batch(images, recipe, [rng(1), rng(2)], labels, copies=3)
    expected, expected_labels = [], []
    for image, gen, label in zip(images, [rng(1), rng(2)], labels):
        for _ in range(3):
            drawn, new = apply_recipe(image, recipe, gen, label)
            expected.append(drawn)
            expected_labels.append(new)
    assert out.tobytes() == np.stack(expected).tobytes()
    assert new_labels == expected_labels == ["right"] * 3 + ["other"] * 3


def test_recipe_runner_draws_what_sample_params_draws(astronaut):
    # The compiled runner inlines the draws; done step by step with
    # sample_params and the public op functions, the bytes must agree.
    steps = (Transform(op="zoom", params={"factor": [0.8, 1.25]}, probability=0.7),
             Transform(op="shift", params={"fraction": [-0.1, 0.1]}),
             Transform(op="saturation", params={"factor": [0.0, 1.5]}),
             Transform(op="hue", params={"degrees": 12.0}),
             Transform(op="noise", params={"sigma": [0.0, 0.04]}))
    recipe = Recipe(name="t", fill="edge", transforms=steps)
    for seed in range(4):
        out, _ = apply_recipe(astronaut, recipe, rng(seed))
        gen, expected = rng(seed), astronaut
        for step in steps:
            if gen.random() < step.probability:
                expected = OPS[step.op].function(expected, sample_params(step, "edge", gen), gen)
        assert out.tobytes() == expected.tobytes()


@pytest.mark.parametrize("name", sorted(OPS))
def test_op_gives_the_same_bytes_wherever_the_image_sits_in_memory(name, astronaut):
    # Vector code paths may differ with alignment; the output must not.
    image = astronaut[:61, :59].copy()
    shifted = np.empty(image.size + 1, np.uint8)[1:].reshape(image.shape)
    shifted[...] = image
    params = example_params(name)
    assert OPS[name].function(image, params, rng(4)).tobytes() == OPS[name].function(shifted, params, rng(4)).tobytes()
