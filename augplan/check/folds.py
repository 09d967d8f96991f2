"""Fold fitting: the proxy's out-of-fold view of the original images, shared by screen and confirmation.

The proxy feature model is fitted on stratified cross-validation folds of
the checked originals; every image gets the prediction of the fold model
that did not see it (out-of-fold, never in-sample). `fit_baseline` also
draws the class regions (`augplan.check.regions.Regions`) and the
originals' own move and leave rates, the screen's baselines.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from augplan.check.regions import OUTSIDE, Regions, locate
from augplan.parallel import parallel_map, single_threaded
from augplan.thresholds import MAX_FOLDS

__all__ = ["Baseline", "fit_baseline", "fit_fold", "out_of_fold_proba", "stratified_folds", "check_models",
           "sklearn_seed"]


def sklearn_seed(rng):
    """An integer ``random_state`` for scikit-learn, drawn from ``rng`` (which takes no Generator)."""
    return int(rng.integers(2**32))


def stratified_folds(labels, n_folds, rng):
    """Fold index of each image: stratified, shuffled by ``rng``; all zero when ``n_folds < 2``."""
    from sklearn.model_selection import StratifiedKFold

    folds = np.zeros(len(labels), dtype=np.int64)
    if n_folds < 2:
        return folds
    splitter = StratifiedKFold(n_splits=n_folds, shuffle=True, random_state=sklearn_seed(rng))
    for fold, (_, rows) in enumerate(splitter.split(np.zeros(len(labels)), labels)):
        folds[rows] = fold
    return folds


def fit_fold(template, features, labels, folds, fold):
    """The template model fitted on every fold but ``fold`` (labels only are read later)."""
    from sklearn.base import clone

    # Single precision: the checker reads predicted labels and the argmax of
    # probabilities, which float32 solver products leave unchanged; the folds
    # are the checker's own, so the model's cross-validation is not run.
    model = clone(template).set_params(cross_validate=False, solver_dtype=np.float32)
    train = folds != fold
    return model.fit_features(features[train], labels[train])


def out_of_fold_proba(models, features, folds, n_classes):
    """Each row's class probabilities from the fold model that did not see its source."""
    proba = np.zeros((len(features), n_classes))
    for fold, model in enumerate(models):
        rows = np.flatnonzero(folds == fold)
        if len(rows):
            columns = np.asarray(model.classes_, dtype=np.int64)
            proba[np.ix_(rows, columns)] = model.predict_proba_features(features[rows])
    return proba


@dataclass
class Baseline:
    """Out-of-fold state of the originals shared by both stages."""

    features: np.ndarray
    folds: np.ndarray
    models: list
    predictions: np.ndarray
    dest: np.ndarray
    geometry: Regions
    change: np.ndarray
    leave: np.ndarray
    cv_accuracy: float
    chance: float
    weak: bool


def fit_baseline(images, labels, n_classes, template, rngs, workers, quiet):
    """Fold models, out-of-fold predictions and regions of the original images.

    Parameters
    ----------
    images : numpy.ndarray, shape (N, S, S, 3)
    labels : numpy.ndarray of int, shape (N,)
    n_classes : int
    template : augplan.measure.model.FeatureModel
    rngs : (numpy.random.Generator, numpy.random.Generator)
        The check's fold and region streams.
    workers, quiet
        As for `augplan.parallel.parallel_map`.

    Returns
    -------
    Baseline
    """
    from augplan.measure.model import is_weak
    from augplan.measure.stats import wilson_interval

    fold_rng, region_rng = rngs
    features = template.featurize(images)
    counts = np.bincount(labels, minlength=n_classes)
    folds = stratified_folds(labels, int(min(MAX_FOLDS, counts.min())), fold_rng)
    models = parallel_map(functools.partial(fit_fold, template, features, labels, folds), range(int(folds.max()) + 1),
                          workers=workers, desc="fitting the proxy on folds", quiet=quiet)
    proba = out_of_fold_proba(models, features, folds, n_classes)
    predictions = np.argmax(proba, axis=1)
    correct = int(np.sum(predictions == labels))
    cv_accuracy = correct / len(labels)
    chance = float(counts.max() / counts.sum())
    weak = is_weak(cv_accuracy, wilson_interval(correct, len(labels))[0], chance)
    with single_threaded():   # the PCA's SVD, as the shortcut audit's fits (augplan.parallel.single_threaded)
        geometry = Regions(features, labels, n_classes, region_rng)
    dest = locate(geometry.held_out_ratios, proba, labels)
    change = np.array([np.mean((dest[labels == c] != c) & (dest[labels == c] != OUTSIDE))
                       for c in range(n_classes)])
    leave = np.array([np.mean(dest[labels == c] == OUTSIDE) for c in range(n_classes)])
    return Baseline(features, folds, models, predictions, dest, geometry, change, leave, cv_accuracy, chance,
                    weak)


def check_models(model, rng):
    """The screen's feature model and the confirmation's model for ``check_recipe``'s ``model``.

    Returns ``(template, scoring)``: the `FeatureModel` the screen (and the
    linear confirmation) use, seeded from ``rng``, and the
    `augplan.measure.models` choice the first witness trains (None for a
    `FeatureModel` passed in, which then serves both stages).
    """
    from augplan.measure.model import FeatureModel
    from augplan.measure.models import CHECK_DEFAULT_MODEL, scoring_model

    if isinstance(model, FeatureModel):
        return model, None
    return (FeatureModel(random_state=sklearn_seed(rng)),
            scoring_model(CHECK_DEFAULT_MODEL if model is None else model))
