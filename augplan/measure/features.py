"""The small CPU proxy model: hand-made image features and a linear classifier.

The label-safety checker, the coverage audit and the evaluator all need a
model that trains in seconds on a laptop and still notices shape,
orientation, position, colour and scale. `image_features` turns a batch of
images into fixed-length vectors; `augplan.measure.model.FeatureModel` standardises them and fits a
scikit-learn classifier (logistic regression by default), and measures by
cross-validation whether the model is good enough to be trusted.

Feature layout
--------------
For every image, whatever its size (at least 8 x 8 pixels), the vector holds
``FEATURE_LENGTH`` float32 values in this order (see `FEATURE_BLOCKS`):

``orientation`` (900 values)
    Oriented-gradient histograms in the manner of Dalal & Triggs [1]_ on the
    square root of relative luminance: a 6 x 6 grid of cells, 9 unsigned
    orientation bins over [0, pi) with linear vote splitting between
    neighbouring bins, and 2 x 2-cell blocks at a one-cell stride (5 x 5
    blocks) each normalised with L2-Hys (L2, clip at 0.2, L2 again). Order:
    block row, block column, cell (top-left, top-right, bottom-left,
    bottom-right), orientation bin. Orientation bin ``k`` is centred on
    ``(k + 0.5) * pi / 9`` measured from the image's x axis towards +y (down).
``hue`` (12 values)
    Hue histogram weighted by saturation, circular linear vote splitting,
    divided by the pixel count (so the total equals the mean saturation and
    grey images have no hue mass).
``saturation`` (4 values), ``value`` (4 values)
    Histograms of HSV saturation and value with linear vote splitting,
    fractions of pixels.
``thumbnail`` (192 values)
    The image area-averaged to 8 x 8 pixels, sRGB-encoded values scaled to
    [0, 1], in row, column, channel (R, G, B) order.

The grid is defined in fractions of the image, so every image size yields
the same layout; cells and thumbnail pixels cover whole source pixels
(``floor(y * parts / height)``), so sizes that are not multiples of 6 or 8
give cells that differ by at most one pixel row or column.

References
----------
.. [1] N. Dalal and B. Triggs, "Histograms of oriented gradients for human
   detection", IEEE Conference on Computer Vision and Pattern Recognition
   (CVPR), 2005, pp. 886-893.
"""

import numpy as np

from augplan.imaging.colour import relative_luminance, rgb_to_hsv

__all__ = [
    "image_features",
    "FEATURE_BLOCKS",
    "FEATURE_LENGTH",
    "MIN_IMAGE_SIDE",
]

_CELLS = 6
_ORIENTATIONS = 9
_HUE_BINS = 12
_SATURATION_BINS = 4
_VALUE_BINS = 4
_THUMBNAIL = 8
_COLOUR_SIDE = 16
# L2-Hys clipping value from Dalal & Triggs (2005), section 6.4.
_HYS_CLIP = 0.2
# Regularises block normalisation so that nearly flat regions (mean gradient
# per pixel well below 0.005 of full scale) are not blown up to unit length
# (common practice, no source for the exact value).
_BLOCK_EPSILON = 0.005
# Images are processed in chunks so temporaries stay a few tens of MB.
_CHUNK_PIXELS = 2_000_000

MIN_IMAGE_SIDE = max(_CELLS, _THUMBNAIL, _COLOUR_SIDE)

_orientation_length = (_CELLS - 1) ** 2 * 4 * _ORIENTATIONS
_sizes = [
    ("orientation", _orientation_length),
    ("hue", _HUE_BINS),
    ("saturation", _SATURATION_BINS),
    ("value", _VALUE_BINS),
    ("thumbnail", _THUMBNAIL * _THUMBNAIL * 3),
]
FEATURE_BLOCKS = {}
_start = 0
for _name, _size in _sizes:
    FEATURE_BLOCKS[_name] = slice(_start, _start + _size)
    _start += _size
FEATURE_LENGTH = _start
del _name, _size, _start, _sizes


def _check_batch(images):
    images = np.asarray(images)
    if images.ndim != 4 or images.shape[-1] != 3 or images.dtype != np.uint8:
        raise ValueError(
            "images must be a uint8 batch of RGB images with shape (N, H, W, 3); "
            f"got shape {images.shape} and dtype {images.dtype}."
        )
    if min(images.shape[1:3]) < MIN_IMAGE_SIDE:
        raise ValueError(
            f"images must be at least {MIN_IMAGE_SIDE} x {MIN_IMAGE_SIDE} pixels; "
            f"got {images.shape[1]} x {images.shape[2]}."
        )
    return images


def _part_index(length, parts):
    """Which of ``parts`` equal strips each of ``length`` pixels falls in."""
    return (np.arange(length) * parts) // length


def _pool_matrix(length, parts):
    """(parts, length) float32 matrix averaging the pixels of each strip."""
    index = _part_index(length, parts)
    matrix = (index[None, :] == np.arange(parts)[:, None]).astype(np.float32)
    return matrix / matrix.sum(axis=1, keepdims=True)


def _split_votes(position, bins, circular, weight, group_parts, n_groups):
    """Histograms per group with each vote split between the two nearest bins.

    ``position`` is in bin units, bin ``k`` centred at ``k + 0.5``, within
    ``[0, bins]``. A vote at ``p`` gives ``1 - f`` of ``weight`` to bin
    ``floor(p - 0.5)`` and ``f = (p - 0.5) - floor(p - 0.5)`` to the next
    one. Votes are counted in ``bins + 2`` slots per group (one spare at each
    end) so no modulo is needed per pixel; the spare slots are folded back
    afterwards: onto the opposite end for circular quantities (hue,
    orientation), onto the same end otherwise (a vote below the first centre
    goes wholly to the first bin).

    ``group_parts`` are small integer arrays, broadcastable to
    ``position``, whose sum is each vote's group (image, or image and cell);
    adding them one at a time avoids building a full-size group array.

    Returns
    -------
    numpy.ndarray of float64, shape (n_groups, bins)
    """
    shifted = position - np.float32(0.5)
    lower = np.floor(shifted)
    upper_share = weight * (shifted - lower)
    lower_share = weight - upper_share
    slots = bins + 2
    index = lower.astype(np.intp)
    index += 1
    for part in group_parts:
        index += part * slots
    total = n_groups * slots
    counts = np.bincount(index.ravel(), weights=lower_share.ravel(), minlength=total)
    index += 1
    counts += np.bincount(index.ravel(), weights=upper_share.ravel(), minlength=total)
    counts = counts.reshape(n_groups, slots)
    hist = counts[:, 1:-1].copy()
    if circular:
        hist[:, -1] += counts[:, 0]
        hist[:, 0] += counts[:, -1]
    else:
        hist[:, 0] += counts[:, 0]
        hist[:, -1] += counts[:, -1]
    return hist


def _orientation_features(images):
    n, height, width, _ = images.shape
    # Square-root compression of luminance: Dalal & Triggs (2005), section 6.1.
    grey = np.sqrt(relative_luminance(images))
    # Centred [-1, 0, 1] derivatives (Dalal & Triggs 2005, section 6.2), with
    # one-sided differences at the border.
    gx = np.empty_like(grey)
    gx[:, :, 1:-1] = grey[:, :, 2:] - grey[:, :, :-2]
    gx[:, :, 0] = grey[:, :, 1] - grey[:, :, 0]
    gx[:, :, -1] = grey[:, :, -1] - grey[:, :, -2]
    gy = np.empty_like(grey)
    gy[:, 1:-1, :] = grey[:, 2:, :] - grey[:, :-2, :]
    gy[:, 0, :] = grey[:, 1, :] - grey[:, 0, :]
    gy[:, -1, :] = grey[:, -1, :] - grey[:, -2, :]
    # np.hypot, not cv2.magnitude: the latter's last bit depended on where
    # the arrays sat in memory, and features must be the same bytes each run.
    magnitude = np.hypot(gx, gy)
    # Unsigned orientation in bin units: atan2 gives (-pi, pi]; adding half a
    # turn to negative angles folds it onto [0, pi] (a float modulo would be
    # an order of magnitude slower).
    position = np.arctan2(gy, gx) * np.float32(_ORIENTATIONS / np.pi)
    position += np.float32(_ORIENTATIONS) * (position < 0)

    cell = _part_index(height, _CELLS)[:, None] * _CELLS + _part_index(width, _CELLS)[None, :]
    group_parts = (np.arange(n)[:, None, None] * (_CELLS * _CELLS), cell[None])
    cells = _split_votes(position, _ORIENTATIONS, True, magnitude, group_parts, n * _CELLS * _CELLS)
    # Mean gradient per pixel of each cell, so the scale does not depend on image size.
    pixels_per_cell = np.bincount(cell.ravel(), minlength=_CELLS * _CELLS)
    cells = cells.reshape(n, _CELLS * _CELLS, _ORIENTATIONS) / pixels_per_cell[None, :, None]
    cells = cells.reshape(n, _CELLS, _CELLS, _ORIENTATIONS)

    blocks = np.concatenate(
        [cells[:, :-1, :-1], cells[:, :-1, 1:], cells[:, 1:, :-1], cells[:, 1:, 1:]], axis=-1
    )
    eps2 = _BLOCK_EPSILON ** 2
    blocks = blocks / np.sqrt(np.sum(blocks * blocks, axis=-1, keepdims=True) + eps2)
    np.minimum(blocks, _HYS_CLIP, out=blocks)
    blocks = blocks / np.sqrt(np.sum(blocks * blocks, axis=-1, keepdims=True) + eps2)
    return blocks.reshape(n, -1)


def _area_average(planes, size):
    """Area-average (N, C, H, W) float32 planes to (N, C, size, size)."""
    rows = _pool_matrix(planes.shape[2], size)
    columns = _pool_matrix(planes.shape[3], size)
    return rows @ planes @ columns.T


def _colour_features(images):
    n = images.shape[0]
    encoded = images.astype(np.float32) * np.float32(1.0 / 255.0)
    planes = np.ascontiguousarray(encoded.transpose(0, 3, 1, 2))
    # Colour histograms are taken on a 16 x 16 area average: the HSV
    # conversion is the costliest step per pixel, and the colour distribution
    # at that scale is what the proxy model needs (fine colour texture, such
    # as a red-green checker, averages to its mixture).
    small = _area_average(planes, _COLOUR_SIDE).transpose(0, 2, 3, 1)
    hsv = rgb_to_hsv(np.clip(small, 0.0, 1.0)).reshape(n, _COLOUR_SIDE * _COLOUR_SIDE, 3)
    hue, saturation, value = hsv[..., 0], hsv[..., 1], hsv[..., 2]
    group = (np.arange(n)[:, None],)
    share = np.float32(1.0 / (_COLOUR_SIDE * _COLOUR_SIDE))
    parts = [_split_votes(hue * _HUE_BINS, _HUE_BINS, True, saturation * share, group, n)]
    flat = np.full_like(saturation, share)
    parts.append(_split_votes(saturation * _SATURATION_BINS, _SATURATION_BINS, False, flat, group, n))
    parts.append(_split_votes(value * _VALUE_BINS, _VALUE_BINS, False, flat, group, n))
    thumbnail = _area_average(planes, _THUMBNAIL)
    parts.append(thumbnail.transpose(0, 2, 3, 1).reshape(n, -1))
    return np.concatenate(parts, axis=1)


def image_features(images):
    """Feature vectors of a batch of images for the proxy model.

    Parameters
    ----------
    images : numpy.ndarray of uint8, shape (N, H, W, 3)
        RGB, sRGB-encoded images of one size, at least ``MIN_IMAGE_SIDE``
        pixels on each side (typically 64 x 64).

    Returns
    -------
    numpy.ndarray of float32, shape (N, FEATURE_LENGTH)
        One row per image; the column layout is described in the module
        docstring and given by `FEATURE_BLOCKS`.

    Raises
    ------
    ValueError
        If ``images`` is not a 4-D uint8 array with 3 channels, or is smaller
        than ``MIN_IMAGE_SIDE`` on a side.

    Notes
    -----
    The oriented-gradient block responds to shape, orientation and position;
    a left-right flip mirrors the cell grid and maps orientation
    ``theta`` to ``pi - theta``. The hue, saturation and value histograms
    respond to colour; the thumbnail to position, colour and scale. The
    computation is vectorised over the batch (chunked to bound memory) and
    deterministic.

    References
    ----------
    .. [1] N. Dalal and B. Triggs, "Histograms of oriented gradients for human
       detection", CVPR 2005, pp. 886-893.

    Examples
    --------
    >>> batch = np.zeros((2, 64, 64, 3), dtype=np.uint8)
    >>> image_features(batch).shape == (2, FEATURE_LENGTH)
    True
    """
    images = _check_batch(images)
    n, height, width, _ = images.shape
    out = np.empty((n, FEATURE_LENGTH), dtype=np.float32)
    chunk = max(1, _CHUNK_PIXELS // (height * width))
    orientation = FEATURE_BLOCKS["orientation"]
    for start in range(0, n, chunk):
        batch = images[start:start + chunk]
        out[start:start + len(batch), orientation] = _orientation_features(batch)
        out[start:start + len(batch), orientation.stop:] = _colour_features(batch)
    return out
