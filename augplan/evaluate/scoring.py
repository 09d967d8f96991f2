"""Scoring one arm against the baseline: accuracy, the paired gain test and the verdict word.

Validation images are the sampling unit. Each image's correctness is
averaged over the repeats of an arm; the gain is the mean over images of the
per-image difference between recipe and baseline. Its p-value is a paired
sign-flip permutation test over those per-image differences and its
interval is the set of gains that test does not reject, so ``p < 0.05``
exactly when the 95% interval excludes zero (`GAIN_RULE`). Accuracy
intervals are Wilson intervals with the validation images as n; Holm
adjusts the p-values across the recipes of one run (`VERDICT_RULE`).

References
----------
.. [1] M. D. Ernst, Statistical Science 19(4), 676-685, 2004.
.. [2] S. Holm, Scandinavian Journal of Statistics 6(2), 65-70, 1979.
.. [3] E. B. Wilson, JASA 22(158), 209-212, 1927.
"""

import numpy as np

from augplan.measure import stats
from augplan.thresholds import CONFIDENCE

__all__ = ["GAIN_RULE", "VERDICT_RULE", "gain_verdict", "score_predictions", "compare", "per_class_gain", "short",
           "round_value", "round_p"]

_ROUND = 6

# The level Holm's p is compared with: one minus the confidence of every
# interval, rounded so that 1 - 0.95 is the 0.05 every reader compares against.
_LEVEL_TEXT = f"{round(1.0 - CONFIDENCE, 12):g}"
_CONFIDENCE_TEXT = f"{100 * CONFIDENCE:g}%"

GAIN_RULE = ("image is the unit: per-image correctness averaged over repeats; gain interval and "
             "p-value from one paired sign-flip permutation test over the per-image differences "
             f"(the interval holds every gain the test does not reject), so p < {_LEVEL_TEXT} exactly when "
             f"the {_CONFIDENCE_TEXT} interval excludes zero")

VERDICT_RULE = ("a recipe gains (or loses) when its Holm-adjusted p-value across the recipes of the run is below "
                f"{_LEVEL_TEXT} and its gain is above (below) zero; otherwise there is no difference; a recipe "
                f"that gains or loses always has its {_CONFIDENCE_TEXT} gain interval above or below zero")


def round_value(value):
    """A figure of a document, rounded to six decimals (None stays None)."""
    return None if value is None else round(float(value), _ROUND)


def round_p(value):
    """A p-value to three significant digits (None stays None)."""
    # Significant digits, so a tiny p-value never prints as 0.
    return None if value is None else float(f"{float(value):.3g}")


def score_predictions(y_true, predictions, classes):
    """Pooled metrics of ``predictions`` (repeats, n) against ``y_true`` (n,), and per-image correctness."""
    repeats = predictions.shape[0]
    correct = predictions == y_true[None, :]
    summary = stats.summarise_predictions(np.tile(y_true, repeats), predictions.ravel(), classes)
    # Wilson interval over the validation images (Wilson 1927): the mean
    # accuracy of the repeats, with the validation sample's size as n. Unlike a
    # bootstrap it does not collapse to a point when every image is right.
    accuracy = float(correct.mean())
    low, high = stats.wilson_interval(accuracy * y_true.size, y_true.size)
    return {
        "n_images": int(y_true.size),
        "accuracy": round_value(accuracy),
        "accuracy_ci": [round_value(low), round_value(high)],
        "balanced_accuracy": round_value(summary["balanced_accuracy"]),
        "macro_f1": round_value(summary["macro_f1"]),
        "per_class_recall": {c: round_value(v) for c, v in summary["per_class_recall"].items()},
        # Pooled over repeats: each validation image counts once per repeat.
        "confusion": {"classes": list(classes), "counts": summary["confusion"], "repeats": int(repeats)},
        "repeat_accuracy": [round_value(v) for v in correct.mean(axis=1)],
    }, correct


def _round_bound(value):
    """A rounded interval end on the same side of zero as the end itself.

    The rule ``p < 0.05`` exactly when the interval excludes zero must
    survive rounding: an end a hair above zero never prints as zero.
    """
    rounded = round_value(value)
    step = 10.0 ** -_ROUND
    if value > 0 and rounded <= 0:
        return step
    if value < 0 and rounded >= 0:
        return -step
    return rounded


def compare(base_correct, new_correct, rng):
    """Gain of an arm over the baseline, its interval and p (the paired sign-flip test [1]_).

    Parameters
    ----------
    base_correct, new_correct : numpy.ndarray of bool, shape (repeats, n)
        Per-repeat correctness of each image.
    rng : numpy.random.Generator
        The test's resampling stream.

    Returns
    -------
    dict
        ``gain``, ``gain_ci``, ``p_value``.
    """
    test = stats.paired_gain_test(base_correct, new_correct, rng)
    return {"gain": round_value(test.gain), "gain_ci": [_round_bound(test.low), _round_bound(test.high)],
            "p_value": round_p(test.p_value)}


def per_class_gain(base_recall, new_recall):
    """Class -> recall of the arm minus the baseline's (None where either is undefined)."""
    return {c: (None if base_recall[c] is None or new_recall.get(c) is None
                else round_value(new_recall[c] - base_recall[c])) for c in base_recall}


def short(score):
    """The short block of a score (counts, accuracy, gain) for ``field`` and ``confirm``."""
    keys = ("n_images", "accuracy", "accuracy_ci", "gain", "gain_ci", "p_value")
    return {k: score[k] for k in keys if k in score}


def gain_verdict(gain, p_holm):
    """``gains``, ``no difference`` or ``loses``, by `VERDICT_RULE`.

    Holm's adjusted p is never below the test's own p, so a recipe that
    ``gains`` (``loses``) always has its 95% interval above (below) zero.
    """
    # The level is one minus the confidence of every interval (thresholds.CONFIDENCE).
    if p_holm >= round(1.0 - CONFIDENCE, 12) or gain == 0:
        return "no difference"
    return "gains" if gain > 0 else "loses"


