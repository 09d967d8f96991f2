"""Confirmation of label safety: does training with a transform teach wrong labels?

The checker's screen (`augplan.check.screen`) asks where transformed images
land; a transform it does not clear is confirmed here by what matters to a
user (the models are trained by `augplan.check.witnesses`). The same proxy model is trained twice on the same cross-validation
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
  confusion rise out of it are below ``EQUIVALENCE_MARGIN`` (0.15; an
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
from typing import NamedTuple

import numpy as np

from augplan.measure.stats import paired_gain_test
from augplan.thresholds import CONFIRM_CONFIDENCE, EQUIVALENCE_MARGIN, MIN_EVIDENCE, PAIR_MARGIN

__all__ = [
    "TOO_FEW",
    "ClassChange",
    "PairChange",
    "RangeVerdict",
    "compare_predictions",
    "pair_breaks",
    "class_verdict",
    "judge",
]

# Sign patterns of each paired test (the numbers of the rule live in
# augplan.thresholds, with their sources).
N_RESAMPLES = 1999
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
    result = paired_gain_test(base_hits, new_hits, rng, n_resamples=N_RESAMPLES, confidence=CONFIRM_CONFIDENCE)
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
    if change.high < EQUIVALENCE_MARGIN and all(pair.high < EQUIVALENCE_MARGIN for pair in pairs):
        return "safe"
    return "unverified"


class RangeVerdict(NamedTuple):
    """The confirmation's verdict of one range of one transform."""

    overall: str        # 'breaks', 'safe' or 'unverified'
    entries: dict       # class index -> the JSON's per-class entry
    passing: list       # PairChange items that break (the confirmed swaps)
    others: list        # (PairChange, witnessed) for the other rises


def _class_entry(change, verdict):
    return {"verdict": verdict, "n": change.n, "recall_base": round(change.recall_base, 4),
            "recall_augmented": round(change.recall_augmented, 4), "recall_fall": round(change.fall, 4),
            "recall_fall_ci": [round(change.low, 4), round(change.high, 4)]}


def judge(labels, base_pred, predictions, n_classes, checked, weak, seen, rng):
    """Confirmation verdict of one range from the witnesses' predictions.

    A pair breaks when the model trained on replaced images shows a rise of
    the confusion ``B -> A`` that passes `pair_breaks` and the screen
    witnessed A's transformed images taking B's look (``seen[A, B]``,
    `augplan.check.rules.witness_holds`): two witnesses, so a proxy that
    merely fails on a look it was not trained on (a domain shift) cannot
    call a label changed. Safety is judged on the model trained with the
    originals plus copies, as a recipe is used.

    Parameters
    ----------
    labels, base_pred : numpy.ndarray of int, shape (N,)
        Classes of the held-out originals and the baseline proxy's predictions.
    predictions : dict
        ``{"replace", "add"}`` predictions, and ``"replace_base"`` when the
        replaced model has a baseline of its own kind (the network's).
    n_classes : int
    checked : list of int
        Classes in the transform's scope.
    weak : bool
        The proxy is weak: nothing is called safe.
    seen : numpy.ndarray of bool, shape (n_classes, n_classes)
        The screen's witnesses.
    rng : numpy.random.Generator
        This range's own stream (sign patterns of the paired tests).

    Returns
    -------
    RangeVerdict
    """
    rng_replace, rng_add = rng.spawn(2)
    _, replaced = compare_predictions(labels, predictions.get("replace_base", base_pred), predictions["replace"],
                                      n_classes, rng_replace)
    changes, pairs = compare_predictions(labels, base_pred, predictions["add"], n_classes, rng_add)
    counts = np.bincount(labels, minlength=n_classes)
    passing = [p for p in replaced if pair_breaks(p) and seen[p.target, p.source]
               and counts[p.target] >= MIN_EVIDENCE]
    culprits = {p.target for p in passing}
    verdicts = {}
    for change in changes:
        own = class_verdict(change, [p for p in pairs if p.source == change.index])
        # Only the two witnesses can say breaks; a weak proxy vouches for nothing.
        verdicts[change.index] = "unverified" if own == "breaks" or (own == "safe" and weak) else own
    if passing:
        overall = "breaks"
    elif all(v == "safe" for v in verdicts.values()):
        overall = "safe"
    else:
        overall = "unverified"
    entries = {change.index: _class_entry(change, "breaks" if change.index in culprits else verdicts[change.index])
               for change in changes if change.index in checked}
    shown = {(p.source, p.target) for p in passing}
    others = [(p, bool(seen[p.target, p.source])) for p in replaced if (p.source, p.target) not in shown and p.rise > 0]
    return RangeVerdict(overall, entries, passing, others)
