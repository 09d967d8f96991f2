"""Tests for augplan.measure.shortcuts: the cross-validated shortcut scores and the link rule."""

import numpy as np
import pytest

from augplan.measure.shortcuts import shortcut_score, shortcut_scores, shortcut_threshold


def test_shortcut_score_of_a_perfect_and_a_useless_feature():
    rng = np.random.default_rng(5)
    labels = np.repeat(["a", "b"], 40)
    perfect = np.where(labels == "a", 0.0, 1.0)[:, None] + rng.normal(0, 0.05, (80, 1))
    useless = rng.normal(size=(80, 1))
    assert shortcut_score(perfect, labels, rng=np.random.default_rng(0)) == 1.0
    assert abs(shortcut_score(useless, labels, rng=np.random.default_rng(0)) - 0.5) < 0.2
    assert shortcut_score(useless[:3], ["a", "a", "b"], rng=np.random.default_rng(0)) is None
    assert shortcut_threshold(2) == 0.75


def test_one_vs_rest_scores_single_out_one_class_among_three():
    # Invented ground truth: class "c" sits far from "a" and "b", which overlap.
    rng = np.random.default_rng(6)
    labels = np.repeat(["a", "b", "c"], 30)
    feature = np.where(labels == "c", 5.0, 0.0) + rng.normal(0, 1.0, 90)
    overall, per_class = shortcut_scores(feature[:, None], labels, rng=np.random.default_rng(0))
    assert per_class["c"] > 0.95
    assert max(per_class["a"], per_class["b"]) < 0.8
    assert overall < shortcut_threshold(3) + 0.1


@pytest.mark.parametrize("augmented, n, chance, expected", [
    # The cases: 0.61 -> 0.55 with chance 0.20, and 0.94 -> 0.90 with two classes.
    (0.55, 180, 0.2, "weakened"),
    (0.90, 180, 0.5, "weakened"),
    # Near chance with a tight interval: Wilson upper end about 0.26 <= 0.28 at n = 400.
    (0.22, 400, 0.2, "broken"),
    # The same score on few images: the interval reaches past the bound.
    (0.22, 20, 0.2, "weakened"),
], ids=["five-classes-0.55", "two-classes-0.90", "near-chance-many", "near-chance-few"])
def test_the_link_is_broken_only_within_a_margin_of_chance(augmented, n, chance, expected):
    from augplan.measure.shortcuts import link_of

    row = {"augmented": augmented, "persists": False}
    link = link_of(row, {}, None, chance, n)
    assert link["link"] == expected
    low, high = link["augmented_ci"]
    assert low <= augmented <= high
    # Wilson interval of the score as a share of n images (scipy's binomtest gives the same bounds).
    from scipy.stats import binomtest
    ci = binomtest(int(round(augmented * n)), n).proportion_ci(0.95, method="wilson")
    assert (low, high) == pytest.approx((ci.low, ci.high), abs=1e-5)  # stored to 6 significant digits
    assert link["link_bound"] == pytest.approx(chance + 0.1 * (1 - chance))


def test_a_persisting_shortcut_keeps_its_word():
    from augplan.measure.shortcuts import link_of

    assert link_of({"augmented": 0.95, "persists": True}, {}, None, 0.5, 100)["link"] == "persists"


def test_the_link_of_a_one_class_shortcut_is_judged_against_one_vs_rest_chance():
    from augplan.measure.shortcuts import link_of

    row = {"augmented": 0.21, "persists": False}
    by_class = {"augmented": {"crack": 0.80}}
    assert link_of(row, by_class, "crack", 0.2, 400)["link"] == "weakened"


def test_shortcut_balanced_accuracies_equal_scikit_learns():
    # sklearn.metrics.balanced_accuracy_score is the reference, overall and
    # one-vs-rest ("this class or not"), to the last bit.
    from sklearn.metrics import balanced_accuracy_score
    from augplan.measure.shortcuts import _balanced_accuracies

    rng = np.random.default_rng(12)
    for trial in range(40):
        k = 2 + trial % 4
        names = np.array(["amber", "basalt", "cobalt", "dune", "ember"])[:k]
        labels = names[rng.integers(0, k, 60)]
        labels[:k] = names
        predicted = np.where(rng.random(60) < 0.6, labels, names[rng.integers(0, k, 60)])
        overall, per_class = _balanced_accuracies(labels, predicted)
        assert overall == balanced_accuracy_score(labels, predicted)
        for name in names:
            assert per_class[name] == balanced_accuracy_score(labels == name, predicted == name)
