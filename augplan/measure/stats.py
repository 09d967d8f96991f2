"""Statistics for comparing classifiers: intervals, paired tests, multiplicity.

Everything here works on plain numpy arrays. Correctness arrays are boolean
(or 0/1) with one entry per validation image, optionally stacked over
training repeats as ``(repeats, n_images)``. The validation images are the
sampling unit: repeats of one image are averaged into one per-image value
before any test, so a comparison has as many observations as images, never
images times repeats. The gain's p-value and its interval come from one
sign-flip permutation test over the per-image differences (the interval is
the set of shifts it does not reject), so ``p < 0.05`` exactly when the 95%
interval excludes zero.

Randomness arrives only as a ``numpy.random.Generator``.
"""

from dataclasses import dataclass

import numpy as np
from scipy import stats

from augplan.thresholds import CONFIDENCE

__all__ = [
    "wilson_interval",
    "GainTest",
    "per_image_difference",
    "sign_flip_test",
    "paired_gain_test",
    "holm",
    "summarise_predictions",
]


def _check_confidence(confidence):
    confidence = float(confidence)
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1; got {confidence!r}.")
    return confidence


def wilson_interval(successes, n, confidence=CONFIDENCE):
    """Wilson score interval for a binomial proportion.

    Parameters
    ----------
    successes : int or array_like of int
        Number of successes, ``0 <= successes <= n``.
    n : int or array_like of int
        Number of trials (broadcast against ``successes``).
    confidence : float, default CONFIDENCE (0.95)
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


# Random sign patterns of the Monte Carlo sign-flip test; with the +1
# correction the smallest p-value is 1e-4 and the test keeps its level
# exactly (Phipson & Smyth 2010). Up to _EXACT_MAX_IMAGES images every one
# of the 2**n patterns is used instead (2**13 = 8192 < 10,000).
SIGN_FLIP_RESAMPLES = 9999
_EXACT_MAX_IMAGES = 13

# Upper bound on the number of sign entries held in memory at once.
_SIGN_CHUNK_ENTRIES = 4_000_000


@dataclass(frozen=True)
class GainTest:
    """A paired comparison over images: the gain, its interval, its p-value.

    Attributes
    ----------
    gain : float
        Mean over images of the per-image difference.
    low, high : float
        Confidence interval of the gain: every shift the test does not reject.
    p_value : float
        Two-sided p-value of no gain. ``p_value < 1 - confidence`` exactly
        when the interval excludes zero (``low > 0`` or ``high < 0``).
    n_images : int
        Number of images (the sampling units).
    exact : bool
        True when every sign pattern was used, False for random patterns.
    """

    gain: float
    low: float
    high: float
    p_value: float
    n_images: int
    exact: bool


def per_image_difference(correct_base, correct_new):
    """Per-image gain: mean correctness over repeats, new minus base.

    Parameters
    ----------
    correct_base, correct_new : array_like of bool, shape (n_images,) or (repeats, n_images)
        Correctness of two arms on the same images, in the same column order;
        rows are training repeats.

    Returns
    -------
    numpy.ndarray of float, shape (n_images,)
        Values in [-1, 1], multiples of ``1 / repeats``.
    """
    base, new = _paired_correctness(correct_base, correct_new)
    return new.mean(axis=0) - base.mean(axis=0)


def _sign_patterns(n, rng, n_resamples):
    """Chunks of sign patterns (rows of +1/-1) and whether they are all of them."""
    if n <= _EXACT_MAX_IMAGES:
        codes = np.arange(2 ** n)[:, None] >> np.arange(n)[None, :]
        return [(1 - 2 * (codes & 1)).astype(np.int8)], True
    chunk = max(1, _SIGN_CHUNK_ENTRIES // n)
    blocks = []
    for start in range(0, n_resamples, chunk):
        rows = min(chunk, n_resamples - start)
        blocks.append((2 * rng.integers(0, 2, size=(rows, n), dtype=np.int8) - 1).astype(np.int8))
    return blocks, False


def _pattern_interval(signs, d, total, tolerance):
    """Per sign pattern, the closed interval of shifts it counts as at least as extreme."""
    n = d.size
    a = signs.astype(float) @ d          # sum_i s_i d_i
    c = signs.sum(axis=1).astype(float)  # sum_i s_i
    # |a - c t| >= |total - n t| is q(t) = (c^2 - n^2) t^2 - 2 (a c - total n) t
    # + (a^2 - total^2) >= 0, a closed interval around total / n.
    lead = c * c - n * n
    half = a * c - total * n
    const = a * a - total * total
    degenerate = np.abs(c) == n          # all signs equal: always as extreme
    safe = np.where(degenerate, -1.0, lead)
    root = np.sqrt(np.maximum(half * half - safe * const, 0.0))
    low = np.where(degenerate, -np.inf, (half + root) / safe)
    high = np.where(degenerate, np.inf, (half - root) / safe)
    # Zero's membership is decided on q(0) itself, so rounding in the
    # roots can never split the p-value from the interval.
    counts_zero = const >= -tolerance
    low = np.where(counts_zero, np.minimum(low, 0.0), low)
    high = np.where(counts_zero, np.maximum(high, 0.0), high)
    outside = ~counts_zero & (low <= 0.0) & (high >= 0.0)
    tiny = np.nextafter(0.0, 1.0)
    if total > 0:
        low = np.where(outside, tiny, low)
    elif total < 0:
        high = np.where(outside, -tiny, high)
    return low, high


def _p_value_and_interval(lows, highs, exact, alpha):
    """The p-value of no gain and the interval's ends from every pattern's counted shifts."""
    extra = 0 if exact else 1
    patterns = lows.size
    at_zero = int(np.count_nonzero((lows <= 0.0) & (highs >= 0.0)))
    p_value = (extra + at_zero) / (extra + patterns)
    # Fewest counted patterns whose p-value reaches alpha, by the same float
    # expression as the p-value itself.
    needed = max(0, int(np.floor(alpha * (extra + patterns))) - extra - 2)
    while needed <= patterns and (extra + needed) / (extra + patterns) < alpha:
        needed += 1
    if needed <= 0:
        return p_value, -np.inf, np.inf
    return p_value, float(np.sort(lows)[needed - 1]), float(np.sort(highs)[::-1][needed - 1])


def sign_flip_test(differences, rng, n_resamples=SIGN_FLIP_RESAMPLES, confidence=CONFIDENCE):
    """Sign-flip permutation test of a mean difference, and the interval it implies.

    Parameters
    ----------
    differences : array_like of float, shape (n,)
        One paired difference per sampling unit (here: per validation image).
    rng : numpy.random.Generator
        Source of the random sign patterns (unused when ``n <= 13``).
    n_resamples : int, default 9999
        Random sign patterns when ``n > 13``.
    confidence : float, default CONFIDENCE (0.95)
        Level of the interval; the test's level is ``1 - confidence``.

    Returns
    -------
    GainTest

    Raises
    ------
    ValueError
        No differences, non-finite values, a bad ``n_resamples`` or
        ``confidence``, or an ``rng`` that is not a ``numpy.random.Generator``.

    Notes
    -----
    Under no gain, the sign of each image's difference is as likely + as -
    (the two arms are exchangeable image by image). The statistic is
    :math:`|\\sum_i d_i|`; its null distribution comes from the sums
    :math:`\\sum_i s_i d_i` over sign patterns :math:`s`: all :math:`2^n` of
    them for ``n <= 13`` (exact, as ``scipy.stats.permutation_test``
    enumerates them), otherwise ``n_resamples`` random ones with
    :math:`p = (1 + k) / (1 + B)`, which keeps the level exact [2]_.

    The interval is the set of shifts :math:`\\theta` that the same test,
    on the same sign patterns, does not reject for :math:`d_i - \\theta`
    (test inversion [1]_). For each pattern the shifts it counts for form a
    closed interval around the mean, so the set is one interval whose ends
    are order statistics of those per-pattern ends. Zero lies in it exactly
    when the test of no gain does not reject: **p < 1 - confidence exactly
    when the interval excludes zero**.

    References
    ----------
    .. [1] M. D. Ernst, "Permutation methods: a basis for exact inference",
       Statistical Science 19(4), 676-685, 2004 (sections 2 and 5).
    .. [2] B. Phipson and G. K. Smyth, "Permutation p-values should never be
       zero", Statistical Applications in Genetics and Molecular Biology
       9(1), article 39, 2010.

    Examples
    --------
    >>> result = sign_flip_test([0.2, 0.4, 0.0, 0.2, -0.2, 0.6], np.random.default_rng(0))
    >>> round(result.gain, 4), round(result.p_value, 4), result.exact
    (0.2, 0.25, True)
    """
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}.")
    # Rounded so that 1 - 0.95 is the 0.05 every reader compares against.
    alpha = round(1.0 - _check_confidence(confidence), 12)
    if isinstance(n_resamples, bool) or int(n_resamples) != n_resamples or int(n_resamples) < 1:
        raise ValueError(f"n_resamples must be a positive integer; got {n_resamples!r}.")
    d = np.asarray(differences, dtype=float)
    if d.ndim != 1 or d.size == 0:
        raise ValueError(f"differences must be a non-empty 1-D array; got shape {d.shape}.")
    if not np.all(np.isfinite(d)):
        raise ValueError("differences must be finite numbers; got NaN or infinity.")
    n = d.size
    total = float(d.sum())
    # Sums of differences agree to rounding only; the tolerance is far below
    # any real gap for differences on a grid of 1/repeats.
    tolerance = 1e-9 * max(1.0, float(np.abs(d).sum())) ** 2
    blocks, exact = _sign_patterns(n, rng, int(n_resamples))
    ends = [_pattern_interval(signs, d, total, tolerance) for signs in blocks]
    lows, highs = np.concatenate([low for low, _ in ends]), np.concatenate([high for _, high in ends])
    p_value, interval_low, interval_high = _p_value_and_interval(lows, highs, exact, alpha)
    return GainTest(gain=total / n, low=interval_low, high=interval_high, p_value=float(min(1.0, p_value)),
                    n_images=int(n), exact=bool(exact))


def paired_gain_test(correct_base, correct_new, rng, n_resamples=SIGN_FLIP_RESAMPLES,
                     confidence=CONFIDENCE):
    """Accuracy gain of a new arm over a base arm, with the image as the unit.

    Parameters
    ----------
    correct_base, correct_new : array_like of bool, shape (n_images,) or (repeats, n_images)
        Correctness of the two arms on the same images; rows are training
        repeats, which are averaged per image (repeats of one image are not
        independent observations).
    rng : numpy.random.Generator
    n_resamples, confidence
        As in `sign_flip_test`.

    Returns
    -------
    GainTest
        The gain is the mean accuracy of the new arm minus that of the base
        arm over all repeats and images; interval and p-value come from
        `sign_flip_test` on the per-image differences, bounded to [-1, 1].
    """
    differences = per_image_difference(correct_base, correct_new)
    # Exact arithmetic: on the grid of 1/repeats the differences times the
    # number of repeats are whole numbers, so ties are decided exactly.
    repeats = np.atleast_2d(np.asarray(correct_base)).shape[0]
    whole = np.rint(differences * repeats)
    result = sign_flip_test(whole, rng, n_resamples=n_resamples, confidence=confidence)
    return GainTest(gain=float(differences.mean()), low=max(-1.0, result.low / repeats),
                    high=min(1.0, result.high / repeats), p_value=result.p_value,
                    n_images=result.n_images, exact=result.exact)


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
