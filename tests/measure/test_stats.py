import numpy as np
import pytest
from scipy import stats as scipy_stats

from augplan.measure.stats import (
    holm,
    paired_gain_test,
    per_image_difference,
    sign_flip_test,
    summarise_predictions,
    wilson_interval,
)

# --------------------------------------------------------------------------
# Wilson interval

WILSON_GRID = [
    (0, 1), (1, 1), (0, 10), (3, 10), (10, 10), (0, 57), (1, 57), (29, 57),
    (56, 57), (57, 57), (0, 1000), (999, 1000), (500, 1000),
]


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99], ids=lambda c: f"conf{c}")
@pytest.mark.parametrize("k,n", WILSON_GRID, ids=[f"{k}of{n}" for k, n in WILSON_GRID])
def test_wilson_matches_scipy(k, n, confidence):
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="wilson").
    reference = scipy_stats.binomtest(k, n).proportion_ci(confidence_level=confidence, method="wilson")
    low, high = wilson_interval(k, n, confidence)
    assert low == pytest.approx(reference.low, abs=1e-12)
    assert high == pytest.approx(reference.high, abs=1e-12)


def test_wilson_vectorised_matches_scalar_calls():
    k = np.array([k for k, _ in WILSON_GRID])
    n = np.array([n for _, n in WILSON_GRID])
    low, high = wilson_interval(k, n)
    assert low.shape == high.shape == k.shape
    for i, (ki, ni) in enumerate(WILSON_GRID):
        assert (low[i], high[i]) == pytest.approx(wilson_interval(int(ki), int(ni)), abs=1e-15)


def test_wilson_no_trials_is_uninformative():
    assert wilson_interval(0, 0) == (0.0, 1.0)
    low, high = wilson_interval(np.array([0, 2]), np.array([0, 4]))
    assert (low[0], high[0]) == (0.0, 1.0)
    assert 0.0 < low[1] < 0.5 < high[1] < 1.0


@pytest.mark.parametrize(
    "k,n,confidence",
    [(-1, 5, 0.95), (6, 5, 0.95), (2, 5, 1.0), (2, 5, 0.0)],
    ids=["negative", "more-than-n", "conf-1", "conf-0"],
)
def test_wilson_rejects_bad_input(k, n, confidence):
    with pytest.raises(ValueError):
        wilson_interval(k, n, confidence)


# --------------------------------------------------------------------------
# Sign-flip test over per-image differences


def _scipy_sign_flip(differences, n_resamples=np.inf, rng=None):
    """Reference: scipy.stats.permutation_test flipping the signs of one sample."""
    return scipy_stats.permutation_test(
        (np.asarray(differences, dtype=float),), lambda x, axis: np.mean(x, axis=axis),
        permutation_type="samples", n_resamples=n_resamples, alternative="two-sided",
        vectorized=True, rng=rng).pvalue


EXACT_CASES = {
    "worked": [0.2, 0.4, 0.0, 0.2, -0.2, 0.6],
    "all-positive": [1.0] * 7,
    "ties-and-zeros": [1, -1, 0, 0, 1, 1, 0, 2, -1, 1, 0, 1],
    "thirteen": [0.4, -0.2, 0.6, 0.0, 0.2, 0.2, -0.4, 0.8, 0.2, 0.0, 0.6, -0.2, 0.4],
    "two": [0.5, -0.25],
}


@pytest.mark.parametrize("differences", EXACT_CASES.values(), ids=EXACT_CASES.keys())
def test_sign_flip_exact_matches_scipy_permutation_test(differences):
    result = sign_flip_test(differences, np.random.default_rng(0))
    assert result.exact is True
    # Both enumerate all 2**n sign patterns: the same count over the same
    # denominator, so equal up to float64 rounding of the sums.
    assert result.p_value == pytest.approx(_scipy_sign_flip(differences), rel=1e-12)


@pytest.mark.parametrize("shift", [0.0, 0.03, 0.08], ids=lambda s: f"gain{s}")
def test_sign_flip_monte_carlo_matches_scipy_permutation_test(shift):
    rng = np.random.default_rng(21)
    differences = rng.integers(-3, 4, size=80) / 3.0 * 0.4 + shift
    result = sign_flip_test(differences, np.random.default_rng(1), n_resamples=9999)
    reference = _scipy_sign_flip(differences, n_resamples=9999, rng=np.random.default_rng(2))
    assert result.exact is False
    # Two Monte Carlo estimates of one p-value, B = 9999 each: four standard
    # errors of their difference, sqrt(2 p (1 - p) / B), plus the +1 term.
    spread = 4 * np.sqrt(2 * reference * (1 - reference) / 9999) + 2e-4
    assert result.p_value == pytest.approx(reference, abs=spread)


def _correctness(rng, n_images, repeats, accuracy, gain=0.0):
    """Two arms on the same images: per-image difficulty, iid repeats (ground truth by construction)."""
    chance = np.clip(rng.beta(8 * accuracy, 8 * (1 - accuracy), size=n_images), 0, 1)
    base = rng.uniform(size=(repeats, n_images)) < chance
    new = rng.uniform(size=(repeats, n_images)) < np.clip(chance + gain, 0, 1)
    return base, new


def test_repeats_of_one_image_are_not_new_observations():
    # Five identical repeats carry the information of one: same p, same interval.
    base, new = _correctness(np.random.default_rng(3), 60, 1, 0.8, gain=0.05)
    once = paired_gain_test(base, new, np.random.default_rng(4))
    five = paired_gain_test(np.repeat(base, 5, axis=0), np.repeat(new, 5, axis=0), np.random.default_rng(4))
    assert (five.p_value, five.n_images) == (once.p_value, once.n_images) == (five.p_value, 60)
    assert (five.low, five.gain, five.high) == pytest.approx((once.low, once.gain, once.high), abs=1e-12)


@pytest.mark.parametrize("seed", range(6), ids=lambda s: f"seed{s}")
def test_p_value_below_alpha_exactly_when_interval_excludes_zero(seed):
    rng = np.random.default_rng(seed)
    for n_images, repeats, gain in [(8, 3, 0.3), (40, 5, 0.04), (40, 5, 0.1), (75, 5, 0.0), (200, 2, 0.03)]:
        base, new = _correctness(rng, n_images, repeats, 0.85, gain)
        test = paired_gain_test(base, new, rng)
        assert (test.p_value < 0.05) == (test.low > 0 or test.high < 0)
        assert test.low <= test.gain <= test.high


@pytest.mark.parametrize("case", ["exact", "random"])
def test_interval_ends_are_where_the_shifted_test_starts_to_reject(case):
    rng = np.random.default_rng(30)
    differences = rng.normal(0.05, 0.2, size=10 if case == "exact" else 50)
    result = sign_flip_test(differences, np.random.default_rng(5))
    # Same generator seed: the same sign patterns for every shift.
    def p_at(shift):
        return sign_flip_test(differences - shift, np.random.default_rng(5)).p_value

    step = 1e-7  # far above float64 rounding of sums of 50 numbers near 0.2
    assert p_at(result.low + step) >= 0.05 and p_at(result.high - step) >= 0.05
    assert p_at(result.low - step) < 0.05 and p_at(result.high + step) < 0.05


def test_identical_arms_give_no_gain():
    base, _ = _correctness(np.random.default_rng(14), 90, 4, 0.7)
    test = paired_gain_test(base, base, np.random.default_rng(0))
    assert (test.gain, test.low, test.high, test.p_value) == (0.0, 0.0, 0.0, 1.0)


def test_sign_flip_is_deterministic_for_a_seed():
    base, new = _correctness(np.random.default_rng(13), 120, 3, 0.8, 0.03)
    first = paired_gain_test(base, new, np.random.default_rng(42))
    assert first == paired_gain_test(base, new, np.random.default_rng(42))
    assert first != paired_gain_test(base, new, np.random.default_rng(43))


def test_per_image_difference_averages_repeats():
    base = np.array([[1, 0, 1], [1, 0, 0]], dtype=bool)
    new = np.array([[1, 1, 0], [0, 1, 0]], dtype=bool)
    np.testing.assert_array_equal(per_image_difference(base, new), [-0.5, 1.0, -0.5])


@pytest.mark.parametrize(
    "base,new",
    [
        (np.ones(3, bool), np.ones(4, bool)),
        (np.ones((2, 2, 2), bool), np.ones((2, 2, 2), bool)),
        (np.array([0, 1, 2]), np.array([0, 1, 1])),
        (np.ones(0, bool), np.ones(0, bool)),
    ],
    ids=["shape-mismatch", "3-d", "not-binary", "empty"],
)
def test_paired_gain_test_rejects_bad_arrays(base, new):
    with pytest.raises(ValueError):
        paired_gain_test(base, new, np.random.default_rng(0))


@pytest.mark.parametrize("kwargs, fault", [
    ({"rng": 42}, "Generator"), ({"n_resamples": 0}, "n_resamples"),
    ({"confidence": 1.0}, "confidence"), ({"differences": [0.1, np.nan]}, "finite"),
], ids=["rng", "resamples", "confidence", "nan"])
def test_sign_flip_rejects_bad_settings(kwargs, fault):
    arguments = {"differences": [0.1, 0.2], "rng": np.random.default_rng(0), **kwargs}
    with pytest.raises(ValueError, match=fault):
        sign_flip_test(**arguments)


# --------------------------------------------------------------------------
# Calibration: many comparisons of an arm against itself with other seeds

# Comparisons per calibration setting and sign patterns per comparison: the
# test keeps its level at any number of patterns, so few suffice here.
_NULL_RUNS, _NULL_PATTERNS = 2000, 999


def _monte_carlo_allowance(rate, runs):
    # Three standard errors of a rate estimated from `runs` comparisons.
    return 3 * np.sqrt(rate * (1 - rate) / runs)


@pytest.mark.parametrize("n_images,repeats,accuracy", [(75, 5, 0.9), (75, 5, 0.97), (300, 3, 0.8), (20, 1, 0.7)],
                         ids=["demo-like", "sparse-errors", "digits-like", "tiny"])
def test_false_positive_rate_under_no_gain(n_images, repeats, accuracy):
    # Recipe against itself with other seeds: both arms are fresh draws of
    # the same per-image chances, so every rejection is a false positive.
    rng = np.random.default_rng(n_images * 10 + repeats)
    rejections = 0
    for _ in range(_NULL_RUNS):
        base, new = _correctness(rng, n_images, repeats, accuracy)
        rejections += paired_gain_test(base, new, rng, n_resamples=_NULL_PATTERNS).p_value < 0.05
    rate = rejections / _NULL_RUNS
    assert rate <= 0.05 + _monte_carlo_allowance(0.05, _NULL_RUNS)


def test_false_positive_rate_of_two_label_blind_no_op_arms():
    # Two arms that never change an image (a no-op recipe and no augmentation)
    # differ only through the model seed; here modelled as flips of a
    # per-image coin for the images near the decision boundary.
    rng = np.random.default_rng(77)
    rejections = 0
    for _ in range(_NULL_RUNS):
        boundary = rng.uniform(size=75) < 0.2
        base = np.where(boundary, rng.uniform(size=(5, 75)) < 0.5, True)
        new = np.where(boundary, rng.uniform(size=(5, 75)) < 0.5, True)
        rejections += paired_gain_test(base, new, rng, n_resamples=_NULL_PATTERNS).p_value < 0.05
    assert rejections / _NULL_RUNS <= 0.05 + _monte_carlo_allowance(0.05, _NULL_RUNS)


def _stated_power(n_images, p_up, p_down):
    """Exact power of the 5% sign-flip test for differences in {+1, 0, -1}.

    Flipping signs of +-1 values is the sign test: given m non-zero
    differences with k of them +1, its p-value is scipy.stats.binomtest(k, m)
    (the reference); the power sums the chances of the (m, k) it rejects in
    favour of a gain.
    """
    power = 0.0
    for m in range(n_images + 1):
        k = np.arange(m + 1)
        rejected = np.array([j > m / 2 and scipy_stats.binomtest(int(j), m).pvalue < 0.05 for j in k], dtype=bool)
        power += scipy_stats.binom.pmf(m, n_images, p_up + p_down) * \
            scipy_stats.binom.pmf(k[rejected], m, p_up / (p_up + p_down)).sum()
    return power


def test_planted_gain_is_found_at_the_stated_power():
    # Planted: each image's difference is +1 with chance 0.30, -1 with 0.15,
    # else 0 (a gain of 0.15 per image, one repeat) on 170 images.
    n_images, p_up, p_down = 170, 0.30, 0.15
    stated = _stated_power(n_images, p_up, p_down)
    assert 0.75 < stated < 0.9  # a design at about 80% power
    rng = np.random.default_rng(88)
    runs, found = 1000, 0
    for _ in range(runs):
        differences = rng.choice([1.0, -1.0, 0.0], p=[p_up, p_down, 1 - p_up - p_down], size=n_images)
        result = sign_flip_test(differences, rng, n_resamples=_NULL_PATTERNS)
        found += result.p_value < 0.05 and result.low > 0
    assert found / runs >= stated - _monte_carlo_allowance(stated, runs)


# --------------------------------------------------------------------------
# Holm


def test_holm_hand_worked_example():
    # Worked by hand from the procedure in Holm (1979): m = 4 hypotheses with
    # p = (0.01, 0.04, 0.03, 0.005). Sorted: 0.005 (H4), 0.01 (H1), 0.03 (H3),
    # 0.04 (H2). Multipliers m - j + 1 = 4, 3, 2, 1 give 0.02, 0.03, 0.06, 0.04;
    # the running maximum gives 0.02, 0.03, 0.06, 0.06. Back in input order:
    # H1 0.03, H2 0.06, H3 0.06, H4 0.02.
    # Holm's sequential rule at alpha = 0.05 agrees: 0.005 <= 0.05/4 (reject
    # H4), 0.01 <= 0.05/3 (reject H1), 0.03 > 0.05/2 (stop; keep H3, H2).
    adjusted = holm([0.01, 0.04, 0.03, 0.005])
    np.testing.assert_allclose(adjusted, [0.03, 0.06, 0.06, 0.02], rtol=0, atol=1e-15)
    assert set(np.flatnonzero(adjusted <= 0.05)) == {0, 3}


def test_holm_caps_at_one_and_keeps_single_value():
    np.testing.assert_allclose(holm([0.4, 0.6, 0.9]), [1.0, 1.0, 1.0])
    np.testing.assert_allclose(holm([0.2]), [0.2])
    assert holm([]).shape == (0,)


@pytest.mark.parametrize("seed", [0, 1, 2, 3], ids=lambda s: f"seed{s}")
def test_holm_is_monotone_and_conservative(seed):
    rng = np.random.default_rng(seed)
    p = rng.uniform(0, 0.2, size=25) ** 2
    adjusted = holm(p)
    order = np.argsort(p)
    assert np.all(np.diff(adjusted[order]) >= 0)  # same ranking as the raw p-values
    assert np.all(adjusted >= p)
    assert np.all(adjusted <= 1.0)
    # Holm never rejects less than Bonferroni (p * m).
    assert np.all(adjusted <= np.minimum(1.0, p * p.size) + 1e-15)


@pytest.mark.parametrize("bad", [[0.1, 1.2], [np.nan, 0.1], [[0.1, 0.2]]], ids=["above-1", "nan", "2-d"])
def test_holm_rejects_bad_input(bad):
    with pytest.raises(ValueError):
        holm(bad)


# --------------------------------------------------------------------------
# Summary metrics


def test_summarise_predictions_against_sklearn():
    from sklearn.metrics import accuracy_score, balanced_accuracy_score, f1_score

    rng = np.random.default_rng(3)
    classes = ["cat", "dog", "fox"]
    y_true = rng.choice(classes, size=200, p=[0.6, 0.3, 0.1])
    y_pred = np.where(rng.uniform(size=200) < 0.7, y_true, rng.choice(classes, size=200))
    summary = summarise_predictions(y_true, y_pred, classes)
    # Reference: scikit-learn's metric functions.
    assert summary["accuracy"] == pytest.approx(accuracy_score(y_true, y_pred))
    assert summary["balanced_accuracy"] == pytest.approx(balanced_accuracy_score(y_true, y_pred))
    assert summary["macro_f1"] == pytest.approx(f1_score(y_true, y_pred, average="macro"))
    for name in classes:
        mask = y_true == name
        assert summary["per_class_recall"][name] == pytest.approx(np.mean(y_pred[mask] == name))


def test_confusion_counts_every_pair_in_class_order():
    # Counted by hand: true a -> (a, b, a), true b -> (b), true c -> (a, c).
    summary = summarise_predictions(["a", "a", "a", "b", "c", "c"], ["a", "b", "a", "b", "a", "c"],
                                    ["c", "a", "b"])
    assert summary["confusion"] == [[1, 1, 0], [0, 2, 1], [0, 0, 1]]


def test_summarise_predictions_absent_class_is_none():
    summary = summarise_predictions(["a", "b", "a"], ["a", "a", "a"], ["a", "b", "c"])
    assert summary["per_class_recall"] == {"a": 1.0, "b": 0.0, "c": None}
    assert summary["balanced_accuracy"] == pytest.approx(0.5)
