"""Statistics for comparing classifiers: intervals, paired tests, multiplicity.

Everything here works on plain numpy arrays. Correctness arrays are boolean
(or 0/1) with one entry per validation image, optionally stacked over
training repeats as ``(repeats, n_images)``. The validation images are the
sampling unit: bootstrap resampling draws images (columns), never single
entries, so the repeats of one image stay together and both arms of a
comparison see the same resampled images.

Randomness arrives only as a ``numpy.random.Generator``.
"""

import numpy as np
from scipy import stats

__all__ = [
    "wilson_interval",
    "paired_bootstrap_gain",
    "mcnemar_exact",
    "holm",
    "summarise_predictions",
]

# Upper bound on the number of resampled indices held in memory at once by
# the bootstrap (an int64 array of this many entries is 32 MB).
_BOOTSTRAP_CHUNK_ENTRIES = 4_000_000


def _check_confidence(confidence):
    confidence = float(confidence)
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1; got {confidence!r}.")
    return confidence


def wilson_interval(successes, n, confidence=0.95):
    """Wilson score interval for a binomial proportion.

    Parameters
    ----------
    successes : int or array_like of int
        Number of successes, ``0 <= successes <= n``.
    n : int or array_like of int
        Number of trials (broadcast against ``successes``).
    confidence : float, default 0.95
        Two-sided confidence level in (0, 1).

    Returns
    -------
    low, high : float or numpy.ndarray
        Interval bounds in [0, 1]; floats for scalar input, arrays of the
        broadcast shape otherwise. Where ``n == 0`` the interval is
        ``(0.0, 1.0)`` (nothing is known).

    Raises
    ------
    ValueError
        If counts are negative, ``successes > n`` or ``confidence`` is not in
        (0, 1).

    Notes
    -----
    With :math:`\\hat p = k/n` and :math:`z` the standard normal quantile at
    :math:`1 - (1 - c)/2`, the bounds are

    .. math:: \\frac{\\hat p + z^2/(2n) \\pm z \\sqrt{\\hat p(1-\\hat p)/n + z^2/(4n^2)}}{1 + z^2/n}

    Unlike the Wald interval it never leaves [0, 1] and keeps sensible
    coverage at ``k = 0`` and ``k = n`` [1]_.

    References
    ----------
    .. [1] E. B. Wilson, "Probable inference, the law of succession, and
       statistical inference", Journal of the American Statistical
       Association 22(158), 209-212, 1927.

    Examples
    --------
    >>> low, high = wilson_interval(8, 10)
    >>> round(low, 4), round(high, 4)
    (0.4902, 0.9433)
    """
    confidence = _check_confidence(confidence)
    k = np.asarray(successes, dtype=float)
    m = np.asarray(n, dtype=float)
    scalar = k.ndim == 0 and m.ndim == 0
    k, m = np.broadcast_arrays(k, m)
    if np.any(m < 0) or np.any(k < 0):
        raise ValueError(f"successes and n must be non-negative; got successes={successes!r}, n={n!r}.")
    if np.any(k > m):
        raise ValueError(f"successes must not exceed n; got successes={successes!r}, n={n!r}.")
    z = stats.norm.ppf(1.0 - (1.0 - confidence) / 2.0)
    empty = m == 0
    m_safe = np.where(empty, 1.0, m)
    p_hat = k / m_safe
    denominator = 1.0 + z * z / m_safe
    centre = (p_hat + z * z / (2.0 * m_safe)) / denominator
    half = z * np.sqrt(p_hat * (1.0 - p_hat) / m_safe + z * z / (4.0 * m_safe * m_safe)) / denominator
    low = np.where(empty, 0.0, np.clip(centre - half, 0.0, 1.0))
    high = np.where(empty, 1.0, np.clip(centre + half, 0.0, 1.0))
    if scalar:
        return float(low), float(high)
    return low, high


def _paired_correctness(correct_base, correct_new):
    """Validate two correctness arrays and return them as 2-D float arrays."""
    base = np.asarray(correct_base)
    new = np.asarray(correct_new)
    for name, array in (("correct_base", base), ("correct_new", new)):
        if array.ndim not in (1, 2):
            raise ValueError(
                f"{name} must have shape (n_images,) or (repeats, n_images); got shape {array.shape}."
            )
        if array.dtype != bool and not np.isin(array, (0, 1)).all():
            raise ValueError(f"{name} must be boolean (or 0/1); got values outside {{0, 1}}.")
    if base.shape != new.shape:
        raise ValueError(
            f"correct_base and correct_new must have the same shape; got {base.shape} and {new.shape}."
        )
    if base.shape[-1] == 0 or base.size == 0:
        raise ValueError("correct_base and correct_new must hold at least one image; got none.")
    return np.atleast_2d(base).astype(bool), np.atleast_2d(new).astype(bool)


def paired_bootstrap_gain(correct_base, correct_new, rng, n_resamples=2000, confidence=0.95):
    """Accuracy gain of a new model over a base model with a paired bootstrap interval.

    Parameters
    ----------
    correct_base, correct_new : array_like of bool, shape (n_images,) or (repeats, n_images)
        Per-image correctness of the base and new model on the same
        validation images, in the same column order; rows are independent
        training repeats (pooled).
    rng : numpy.random.Generator
        Source of the resampling indices.
    n_resamples : int, default 2000
        Number of bootstrap resamples.
    confidence : float, default 0.95
        Two-sided confidence level in (0, 1).

    Returns
    -------
    gain : float
        Mean accuracy of the new model minus that of the base model, over all
        repeats and images.
    low, high : float
        Percentile bootstrap interval of the gain [1]_.

    Raises
    ------
    ValueError
        On mismatched shapes, non-boolean values, no images, a bad
        ``n_resamples`` or ``confidence``, or an ``rng`` that is not a
        ``numpy.random.Generator``.

    Notes
    -----
    Each resample draws ``n_images`` validation images with replacement and
    uses the same draw for both models (paired), so image difficulty cancels
    out. Every repeat has the same number of images, so the pooled gain is
    the mean over images of the per-image gain averaged over repeats; the
    resampling works on that per-image vector. Resamples are drawn in
    chunks to bound memory; the result depends only on ``rng``'s state.

    References
    ----------
    .. [1] B. Efron and R. J. Tibshirani, "An Introduction to the Bootstrap",
       Chapman & Hall, 1993, chapter 13 (percentile intervals).
    """
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}.")
    confidence = _check_confidence(confidence)
    n_resamples = int(n_resamples)
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be a positive integer; got {n_resamples}.")
    base, new = _paired_correctness(correct_base, correct_new)
    per_image = new.mean(axis=0) - base.mean(axis=0)
    n_images = per_image.size
    gain = float(per_image.mean())
    chunk = max(1, _BOOTSTRAP_CHUNK_ENTRIES // n_images)
    resampled = np.empty(n_resamples)
    for start in range(0, n_resamples, chunk):
        stop = min(start + chunk, n_resamples)
        indices = rng.integers(0, n_images, size=(stop - start, n_images))
        resampled[start:stop] = per_image[indices].mean(axis=1)
    alpha = 1.0 - confidence
    low, high = np.percentile(resampled, [100.0 * alpha / 2.0, 100.0 * (1.0 - alpha / 2.0)])
    return gain, float(low), float(high)


def mcnemar_exact(correct_base, correct_new):
    """Exact (binomial) McNemar test that two models have the same accuracy.

    Parameters
    ----------
    correct_base, correct_new : array_like of bool, shape (n_images,) or (repeats, n_images)
        Per-image correctness of the two models on the same images.

    Returns
    -------
    float
        Two-sided p-value ``min(1, 2 * P(X <= min(b, c)))`` with
        ``X ~ Binomial(b + c, 1/2)``, where ``b`` counts pairs only the base
        model got right and ``c`` pairs only the new model got right. 1.0
        when there are no discordant pairs.

    Notes
    -----
    Repeats are pooled: every (repeat, image) entry counts as one pair. The
    repeats share images, so the pairs are not fully independent and the
    p-value is somewhat optimistic when repeats > 1; the paired bootstrap,
    which resamples whole images, does not have this problem.

    References
    ----------
    .. [1] Q. McNemar, "Note on the sampling error of the difference between
       correlated proportions or percentages", Psychometrika 12(2), 153-157,
       1947.
    .. [2] M. W. Fagerland, S. Lydersen and P. Laake, "The McNemar test for
       binary matched-pairs data: mid-p and asymptotic are better than exact
       conditional", BMC Medical Research Methodology 13, 91, 2013.
    """
    base, new = _paired_correctness(correct_base, correct_new)
    only_base = int(np.count_nonzero(base & ~new))
    only_new = int(np.count_nonzero(new & ~base))
    discordant = only_base + only_new
    if discordant == 0:
        return 1.0
    # Binomial CDF at 1/2 via the regularised incomplete beta; exact for
    # integer counts and stable for large totals.
    smaller = min(only_base, only_new)
    tail = float(stats.binom.cdf(smaller, discordant, 0.5))
    return min(1.0, 2.0 * tail)


def holm(p_values):
    """Holm step-down adjustment of p-values for multiple comparisons.

    Parameters
    ----------
    p_values : array_like of float, shape (m,)
        Unadjusted p-values in [0, 1].

    Returns
    -------
    numpy.ndarray of float, shape (m,)
        Adjusted p-values in the input order. Rejecting every hypothesis
        whose adjusted value is at most ``alpha`` controls the family-wise
        error rate at ``alpha``.

    Raises
    ------
    ValueError
        If the input is not one-dimensional or holds values outside [0, 1]
        (NaN included).

    Notes
    -----
    With the p-values sorted ascending, :math:`p_{(1)} \\le \\dots \\le p_{(m)}`,
    the adjusted value of the i-th is
    :math:`\\max_{j \\le i} \\min(1, (m - j + 1) p_{(j)})`; the running maximum
    makes the adjustment monotone in the unadjusted p-value [1]_.

    References
    ----------
    .. [1] S. Holm, "A simple sequentially rejective multiple test
       procedure", Scandinavian Journal of Statistics 6(2), 65-70, 1979.
    """
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise ValueError(f"p_values must be one-dimensional; got shape {p.shape}.")
    if not np.all((p >= 0.0) & (p <= 1.0)):
        raise ValueError(f"p_values must lie in [0, 1]; got {p.tolist()!r}.")
    m = p.size
    if m == 0:
        return p.copy()
    order = np.argsort(p, kind="stable")
    multipliers = np.arange(m, 0, -1, dtype=float)
    stepped = np.maximum.accumulate(np.minimum(1.0, multipliers * p[order]))
    adjusted = np.empty(m)
    adjusted[order] = stepped
    return adjusted


def summarise_predictions(y_true, y_pred, classes):
    """Accuracy, balanced accuracy, macro F1 and per-class recall.

    Parameters
    ----------
    y_true, y_pred : array_like, shape (n,)
        True and predicted labels.
    classes : sequence
        Every class to report, in order; a class absent from ``y_true`` gets
        recall NaN (reported as ``None``).

    Returns
    -------
    dict
        ``{"n", "accuracy", "balanced_accuracy", "macro_f1",
        "per_class_recall": {class: recall or None}, "confusion"}`` with plain
        Python numbers, ready for JSON; ``confusion[i][j]`` counts the
        predictions of ``classes[j]`` for true ``classes[i]``.

    Notes
    -----
    Balanced accuracy and macro F1 average over the classes of ``classes``
    that occur in ``y_true``, so an unused class does not drag them down.
    """
    from sklearn.metrics import confusion_matrix, f1_score, recall_score

    y_true = np.asarray(y_true)
    y_pred = np.asarray(y_pred)
    if y_true.shape != y_pred.shape or y_true.ndim != 1:
        raise ValueError(
            f"y_true and y_pred must be 1-D and the same length; got shapes {y_true.shape} and {y_pred.shape}."
        )
    if y_true.size == 0:
        raise ValueError("y_true and y_pred must hold at least one prediction; got none.")
    classes = list(classes)
    recalls = recall_score(y_true, y_pred, labels=classes, average=None, zero_division=np.nan)
    present = np.isin(classes, y_true)
    present_classes = [c for c, ok in zip(classes, present) if ok]
    f1 = f1_score(y_true, y_pred, labels=present_classes, average="macro", zero_division=0.0)
    return {
        "n": int(y_true.size),
        "accuracy": float(np.mean(y_true == y_pred)),
        "balanced_accuracy": float(np.mean(recalls[present])),
        "macro_f1": float(f1),
        "per_class_recall": {
            (c.item() if isinstance(c, np.generic) else c): (float(r) if ok else None)
            for c, r, ok in zip(classes, recalls, present)
        },
        "confusion": confusion_matrix(y_true, y_pred, labels=classes).tolist(),
    }
