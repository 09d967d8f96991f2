"""Tests of the confirmation's comparison of predictions (augplan/check/confirm.py).

Ground truth by construction: predictions written so that the right rise,
fall and verdict are known.
"""

import numpy as np
import pytest

from augplan.check.confirm import TOO_FEW, PairChange, class_verdict, compare_predictions, pair_breaks
from augplan.thresholds import MIN_EVIDENCE


def test_compare_predictions_pairs_each_image():
    labels = np.array([0] * 20 + [1] * 20)
    base = labels.copy()
    moved = labels.copy()
    moved[:15] = 1  # 15 of 20 images of class 0 now predicted as 1
    changes, pairs = compare_predictions(labels, base, moved, 2, np.random.default_rng(0))
    assert changes[0].fall == pytest.approx(0.75) and changes[1].fall == 0.0
    (pair,) = pairs
    assert (pair.source, pair.target, pair.rise, pair.moved) == (0, 1, pytest.approx(0.75), 15)
    assert 0.0 < pair.low <= pair.rise <= pair.high and pair_breaks(pair)


@pytest.mark.parametrize("rise, low, base, breaks", [
    (0.30, 0.15, 0.02, True),    # specific: far beyond the pair's baseline
    (0.30, 0.15, 0.40, False),   # an already-confused pair growing in proportion (capacity)
    (0.08, 0.02, 0.00, False),   # below the margin
    (0.30, -0.01, 0.00, False),  # interval not clear of zero
])
def test_pair_rule_tells_label_change_from_capacity(rise, low, base, breaks):
    pair = PairChange(0, 1, 50, base, base + rise, rise, low, rise + 0.1, 10)
    assert pair_breaks(pair) is breaks


def test_a_pair_of_a_class_with_too_few_images_never_breaks():
    pair = PairChange(0, 1, MIN_EVIDENCE - 1, 0.0, 0.8, 0.8, 0.5, 1.0, 7)
    assert not pair_breaks(pair)


def test_a_class_with_too_few_images_is_never_judged():
    labels = np.array([0] * 5 + [1] * 30)
    moved = labels.copy()
    moved[:5] = 1
    changes, pairs = compare_predictions(labels, labels, moved, 2, np.random.default_rng(0))
    assert class_verdict(changes[0], [p for p in pairs if p.source == 0]) == TOO_FEW
