"""Colour maths shared by the transforms and the nuisance-factor measurements.

Dtype policy: images are ``(H, W, 3)`` uint8, RGB, sRGB encoded (the
transform engine also takes grey ``(H, W)`` and ``(H, W, 1)``, see
`check_image`). Float work is done in float32 unless the caller passes
float64. Functions that map one 8-bit code to another go through 256-entry
lookup tables; linear light goes back to 8-bit codes through a 65,536-entry
table (`encode_linear_image`).

References
----------
.. [1] IEC 61966-2-1:1999, Multimedia systems and equipment -- Colour
   measurement and management -- Part 2-1: Default RGB colour space -- sRGB.
.. [2] ITU-R Recommendation BT.709-6 (2015), Parameter values for the HDTV
   standards for production and international programme exchange, item 3.2
   (derivation of luminance signal).
.. [3] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, Computer
   Graphics 12(3), pp. 12-19, 1978 (the hexcone HSV model).
"""

from __future__ import annotations

import cv2
import numpy as np

__all__ = [
    "BT709_COEFFICIENTS",
    "SRGB_TO_LINEAR_LUT",
    "check_image",
    "check_rgb_image",
    "srgb_to_linear",
    "linear_to_srgb",
    "encode_linear_to_uint8",
    "encode_linear_image",
    "linear_tone_lut",
    "relative_luminance",
    "mean_relative_luminance",
    "rgb_to_hsv",
    "hsv_to_rgb",
]

# ITU-R BT.709-6 item 3.2: Y = 0.2126 R + 0.7152 G + 0.0722 B on linear light [2]_.
BT709_COEFFICIENTS = np.array([0.2126, 0.7152, 0.0722], dtype=np.float32)

# IEC 61966-2-1 constants [1]_: the decode breakpoint on encoded values and the
# encode breakpoint on linear values.
_DECODE_BREAK = 0.04045
_ENCODE_BREAK = 0.0031308


_FLOAT_HINT = ("pass 8-bit codes: a float image in [0, 1] converts with "
               "np.round(image * 255).astype(np.uint8)")


def check_image(image, *, name="image"):
    """Return ``image`` if it is a uint8 RGB or grey image; raise otherwise.

    Parameters
    ----------
    image : numpy.ndarray
        Candidate image: ``(H, W, 3)`` RGB, or grey ``(H, W)`` or ``(H, W, 1)``,
        dtype uint8, sRGB encoded.
    name : str, optional
        What to call the argument in the error message.

    Returns
    -------
    numpy.ndarray
        The same object, unchanged.

    Raises
    ------
    ValueError
        Wrong type, shape or dtype; a float image is told how to convert.
    """
    if not isinstance(image, np.ndarray):
        raise ValueError(f"{name} must be a numpy array of shape (H, W, 3), (H, W, 1) or (H, W) and dtype "
                         f"uint8; got {type(image).__name__}")
    shape = image.shape
    if image.dtype != np.uint8:
        hint = f"; {_FLOAT_HINT}" if image.dtype.kind == "f" else ""
        raise ValueError(f"{name} must have dtype uint8 (8-bit sRGB codes); got dtype {image.dtype}{hint}")
    if not (len(shape) == 2 or len(shape) == 3 and shape[2] in (1, 3)):
        raise ValueError(f"{name} must have shape (H, W, 3), (H, W, 1) or (H, W); got shape {shape}")
    if shape[0] == 0 or shape[1] == 0:
        raise ValueError(f"{name} must have at least one pixel; got shape {shape}")
    return image


def check_rgb_image(image, *, name="image"):
    """`check_image` for RGB only: ``(H, W, 3)`` uint8, or a `ValueError`."""
    check_image(image, name=name)
    if image.ndim != 3 or image.shape[2] != 3:
        raise ValueError(f"{name} must have shape (H, W, 3) (RGB, sRGB encoded); got shape {image.shape}")
    return image


def _float_array(values):
    array = np.asarray(values)
    if array.dtype.kind != "f":
        array = array.astype(np.float32)
    return array


def srgb_to_linear(values):
    """Decode sRGB-encoded values to linear light (IEC 61966-2-1).

    Parameters
    ----------
    values : array_like of float
        Encoded values in [0, 1]; values outside are clipped to [0, 1] first.

    Returns
    -------
    numpy.ndarray
        Linear-light values in [0, 1], float32 unless float64 came in.

    Notes
    -----
    ``v / 12.92`` for ``v <= 0.04045``, else ``((v + 0.055) / 1.055) ** 2.4`` [1]_.

    References
    ----------
    .. [1] IEC 61966-2-1:1999, section 5.2, equations (5)-(7).
    """
    v = np.clip(_float_array(values), 0.0, 1.0)
    return np.where(v <= _DECODE_BREAK, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(
        v.dtype, copy=False
    )


def linear_to_srgb(values):
    """Encode linear-light values with the sRGB transfer function (IEC 61966-2-1).

    Parameters
    ----------
    values : array_like of float
        Linear-light values; values outside [0, 1] are clipped (out-of-gamut
        light saturates, as a camera's output would).

    Returns
    -------
    numpy.ndarray
        Encoded values in [0, 1], float32 unless float64 came in.

    Notes
    -----
    ``12.92 L`` for ``L <= 0.0031308``, else ``1.055 L ** (1 / 2.4) - 0.055`` [1]_.

    References
    ----------
    .. [1] IEC 61966-2-1:1999, section 5.3, equations (8)-(10).
    """
    lin = np.clip(_float_array(values), 0.0, 1.0)
    return np.where(
        lin <= _ENCODE_BREAK, lin * 12.92, 1.055 * lin ** (1.0 / 2.4) - 0.055
    ).astype(lin.dtype, copy=False)


SRGB_TO_LINEAR_LUT = srgb_to_linear(np.arange(256, dtype=np.float64) / 255.0).astype(np.float32)
SRGB_TO_LINEAR_LUT.setflags(write=False)
_DECODED_CODES = srgb_to_linear(np.arange(256, dtype=np.float64) / 255.0)
# Linear light at the midpoints between consecutive codes (255 edges).
_CODE_EDGES = srgb_to_linear((np.arange(255, dtype=np.float64) + 0.5) / 255.0)
_LINEAR16_TO_CODE = np.searchsorted(_CODE_EDGES, np.arange(65536, dtype=np.float64) / 65535.0).astype(np.uint8)

# Each channel's decoded value pre-multiplied by its BT.709 weight, so that
# luminance is three table gathers and two additions.
_WEIGHTED_LUTS = tuple(
    (SRGB_TO_LINEAR_LUT.astype(np.float64) * float(w)).astype(np.float32)
    for w in (0.2126, 0.7152, 0.0722)
)


_WEIGHTED_LUT_RGB = np.stack(_WEIGHTED_LUTS, axis=-1).reshape(1, 256, 3)
_CHANNEL_SUM = np.ones((1, 3), dtype=np.float32)
_WEIGHTED_LUTS_64 = tuple(weighted.astype(np.float64) for weighted in _WEIGHTED_LUTS)


def encode_linear_to_uint8(linear):
    """Encode linear light to 8-bit sRGB codes, rounding to the nearest code.

    Parameters
    ----------
    linear : array_like of float
        Linear-light values; clipped to [0, 1].

    Returns
    -------
    numpy.ndarray of uint8
        ``round(255 * linear_to_srgb(linear))``.
    """
    encoded = linear_to_srgb(linear)
    encoded *= 255.0
    encoded += 0.5
    return encoded.astype(np.uint8)


def linear_tone_lut(gain, offset=0.0):
    """A 256-entry uint8 table applying ``gain * L + offset`` in linear light.

    Each 8-bit code is decoded, mapped, clipped and re-encoded, so applying
    the table (``lut[image]``) is an affine map of linear light done exactly
    per code.

    Parameters
    ----------
    gain : float
        Multiplier on linear light (an exposure change when ``offset`` is 0).
    offset : float, optional
        Added to linear light after the gain.

    Returns
    -------
    numpy.ndarray of uint8, shape (256,)
    """
    mapped = _DECODED_CODES * float(gain)
    mapped += float(offset)
    # Code k is the nearest code to the encoded value exactly when the linear
    # value lies between the decoded midpoints around k: one sorted search.
    return np.searchsorted(_CODE_EDGES, mapped).astype(np.uint8)


def encode_linear_image(linear):
    """Encode a float32 linear-light image to 8-bit sRGB codes, fast.

    Linear light is first rounded to 16 bits (``cv2.multiply`` saturates to
    [0, 65535], so out-of-gamut light clips), then a 65,536-entry table gives
    the nearest code of each level.

    Parameters
    ----------
    linear : numpy.ndarray of float32
        Linear-light values, any shape cv2 accepts (2-D, or 3-D with up to 4
        channels).

    Returns
    -------
    numpy.ndarray of uint8, same shape

    Notes
    -----
    The 16-bit step adds at most ``12.92 * 255 / 65535 / 2 = 0.025`` code
    (the largest slope of the sRGB encoding, at black [1]_) to the half code
    of rounding, against `encode_linear_to_uint8`.

    References
    ----------
    .. [1] IEC 61966-2-1:1999, section 5.3.
    """
    levels = cv2.multiply(linear, 65535.0, dtype=cv2.CV_16U)
    return _LINEAR16_TO_CODE[levels]


def relative_luminance(image):
    """Per-pixel relative luminance of an sRGB uint8 image (ITU-R BT.709).

    Parameters
    ----------
    image : numpy.ndarray of uint8, shape (..., 3)
        sRGB-encoded RGB: one image ``(H, W, 3)`` or a batch ``(N, H, W, 3)``.

    Returns
    -------
    numpy.ndarray of float32, shape (...)
        ``0.2126 R + 0.7152 G + 0.0722 B`` on decoded (linear) values, in [0, 1].

    Raises
    ------
    ValueError
        If ``image`` is not uint8 with a last axis of length 3.

    References
    ----------
    .. [1] ITU-R BT.709-6, item 3.2; IEC 61966-2-1:1999 for the decoding.
    """
    image = np.asarray(image)
    if image.dtype != np.uint8 or image.ndim < 1 or image.shape[-1] != 3:
        raise ValueError(
            "image must be uint8 with a last axis of 3 (RGB); "
            f"got shape {image.shape} and dtype {image.dtype}"
        )
    if image.size == 0:
        return np.zeros(image.shape[:-1], dtype=np.float32)
    # One float cv2.LUT gives each channel's weighted decoded value and one
    # cv2.transform adds them (the same float32 sums as three table gathers
    # and two additions, a third of the time on a batch of 64 x 64 images).
    row = np.ascontiguousarray(image).reshape(1, -1, 3)
    luminance = cv2.transform(cv2.LUT(row, _WEIGHTED_LUT_RGB), _CHANNEL_SUM).reshape(image.shape[:-1])
    # Sums of rounded float32 weights can exceed 1 by an ulp for white.
    np.minimum(luminance, 1.0, out=luminance)
    return luminance


def mean_relative_luminance(image):
    """Mean BT.709 relative luminance of an image (a float in [0, 1]).

    Parameters
    ----------
    image : numpy.ndarray of uint8, shape (H, W, 3)

    Returns
    -------
    float
    """
    # The mean over pixels equals the weighted sum of per-channel decoded
    # means, and per-channel means come cheaply from 256-bin histograms.
    image = np.asarray(image)
    if image.dtype != np.uint8 or image.ndim < 1 or image.shape[-1] != 3:
        raise ValueError(
            "image must be uint8 with a last axis of 3 (RGB); "
            f"got shape {image.shape} and dtype {image.dtype}"
        )
    pixels = image.reshape(-1, 3)
    if pixels.shape[0] == 0:
        raise ValueError("image must have at least one pixel")
    planes = image if image.ndim == 3 else np.ascontiguousarray(pixels).reshape(1, -1, 3)
    total = 0.0
    for channel, weighted in enumerate(_WEIGHTED_LUTS_64):
        # cv2.calcHist counts in float32, exact up to 2**24 pixels a code.
        counts = cv2.calcHist([planes], [channel], None, [256], [0, 256])
        total += float(counts.ravel() @ weighted)
    return min(total / pixels.shape[0], 1.0)


def _check_last_axis(array, name):
    if array.ndim < 1 or array.shape[-1] != 3:
        raise ValueError(f"{name} must have a last axis of length 3; got shape {array.shape}")


def rgb_to_hsv(rgb):
    """Convert RGB to HSV (hexcone model), vectorised over any leading shape.

    Parameters
    ----------
    rgb : array_like of float, shape (..., 3)
        Values in [0, 1].

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        Hue in [0, 1) (a fraction of a turn; red is 0, green 1/3, blue 2/3),
        saturation and value in [0, 1]. Grey pixels get hue 0 and saturation 0.
        float32 unless float64 came in.

    References
    ----------
    .. [1] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978.
    """
    rgb = _float_array(rgb)
    _check_last_axis(rgb, "rgb")
    red, green, blue = rgb[..., 0], rgb[..., 1], rgb[..., 2]
    value = np.maximum(np.maximum(red, green), blue)
    chroma = value - np.minimum(np.minimum(red, green), blue)
    grey = chroma == 0
    safe_chroma = np.where(grey, 1, chroma).astype(rgb.dtype, copy=False)
    saturation = np.divide(chroma, value, out=np.zeros_like(value), where=value > 0)
    # Which sextant the hue lies in depends on which channel is the maximum;
    # ties resolve red first, then green, like colorsys. Masked assignment
    # computes each sextant's formula only where it applies.
    is_red = value == red
    is_green = ~is_red & (value == green)
    is_blue = ~(is_red | is_green)
    hue = np.empty_like(value)
    hue[is_red] = ((green - blue) / safe_chroma)[is_red]
    hue[is_green] = (2.0 + (blue - red) / safe_chroma)[is_green]
    hue[is_blue] = (4.0 + (red - green) / safe_chroma)[is_blue]
    hue /= 6.0
    hue -= np.floor(hue)
    hue[grey] = 0.0
    # A tiny negative hue can wrap to exactly 1.0 in floating point.
    hue[hue >= 1.0] = 0.0
    out = np.empty(rgb.shape, dtype=rgb.dtype)
    out[..., 0], out[..., 1], out[..., 2] = hue, saturation, value
    return out


def hsv_to_rgb(hsv):
    """Convert HSV (hexcone model) back to RGB, vectorised.

    Parameters
    ----------
    hsv : array_like of float, shape (..., 3)
        Hue as a fraction of a turn (any real value; taken modulo 1),
        saturation and value in [0, 1].

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        RGB in [0, 1]; float32 unless float64 came in.

    References
    ----------
    .. [1] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78, 1978.
    """
    hsv = _float_array(hsv)
    _check_last_axis(hsv, "hsv")
    hue = (hsv[..., 0] % 1.0) * 6.0
    saturation, value = hsv[..., 1], hsv[..., 2]
    # Smith's closed form: channel k = V - V S clip(min(n, 4 - n), 0, 1)
    # with n = (k_offset + H) mod 6, offsets 5, 3, 1 for R, G, B.
    chroma = value * saturation
    channels = []
    for offset in (5.0, 3.0, 1.0):
        n = (offset + hue) % 6.0
        ramp = np.clip(np.minimum(n, 4.0 - n), 0.0, 1.0)
        channels.append(value - chroma * ramp)
    return np.stack(channels, axis=-1).astype(hsv.dtype, copy=False)
