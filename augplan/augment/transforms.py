"""The transform catalogue: pure functions ``image, params, rng -> image``, on OpenCV.

Every op function takes a uint8 sRGB image -- RGB ``(H, W, 3)`` or grey
``(H, W)`` or ``(H, W, 1)`` -- a dict of concrete parameter values and a
``numpy.random.Generator``, and returns a new array of the same shape and
dtype; the input is never modified. Float images are refused with a message
that says how to convert them.

The pixel work is done by OpenCV (``opencv-python-headless``), whose
primitives are the fastest on a CPU: each geometric op is one
``cv2.warpAffine`` (bilinear, inverse map); tone ops are one ``cv2.LUT``
with a 256-entry table built per call; hue goes through ``cv2.cvtColor`` to
HSV and back in float32; blur is OpenCV's Gaussian kernel
(``cv2.getGaussianKernel``) applied separably by ``cv2.sepFilter2D``. Colour
maths comes from :mod:`augplan.imaging.colour`. Consecutive geometric ops are not
merged into one warp: each op reads its own input's border (the fill of a
rotation after a shift comes from the shifted image), and merging would change
that, so every op warps once.

Op semantics
------------
flip
    ``axis``: ``"horizontal"`` mirrors left-right, ``"vertical"`` top-bottom.
rotate
    ``degrees``: counterclockwise as the image is displayed (rows downwards).
zoom
    ``factor``: content scales about the centre; ``> 1`` enlarges it; the
    output keeps its size.
shift
    ``fraction``: ``(fx, fy)`` moves content right by ``fx * width`` and down
    by ``fy * height``; a scalar moves both ways by the same fraction.
    :func:`sample_params` draws ``fx`` and ``fy`` independently from the
    transform's range.
brightness
    ``factor`` multiplies linear-light intensity (an exposure change).
contrast
    ``factor`` scales each channel's linear-light deviation from the image's
    mean BT.709 relative luminance ``m``: ``L' = m + factor * (L - m)``. Mean
    luminance is kept (up to clipping), so contrast does not move brightness.
saturation
    ``factor`` blends each pixel with the grey of its own relative luminance
    ``Y`` in linear light: ``L' = Y + factor * (L - Y)``; 0 gives greyscale.
hue
    ``degrees`` rotates the HSV hue angle; +120 takes pure red to pure green.
blur
    ``sigma``: Gaussian standard deviation in pixels; 0 is the identity. The
    kernel is truncated at 4 sigma: radius ``int(4 * sigma + 0.5)`` pixels,
    so ``2 * radius + 1`` taps (as scipy.ndimage and scikit-image truncate).
    Edges are extended by half-sample symmetric reflection (``c b a | a b c``).
noise
    ``sigma``: additive Gaussian noise on the 8-bit codes, standard deviation
    as a fraction of full scale (255), drawn from ``rng``.

On grey images hue and saturation are the identity (a grey pixel has no hue
and is its own luminance); the other ops act on the one channel.

Geometric ops (rotate, zoom, shift) take ``fill`` in ``{"reflect",
"constant", "edge"}`` for pixels that come from outside the image, mapped to
OpenCV border modes (`FILLS`):

- ``reflect``: ``cv2.BORDER_REFLECT_101``, reflection about the edge pixel
  without repeating it (``d c b | a b c d``; scipy.ndimage's ``"mirror"``,
  scikit-image's ``"reflect"``);
- ``edge``: ``cv2.BORDER_REPLICATE``, the nearest edge pixel;
- ``constant``: ``cv2.BORDER_CONSTANT`` with black; the bilinear blend runs
  across the border into black (scipy.ndimage's ``"grid-constant"``).

References
----------
.. [1] IEC 61966-2-1:1999, the sRGB transfer function (via augplan.imaging.colour).
.. [2] ITU-R BT.709-6, item 3.2, relative luminance coefficients.
.. [3] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978 (HSV).
.. [4] OpenCV, "Geometric Image Transformations" (warpAffine) and "Image
   Filtering" (getGaussianKernel, sepFilter2D) reference manuals.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, NamedTuple

import cv2
import numpy as np

from augplan.imaging.colour import (
    BT709_COEFFICIENTS,
    SRGB_TO_LINEAR_LUT,
    check_image,
    check_rgb_batch,
    encode_linear_image,
    linear_tone_lut,
    mean_relative_luminance,
)
from augplan.recipe.ops import FILLS as RECIPE_FILLS, OP_TABLE

__all__ = [
    "FILLS",
    "OpSpec",
    "OPS",
    "flip",
    "rotate",
    "zoom",
    "shift",
    "brightness",
    "contrast",
    "saturation",
    "hue",
    "blur",
    "noise",
    "sample_params",
    "params_at",
    "magnitude_grid",
    "apply_recipe",
    "compile_recipe",
    "run_plan",
    "apply_op_batch",
    "augment_batch",
]

# Recipe fill name -> OpenCV border mode for geometric ops.
_BORDERS = {"reflect": cv2.BORDER_REFLECT_101, "constant": cv2.BORDER_CONSTANT, "edge": cv2.BORDER_REPLICATE}
FILLS = {fill: _BORDERS[fill] for fill in RECIPE_FILLS}

_INVERSE_BILINEAR = cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP
# Blur kernels reach 4 sigma each side, as scipy.ndimage's default truncate.
_BLUR_TRUNCATE = 4.0


@dataclass(frozen=True)
class OpSpec:
    """What the rest of augplan needs to know about one op.

    Attributes
    ----------
    name : str
        Op name as written in a recipe.
    function : callable
        ``(image, params, rng) -> image``: checks its image and params.
    kernel : callable
        ``(image, value, border, rng) -> image`` on a checked 2-D or
        ``(H, W, 3)`` image with a concrete magnitude ``value`` (flip: the
        axis name; shift: ``(fx, fy)``) and an OpenCV border mode (geometric
        ops); no checks, for the recipe runner's fast path.
    magnitude, identity, log_scale, geometric
        Copied from the op table, `augplan.recipe.ops.OpRule`.
    """

    name: str
    function: Callable
    kernel: Callable
    magnitude: str | None
    identity: float | None
    log_scale: bool
    geometric: bool


# --------------------------------------------------------------------------
# parameter and image checks


def _number(params, key, op, *, minimum=None, exclusive=False):
    if not isinstance(params, dict) and not hasattr(params, "get"):
        raise ValueError(f"{op}: params must be a mapping; got {type(params).__name__}")
    if key not in params:
        raise ValueError(f"{op}: params must contain {key!r}; got keys {sorted(params)}")
    value = params[key]
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{op}: {key!r} must be a number; got {value!r}") from None
    if not math.isfinite(value):
        raise ValueError(f"{op}: {key!r} must be finite; got {value!r}")
    if minimum is not None:
        if exclusive and value <= minimum:
            raise ValueError(f"{op}: {key!r} must be greater than {minimum}; got {value!r}")
        if not exclusive and value < minimum:
            raise ValueError(f"{op}: {key!r} must be at least {minimum}; got {value!r}")
    return value


def _border(params, op):
    fill = params.get("fill", "reflect")
    if fill not in FILLS:
        raise ValueError(f"{op}: 'fill' must be one of {sorted(FILLS)}; got {fill!r}")
    return FILLS[fill]


def _planes(image):
    """The checked image as OpenCV takes it: ``(H, W, 1)`` becomes ``(H, W)``."""
    check_image(image)
    return image[..., 0] if image.ndim == 3 and image.shape[2] == 1 else image


# Lower bound of each op's magnitude: (minimum, exclusive); others are any number.
_MINIMUM = {"zoom": (0.0, True), "brightness": (0.0, False), "contrast": (0.0, False),
            "saturation": (0.0, False), "blur": (0.0, False), "noise": (0.0, False)}


def _concrete(spec, params):
    """Check an op's params; return the value and border its kernel takes."""
    border = _border(params, spec.name) if spec.geometric else None
    if spec.name == "flip":
        axis = params.get("axis") if hasattr(params, "get") else None
        if axis not in _FLIP_CODES:
            raise ValueError(f"flip: 'axis' must be 'horizontal' or 'vertical'; got {axis!r}")
        return axis, border
    if spec.name == "shift":
        return _shift_fractions(params), border
    minimum, exclusive = _MINIMUM.get(spec.name, (None, False))
    return _number(params, spec.magnitude, spec.name, minimum=minimum, exclusive=exclusive), border


def _run_public(name, image, params, rng):
    """An op function's body: check params and image, run the kernel, keep the shape."""
    spec = OPS[name]
    value, border = _concrete(spec, params)
    check_image(image)
    if image.ndim == 3 and image.shape[2] == 1:
        return spec.kernel(image[..., 0], value, border, rng)[..., None]
    return spec.kernel(image, value, border, rng)


# --------------------------------------------------------------------------
# geometric ops


def _warp(image, matrix, translation, border):
    """One bilinear affine warp about the centre (``cv2.warpAffine``).

    ``matrix`` maps output (row, col) offsets from the centre to input
    offsets; ``translation`` is added to the input position (pixels, row then
    col). Pixel centres sit at integer coordinates, as in scipy.ndimage.
    """
    height, width = image.shape[:2]
    (row_row, row_col), (col_row, col_col) = matrix
    centre_row, centre_col = (height - 1) / 2.0, (width - 1) / 2.0
    row_offset = centre_row - row_row * centre_row - row_col * centre_col + translation[0]
    col_offset = centre_col - col_row * centre_row - col_col * centre_col + translation[1]
    # OpenCV's map is in (x, y) = (col, row): source x from destination (x, y).
    inverse = np.array([[col_col, col_row, col_offset], [row_col, row_row, row_offset]])
    if image.ndim == 2:
        return cv2.warpAffine(image, inverse, (width, height), flags=_INVERSE_BILINEAR,
                              borderMode=border, borderValue=0)
    # OpenCV 5's bilinear warp has a vector path for 4 channels, not 3: an
    # RGB image warped as RGBA (channels are independent, the same bytes
    # come out) took 136 us instead of 208 us at 224 x 224, conversions
    # included (fastest of 40 rounds each on a shared 2-core machine).
    four = cv2.warpAffine(cv2.cvtColor(image, cv2.COLOR_RGB2RGBA), inverse, (width, height),
                          flags=_INVERSE_BILINEAR, borderMode=border, borderValue=0)
    return cv2.cvtColor(four, cv2.COLOR_RGBA2RGB)


_FLIP_CODES = {"horizontal": 1, "vertical": 0}


def _flip_kernel(image, axis, border=None, rng=None):
    return cv2.flip(image, _FLIP_CODES[axis])


def _rotate_kernel(image, degrees, border, rng=None):
    if degrees % 360.0 == 0.0:
        return image.copy()
    theta = math.radians(degrees)
    cos, sin = math.cos(theta), math.sin(theta)
    # Inverse map in (row, col) with rows pointing down: a counterclockwise
    # turn of the content samples the input at R(-theta) of the output.
    return _warp(image, ((cos, sin), (-sin, cos)), (0.0, 0.0), border)


def _zoom_kernel(image, factor, border, rng=None):
    if factor == 1.0:
        return image.copy()
    return _warp(image, ((1.0 / factor, 0.0), (0.0, 1.0 / factor)), (0.0, 0.0), border)


def _shift_kernel(image, fraction, border, rng=None):
    fx, fy = fraction
    if fx == 0.0 and fy == 0.0:
        return image.copy()
    height, width = image.shape[:2]
    return _warp(image, ((1.0, 0.0), (0.0, 1.0)), (-fy * height, -fx * width), border)


def flip(image, params, rng=None):
    """Mirror the image: ``axis`` is ``"horizontal"`` (left-right) or ``"vertical"`` (``cv2.flip``)."""
    return _run_public("flip", image, params, rng)


def rotate(image, params, rng=None):
    """Rotate about the centre by ``degrees``, counterclockwise as displayed.

    One ``cv2.warpAffine`` (bilinear); ``params["fill"]`` picks the border
    mode (see `FILLS`).
    """
    return _run_public("rotate", image, params, rng)


def zoom(image, params, rng=None):
    """Scale content about the centre by ``factor`` (> 1 enlarges); size is kept.

    One ``cv2.warpAffine`` (bilinear); ``params["fill"]`` picks the border
    mode (see `FILLS`).
    """
    return _run_public("zoom", image, params, rng)


def _shift_fractions(params):
    if not hasattr(params, "get") or "fraction" not in params:
        raise ValueError("shift: params must contain 'fraction' (a number or an (x, y) pair)")
    value = params["fraction"]
    if np.ndim(value) == 0:
        fx = fy = _number(params, "fraction", "shift")
    else:
        if np.shape(value) != (2,):
            raise ValueError(f"shift: 'fraction' must be a number or an (x, y) pair; got {value!r}")
        fx = _number({"x": value[0]}, "x", "shift")
        fy = _number({"y": value[1]}, "y", "shift")
    return fx, fy


def shift(image, params, rng=None):
    """Move content right by ``fx * width`` and down by ``fy * height``.

    ``params["fraction"]`` is ``(fx, fy)`` or one number used for both. One
    ``cv2.warpAffine`` (bilinear); ``params["fill"]`` picks the border mode
    (see `FILLS`).
    """
    return _run_public("shift", image, params, rng)


# --------------------------------------------------------------------------
# tone and colour ops


def _brightness_kernel(image, factor, border=None, rng=None):
    return cv2.LUT(image, linear_tone_lut(factor))


def _contrast_kernel(image, factor, border=None, rng=None):
    if image.ndim == 2:
        # A grey pixel's relative luminance is its decoded value (the BT.709
        # weights sum to 1).
        counts = cv2.calcHist([image], [0], None, [256], [0, 256]).ravel()
        mean = float(counts @ SRGB_TO_LINEAR_LUT.astype(np.float64)) / image.size
    else:
        mean = mean_relative_luminance(image)
    return cv2.LUT(image, linear_tone_lut(factor, (1.0 - factor) * mean))


def _saturation_kernel(image, factor, border=None, rng=None):
    if factor == 1.0 or image.ndim == 2:
        return image.copy()
    linear = cv2.LUT(image, SRGB_TO_LINEAR_LUT)
    grey = cv2.transform(linear, _BT709_ROW)
    mixed = cv2.addWeighted(linear, factor, cv2.merge((grey, grey, grey)), 1.0 - factor, 0.0)
    return encode_linear_image(mixed)


_BT709_ROW = BT709_COEFFICIENTS.reshape(1, 3)


def _hue_kernel(image, degrees, border=None, rng=None):
    turn = degrees % 360.0
    if turn == 0.0 or image.ndim == 2:
        return image.copy()
    # OpenCV's float HSV is Smith's hexcone with hue in degrees; it needs no
    # scaling of the codes (hue and saturation are ratios, value is the
    # maximum code). The shifted hue lies in [0, 720), which the way back
    # wraps. Every step after the float copy writes into that copy: one
    # float32 buffer per call instead of three. Integer and table-driven
    # paths (hue rotation keeps each pixel's largest and smallest channel)
    # were slower in numpy and in per-plane OpenCV calls; see
    # benchmarks/bench_hue.py for the figures.
    work = image.astype(np.float32)
    cv2.cvtColor(work, cv2.COLOR_RGB2HSV, dst=work)
    cv2.add(work, (turn, 0.0, 0.0, 0.0), dst=work)
    cv2.cvtColor(work, cv2.COLOR_HSV2RGB, dst=work)
    return cv2.convertScaleAbs(work)


def _blur_kernel(image, sigma, border=None, rng=None):
    if sigma == 0.0:
        return image.copy()
    radius = int(_BLUR_TRUNCATE * sigma + 0.5)
    taps = cv2.getGaussianKernel(2 * radius + 1, sigma, ktype=cv2.CV_32F)
    # sepFilter2D sums in float and rounds once; GaussianBlur's 8-bit path
    # uses fixed-point weights that strayed up to 1.6 codes from
    # scikit-image's float result at sigma 1.5.
    return cv2.sepFilter2D(image, -1, taps, taps, borderType=cv2.BORDER_REFLECT)


def _noise_kernel(image, sigma, border, rng):
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"noise: rng must be a numpy.random.Generator; got {type(rng).__name__}")
    # One standard normal per channel value, always, so the stream advances
    # the same way whatever sigma is.
    values = rng.standard_normal(image.shape, dtype=np.float32)
    values *= np.float32(sigma * 255.0)
    # cv2.add rounds to the nearest code and saturates to [0, 255].
    return cv2.add(image, values, dtype=cv2.CV_8U)


def brightness(image, params, rng=None):
    """Multiply linear-light intensity by ``factor`` (decode, scale, re-encode).

    One ``cv2.LUT`` with a 256-entry table built per call.

    References
    ----------
    .. [1] IEC 61966-2-1:1999 (sRGB decoding and encoding).
    """
    return _run_public("brightness", image, params, rng)


def contrast(image, params, rng=None):
    """Scale linear-light deviations from the image's mean relative luminance.

    ``L' = m + factor * (L - m)`` per channel, ``m`` the mean BT.709 relative
    luminance of the image; applied as one 256-entry table (``cv2.LUT``).

    References
    ----------
    .. [1] ITU-R BT.709-6 item 3.2; IEC 61966-2-1:1999.
    """
    return _run_public("contrast", image, params, rng)


def saturation(image, params, rng=None):
    """Blend each pixel with the grey of its own relative luminance, in linear light.

    ``L' = Y + factor * (L - Y)``: 0 gives greyscale, 1 the identity, > 1
    more saturated colour (clipped at the gamut edge). Decoded with a float
    ``cv2.LUT``, blended by ``cv2.transform`` and ``cv2.addWeighted``,
    re-encoded through `augplan.imaging.colour.encode_linear_image`. Grey images come
    back unchanged.

    References
    ----------
    .. [1] ITU-R BT.709-6 item 3.2; IEC 61966-2-1:1999.
    """
    return _run_public("saturation", image, params, rng)


def hue(image, params, rng=None):
    """Rotate the HSV hue angle by ``degrees`` (+120 takes red to green).

    ``cv2.cvtColor`` to float32 HSV (hexcone model [1]_), the hue channel
    shifted, and back; rounded to the nearest code. Grey images come back
    unchanged.

    References
    ----------
    .. [1] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978.
    """
    return _run_public("hue", image, params, rng)


def blur(image, params, rng=None):
    """Gaussian blur with standard deviation ``sigma`` pixels (0 = identity).

    OpenCV's Gaussian kernel truncated at 4 sigma (radius
    ``int(4 * sigma + 0.5)``), applied separably (``cv2.sepFilter2D``, float
    sums, one rounding); edges extended by half-sample symmetric reflection
    (``cv2.BORDER_REFLECT``).
    """
    return _run_public("blur", image, params, rng)


def noise(image, params, rng):
    """Add Gaussian noise with standard deviation ``sigma`` of full scale.

    The noise is drawn from ``rng`` (one standard normal per channel value,
    always, so the stream advances the same way whatever ``sigma`` is).
    """
    return _run_public("noise", image, params, rng)


# The pixel work of each op; every other fact comes from the op table (augplan.recipe.ops).
_IMPLEMENTATIONS = {
    "flip": (flip, _flip_kernel),
    "rotate": (rotate, _rotate_kernel),
    "zoom": (zoom, _zoom_kernel),
    "shift": (shift, _shift_kernel),
    "brightness": (brightness, _brightness_kernel),
    "contrast": (contrast, _contrast_kernel),
    "saturation": (saturation, _saturation_kernel),
    "hue": (hue, _hue_kernel),
    "blur": (blur, _blur_kernel),
    "noise": (noise, _noise_kernel),
}
OPS: dict[str, OpSpec] = {
    name: OpSpec(name, *_IMPLEMENTATIONS[name], rule.magnitude, rule.identity, log_scale=rule.log_scale,
                 geometric=rule.geometric)
    for name, rule in OP_TABLE.items()
}


# --------------------------------------------------------------------------
# sampling and recipes


def _spec(transform):
    try:
        return OPS[transform.op]
    except KeyError:
        raise ValueError(f"unknown op {transform.op!r}; known ops: {sorted(OPS)}") from None


def _range(transform, spec):
    value = transform.params[spec.magnitude]
    if np.ndim(value) == 0:
        low = high = float(value)
    else:
        low, high = (float(v) for v in value)
    if low > high:
        raise ValueError(f"{spec.name}: {spec.magnitude} range must be (low, high); got {value!r}")
    if spec.log_scale and low < 0:
        raise ValueError(f"{spec.name}: {spec.magnitude} must not be negative; got {value!r}")
    return low, high


def _log_spaced(spec, low):
    # A range reaching 0 (saturation down to greyscale) has no log-space
    # form; such ranges are sampled and gridded uniformly instead.
    return spec.log_scale and low > 0


def _draw(low, high, log_scale, rng):
    # low + (high - low) * random() is the very value rng.uniform(low, high)
    # returns (bit for bit), without its per-call overhead.
    if low == high:
        return low
    if log_scale:
        low, high = math.log(low), math.log(high)
        return math.exp(low + (high - low) * rng.random())
    return low + (high - low) * rng.random()


def _base_params(transform, spec, fill):
    params = {k: v for k, v in transform.params.items() if k != spec.magnitude}
    if spec.geometric:
        if fill not in FILLS:
            raise ValueError(f"fill must be one of {sorted(FILLS)}; got {fill!r}")
        params["fill"] = fill
    return params


def sample_params(transform, fill, rng):
    """Draw concrete parameters for one application of ``transform``.

    Parameters
    ----------
    transform : augplan.recipe.Transform
        Its ``params`` hold the magnitude range as ``(low, high)``.
    fill : {"reflect", "constant", "edge"}
        The recipe's fill, added for geometric ops.
    rng : numpy.random.Generator

    Returns
    -------
    dict
        Concrete params for ``OPS[transform.op].function``. Multiplicative
        factors (zoom, brightness, contrast, saturation) are drawn uniformly
        in log space (uniformly if the range starts at 0), others
        uniformly; a degenerate range ``(v, v)`` gives
        ``v``. Shift gets ``"fraction": (fx, fy)``, two independent draws.
    """
    spec = _spec(transform)
    params = _base_params(transform, spec, fill)
    if spec.magnitude is None:
        return params
    low, high = _range(transform, spec)
    if spec.name == "shift":
        params["fraction"] = (_draw(low, high, False, rng), _draw(low, high, False, rng))
    else:
        params[spec.magnitude] = _draw(low, high, _log_spaced(spec, low), rng)
    return params


def params_at(transform, magnitude, fill):
    """Concrete params for ``transform`` at a chosen ``magnitude``.

    For shift, the one value applies to both x and y. For flip, ``magnitude``
    is ignored.
    """
    spec = _spec(transform)
    params = _base_params(transform, spec, fill)
    if spec.magnitude is not None:
        params[spec.magnitude] = float(magnitude)
    return params


def magnitude_grid(transform, n):
    """``n`` magnitudes spread over the transform's range, both ends included.

    Parameters
    ----------
    transform : augplan.recipe.Transform
    n : int
        Number of values, at least 2.

    Returns
    -------
    numpy.ndarray of float64
        Ascending; log-spaced for log-scale ops (linear if the range starts
        at 0); one value for a degenerate
        range; empty for flip (no magnitude).
    """
    spec = _spec(transform)
    if spec.magnitude is None:
        return np.empty(0)
    if int(n) != n or n < 2:
        raise ValueError(f"n must be an integer of at least 2; got {n!r}")
    low, high = _range(transform, spec)
    if low == high:
        return np.array([low])
    if _log_spaced(spec, low):
        grid = np.geomspace(low, high, int(n))
    else:
        grid = np.linspace(low, high, int(n))
    grid[0], grid[-1] = low, high
    return grid


class _Step(NamedTuple):
    """One transform of a recipe, checked and ready to run (see `compile_recipe`).

    A named tuple, so `run_plan` unpacks a step in one go: the loop's own
    cost is part of every augmenter call.
    """

    kernel: Callable
    probability: float
    scoped: bool
    only: frozenset | None
    exclude: frozenset | None
    relabel: dict | None
    kind: str               # "fixed" (flip's axis), "scalar" or "pair" (shift)
    value: object           # flip's axis
    low: float              # the range; its logarithms for log-scale draws
    span: float             # high - low (in log space for log-scale draws)
    log_scale: bool
    border: int | None


def _compile_step(transform, fill):
    spec = _spec(transform)
    border = None
    if spec.geometric:
        if fill not in FILLS:
            raise ValueError(f"fill must be one of {sorted(FILLS)}; got {fill!r}")
        border = FILLS[fill]
    if spec.magnitude is None:
        axis = transform.params.get("axis", "horizontal")
        if axis not in ("horizontal", "vertical"):
            raise ValueError(f"flip: 'axis' must be 'horizontal' or 'vertical'; got {axis!r}")
        kind, value, low, high, log_scale = "fixed", axis, 0.0, 0.0, False
    else:
        low, high = _range(transform, spec)
        if not (math.isfinite(low) and math.isfinite(high)):
            raise ValueError(f"{spec.name}: {spec.magnitude} must be finite; got {(low, high)!r}")
        if spec.name == "zoom" and low <= 0:
            raise ValueError(f"zoom: factor must be greater than 0; got {(low, high)!r}")
        if spec.name in ("blur", "noise") and low < 0:
            raise ValueError(f"{spec.name}: sigma must be at least 0; got {(low, high)!r}")
        kind = "pair" if spec.name == "shift" else "scalar"
        value, log_scale = None, _log_spaced(spec, low)
    only = None if transform.only is None else frozenset(transform.only)
    exclude = None if transform.exclude is None else frozenset(transform.exclude)
    relabel = dict(transform.relabel) if transform.relabel else None
    if log_scale and low != high:
        low, high = math.log(low), math.log(high)
    else:
        log_scale = False
    return _Step(spec.kernel, float(transform.probability), only is not None or exclude is not None,
                 only, exclude, relabel, kind, value, low, high - low, log_scale, border)


def compile_recipe(recipe):
    """Check a recipe's transforms once and return the plan `run_plan` executes.

    Parameters
    ----------
    recipe : augplan.recipe.Recipe

    Returns
    -------
    tuple
        One checked step per transform. The plan holds plain values and
        module-level functions, so it pickles with the object that keeps it.

    Raises
    ------
    ValueError
        An unknown op, a bad range or fill.
    """
    return tuple(_compile_step(transform, recipe.fill) for transform in recipe.transforms)


def run_plan(image, plan, rng, label=None):
    """Apply a compiled recipe to one checked image (see `apply_recipe`).

    ``image`` must already be a 2-D or ``(H, W, 3)`` uint8 array (a grey
    ``(H, W, 1)`` image is passed as its 2-D plane); nothing is checked here,
    which keeps the per-call overhead to the draws themselves.
    """
    random = rng.random
    for kernel, probability, scoped, only, exclude, relabel, kind, value, low, span, log_scale, border in plan:
        if scoped:
            if label is None:
                continue
            if only is not None and label not in only:
                continue
            if exclude is not None and label in exclude:
                continue
        if random() >= probability:
            continue
        # The draws of `_draw`, inlined: low + span * random() is what
        # rng.uniform returns, bit for bit (a degenerate range draws nothing).
        if kind == "scalar":
            if span == 0.0:
                value = low
            elif log_scale:
                value = math.exp(low + span * random())
            else:
                value = low + span * random()
        elif kind == "pair":
            value = (low, low) if span == 0.0 else (low + span * random(), low + span * random())
        image = kernel(image, value, border, rng)
        if relabel is not None and label in relabel:
            label = relabel[label]
    return image, label


# Plans of recently applied recipes, keyed by identity (a recipe is immutable;
# the stored recipe keeps its id from being reused while the entry lives).
_PLANS = {}
_PLANS_KEPT = 16


def _plan_of(recipe):
    entry = _PLANS.get(id(recipe))
    if entry is not None and entry[0] is recipe:
        return entry[1]
    plan = compile_recipe(recipe)
    if len(_PLANS) >= _PLANS_KEPT:
        _PLANS.clear()
    _PLANS[id(recipe)] = (recipe, plan)
    return plan


def apply_recipe(image, recipe, rng, label=None):
    """Apply a recipe's transforms in order to one image.

    Parameters
    ----------
    image : numpy.ndarray of uint8, shape (H, W, 3), (H, W, 1) or (H, W)
    recipe : augplan.recipe.Recipe
    rng : numpy.random.Generator
    label : str or None
        The image's class. Transforms whose scope excludes it are skipped
        (with None only unscoped transforms apply).

    Returns
    -------
    (numpy.ndarray, str or None)
        The augmented image (same shape and dtype) and its label after any
        ``relabel``.

    Notes
    -----
    For each applicable transform one ``rng.random()`` is drawn and the
    transform runs when it is below ``probability``; then its magnitude is
    drawn (shift: x then y) and the op is called with the same ``rng``. The
    draws are those of `sample_params`, so both paths give the same stream.
    """
    plane = _planes(image)
    out, label = run_plan(plane, _plan_of(recipe), rng, label)
    if out is plane:
        out = plane.copy()
    return out.reshape(image.shape), label


# Ops whose result at a pixel depends on that pixel and the params alone:
# a batch goes through them as one tall image, in one OpenCV call.
_POINTWISE = frozenset({"brightness", "saturation", "hue", "noise"})


def _check_batch(images):
    return check_rgb_batch(images)


def apply_op_batch(images, op, params, rng):
    """One op with the same params on every image of a batch.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)
    op : str
        A name in `OPS`.
    params : dict
        Concrete params, as for ``OPS[op].function``.
    rng : numpy.random.Generator

    Returns
    -------
    numpy.ndarray of uint8, shape (N, H, W, 3)
        Byte for byte what calling ``OPS[op].function`` on each image in
        turn with ``rng`` gives (noise draws image after image either way).

    Notes
    -----
    The params are checked once. Pointwise ops (brightness, saturation, hue,
    noise) run once on the batch seen as one ``(N * H, W, 3)`` image; flip is
    one numpy copy; the others run image by image.
    """
    _check_batch(images)
    if op not in OPS:
        raise ValueError(f"unknown op {op!r}; known ops: {sorted(OPS)}")
    spec = OPS[op]
    value, border = _concrete(spec, params)
    if spec.name == "flip":
        return np.ascontiguousarray(images[:, :, ::-1] if value == "horizontal" else images[:, ::-1])
    if spec.name in _POINTWISE and len(images):
        n, height, width, channels = images.shape
        return spec.kernel(images.reshape(n * height, width, channels), value, border, rng).reshape(images.shape)
    out = np.empty_like(images)
    for index, image in enumerate(images):
        out[index] = spec.kernel(image, value, border, rng)
    return out


def augment_batch(images, recipe, generators, labels, copies=1):
    """``copies`` draws of a recipe for each image of a batch.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)
    recipe : augplan.recipe.Recipe
    generators : sequence of numpy.random.Generator, length N
        Image ``i``'s draws all come from ``generators[i]``, one after the other.
    labels : sequence of length N
        Class of each image (None: only unscoped transforms apply).
    copies : int, default 1

    Returns
    -------
    (numpy.ndarray, list)
        ``(N * copies, H, W, 3)`` draws, image ``i``'s copy ``c`` at row
        ``i * copies + c``, and their labels after relabels: byte for byte
        what `apply_recipe` gives called in that order.
    """
    _check_batch(images)
    if len(generators) != len(images) or len(labels) != len(images):
        raise ValueError(f"need one generator and one label per image: {len(images)} images, "
                         f"{len(generators)} generators, {len(labels)} labels")
    plan = _plan_of(recipe)
    out = np.empty((len(images) * copies,) + images.shape[1:], dtype=np.uint8)
    new_labels = []
    row = 0
    for image, rng, label in zip(images, generators, labels):
        for _ in range(copies):
            out[row], new_label = run_plan(image, plan, rng, label)
            new_labels.append(new_label)
            row += 1
    return out, new_labels
