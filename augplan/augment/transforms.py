"""The transform catalogue: pure functions ``image, params, rng -> image``.

Every op function takes an ``(H, W, 3)`` uint8 sRGB image, a dict of concrete
parameter values and a ``numpy.random.Generator``, and returns a new array of
the same shape and dtype; the input is never modified. Tone ops (brightness,
contrast) are 256-entry lookup tables built per call; geometric ops are one
bilinear affine warp about the image centre (axis-aligned ones, zoom and
shift, are done one axis at a time); colour maths comes from
:mod:`augplan.colour`.

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
    ``sigma``: Gaussian standard deviation in pixels; 0 is the identity.
noise
    ``sigma``: additive Gaussian noise on the 8-bit codes, standard deviation
    as a fraction of full scale (255), drawn from ``rng``.

Geometric ops (rotate, zoom, shift) take ``fill`` in ``{"reflect",
"constant", "edge"}`` for pixels that come from outside the image: half-sample
symmetric reflection (``d c b a | a b c d``), black, or the nearest edge pixel.

References
----------
.. [1] IEC 61966-2-1:1999, the sRGB transfer function (via augplan.colour).
.. [2] ITU-R BT.709-6, item 3.2, relative luminance coefficients.
.. [3] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978 (HSV).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from PIL import Image
from scipy import ndimage

from augplan.imaging.colour import (
    SRGB_TO_LINEAR_LUT,
    BT709_COEFFICIENTS,
    check_rgb_image,
    encode_linear_to_uint8,
    hsv_to_rgb,
    linear_tone_lut,
    mean_relative_luminance,
    rgb_to_hsv,
)

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
]

# Recipe fill name -> scipy.ndimage boundary mode. "grid-constant" keeps the
# bilinear blend going across the border into black, as scikit-image does.
FILLS = {"reflect": "reflect", "constant": "grid-constant", "edge": "nearest"}


@dataclass(frozen=True)
class OpSpec:
    """What the rest of augplan needs to know about one op.

    Attributes
    ----------
    name : str
        Op name as written in a recipe.
    function : callable
        ``(image, params, rng) -> image``.
    magnitude : str or None
        The range field (``"degrees"``, ``"factor"``, ``"fraction"``,
        ``"sigma"``); None for flip.
    identity : float or None
        Magnitude that leaves the image unchanged (0 or 1); None for flip.
    log_scale : bool
        Ranges are sampled uniformly in log space (multiplicative factors).
    geometric : bool
        Uses the recipe's ``fill``.
    """

    name: str
    function: Callable
    magnitude: str | None
    identity: float | None
    log_scale: bool
    geometric: bool


# --------------------------------------------------------------------------
# parameter checks


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


def _fill_mode(params, op):
    fill = params.get("fill", "reflect")
    if fill not in FILLS:
        raise ValueError(f"{op}: 'fill' must be one of {sorted(FILLS)}; got {fill!r}")
    return FILLS[fill]


# --------------------------------------------------------------------------
# geometric ops


def _fold_indices(index, length, mode):
    """Map integer sample positions outside ``[0, length)`` inside, per ``mode``.

    Returns the folded indices and a mask of positions that read real pixels
    (all True except in ``"grid-constant"`` mode, where outside reads are 0).
    """
    if mode == "reflect":  # half-sample symmetric: d c b a | a b c d
        index = index % (2 * length)
        return np.where(index >= length, 2 * length - 1 - index, index), np.ones(index.shape, bool)
    inside = (index >= 0) & (index < length)
    return np.clip(index, 0, length - 1), (inside if mode == "grid-constant" else np.ones(index.shape, bool))


def _linear_taps(scale, offset, n_out, n_in, mode):
    """Two source indices and their weights per output position along one axis.

    Source position ``scale * i + offset`` for output index ``i``; weights of
    reads from outside the image are 0 in ``"grid-constant"`` mode.
    """
    position = scale * np.arange(n_out, dtype=np.float64) + offset
    floor = np.floor(position)
    upper_weight = (position - floor).astype(np.float32)
    floor = floor.astype(np.intp)
    lower, lower_real = _fold_indices(floor, n_in, mode)
    upper, upper_real = _fold_indices(floor + 1, n_in, mode)
    lower_weight = (1.0 - upper_weight) * lower_real
    upper_weight = upper_weight * upper_real
    return lower, upper, lower_weight, upper_weight


def _separable_warp(image, scale, offset, mode):
    """Bilinear warp for an axis-aligned map (scale and shift per axis).

    The same bilinear interpolation as the general warp, done one axis at a
    time: rows are blended, then columns. Zoom and shift take this path;
    at 64 x 64 it measured about three times faster than per-channel
    ``scipy.ndimage.affine_transform`` (0.13 ms against 0.46 ms per image).
    """
    height, width = image.shape[:2]
    r0, r1, wr0, wr1 = _linear_taps(scale[0], offset[0], height, height, mode)
    c0, c1, wc0, wc1 = _linear_taps(scale[1], offset[1], width, width, mode)
    rows = image[r0] * wr0[:, None, None]
    rows += image[r1] * wr1[:, None, None]
    out = rows[:, c0] * wc0[None, :, None]
    out += rows[:, c1] * wc1[None, :, None]
    # Convex weights keep values in [0, 255]; adding 0.5 then truncating rounds.
    out += 0.5
    return out.astype(np.uint8)


def _warp(image, matrix, translation, mode):
    """One bilinear affine warp about the centre, uint8 in and out.

    ``matrix`` maps output (row, col) offsets from the centre to input offsets;
    ``translation`` is added to the input position (in pixels, row then col).
    """
    height, width = image.shape[:2]
    centre = np.array([(height - 1) / 2.0, (width - 1) / 2.0])
    offset = centre - matrix @ centre + np.asarray(translation, dtype=np.float64)
    if matrix[0, 1] == 0.0 and matrix[1, 0] == 0.0:
        return _separable_warp(image, (matrix[0, 0], matrix[1, 1]), offset, mode)
    return _general_warp(image, matrix, offset, mode)


# np.pad modes that extend an image as each fill mode reads outside it.
_PAD_MODES = {"reflect": "symmetric", "nearest": "edge", "grid-constant": "constant"}


def _general_warp(image, matrix, offset, mode):
    """Bilinear warp of a full affine map (rotation) with Pillow's float resampler.

    Pillow only fills outside the image with a constant, so the image is first
    padded (as ``mode`` extends it) far enough that every bilinear read lands
    inside; each channel is then warped as a float32 plane and rounded. The
    result equals ``scipy.ndimage.affine_transform`` (order 1, same mode) up to
    rounding ties, and at 224 x 224 it measured 2.5 times faster (2.0 ms against
    5.0 ms per image; equal at 64 x 64).
    """
    height, width = image.shape[:2]
    corners = np.array([[0, 0], [0, width - 1], [height - 1, 0], [height - 1, width - 1]], dtype=np.float64)
    reads = corners @ matrix.T + offset
    # Two more pixels than the farthest read: a bilinear read touches the next pixel.
    pad_rows = int(max(0.0, -np.floor(reads[:, 0].min()), np.ceil(reads[:, 0].max()) - (height - 1))) + 2
    pad_cols = int(max(0.0, -np.floor(reads[:, 1].min()), np.ceil(reads[:, 1].max()) - (width - 1))) + 2
    if mode == "grid-constant":  # beyond a 2-pixel black border Pillow's own fill (0) is the same
        pad_rows, pad_cols = min(pad_rows, 2), min(pad_cols, 2)
    padded = np.pad(image, ((pad_rows, pad_rows), (pad_cols, pad_cols), (0, 0)), mode=_PAD_MODES[mode])
    # Pillow maps output pixel centres (x + 0.5, y + 0.5) to input
    # coordinates whose pixel centres also lie at + 0.5; x is the column.
    (row_row, row_col), (col_row, col_col) = matrix
    coefficients = (col_col, col_row, offset[1] + pad_cols + 0.5 - 0.5 * (col_col + col_row),
                    row_col, row_row, offset[0] + pad_rows + 0.5 - 0.5 * (row_col + row_row))
    out = np.empty(image.shape, dtype=np.float32)
    for channel in range(3):
        plane = Image.fromarray(np.ascontiguousarray(padded[..., channel], dtype=np.float32))
        out[..., channel] = np.asarray(plane.transform((width, height), Image.Transform.AFFINE, coefficients,
                                                       resample=Image.Resampling.BILINEAR))
    # Convex weights keep values in [0, 255]; adding 0.5 then truncating rounds.
    out += 0.5
    return out.astype(np.uint8)


def flip(image, params, rng=None):
    """Mirror the image: ``axis`` is ``"horizontal"`` (left-right) or ``"vertical"``."""
    check_rgb_image(image)
    axis = params.get("axis") if hasattr(params, "get") else None
    if axis == "horizontal":
        return np.ascontiguousarray(image[:, ::-1])
    if axis == "vertical":
        return np.ascontiguousarray(image[::-1])
    raise ValueError(f"flip: 'axis' must be 'horizontal' or 'vertical'; got {axis!r}")


def rotate(image, params, rng=None):
    """Rotate about the centre by ``degrees``, counterclockwise as displayed."""
    check_rgb_image(image)
    theta = math.radians(_number(params, "degrees", "rotate"))
    cos, sin = math.cos(theta), math.sin(theta)
    # Inverse map in (row, col) with rows pointing down: a counterclockwise
    # turn of the content samples the input at R(-theta) of the output.
    matrix = np.array([[cos, sin], [-sin, cos]])
    return _warp(image, matrix, (0.0, 0.0), _fill_mode(params, "rotate"))


def zoom(image, params, rng=None):
    """Scale content about the centre by ``factor`` (> 1 enlarges); size is kept."""
    check_rgb_image(image)
    factor = _number(params, "factor", "zoom", minimum=0.0, exclusive=True)
    matrix = np.eye(2) / factor
    return _warp(image, matrix, (0.0, 0.0), _fill_mode(params, "zoom"))


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

    ``params["fraction"]`` is ``(fx, fy)`` or one number used for both.
    """
    check_rgb_image(image)
    fx, fy = _shift_fractions(params)
    height, width = image.shape[:2]
    return _warp(image, np.eye(2), (-fy * height, -fx * width), _fill_mode(params, "shift"))


# --------------------------------------------------------------------------
# tone and colour ops


def brightness(image, params, rng=None):
    """Multiply linear-light intensity by ``factor`` (decode, scale, re-encode).

    References
    ----------
    .. [1] IEC 61966-2-1:1999 (sRGB decoding and encoding).
    """
    check_rgb_image(image)
    factor = _number(params, "factor", "brightness", minimum=0.0)
    return linear_tone_lut(factor)[image]


def contrast(image, params, rng=None):
    """Scale linear-light deviations from the image's mean relative luminance.

    ``L' = m + factor * (L - m)`` per channel, ``m`` the mean BT.709 relative
    luminance of the image; applied as one 256-entry table.

    References
    ----------
    .. [1] ITU-R BT.709-6 item 3.2; IEC 61966-2-1:1999.
    """
    check_rgb_image(image)
    factor = _number(params, "factor", "contrast", minimum=0.0)
    mean = mean_relative_luminance(image)
    return linear_tone_lut(factor, (1.0 - factor) * mean)[image]


def saturation(image, params, rng=None):
    """Blend each pixel with the grey of its own relative luminance, in linear light.

    ``L' = Y + factor * (L - Y)``: 0 gives greyscale, 1 the identity, > 1
    more saturated colour (clipped at the gamut edge).

    References
    ----------
    .. [1] ITU-R BT.709-6 item 3.2; IEC 61966-2-1:1999.
    """
    check_rgb_image(image)
    factor = _number(params, "factor", "saturation", minimum=0.0)
    if factor == 1.0:
        return image.copy()
    linear = SRGB_TO_LINEAR_LUT[image]
    grey = linear @ BT709_COEFFICIENTS
    grey *= 1.0 - factor
    linear *= factor
    linear += grey[..., None]
    return encode_linear_to_uint8(linear)


def hue(image, params, rng=None):
    """Rotate the HSV hue angle by ``degrees`` (+120 takes red to green).

    References
    ----------
    .. [1] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978.
    """
    check_rgb_image(image)
    turn = _number(params, "degrees", "hue") / 360.0
    if turn % 1.0 == 0.0:
        return image.copy()
    hsv = rgb_to_hsv(image.astype(np.float32) * np.float32(1 / 255))
    hsv[..., 0] += np.float32(turn % 1.0)
    rgb = hsv_to_rgb(hsv)
    rgb *= 255.0
    rgb += 0.5
    return rgb.astype(np.uint8)


def blur(image, params, rng=None):
    """Gaussian blur with standard deviation ``sigma`` pixels (0 = identity).

    Edges are extended by half-sample symmetric reflection; the kernel is
    truncated at 4 sigma.
    """
    check_rgb_image(image)
    sigma = _number(params, "sigma", "blur", minimum=0.0)
    if sigma == 0.0:
        return image.copy()
    # Filtering into a float buffer and rounding: scipy truncates when it
    # writes a uint8 output, which would darken the image by half a code.
    out = ndimage.gaussian_filter(
        image, sigma=(sigma, sigma, 0.0), mode="reflect", truncate=4.0, output=np.float32
    )
    # Positive weights summing to 1 keep values in [0, 255]: no clip needed.
    out += 0.5
    return out.astype(np.uint8)


def noise(image, params, rng):
    """Add Gaussian noise with standard deviation ``sigma`` of full scale.

    The noise is drawn from ``rng`` (one standard normal per channel value,
    always, so the stream advances the same way whatever ``sigma`` is).
    """
    check_rgb_image(image)
    sigma = _number(params, "sigma", "noise", minimum=0.0)
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"noise: rng must be a numpy.random.Generator; got {type(rng).__name__}")
    out = rng.standard_normal(image.shape, dtype=np.float32)
    out *= np.float32(sigma * 255.0)
    out += image
    out += 0.5
    np.clip(out, 0.0, 255.0, out=out)
    return out.astype(np.uint8)


OPS: dict[str, OpSpec] = {
    spec.name: spec
    for spec in (
        OpSpec("flip", flip, None, None, log_scale=False, geometric=False),
        OpSpec("rotate", rotate, "degrees", 0.0, log_scale=False, geometric=True),
        OpSpec("zoom", zoom, "factor", 1.0, log_scale=True, geometric=True),
        OpSpec("shift", shift, "fraction", 0.0, log_scale=False, geometric=True),
        OpSpec("brightness", brightness, "factor", 1.0, log_scale=True, geometric=False),
        OpSpec("contrast", contrast, "factor", 1.0, log_scale=True, geometric=False),
        OpSpec("saturation", saturation, "factor", 1.0, log_scale=True, geometric=False),
        OpSpec("hue", hue, "degrees", 0.0, log_scale=False, geometric=False),
        OpSpec("blur", blur, "sigma", 0.0, log_scale=False, geometric=False),
        OpSpec("noise", noise, "sigma", 0.0, log_scale=False, geometric=False),
    )
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
    if low == high:
        return low
    if log_scale:
        return float(math.exp(rng.uniform(math.log(low), math.log(high))))
    return float(rng.uniform(low, high))


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


def apply_recipe(image, recipe, rng, label=None):
    """Apply a recipe's transforms in order to one image.

    Parameters
    ----------
    image : numpy.ndarray of uint8, shape (H, W, 3)
    recipe : augplan.recipe.Recipe
    rng : numpy.random.Generator
    label : str or None
        The image's class. Transforms whose scope excludes it are skipped
        (with None only unscoped transforms apply).

    Returns
    -------
    (numpy.ndarray, str or None)
        The augmented image and its label after any ``relabel``.

    Notes
    -----
    For each applicable transform one ``rng.random()`` is drawn and the
    transform runs when it is below ``probability``; then its params are
    sampled and the op is called with the same ``rng``.
    """
    check_rgb_image(image)
    for transform in recipe.transforms:
        if not transform.applies_to(label):
            continue
        if rng.random() >= transform.probability:
            continue
        spec = _spec(transform)
        image = spec.function(image, sample_params(transform, recipe.fill, rng), rng)
        if transform.relabel and label in transform.relabel:
            label = transform.relabel[label]
    return image, label
