"""The checker's rules in words and as small predicates: what clears, witnesses or is typical.

Each predicate decides one word of the verdict from counts or distances;
the numbers they compare against live in `augplan.thresholds`, and
`DECISION_RULE`, the text every report prints, is written from the same
constants.

References
----------
.. [1] E. B. Wilson, "Probable inference, the law of succession, and
   statistical inference", JASA 22(158), 209-212, 1927.
"""

from __future__ import annotations

import numpy as np

from augplan.measure.stats import wilson_interval
from augplan.thresholds import (CONFIDENCE, CONFIRM_CONFIDENCE, EQUIVALENCE_MARGIN, MIN_EVIDENCE, PAIR_MARGIN,
                                RELABEL_TYPICAL_SHARE, SCREEN_MARGIN, SWAP_WITNESS_MARGIN, TURN_DEGREES,
                                TYPICAL_PERCENTILE)

__all__ = ["DECISION_RULE", "SWAPPING_OPS", "screen_clears", "witness_holds", "typical_share", "nested_ranges",
           "can_swap_classes"]

# Ops whose images can take another class's look as a whole (a mirror, a
# turn of the image, a hue turn), so that a relabel can undo the swap.
# Rotations, zooms and shifts only widen a class: never relabelled.
SWAPPING_OPS = ("flip", "hue")

DECISION_RULE = (
    "Two stages. Screen: with out-of-fold predictions of the proxy model, the transform is "
    "cleared (safe) when at every magnitude every class in its scope has at least "
    f"{MIN_EVIDENCE} images and the upper Wilson {CONFIDENCE:.0%} bounds of the shares of its transformed "
    "images that land in another class or outside every class stay within "
    f"{SCREEN_MARGIN:.2f} of the same shares for its held-out originals. Confirmation, for every "
    "transform the screen does not clear: the proxy is trained on the same folds without the "
    "transform, with the images in scope replaced by transformed copies (probability 1, across "
    "the range), and with the originals plus those copies, and each predicts the held-out "
    "original images. A swap A -> B breaks when, for the replaced model, the confusion B -> A "
    f"rises by more than {PAIR_MARGIN:.2f} with its sign-flip test interval over images above "
    "zero and by more than "
    "the pair's own baseline confusion (a label change is specific; a capacity loss is spread "
    "over pairs the model already confuses), and the screen witnessed it: the lower Wilson "
    f"{CONFIDENCE:.0%} "
    "bound of the share of A's transformed images that the proxy calls B exceeds the share of A's "
    f"held-out originals it calls B by more than {SWAP_WITNESS_MARGIN:.2f} (a real share, never "
    "one image). A transform is safe when, for the originals-plus-copies model, the upper bound of every "
    f"class's recall fall and of every confusion rise are below {EQUIVALENCE_MARGIN:.2f} (an "
    "equivalence test); otherwise it is unverified. A relabel is offered only for a mirror or a "
    "fixed turn (of the image or of hue) whose confirmed swaps close a cycle and, at every step, "
    "most of A's transformed images are typical of B (no farther from B's originals than the "
    f"{TYPICAL_PERCENTILE:.0f}th percentile of B's own held-out originals; the lower Wilson {CONFIDENCE:.0%} "
    f"bound of their share at least {RELABEL_TYPICAL_SHARE:.2f}), in both directions of a pair; "
    "otherwise the class is scoped out. The confirmation's bounds are one-sided "
    f"{(1 + CONFIRM_CONFIDENCE) / 2:.0%} bounds. A class with fewer than {MIN_EVIDENCE} "
    "images is too few images to judge, never breaks; nothing is safe when the proxy is weak. "
    "A lighting move into a class that lighting alone singles out in the training data, while "
    "structure also separates the classes, is unverified (a possible shortcut) unless a "
    "labelled field sample confirms lighting as the cue."
)


def screen_clears(moved, left, n, baseline_change, baseline_leave, margin=SCREEN_MARGIN):
    """Whether the screen clears one class at one magnitude.

    Parameters
    ----------
    moved, left, n : int
        Transformed images (one per original) that moved to another class,
        landed outside every region, and in total.
    baseline_change, baseline_leave : float
        The same shares for the class's held-out originals.
    margin : float, default `augplan.thresholds.SCREEN_MARGIN`

    Returns
    -------
    bool
        True when ``n >= MIN_EVIDENCE`` and the upper Wilson 95% bounds of
        both shares are at most their baseline plus ``margin``.

    References
    ----------
    .. [1] E. B. Wilson, JASA 22(158), 209-212, 1927.
    """
    if n < MIN_EVIDENCE:
        return False
    return (wilson_interval(moved, n)[1] <= baseline_change + margin
            and wilson_interval(left, n)[1] <= baseline_leave + margin)


def witness_holds(count, n, baseline, margin=SWAP_WITNESS_MARGIN):
    """Whether the screen witnesses a swap: a real share of a class, never a few images.

    Parameters
    ----------
    count, n : int
        Transformed images of class A that the out-of-fold proxy calls B, and
        A's transformed images in total.
    baseline : float
        Share of A's held-out originals that the proxy calls B.
    margin : float, default `augplan.thresholds.SWAP_WITNESS_MARGIN`

    Returns
    -------
    bool
        True when ``n >= MIN_EVIDENCE`` and the lower Wilson 95% bound of
        ``count / n`` exceeds ``baseline + margin``.

    References
    ----------
    .. [1] E. B. Wilson, "Probable inference, the law of succession, and
       statistical inference", JASA 22(158), 209-212, 1927.
    """
    if n < MIN_EVIDENCE:
        return False
    return bool(wilson_interval(int(count), int(n))[0] > baseline + margin)


def typical_share(ratios, own_ratios, percentile=TYPICAL_PERCENTILE):
    """Share of transformed images as close to class B as B's own held-out originals are.

    Parameters
    ----------
    ratios : numpy.ndarray, shape (M,)
        Region ratio ``r_B = d_B / t_B`` of each transformed image of A.
    own_ratios : numpy.ndarray, shape (K,)
        The same ratio for each of B's held-out originals (its own source
        left out).
    percentile : float, default `augplan.thresholds.TYPICAL_PERCENTILE`

    Returns
    -------
    float
        Share of ``ratios`` at most the ``percentile``-th percentile of
        ``own_ratios`` (linear interpolation, numpy's default); B's own
        originals score ``percentile / 100`` up to ties. 0.0 when ``ratios``
        is empty.
    """
    ratios = np.asarray(ratios, dtype=np.float64)
    own_ratios = np.asarray(own_ratios, dtype=np.float64)
    if own_ratios.ndim != 1 or len(own_ratios) == 0:
        raise ValueError(f"own_ratios must be a non-empty 1-D array; got shape {own_ratios.shape}")
    if len(ratios) == 0:
        return 0.0
    return float(np.mean(ratios <= np.percentile(own_ratios, percentile)))


def nested_ranges(values, identity):
    """Grid ranges nested around the identity magnitude, widest first.

    Parameters
    ----------
    values : sequence of float
        Ascending grid values (the identity included when the range holds it).
    identity : float
        Magnitude that leaves images unchanged (0 or 1).

    Returns
    -------
    list of list of float
        The grid values within ``w`` steps of the value nearest ``identity``
        for ``w`` from the widest that still adds a value down to 1; the
        first is the whole grid. Empty for a grid of one value.
    """
    values = list(values)
    if len(values) < 2:
        return []
    start = int(np.argmin([abs(v - identity) for v in values]))
    widest = max(start, len(values) - 1 - start)
    return [values[max(0, start - w): start + w + 1] for w in range(widest, 0, -1)]


def can_swap_classes(transform):
    """Whether the op can give an image another class's look as a whole (mirror, turn, hue).

    A relabel applies to every draw of the step, so the step must do the
    same thing to every image it changes: a mirror, or a fixed turn of at
    least `augplan.thresholds.TURN_DEGREES`. A hue or rotation *range* also
    draws small turns that keep the label; relabelling those would teach
    wrong labels, so a range is clipped or scoped instead.

    Parameters
    ----------
    transform : augplan.recipe.Transform

    Returns
    -------
    bool
    """
    from augplan.augment.transforms import OPS

    if transform.op == "flip":
        return True
    if transform.op not in SWAPPING_OPS + ("rotate",):
        return False
    value = transform.params[OPS[transform.op].magnitude]
    low, high = (value, value) if np.ndim(value) == 0 else value
    smallest_turn = TURN_DEGREES if transform.op == "rotate" else 0.0
    return low == high and abs(float(low)) > 0 and abs(float(low)) >= smallest_turn
