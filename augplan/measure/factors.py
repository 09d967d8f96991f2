"""Nuisance factors measured per image: lighting, colour, sharpness, pose, framing.

Every factor function takes a uint8 batch ``(N, H, W, 3)`` (RGB, sRGB
encoded) and returns an ``(N,)`` float64 array, vectorised over the batch
except where noted. Colour maths comes from `augplan.imaging.colour`; nothing here
re-implements it. Luminance means BT.709 relative luminance of linear light
in [0, 1] throughout.

Two factors are angles (``kind="circular"``): ``hue`` in degrees with period
360 and ``orientation`` in degrees with period 180 (an axial angle: a stripe
at 10 degrees is the same stripe at 190). Anything that summarises them must
use circular statistics; `FACTORS` records each factor's kind and period.

References
----------
.. [1] IEC 61966-2-1:1999, sRGB; ITU-R BT.709-6, item 3.2 (luminance).
.. [2] E. Peli, "Contrast in complex images", J. Opt. Soc. Am. A 7(10),
   pp. 2032-2040, 1990.
.. [3] D. Hasler and S. Suesstrunk, "Measuring colourfulness in natural
   images", Proc. SPIE 5007, Human Vision and Electronic Imaging VIII, 2003.
.. [4] J. L. Pech-Pacheco, G. Cristobal, J. Chamorro-Martinez and
   J. Fernandez-Valdivia, "Diatom autofocusing in brightfield microscopy: a
   comparative study", Proc. ICPR 2000, vol. 3, pp. 314-317.
.. [5] J. Bigun and G. H. Granlund, "Optimal orientation detection of linear
   symmetry", Proc. ICCV 1987, pp. 433-438; B. Jaehne, Digital Image
   Processing, Springer, chapter on local orientation (structure tensor,
   coherence).
.. [6] N. Otsu, "A threshold selection method from gray-level histograms",
   IEEE Trans. SMC 9(1), pp. 62-66, 1979.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import cv2
import numpy as np

from augplan.imaging.colour import check_rgb_batch, relative_luminance

__all__ = [
    "REDUCE_FROM",
    "Factor",
    "FACTORS",
    "check_batch",
    "brightness",
    "rms_contrast",
    "colourfulness",
    "hue",
    "sharpness",
    "normalised_sharpness",
    "orientation",
    "coherence",
    "asymmetry",
    "pose_factors",
    "centroid_x",
    "centroid_y",
    "area",
    "framing_factors",
    "measure_factors",
]

# Images processed together inside measure_factors: bounds the float32
# temporaries to a few tens of MB at 128 x 128.
_CHUNK = 128

# Rows give rg = R - G and yb = (R + G) / 2 - B (Hasler and Suesstrunk).
# Histogram bins of the Otsu threshold: skimage.filters.threshold_otsu's default.
_OTSU_BINS = 256

# Images whose sides are both at least this many pixels have their
# colourfulness and hue measured over a regular quarter of their pixels (see
# those functions): the two took a third of the factor time at 128 x 128,
# and each is a statistic of the image's pixels that such a sample
# estimates closely.
REDUCE_FROM = 64

_OPPONENT = np.array([[1.0, -1.0, 0.0], [0.5, 0.5, -1.0]], dtype=np.float32)


def check_batch(images, *, name="images"):
    """Return ``images`` if it is a uint8 batch ``(N, H, W, 3)``; raise otherwise.

    Parameters
    ----------
    images : numpy.ndarray
        Candidate batch.
    name : str, optional
        What to call the argument in the error message.

    Returns
    -------
    numpy.ndarray
        The same array.

    Raises
    ------
    ValueError
        If the shape or dtype is not ``(N, H, W, 3)`` uint8 with H, W >= 3.
    """
    check_rgb_batch(images, name=name)
    if images.shape[1] < 3 or images.shape[2] < 3:
        raise ValueError(
            f"{name} must be at least 3 x 3 pixels for the gradient factors; "
            f"got {images.shape[1]} x {images.shape[2]}"
        )
    return images


def _luminance(images):
    return relative_luminance(check_batch(images))


# ---------------------------------------------------------------- lighting


def _brightness_of(lum):
    return lum.mean(axis=(1, 2), dtype=np.float64)


def brightness(images):
    """Mean relative luminance of each image.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        Mean of ``0.2126 R + 0.7152 G + 0.0722 B`` over pixels, on linear
        (decoded) light, in [0, 1].

    References
    ----------
    .. [1] ITU-R BT.709-6, item 3.2; IEC 61966-2-1:1999 (sRGB decoding).
    """
    return _brightness_of(_luminance(images))


def _contrast_of(lum):
    # cv2.meanStdDev accumulates the float32 pixels in float64, like
    # numpy's std with dtype float64, in one pass per image.
    return np.array([cv2.meanStdDev(image)[1][0, 0] for image in lum], dtype=np.float64)


def rms_contrast(images):
    """RMS contrast: the standard deviation of relative luminance over pixels.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        ``sqrt(mean((Y - mean(Y))**2))`` with Y the relative luminance in
        [0, 1]; in [0, 0.5].

    Notes
    -----
    Peli's RMS contrast [1]_ is the standard deviation of intensities
    normalised to [0, 1], not divided by the mean; that is the form used here.

    References
    ----------
    .. [1] E. Peli, "Contrast in complex images", JOSA A 7(10), 1990.
    """
    return _contrast_of(_luminance(images))


# ------------------------------------------------------------------ colour


def colourfulness(images):
    """Hasler and Suesstrunk's colourfulness metric M.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        ``sigma_rgyb + 0.3 * mu_rgyb`` with ``rg = R - G``,
        ``yb = (R + G) / 2 - B`` on the encoded 0-255 values (as in the
        paper), ``sigma_rgyb = sqrt(var(rg) + var(yb))`` and
        ``mu_rgyb = sqrt(mean(rg)**2 + mean(yb)**2)``. A grey image scores 0.

    References
    ----------
    Notes
    -----
    The means and standard deviations are statistics of the image's pixels;
    at sides of `REDUCE_FROM` (64) pixels or more they are taken over every
    second pixel of every second row, a regular sample of a quarter of the
    pixels (sampled, not averaged, so the spread of colours is kept). On
    the 2,000 crops of 128 x 128 of `benchmarks/bench_coverage.py`
    (scikit-image's sample photographs) the largest difference from the
    value over all pixels was 6.3 % of it (1.85 on M); on 200 images of
    64 x 64 uniform noise, 4.6 %.

    References
    ----------
    .. [1] D. Hasler and S. Suesstrunk, "Measuring colourfulness in natural
       images", Proc. SPIE 5007, 2003, equation (3) and table 2.
    """
    return _colourfulness_of(_pixel_sample(check_batch(images)))


def _pixel_sample(images):
    """Every second pixel of every second row at sides of `REDUCE_FROM` or more; else all pixels."""
    if min(images.shape[1:3]) >= REDUCE_FROM:
        return np.ascontiguousarray(images[:, ::2, ::2])
    return images


def _colourfulness_of(images):
    n, height, width = images.shape[:3]
    out = np.empty(n, dtype=np.float64)
    for start in range(0, n, _CHUNK):
        block = images[start:start + _CHUNK].astype(np.float32).reshape(-1, width, 3)
        # One cv2.transform gives the rg and yb planes in float32.
        opponent = cv2.transform(block, _OPPONENT).reshape(-1, height, width, 2)
        for i, planes in enumerate(opponent):
            mean, std = cv2.meanStdDev(planes)
            out[start + i] = np.hypot(std[0, 0], std[1, 0]) + 0.3 * np.hypot(mean[0, 0], mean[1, 0])
    return out


def hue(images):
    """Saturation-weighted circular mean of the HSV hue angle, in degrees.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        ``angle(sum_p s_p exp(i h_p))`` in [0, 360): red 0, green 120,
        blue 240. NaN where the image has no hue (all pixels grey, or
        saturated hues that cancel exactly).

    Notes
    -----
    Weighting by saturation keeps near-grey pixels, whose hue is noise, from
    pulling the mean; the hexcone HSV model comes from `augplan.imaging.colour`. At
    sides of `REDUCE_FROM` (64) pixels or more the mean runs over every
    second pixel of every second row (a regular sample of a quarter of the
    pixels); on the 2,000 crops of 128 x 128 of
    `benchmarks/bench_coverage.py` the largest difference from the mean over
    all pixels was 7.2 degrees.

    References
    ----------
    .. [1] N. I. Fisher, Statistical Analysis of Circular Data, Cambridge
       University Press, 1993, section 2.2 (mean direction).
    .. [2] A. R. Smith, "Color gamut transform pairs", SIGGRAPH '78 (HSV).
    """
    return _hue_of(_pixel_sample(check_batch(images)))


def _hue_of(images):
    n, height, width = images.shape[:3]
    out = np.empty(n, dtype=np.float64)
    for start in range(0, n, _CHUNK):
        block = images[start:start + _CHUNK].astype(np.float32).reshape(-1, width, 3)
        # OpenCV's float RGB -> HSV is the same hexcone model (hue in
        # degrees, saturation in [0, 1], both independent of the 0-255
        # scale); cv2.polarToCart forms s cos(h) and s sin(h) in one pass.
        hsv = cv2.cvtColor(block, cv2.COLOR_RGB2HSV)
        c, s = cv2.polarToCart(np.ascontiguousarray(hsv[..., 1]), np.ascontiguousarray(hsv[..., 0]),
                               angleInDegrees=True)
        c = c.reshape(-1, height * width).sum(axis=1, dtype=np.float64)
        s = s.reshape(-1, height * width).sum(axis=1, dtype=np.float64)
        degrees = np.degrees(np.arctan2(s, c)) % 360.0
        # A resultant this short is float noise: the image has no mean hue.
        degrees[np.hypot(c, s) < 1e-6 * height * width] = np.nan
        out[start:start + _CHUNK] = degrees
    return out


# --------------------------------------------------------------- sharpness


def _sharpness_of(lum):
    # ksize=1 is scipy.ndimage.laplace's 5-point stencil, and BORDER_REFLECT
    # its default 'reflect' border (the edge pixel repeated).
    out = np.empty(lum.shape[0], dtype=np.float64)
    for i, image in enumerate(lum):
        laplacian = cv2.Laplacian(image, cv2.CV_32F, ksize=1, borderType=cv2.BORDER_REFLECT)
        out[i] = cv2.meanStdDev(laplacian)[1][0, 0] ** 2
    return out


def sharpness(images):
    """Variance of the Laplacian of relative luminance.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        Variance over pixels of the 5-point Laplacian (the stencil of
        ``scipy.ndimage.laplace``, mirrored borders) of luminance in [0, 1].
        Blur lowers it; noise and fine texture raise it.

    References
    ----------
    .. [1] J. L. Pech-Pacheco et al., "Diatom autofocusing in brightfield
       microscopy: a comparative study", ICPR 2000 (the LAP2/variance of
       Laplacian focus measure).
    """
    return _sharpness_of(_luminance(images))


def normalised_sharpness(images):
    """Variance of the Laplacian of intensity-normalised luminance: blind to exposure.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    numpy.ndarray of float64, shape (N,)
        `sharpness` of ``Y / mean(Y)``, each image's relative luminance
        divided by its own mean: ``var(laplace(Y)) / mean(Y) ** 2``. An
        exposure change multiplies linear-light luminance by a factor, and
        with it the variance of the Laplacian by the factor squared, so
        `sharpness` falls as an image darkens; this ratio does not (up to
        clipping at white and 8-bit rounding) and falls only with blur. 0
        for a black image.

    References
    ----------
    .. [1] J. L. Pech-Pacheco et al., "Diatom autofocusing in brightfield
       microscopy: a comparative study", ICPR 2000.
    """
    lum = _luminance(images)
    mean = lum.reshape(lum.shape[0], -1).mean(axis=1, dtype=np.float64)
    safe = np.where(mean > 0, mean, 1.0)
    return np.where(mean > 0, _sharpness_of(lum) / safe ** 2, 0.0)


# -------------------------------------------------------------------- pose


def _structure_tensor(image):
    # Sobel derivatives kept on the interior only, so the border adds no
    # artificial edges; x points right and y points up (row index down),
    # making angles counterclockwise like the rotate op. cv2.Sobel's y
    # derivative points down, hence the sign of jxy.
    gx = cv2.Sobel(image, cv2.CV_32F, 1, 0, ksize=3)[1:-1, 1:-1]
    down = cv2.Sobel(image, cv2.CV_32F, 0, 1, ksize=3)[1:-1, 1:-1]
    n = gx.size
    jxx = cv2.norm(gx, cv2.NORM_L2SQR) / n
    jyy = cv2.norm(down, cv2.NORM_L2SQR) / n
    jxy = -cv2.sumElems(cv2.multiply(gx, down))[0] / n
    return jxx, jyy, jxy


def _pose_of(lum):
    tensors = np.array([_structure_tensor(image) for image in lum], dtype=np.float64).reshape(-1, 3)
    jxx, jyy, jxy = tensors.T
    angle = (0.5 * np.degrees(np.arctan2(2.0 * jxy, jxx - jyy))) % 180.0
    anisotropy = np.hypot(jxx - jyy, 2.0 * jxy)
    trace = jxx + jyy
    flat = trace <= 1e-12
    coherence_value = np.where(flat, 0.0, anisotropy / np.where(flat, 1.0, trace))
    # A flat or perfectly isotropic image has no dominant orientation.
    angle = np.where(flat | (coherence_value < 1e-9), np.nan, angle)
    n_pixels = lum.shape[1] * lum.shape[2]
    spread = np.array([cv2.norm(image - image.mean(dtype=np.float32), cv2.NORM_L1) for image in lum],
                      dtype=np.float64) / n_pixels
    difference = np.array([cv2.norm(image, cv2.flip(image, 1), cv2.NORM_L1) for image in lum],
                          dtype=np.float64) / n_pixels
    # |a - b| <= |a - m| + |b - m|, so the ratio lies in [0, 1].
    asym = np.where(spread <= 1e-12, 0.0, difference / np.where(spread <= 1e-12, 1.0, 2.0 * spread))
    return {"orientation": angle, "coherence": coherence_value, "asymmetry": asym}


def pose_factors(images):
    """Dominant gradient orientation, its coherence and left-right asymmetry.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    dict of str -> numpy.ndarray of float64, shape (N,)
        ``"orientation"``: the dominant gradient direction of the whole
        image in degrees, in [0, 180), counterclockwise from the x axis
        (right), an axial angle with period 180; NaN for a flat or isotropic
        image. ``"coherence"``: ``sqrt((Jxx - Jyy)**2 + 4 Jxy**2) / (Jxx + Jyy)``
        in [0, 1] (1 for a perfect stripe pattern, 0 for isotropic texture).
        ``"asymmetry"``: ``mean|Y - mirror(Y)| / (2 mean|Y - mean(Y)|)`` in
        [0, 1], 0 for a left-right symmetric image.

    Notes
    -----
    The structure tensor ``J`` averages the outer product of Sobel
    gradients of luminance over the image interior; its principal
    direction ``0.5 atan2(2 Jxy, Jxx - Jyy)`` is the gradient orientation
    (perpendicular to the stripes or edges) [1]_, [2]_.

    References
    ----------
    .. [1] J. Bigun and G. H. Granlund, "Optimal orientation detection of
       linear symmetry", ICCV 1987.
    .. [2] B. Jaehne, Digital Image Processing, Springer (structure tensor
       and coherence measure).
    """
    return _pose_of(_luminance(images))


def orientation(images):
    """Dominant gradient orientation in degrees, period 180; see `pose_factors`."""
    return pose_factors(images)["orientation"]


def coherence(images):
    """Orientation coherence in [0, 1]; see `pose_factors`."""
    return pose_factors(images)["coherence"]


def asymmetry(images):
    """Normalised left-right luminance asymmetry in [0, 1]; see `pose_factors`."""
    return pose_factors(images)["asymmetry"]


# ----------------------------------------------------------------- framing


def _otsu_thresholds(lum):
    # skimage.filters.threshold_otsu on each float32 image at once: the same
    # 256 bins of numpy.histogram (edges from numpy.linspace between the
    # image's extremes, bin k holding edges[k] <= v < edges[k + 1], the last
    # bin closed) and the same float32 cumulative sums, so the thresholds
    # agree to the bit. Images must not be uniform.
    n = lum.shape[0]
    flat = lum.reshape(n, -1)
    low, high = flat.min(axis=1), flat.max(axis=1)
    edges = np.stack([np.linspace(a, b, _OTSU_BINS + 1, endpoint=True, dtype=lum.dtype)
                      for a, b in zip(low, high)])
    scale = (high - low)[:, None]
    position = flat - low[:, None]
    position /= scale
    position *= np.float32(_OTSU_BINS)
    # The bin a pixel's position names; the top value belongs to the last bin.
    np.minimum(position, np.float32(_OTSU_BINS - 1), out=position)
    index = position.astype(np.uint8)
    # numpy corrects the computed bin against the edges; only pixels within
    # rounding reach of an edge can move (a wide bound on the float32 error
    # of the position and of linspace's edges, in units of a bin). One bound
    # for the batch, the widest, only adds pixels to check.
    reach = float(np.max(1e-3 + _OTSU_BINS * 16 * np.finfo(lum.dtype).eps
                         * np.maximum(abs(low), abs(high)) / scale[:, 0]))
    offset = cv2.absdiff(position, np.rint(position))
    near = np.flatnonzero(offset < reach)
    owner = near // flat.shape[1]
    index = index.reshape(-1)
    edge_index = index[near].astype(np.int32)
    value = flat.reshape(-1)[near]
    edge_index[value < edges[owner, edge_index]] -= 1
    edge_index[(value >= edges[owner, edge_index + 1]) & (edge_index != _OTSU_BINS - 1)] += 1
    index[near] = edge_index
    bins = index.reshape(lum.shape)
    # cv2.calcHist counts in float32, exact up to 2**24 pixels a bin.
    counts = np.stack([cv2.calcHist([image], [0], None, [_OTSU_BINS], [0, _OTSU_BINS]).ravel()
                       for image in bins])
    centres = (edges[:, :-1] + edges[:, 1:]) / 2.0
    weight1 = np.cumsum(counts, axis=1)
    weight2 = np.cumsum(counts[:, ::-1], axis=1)[:, ::-1]
    mean1 = np.cumsum(counts * centres, axis=1) / weight1
    mean2 = (np.cumsum((counts * centres)[:, ::-1], axis=1) / weight2[:, ::-1])[:, ::-1]
    between = weight1[:, :-1] * weight2[:, 1:] * (mean1[:, :-1] - mean2[:, 1:]) ** 2
    return centres[np.arange(n), np.argmax(between, axis=1)]


def _framing_of(lum):
    n, height, width = lum.shape
    x = np.full(n, 0.5)
    y = np.full(n, 0.5)
    fraction = np.zeros(n)
    flat = lum.reshape(n, -1)
    varied = flat.min(axis=1) != flat.max(axis=1)
    if not varied.any():
        return {"centroid_x": x, "centroid_y": y, "area": fraction}
    images = lum if varied.all() else lum[varied]
    bright = images > _otsu_thresholds(images)[:, None, None]
    ring = np.concatenate([bright[:, 0, :], bright[:, -1, :], bright[:, 1:-1, 0], bright[:, 1:-1, -1]], axis=1)
    # Polarity: the side of the threshold that holds most of the border
    # ring is background (objects are framed, backgrounds touch edges).
    dark_object = ring.mean(axis=1) > 0.5
    # Count, column-index sum and row-index sum of the bright pixels in one
    # matrix product; whole numbers below 2**24, so exact in float32.
    rows, cols = np.divmod(np.arange(height * width, dtype=np.float32), np.float32(width))
    weights = np.stack([np.ones(height * width, dtype=np.float32), cols, rows], axis=1)
    sums = (bright.reshape(len(images), -1).astype(np.float32) @ weights).astype(np.float64)
    # The foreground is the bright side or, for a dark object, its complement.
    whole = np.array([height * width, height * width * (width - 1) / 2.0, height * width * (height - 1) / 2.0])
    sums[dark_object] = whole - sums[dark_object]
    count, col_sum, row_sum = sums.T
    some = count > 0
    safe = np.where(some, count, 1)
    # Pixel centres at (index + 0.5) / side.
    fraction[varied] = count / (height * width)
    x[varied] = np.where(some, (col_sum + 0.5 * count) / width / safe, 0.5)
    y[varied] = np.where(some, (row_sum + 0.5 * count) / height / safe, 0.5)
    return {"centroid_x": x, "centroid_y": y, "area": fraction}


def framing_factors(images):
    """Foreground centroid and area fraction from an Otsu threshold on luminance.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    dict of str -> numpy.ndarray of float64, shape (N,)
        ``"centroid_x"`` (0 left edge, 1 right edge) and ``"centroid_y"``
        (0 top, 1 bottom) of the foreground's pixel centres, and ``"area"``,
        the foreground's share of the pixels. A uniform image has no
        foreground: centroid (0.5, 0.5), area 0.

    Notes
    -----
    Pixels above the Otsu threshold [1]_ (``skimage.filters.threshold_otsu``)
    form the bright side. Polarity rule: if more than half of the
    one-pixel border ring is bright, the background is bright and the
    foreground is the dark side; otherwise the foreground is the bright
    side. The thresholds of a batch are computed together, bit for bit
    those of ``threshold_otsu`` on each image.

    References
    ----------
    .. [1] N. Otsu, "A threshold selection method from gray-level
       histograms", IEEE Trans. SMC 9(1), 1979.
    """
    return _framing_of(_luminance(images))


def centroid_x(images):
    """Foreground centroid x in [0, 1]; see `framing_factors`."""
    return framing_factors(images)["centroid_x"]


def centroid_y(images):
    """Foreground centroid y in [0, 1] (0 top); see `framing_factors`."""
    return framing_factors(images)["centroid_y"]


def area(images):
    """Foreground area fraction in [0, 1]; see `framing_factors`."""
    return framing_factors(images)["area"]


# ---------------------------------------------------------------- registry


@dataclass(frozen=True)
class Factor:
    """One nuisance factor: how to measure it and how to summarise it.

    Attributes
    ----------
    name : str
    function : callable
        ``images (N, H, W, 3) uint8 -> (N,) float64``.
    kind : {'linear', 'circular'}
    period : float or None
        Period in the factor's unit for circular factors (360 or 180).
    unit : str
        What the numbers are, for tables and plot axes.
    undefined_for : str
        The images on which the factor has no value (NaN), in words, for the
        note every output gives when a whole set has none: "grey images"
        for hue (a grey pixel has no hue). Empty for factors defined on
        every image.
    """

    name: str
    function: Callable
    kind: str = "linear"
    period: float | None = None
    unit: str = ""
    undefined_for: str = ""

    @property
    def undefined_note(self):
        """``"not defined for grey images"``: what outputs say where no image of a set has a value."""
        return f"not defined for {self.undefined_for or 'these images'}"

    @property
    def circular(self):
        return self.kind == "circular"


FACTORS = {
    f.name: f
    for f in (
        Factor("brightness", brightness, unit="mean relative luminance"),
        Factor("contrast", rms_contrast, unit="RMS contrast of luminance"),
        Factor("colourfulness", colourfulness, unit="Hasler-Suesstrunk M"),
        Factor("hue", hue, "circular", 360.0, unit="degrees", undefined_for="grey images"),
        Factor("sharpness", sharpness, unit="variance of Laplacian"),
        Factor("orientation", orientation, "circular", 180.0, unit="degrees (axial)",
               undefined_for="flat images (no dominant direction)"),
        Factor("coherence", coherence, unit="structure-tensor coherence"),
        Factor("asymmetry", asymmetry, unit="left-right asymmetry"),
        Factor("centroid_x", centroid_x, unit="fraction of width"),
        Factor("centroid_y", centroid_y, unit="fraction of height"),
        Factor("area", area, unit="foreground fraction"),
    )
}


def measure_factors(images):
    """Every factor in `FACTORS` for a batch, sharing the luminance work.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)

    Returns
    -------
    dict of str -> numpy.ndarray of float64, shape (N,)
        Keys in the order of `FACTORS`; identical to calling each factor's
        function on the batch.
    """
    images = check_batch(images)
    n = images.shape[0]
    out = {name: np.empty(n, dtype=np.float64) for name in FACTORS}
    for start in range(0, n, _CHUNK):
        block = images[start:start + _CHUNK]
        part = slice(start, start + block.shape[0])
        lum = relative_luminance(block)
        out["brightness"][part] = _brightness_of(lum)
        out["contrast"][part] = _contrast_of(lum)
        out["sharpness"][part] = _sharpness_of(lum)
        for name, values in {**_pose_of(lum), **_framing_of(lum)}.items():
            out[name][part] = values
        sample = _pixel_sample(block)
        out["colourfulness"][part] = _colourfulness_of(sample)
        out["hue"][part] = _hue_of(sample)
    return out
