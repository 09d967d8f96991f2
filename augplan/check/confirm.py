"""Confirmation of label safety: does training with a transform teach wrong labels?

The checker's screen (`augplan.check.check`) asks where transformed images
land; a transform it does not clear is confirmed here by what matters to a
user. The same proxy model is trained twice on the same cross-validation
folds with the same seed, once on the original images and once with the
transform applied to every image in its scope, and both predict the same
held-out *original* images. Each image is then a paired observation: its
class, the base model's prediction and the augmented model's prediction.

Decision rule
-------------
For every class ``A`` with at least ``MIN_EVIDENCE`` images and every other
class ``B``, the confusion ``A -> B`` is the share of ``A``'s held-out
originals predicted as ``B``; its *rise* is the augmented model's share
minus the base model's, with an interval over ``A``'s images that inverts
a paired sign-flip test (each image one unit, both models on it), whose
bounds are one-sided 95% bounds (the 90% two-sided interval of Schuirmann's
two one-sided tests).

- A pair **breaks** when its rise exceeds ``PAIR_MARGIN`` (0.10), its
  interval lies above zero, and the rise exceeds the pair's own baseline
  confusion (the confusion at least doubles). A class breaks when one of
  its pairs does; the reported swaps are exactly these pairs.
- A class is **safe** when the upper bounds of its recall fall and of every
  confusion rise out of it are below ``RECALL_MARGIN`` (0.15; an
  equivalence test).
- Otherwise the class is **unverified**; a class with fewer than
  ``MIN_EVIDENCE`` images is *too few images to judge*.

Capacity is not label change. A small linear proxy loses a little accuracy
from any widening it cannot represent; that loss is diffuse (spread over
classes, mostly at pairs the model already confuses, each growing in
proportion) and does not pass the pair rule, though it can keep a class from
being safe. A label change is specific: images of ``A`` go to one ``B``
far beyond that pair's baseline confusion.

References
----------
.. [1] M. D. Ernst, "Permutation methods: a basis for exact inference",
   Statistical Science 19(4), 676-685, 2004 (test inversion).
.. [2] D. J. Schuirmann, "A comparison of the two one-sided tests procedure
   and the power approach for assessing the equivalence of average
   bioavailability", J. Pharmacokinetics and Biopharmaceutics 15(6),
   657-680, 1987 (equivalence: the interval's bound inside the margin).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from augplan.measure.stats import paired_gain_test
from augplan.thresholds import CONFIRM_CONFIDENCE, EQUIVALENCE_MARGIN, MIN_EVIDENCE, PAIR_MARGIN

__all__ = [
    "MIN_EVIDENCE",
    "PAIR_MARGIN",
    "RECALL_MARGIN",
    "TOO_FEW",
    "ClassChange",
    "PairChange",
    "compare_predictions",
    "pair_breaks",
    "class_verdict",
]

# The numbers of the rule live in augplan.thresholds, with their sources.
RECALL_MARGIN = EQUIVALENCE_MARGIN
N_RESAMPLES = 1999
CONFIDENCE = CONFIRM_CONFIDENCE
TOO_FEW = "too few images to judge"


@dataclass(frozen=True)
class PairChange:
    """Confusion ``source -> target`` of the base and augmented models on held-out originals."""

    source: int
    target: int
    n: int
    base: float
    augmented: float
    rise: float
    low: float
    high: float
    moved: int


@dataclass(frozen=True)
class ClassChange:
    """Recall of one class under both models, with the interval of its fall."""

    index: int
    n: int
    recall_base: float
    recall_augmented: float
    fall: float
    low: float
    high: float


def pair_breaks(pair):
    """Whether one confusion rise passes the module's rule for a label change.

    The confused class needs at least ``MIN_EVIDENCE`` images: fewer are too
    few to judge, never a break.
    """
    return pair.n >= MIN_EVIDENCE and pair.rise > PAIR_MARGIN and pair.low > 0.0 and pair.rise > pair.base


def _paired(base_hits, new_hits, rng):
    """Mean paired difference (new - base) of two 0/1 vectors with its interval.

    The interval inverts the sign-flip test over images
    (`augplan.measure.stats.paired_gain_test`), so it excludes zero exactly
    when that test rejects no change.
    """
    if np.array_equal(base_hits, new_hits):
        value = float(np.mean(new_hits) - np.mean(base_hits))
        return value, value, value
    result = paired_gain_test(base_hits, new_hits, rng, n_resamples=N_RESAMPLES, confidence=CONFIDENCE)
    return result.gain, result.low, result.high


def compare_predictions(labels, base_pred, augmented_pred, n_classes, rng):
    """Per-class recall falls and per-pair confusion rises, paired per image.

    Parameters
    ----------
    labels, base_pred, augmented_pred : numpy.ndarray of int, shape (N,)
        True class of each held-out original and the two models'
        predictions of it (class indices ``0 .. n_classes - 1``).
    n_classes : int
    rng : numpy.random.Generator
        Source of the sign patterns of the paired tests.

    Returns
    -------
    classes : list of ClassChange
        One per class present in ``labels``.
    pairs : list of PairChange
        Every pair ``A -> B`` (``A != B``) where either model confuses at
        least one image of ``A`` with ``B``.

    References
    ----------
    .. [1] M. D. Ernst, "Permutation methods: a basis for exact inference",
       Statistical Science 19(4), 676-685, 2004.
    """
    labels, base_pred, augmented_pred = (np.asarray(a) for a in (labels, base_pred, augmented_pred))
    if not (labels.shape == base_pred.shape == augmented_pred.shape) or labels.ndim != 1:
        raise ValueError(f"labels and both predictions must be 1-D of one length; got {labels.shape}, "
                         f"{base_pred.shape} and {augmented_pred.shape}")
    classes, pairs = [], []
    for a in range(n_classes):
        rows = labels == a
        n = int(rows.sum())
        if n == 0:
            continue
        base_a, new_a = base_pred[rows], augmented_pred[rows]
        gain, low, high = _paired(base_a == a, new_a == a, rng)
        classes.append(ClassChange(a, n, float(np.mean(base_a == a)), float(np.mean(new_a == a)),
                                   -gain, -high, -low))
        for b in range(n_classes):
            if b == a or not (np.any(base_a == b) or np.any(new_a == b)):
                continue
            rise, low, high = _paired(base_a == b, new_a == b, rng)
            pairs.append(PairChange(a, b, n, float(np.mean(base_a == b)), float(np.mean(new_a == b)),
                                    rise, low, high, int(np.sum(new_a == b))))
    return classes, pairs


def class_verdict(change, pairs):
    """Verdict of one class from its recall change and the rises out of it.

    Parameters
    ----------
    change : ClassChange
    pairs : list of PairChange
        The pairs whose ``source`` is this class.

    Returns
    -------
    str
        ``"breaks"``, ``"safe"``, ``"unverified"`` or `TOO_FEW`.
    """
    if change.n < MIN_EVIDENCE:
        return TOO_FEW
    if any(pair_breaks(pair) for pair in pairs):
        return "breaks"
    if change.high < RECALL_MARGIN and all(pair.high < RECALL_MARGIN for pair in pairs):
        return "safe"
    return "unverified"
