"""Tests of the class regions (augplan/check/regions.py).

Outside reference: scikit-learn's NearestNeighbors, an independent
k-nearest-neighbour search; `locate`'s cases are ground truth by construction.
"""

import numpy as np
import pytest

from augplan.check.regions import class_distances, locate, reference_rows


def test_class_distances_match_sklearn_nearest_neighbors():
    # Reference: scikit-learn's NearestNeighbors (an independent k-NN search).
    from sklearn.neighbors import NearestNeighbors

    rng = np.random.default_rng(0)
    reference = rng.normal(size=(40, 6))
    labels = np.repeat([0, 1], 20)
    query = rng.normal(size=(7, 6))
    got = class_distances(query, reference, labels, 2, k=3)
    for c in range(2):
        members = reference[labels == c]
        distances, _ = NearestNeighbors(n_neighbors=3).fit(members).kneighbors(query)
        # float64 (eps 2.2e-16); distances by another formula than scikit-learn's
        # lose at most a few digits: 1e-10 relative.
        np.testing.assert_allclose(got[:, c], distances.mean(axis=1), rtol=1e-10)


def test_class_distances_exclude_the_source_image():
    # A query equal to reference point 0 is at distance 0 from it; excluded,
    # its nearest neighbours are the next ones (NearestNeighbors on the rest).
    from sklearn.neighbors import NearestNeighbors

    rng = np.random.default_rng(1)
    reference = rng.normal(size=(10, 3))
    labels = np.zeros(10, dtype=int)
    got = class_distances(reference[:1], reference, labels, 1, k=3, exclude=np.array([0]))
    distances, _ = NearestNeighbors(n_neighbors=3).fit(reference[1:]).kneighbors(reference[:1])
    np.testing.assert_allclose(got[0, 0], distances.mean(), rtol=1e-10)
    # Without the exclusion the zero distance to itself is counted.
    assert class_distances(reference[:1], reference, labels, 1, k=3)[0, 0] < got[0, 0]


@pytest.mark.parametrize("ratios, proba, expected, destination", [
    ([0.5, 0.9, 2.0], [0.2, 0.7, 0.1], 0, 1),    # classifier and region agree on 1: moved
    ([1.5, 1.2, 3.0], [0.9, 0.05, 0.05], 0, -1),  # no region holds it: outside
    ([1.5, 2.0, 0.8], [0.9, 0.05, 0.05], 0, 0),   # classifier keeps 0, a region holds it: kept
    ([0.8, 2.0, 2.0], [0.1, 0.8, 0.1], 0, 0),     # classifier says 1, only 0's region holds it: kept
    ([1.5, 2.0, 0.8], [0.1, 0.8, 0.1], 0, -1),    # classifier says 1, region says 2: outside
    ([1.5, 0.9, 0.8], [0.1, 0.3, 0.6], 1, 2),     # agreement on 2 against expected 1: moved
], ids=["agree-moved", "outside", "classifier-keeps", "region-keeps", "disagree", "agree-other"])
def test_locate_needs_two_witnesses_for_a_move(ratios, proba, expected, destination):
    got = locate(np.array([ratios]), np.array([proba]), np.array([expected]))
    assert got.tolist() == [destination]


def test_region_reference_keeps_small_classes_whole_and_draws_large_ones():
    labels = np.repeat([0, 1, 2], [5, 40, 12])
    rows = reference_rows(labels, 3, 10, np.random.default_rng(3))
    counts = np.bincount(labels[rows], minlength=3)
    assert counts.tolist() == [5, 10, 10]
    assert set(np.flatnonzero(labels == 0)) <= set(rows)
    assert np.all(np.diff(rows) > 0)
    assert np.array_equal(rows, reference_rows(labels, 3, 10, np.random.default_rng(3)))
    assert not np.array_equal(rows, reference_rows(labels, 3, 10, np.random.default_rng(4)))
    with pytest.raises(TypeError, match="Generator"):
        reference_rows(labels, 3, 10, 3)
