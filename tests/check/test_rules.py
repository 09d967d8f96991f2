"""Tests of the checker's rule predicates (augplan/check/rules.py).

Outside references: scipy's Wilson score interval (binomtest) and scipy's
percentile (scoreatpercentile).
"""

import pytest
import numpy as np

from augplan.check.rules import nested_ranges, screen_clears, typical_share, witness_holds
from augplan.thresholds import MIN_EVIDENCE, SWAP_WITNESS_MARGIN


@pytest.mark.parametrize("moved, left, n, expected", [
    (0, 0, 100, True),      # upper Wilson bound 0.037: within 0.10 of a zero baseline
    (8, 0, 100, False),     # upper bound 0.15: beyond the margin
    (0, 0, MIN_EVIDENCE - 1, False),  # too few images: never cleared
])
def test_screen_clears_on_upper_wilson_bounds(moved, left, n, expected):
    assert screen_clears(moved, left, n, 0.0, 0.0) is expected


@pytest.mark.parametrize("values, identity, expected", [
    ([-10, -5, 0, 5, 10], 0.0, [[-10, -5, 0, 5, 10], [-5, 0, 5]]),
    ([0.9, 1.0, 1.1, 1.2], 1.0, [[0.9, 1.0, 1.1, 1.2], [0.9, 1.0, 1.1]]),
    ([180.0], 0.0, []),
])
def test_nested_ranges_shrink_around_identity(values, identity, expected):
    assert nested_ranges(values, identity) == expected


@pytest.mark.parametrize("count, n, baseline", [(1, 60, 0.0), (2, 36, 0.0), (8, 36, 0.0), (11, 60, 0.0),
                                               (20, 60, 0.05), (30, 60, 0.3), (9, 9, 0.0)])
def test_swap_witness_is_a_real_share_by_scipys_wilson_bound(count, n, baseline):
    from scipy.stats import binomtest

    # scipy's Wilson score interval (Wilson 1927) as the outside reference.
    low = binomtest(count, n).proportion_ci(0.95, method="wilson").low
    expected = bool(n >= MIN_EVIDENCE and low > baseline + SWAP_WITNESS_MARGIN)
    assert witness_holds(count, n, baseline) is expected
    # One image of a class never witnesses a swap.
    assert not witness_holds(1, n, 0.0)


def test_typical_share_counts_images_within_scipys_percentile_of_the_class_own():
    from scipy.stats import scoreatpercentile

    rng = np.random.default_rng(3)
    own = rng.gamma(4.0, size=200)
    moved = rng.gamma(4.0, size=80) * 1.3
    # scipy's percentile with linear interpolation as the outside reference.
    cut = scoreatpercentile(own, 75)
    assert typical_share(moved, own) == pytest.approx(np.mean(moved <= cut), abs=0)
    # B's own originals are typical by construction in 3 of 4 cases (200
    # distinct values: at most one lands on the cut itself).
    assert abs(typical_share(own, own) - 0.75) <= 1 / len(own)
    assert typical_share(own + own.max(), own) == 0.0 and typical_share([], own) == 0.0


# --------------------------------------------------------------------------
# outside references

