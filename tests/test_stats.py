import numpy as np
import pytest
from scipy import stats as scipy_stats

from augplan.stats import (
    holm,
    mcnemar_exact,
    paired_bootstrap_gain,
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
# McNemar


def _pairs(only_base, only_new, both=7, neither=3):
    """Correctness arrays with the given discordant counts (ground truth by construction)."""
    base = [True] * only_base + [False] * only_new + [True] * both + [False] * neither
    new = [False] * only_base + [True] * only_new + [True] * both + [False] * neither
    return np.array(base), np.array(new)


MCNEMAR_CASES = [(0, 1), (1, 1), (2, 9), (9, 2), (5, 5), (0, 12), (30, 45), (120, 80)]


@pytest.mark.parametrize("b,c", MCNEMAR_CASES, ids=[f"b{b}-c{c}" for b, c in MCNEMAR_CASES])
def test_mcnemar_matches_scipy_binomtest(b, c):
    # Reference: scipy.stats.binomtest on the discordant counts, p = 1/2, two-sided.
    base, new = _pairs(b, c)
    reference = scipy_stats.binomtest(b, b + c, 0.5, alternative="two-sided").pvalue
    assert mcnemar_exact(base, new) == pytest.approx(reference, rel=1e-10)


def test_mcnemar_no_discordant_pairs_is_one():
    base, new = _pairs(0, 0)
    assert mcnemar_exact(base, new) == 1.0


def test_mcnemar_pools_repeats():
    # Two repeats with (b, c) = (2, 5) and (1, 6) pool to (3, 11).
    b1, n1 = _pairs(2, 5, both=3, neither=0)
    b2, n2 = _pairs(1, 6, both=3, neither=0)
    reference = scipy_stats.binomtest(3, 14, 0.5).pvalue
    assert mcnemar_exact(np.stack([b1, b2]), np.stack([n1, n2])) == pytest.approx(reference, rel=1e-10)


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
def test_mcnemar_rejects_bad_input(base, new):
    with pytest.raises(ValueError):
        mcnemar_exact(base, new)


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
# Paired bootstrap


def _two_models(rng, n_images=400, repeats=None):
    """Synthetic correctness: a base model and a new one that fixes some errors."""
    shape = (n_images,) if repeats is None else (repeats, n_images)
    difficulty = rng.uniform(0, 1, size=n_images)
    base = rng.uniform(0, 1, size=shape) > difficulty * 0.6
    new = base | (rng.uniform(0, 1, size=shape) < 0.08)
    new &= rng.uniform(0, 1, size=shape) > 0.02
    return base, new


def test_bootstrap_matches_scipy_percentile_interval():
    base, new = _two_models(np.random.default_rng(11))

    def gain(b, n, axis):
        return np.mean(n, axis=axis) - np.mean(b, axis=axis)

    # Reference: scipy.stats.bootstrap(paired=True, method="percentile").
    reference = scipy_stats.bootstrap(
        (base.astype(float), new.astype(float)), gain, paired=True, vectorized=True,
        n_resamples=20000, method="percentile", confidence_level=0.95,
        rng=np.random.default_rng(5),
    ).confidence_interval
    value, low, high = paired_bootstrap_gain(base, new, np.random.default_rng(6), n_resamples=20000)
    assert value == pytest.approx(new.mean() - base.mean(), abs=1e-15)
    # Both are Monte Carlo estimates from different streams; the percentile
    # error is about 5e-4 here and the gain moves in steps of 1/400.
    assert low == pytest.approx(reference.low, abs=0.005)
    assert high == pytest.approx(reference.high, abs=0.005)
    assert low < value < high


def test_bootstrap_repeats_resample_whole_images():
    base, new = _two_models(np.random.default_rng(12), n_images=300, repeats=3)

    def gain(b, n, axis):
        # scipy's paired mode indexes the last axis, so the arrays arrive as
        # (repeats, [resamples,] images): average over images, then repeats.
        return (np.mean(n, axis=axis) - np.mean(b, axis=axis)).mean(axis=0)

    # Reference: scipy.stats.bootstrap resampling the image axis of both arrays together.
    reference = scipy_stats.bootstrap(
        (base.astype(float), new.astype(float)), gain, paired=True, vectorized=True, axis=-1,
        n_resamples=20000, method="percentile", rng=np.random.default_rng(7),
    ).confidence_interval
    value, low, high = paired_bootstrap_gain(base, new, np.random.default_rng(8), n_resamples=20000)
    assert value == pytest.approx(new.mean() - base.mean(), abs=1e-15)
    assert low == pytest.approx(reference.low, abs=0.005)
    assert high == pytest.approx(reference.high, abs=0.005)


def test_bootstrap_is_deterministic_for_a_seed():
    base, new = _two_models(np.random.default_rng(13))
    first = paired_bootstrap_gain(base, new, np.random.default_rng(42), n_resamples=500)
    second = paired_bootstrap_gain(base, new, np.random.default_rng(42), n_resamples=500)
    third = paired_bootstrap_gain(base, new, np.random.default_rng(43), n_resamples=500)
    assert first == second
    assert first[1:] != third[1:]


def test_bootstrap_identical_models_give_zero_interval():
    base, _ = _two_models(np.random.default_rng(14))
    assert paired_bootstrap_gain(base, base, np.random.default_rng(0), n_resamples=200) == (0.0, 0.0, 0.0)


def test_bootstrap_rejects_bad_input():
    base, new = _two_models(np.random.default_rng(15), n_images=10)
    with pytest.raises(ValueError, match="Generator"):
        paired_bootstrap_gain(base, new, 42)
    with pytest.raises(ValueError, match="same shape"):
        paired_bootstrap_gain(base, new[:5], np.random.default_rng(0))
    with pytest.raises(ValueError, match="n_resamples"):
        paired_bootstrap_gain(base, new, np.random.default_rng(0), n_resamples=0)


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
