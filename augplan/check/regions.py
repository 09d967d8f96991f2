"""Class regions in feature space: where a transformed image lands.

Every class owns a *region* of feature space (standardised features, PCA to
`augplan.thresholds.PCA_VARIANCE_KEPT` of the variance): ``d_c(x)`` is the
mean distance from ``x`` to its ``k`` nearest reference originals of ``c``
(`class_distances`), never counting ``x``'s own source, and ``t_c`` the
`augplan.thresholds.REGION_PERCENTILE`-th percentile of ``d_c`` over
``c``'s held-out originals; ``r_c = d_c / t_c`` is at most 1 inside the
region. `locate` turns the ratios and a classifier's probabilities into a
destination class, or `OUTSIDE`.

References
----------
.. [1] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
   classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial.distance import cdist
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler

from augplan.seeding import require_generator
from augplan.thresholds import PCA_VARIANCE_KEPT, REGION_NEIGHBOURS, REGION_PERCENTILE, REGION_REFERENCE_LIMIT

__all__ = ["OUTSIDE", "Regions", "class_distances", "locate", "reference_rows"]

# Destination of an image that no class's region vouches for.
OUTSIDE = -1


def class_distances(query, reference, reference_labels, n_classes, *, k=REGION_NEIGHBOURS,
                    exclude=None):
    """Mean distance from each query point to its ``k`` nearest points of each class.

    Parameters
    ----------
    query : numpy.ndarray, shape (M, D)
    reference : numpy.ndarray, shape (N, D)
    reference_labels : numpy.ndarray of int, shape (N,)
        Class index ``0 .. n_classes - 1`` of each reference point.
    n_classes : int
    k : int, default `augplan.thresholds.REGION_NEIGHBOURS`
        Neighbours averaged. Class ``c`` uses ``min(k, n_c - 1)`` so that a
        query with its source excluded and one without see the same count.
    exclude : numpy.ndarray of int, shape (M,), optional
        Reference index to leave out for each query (its source image), or
        -1 for none.

    Returns
    -------
    numpy.ndarray of float64, shape (M, n_classes)

    References
    ----------
    .. [1] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
       classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
    """
    query = np.asarray(query, dtype=np.float64)
    reference = np.asarray(reference, dtype=np.float64)
    reference_labels = np.asarray(reference_labels)
    if query.ndim != 2 or reference.ndim != 2 or query.shape[1] != reference.shape[1]:
        raise ValueError(f"query and reference must be 2-D with equal widths; "
                         f"got {query.shape} and {reference.shape}")
    # cdist rather than a BLAS product: its sums run in a fixed order, so the
    # distances do not depend on how many threads a worker process has.
    dist = cdist(query, reference)
    if exclude is not None:
        exclude = np.asarray(exclude)
        rows = np.flatnonzero(exclude >= 0)
        dist[rows, exclude[rows]] = np.inf
    out = np.empty((len(query), n_classes))
    for c in range(n_classes):
        members = dist[:, reference_labels == c]
        if members.shape[1] < 2:
            raise ValueError(f"class {c} has {members.shape[1]} reference points; at least 2 needed")
        kc = min(k, members.shape[1] - 1)
        nearest = np.partition(members, kc - 1, axis=1)[:, :kc]
        out[:, c] = np.sort(nearest, axis=1).mean(axis=1)
    return out


def locate(ratios, probabilities, expected):
    """Destination class of each image, or `OUTSIDE` (-1) when nothing in the data vouches for one.

    A class change needs the classifier and the geometry to agree; where
    they disagree, an image keeps its expected class if either of them
    still vouches for it, and is outside otherwise.

    Parameters
    ----------
    ratios : numpy.ndarray, shape (M, C)
        ``r_c = d_c / t_c``; at most 1 inside class ``c``'s region.
    probabilities : numpy.ndarray, shape (M, C)
        Classifier probabilities in the same class order.
    expected : numpy.ndarray of int, shape (M,)
        Class each image should still belong to.

    Returns
    -------
    numpy.ndarray of int, shape (M,)
        With ``b`` the classifier's most probable class:

        - ``b`` when ``b``'s region holds the image (both agree);
        - else ``expected`` when some region holds the image and either the
          classifier picks ``expected`` or ``expected``'s region holds it;
        - else -1 (outside): no region holds it, or the classifier points to
          a class whose region does not hold it while the expected class's
          region does not either.
    """
    ratios = np.asarray(ratios)
    expected = np.asarray(expected)
    rows = np.arange(len(ratios))
    best = np.argmax(probabilities, axis=1)
    inside = ratios <= 1.0
    in_any = inside.any(axis=1)
    agree = inside[rows, best]
    keeps = in_any & ((best == expected) | inside[rows, expected])
    return np.where(agree, best, np.where(keeps, expected, OUTSIDE))


def reference_rows(labels, n_classes, limit, rng):
    """Rows that stand as region reference points: every class's, or a draw of ``limit`` of a larger class.

    Parameters
    ----------
    labels : numpy.ndarray of int, shape (N,)
    n_classes : int
    limit : int
        Most reference points per class.
    rng : numpy.random.Generator
        Source of the draw (the check's regions stream), so the same check
        draws the same points.

    Returns
    -------
    numpy.ndarray of int
        Ascending row indices.
    """
    require_generator(rng)
    rows = []
    for c in range(n_classes):
        members = np.flatnonzero(labels == c)
        if len(members) > limit:
            members = np.sort(rng.choice(members, size=limit, replace=False))
        rows.append(members)
    return np.sort(np.concatenate(rows)) if rows else np.empty(0, dtype=np.int64)


class Regions:
    """Standardise + PCA projection with each class's reference points and threshold.

    Every original is projected and judged, but each class's region is drawn
    from at most `REGION_REFERENCE_LIMIT` of its originals (`reference_rows`):
    distances are computed to those points only, so the work grows linearly
    with the images. An original among them is left out of its own distances.

    Parameters
    ----------
    features : numpy.ndarray, shape (N, D)
        Proxy features of the originals.
    labels : numpy.ndarray of int, shape (N,)
    n_classes : int
    rng : numpy.random.Generator
        Draws the reference points; the PCA's ``random_state`` comes from it too.

    Attributes
    ----------
    held_out_ratios : numpy.ndarray, shape (N, n_classes)
        ``r_c`` of every original with its own source left out.
    """

    def __init__(self, features, labels, n_classes, rng):
        self.scaler = StandardScaler().fit(features)
        scaled = self.scaler.transform(features)
        n_components = PCA_VARIANCE_KEPT if min(scaled.shape) > 1 else None
        self.pca = PCA(n_components=n_components, svd_solver="full", random_state=int(rng.integers(2**32)))
        projected = self.pca.fit_transform(scaled).astype(np.float64)
        rows = reference_rows(labels, n_classes, REGION_REFERENCE_LIMIT, rng)
        self.reference = projected[rows]
        self.labels = labels[rows]
        # Each original's row among the reference points, or -1.
        self.position = np.full(len(labels), -1, dtype=np.int64)
        self.position[rows] = np.arange(len(rows))
        self.n_classes = n_classes
        held_out = class_distances(projected, self.reference, self.labels, n_classes, exclude=self.position)
        self.thresholds = np.array([
            np.percentile(held_out[labels == c, c], REGION_PERCENTILE) for c in range(n_classes)])
        # A class whose originals coincide has threshold 0; keep the ratio finite.
        self.thresholds = np.maximum(self.thresholds, 1e-12)
        self.held_out_ratios = held_out / self.thresholds

    def ratios(self, features, sources):
        """``r_c`` of transformed images whose originals are rows ``sources`` (each source left out)."""
        points = self.pca.transform(self.scaler.transform(features))
        distances = class_distances(points, self.reference, self.labels, self.n_classes,
                                    exclude=self.position[sources])
        return distances / self.thresholds
