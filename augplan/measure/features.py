"""The small CPU proxy model: hand-made image features and a linear classifier.

The label-safety checker, the coverage audit and the evaluator all need a
model that trains in seconds on a laptop and still notices shape,
orientation, position, colour and scale. `image_features` turns a batch of
images into fixed-length vectors; `FeatureModel` standardises them and fits a
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
    "FeatureModel",
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


def _count_folds(labels):
    """Folds for cross-validation: min(5, smallest class count); below 2 none."""
    _, counts = np.unique(labels, return_counts=True)
    return int(min(5, counts.min()))


class FeatureModel:
    """Features plus a standardised scikit-learn classifier, with a trust check.

    Parameters
    ----------
    feature_fn : callable, default `image_features`
        Maps a uint8 batch ``(N, H, W, 3)`` to a 2-D array ``(N, D)``. Must be
        picklable (a module-level function) for the model to be picklable.
    estimator : scikit-learn classifier or None
        Any classifier with ``fit``/``predict`` (``predict_proba`` for
        `predict_proba_features`); cloned before fitting. None means
        ``LogisticRegression(C=0.1, max_iter=2000)`` with the lbfgs solver.
    random_state : int, default 0
        Seeds the fold shuffling and, when the estimator takes one, the
        estimator.

    Attributes
    ----------
    classes_ : numpy.ndarray
        Sorted class labels.
    scaler_ : sklearn.preprocessing.StandardScaler
    estimator_ : fitted classifier
    cv_accuracy_ : float
        Accuracy of out-of-fold predictions from stratified k-fold
        cross-validation of the same pipeline (scaler + estimator), with
        ``k = min(5, smallest class count)``; NaN when some class has fewer
        than 2 images.
    cv_accuracy_ci_ : tuple of float
        95 % Wilson interval of ``cv_accuracy_`` over the images; (0, 1) when
        not measured.
    cv_predictions_ : numpy.ndarray or None
        The out-of-fold predictions, in input order.
    chance_ : float
        Share of the largest class: the accuracy of always guessing it. For
        balanced classes this equals ``1 / n_classes``; for imbalanced ones
        it is the honest floor that plain accuracy must beat.
    weak_ : bool
        True when the model is not clearly better than chance, i.e. when

        - cross-validation could not run, or
        - ``cv_accuracy_ < chance_ + 0.5 * (1 - chance_)``: the model closes
          less than half of the gap between chance and perfect (with two
          balanced classes it needs 0.75, with ten 0.55; common practice, no
          source for the one-half), or
        - the lower Wilson bound of ``cv_accuracy_`` is at or below
          ``chance_`` (the margin could be luck on a small set).

        Verdicts that lean on a weak model should be reported as unverified.

    Notes
    -----
    ``__init__`` only stores parameters. Results are deterministic for a
    fixed ``random_state``. Callers that reuse features (for example from a
    cache) call `featurize` once and then `fit_features` and the
    ``*_features`` methods.

    The default regularisation ``C = 0.1`` on standardised features suits the
    regime the tool works in (hundreds to a few thousand images, about a
    thousand features): it keeps the model from memorising small training
    sets (chosen on scikit-learn's digits; common practice, no source).
    """

    def __init__(self, feature_fn=image_features, estimator=None, *, random_state=0):
        self.feature_fn = feature_fn
        self.estimator = estimator
        self.random_state = random_state

    # -- construction helpers -------------------------------------------------

    def _make_estimator(self):
        from sklearn.base import clone
        from sklearn.linear_model import LogisticRegression

        if self.estimator is None:
            estimator = LogisticRegression(C=0.1, max_iter=2000)
        else:
            estimator = clone(self.estimator)
        if "random_state" in estimator.get_params():
            estimator.set_params(random_state=self.random_state)
        return estimator

    def _check_fitted(self):
        if not hasattr(self, "estimator_"):
            raise ValueError("This FeatureModel is not fitted yet; call fit or fit_features first.")

    # -- features -------------------------------------------------------------

    def featurize(self, images):
        """Raw (unstandardised) features of a uint8 batch, as float arrays ``(N, D)``."""
        features = np.asarray(self.feature_fn(images))
        if features.ndim != 2 or features.shape[0] != len(images):
            raise ValueError(
                f"feature_fn must return a 2-D array with one row per image; got shape "
                f"{features.shape} for {len(images)} images."
            )
        return features

    def scaled(self, features):
        """Standardise raw features with the scaler learned in fit."""
        self._check_fitted()
        features = np.asarray(features)
        if features.ndim != 2 or features.shape[1] != self.scaler_.n_features_in_:
            raise ValueError(
                f"features must have shape (N, {self.scaler_.n_features_in_}); got {features.shape}."
            )
        return self.scaler_.transform(features.astype(np.float64, copy=False))

    # -- fitting --------------------------------------------------------------

    def fit(self, images, labels):
        """Featurize ``images`` and fit; see `fit_features`. Returns self."""
        return self.fit_features(self.featurize(images), labels)

    def fit_features(self, features, labels, *, cross_validate=True, solver_dtype=np.float64):
        """Fit scaler and estimator on raw features and measure cross-validated accuracy.

        Parameters
        ----------
        features : array_like, shape (N, D)
            Raw features from `featurize` (or the same ``feature_fn``).
        labels : array_like, shape (N,)
            Class labels (strings or integers); at least two classes.
        cross_validate : bool, default True
            Measure ``cv_accuracy_`` (and ``weak_``). Scoring loops that fit
            many models and never read them skip the extra fits.
        solver_dtype : {numpy.float64, numpy.float32}, default numpy.float64
            Precision of the standardised features handed to the estimator.
            float32 halves the time of the solver's matrix products (a
            10,000 x 1,112 fit took 3.6 s instead of 6.4 s, with the same
            iterations and predictions); probabilities then carry single
            precision, so only callers that need labels alone choose it.

        Returns
        -------
        FeatureModel
            self.
        """
        from threadpoolctl import threadpool_limits

        # One BLAS thread: augplan parallelises with processes (parallel_map),
        # and BLAS threads on top oversubscribe the cores and make small fits
        # many times slower on a busy machine.
        with threadpool_limits(limits=1, user_api="blas"):
            return self._fit_features(features, labels, cross_validate, solver_dtype)

    def _fit_features(self, features, labels, cross_validate=True, solver_dtype=np.float64):
        from sklearn.model_selection import StratifiedKFold, cross_val_predict
        from sklearn.pipeline import make_pipeline
        from sklearn.preprocessing import StandardScaler

        from augplan.measure.stats import wilson_interval

        if np.dtype(solver_dtype) not in (np.float32, np.float64):
            raise ValueError(f"solver_dtype must be numpy.float32 or numpy.float64; got {solver_dtype!r}.")
        # float64 for scaling; the solver gets solver_dtype (float32 input makes
        # scikit-learn fit and report probabilities in single precision).
        features = np.asarray(features, dtype=np.float64)
        labels = np.asarray(labels)
        if features.ndim != 2:
            raise ValueError(f"features must be 2-D (N, D); got shape {features.shape}.")
        if labels.ndim != 1 or labels.shape[0] != features.shape[0]:
            raise ValueError(
                f"labels must be 1-D with one entry per feature row ({features.shape[0]}); "
                f"got shape {labels.shape}."
            )
        classes, counts = np.unique(labels, return_counts=True)
        if classes.size < 2:
            raise ValueError(f"at least two classes are needed to fit; got {classes.tolist()!r}.")

        self.classes_ = classes
        self.chance_ = float(counts.max() / counts.sum())
        folds = _count_folds(labels) if cross_validate else 0
        if folds >= 2:
            splitter = StratifiedKFold(n_splits=folds, shuffle=True, random_state=self.random_state)
            pipeline = make_pipeline(StandardScaler(), self._make_estimator())
            predictions = cross_val_predict(pipeline, features, labels, cv=splitter)
            correct = int(np.count_nonzero(predictions == labels))
            self.cv_predictions_ = predictions
            self.cv_accuracy_ = correct / labels.size
            self.cv_accuracy_ci_ = wilson_interval(correct, labels.size)
        else:
            self.cv_predictions_ = None
            self.cv_accuracy_ = float("nan")
            self.cv_accuracy_ci_ = (0.0, 1.0)
        self.weak_ = bool(
            folds < 2
            or self.cv_accuracy_ < self.chance_ + 0.5 * (1.0 - self.chance_)
            or self.cv_accuracy_ci_[0] <= self.chance_
        )
        self.scaler_ = StandardScaler().fit(features)
        scaled = self.scaler_.transform(features).astype(solver_dtype, copy=False)
        self.estimator_ = self._make_estimator().fit(scaled, labels)
        return self

    # -- prediction -----------------------------------------------------------

    def predict_proba_features(self, features):
        """Class probabilities ``(N, n_classes)`` for raw features, columns in `classes_` order."""
        scaled = self.scaled(features)
        return self.estimator_.predict_proba(scaled)

    def predict_features(self, features):
        """Predicted labels for raw features."""
        scaled = self.scaled(features)
        return self.estimator_.predict(scaled)

    def predict_proba(self, images):
        """Class probabilities for a uint8 batch."""
        return self.predict_proba_features(self.featurize(images))

    def predict(self, images):
        """Predicted labels for a uint8 batch."""
        return self.predict_features(self.featurize(images))
