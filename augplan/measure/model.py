"""The small CPU proxy model as a scikit-learn estimator: image features, scaler, classifier.

`FeatureModel` follows scikit-learn's estimator contract: ``__init__`` only
stores its parameters (so `get_params`, `set_params` and
`sklearn.base.clone` work), every option of fitting is a constructor
parameter, ``random_state`` goes through `sklearn.utils.check_random_state`,
and methods that need a fitted model raise `sklearn.exceptions.NotFittedError`.
"""

import numbers

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted

from augplan.measure.features import image_features
from augplan.measure.stats import wilson_interval
from augplan.parallel import single_threaded
from augplan.thresholds import MAX_FOLDS, beyond_chance

__all__ = ["FeatureModel", "is_weak"]


def is_weak(cv_accuracy, cv_low, chance):
    """Whether a cross-validated accuracy is not clearly better than chance.

    Weak when the accuracy is not finite, is below `beyond_chance` of
    ``chance``, or its lower Wilson bound ``cv_low`` is at or below chance
    (the margin could be luck on a small set). See `FeatureModel`'s ``weak_``.
    """
    cv_accuracy = float(cv_accuracy)
    return bool(not np.isfinite(cv_accuracy) or cv_accuracy < beyond_chance(chance) or cv_low <= chance)


def _count_folds(labels):
    """Folds for cross-validation: min(MAX_FOLDS, smallest class count); below 2 none."""
    _, counts = np.unique(labels, return_counts=True)
    return int(min(MAX_FOLDS, counts.min()))


class FeatureModel(ClassifierMixin, BaseEstimator):
    """Features plus a standardised scikit-learn classifier, with a trust check.

    Parameters
    ----------
    feature_fn : callable, default `augplan.measure.features.image_features`
        Maps a uint8 batch ``(N, H, W, 3)`` to a 2-D array ``(N, D)``. Must be
        picklable (a module-level function) for the model to be picklable.
    estimator : scikit-learn classifier or None
        Any classifier with ``fit``/``predict`` (``predict_proba`` for
        `predict_proba_features`); cloned before fitting. None means
        ``LogisticRegression(C=0.1, max_iter=2000)`` with the lbfgs solver.
    random_state : int, numpy.random.RandomState or None, default 0
        Seeds the fold shuffling and, when the estimator takes one, the
        estimator (read through `sklearn.utils.check_random_state`).
    cross_validate : bool, default True
        Measure ``cv_accuracy_`` (and ``weak_``) when fitting. Scoring loops
        that fit many models and never read them skip the extra fits.
    solver_dtype : {numpy.float64, numpy.float32}, default numpy.float64
        Precision of the standardised features handed to the estimator.
        float32 halves the time of the solver's matrix products (a
        10,000 x 1,112 fit took 3.6 s instead of 6.4 s, with the same
        iterations and predictions); probabilities then carry single
        precision, so only callers that need labels alone choose it.

    Attributes
    ----------
    classes_ : numpy.ndarray
        Sorted class labels.
    scaler_ : sklearn.preprocessing.StandardScaler
    estimator_ : fitted classifier
    cv_accuracy_ : float
        Accuracy of out-of-fold predictions from stratified k-fold
        cross-validation of the same pipeline (scaler + estimator), with
        ``k = min(5, smallest class count)``; NaN when some class has fewer
        than 2 images or ``cross_validate`` is False.
    cv_accuracy_ci_ : tuple of float
        95 % Wilson interval of ``cv_accuracy_`` over the images; (0, 1) when
        not measured.
    cv_predictions_ : numpy.ndarray or None
        The out-of-fold predictions, in input order.
    chance_ : float
        Share of the largest class: the accuracy of always guessing it. For
        balanced classes this equals ``1 / n_classes``; for imbalanced ones
        it is the honest floor that plain accuracy must beat.
    weak_ : bool
        True when the model is not clearly better than chance, i.e. when

        - cross-validation could not run, or
        - ``cv_accuracy_ < beyond_chance(chance_)``: the model closes less
          than `augplan.thresholds.CHANCE_GAP_SHARE` (one half) of the gap
          between chance and perfect (with two balanced classes it needs
          0.75, with ten 0.55; common practice, no source for the one-half), or
        - the lower Wilson bound of ``cv_accuracy_`` is at or below
          ``chance_`` (the margin could be luck on a small set).

        Verdicts that lean on a weak model should be reported as unverified.

    Notes
    -----
    Results are deterministic for a fixed integer ``random_state``. Callers
    that reuse features (for example from a cache) call `featurize` once and
    then `fit_features` and the ``*_features`` methods.

    The default regularisation ``C = 0.1`` on standardised features suits the
    regime the tool works in (hundreds to a few thousand images, about a
    thousand features): it keeps the model from memorising small training
    sets (chosen on scikit-learn's digits; common practice, no source).
    """

    def __init__(self, feature_fn=image_features, estimator=None, *, random_state=0, cross_validate=True,
                 solver_dtype=np.float64):
        self.feature_fn = feature_fn
        self.estimator = estimator
        self.random_state = random_state
        self.cross_validate = cross_validate
        self.solver_dtype = solver_dtype

    # -- construction helpers -------------------------------------------------

    def _random_state(self):
        # An integer seed is handed on as is (each consumer makes its own
        # generator from it, as scikit-learn's own meta-estimators do); other
        # values are validated and shared.
        if isinstance(self.random_state, numbers.Integral):
            check_random_state(self.random_state)
            return int(self.random_state)
        return check_random_state(self.random_state)

    def _make_estimator(self, random_state):
        from sklearn.linear_model import LogisticRegression

        if self.estimator is None:
            estimator = LogisticRegression(C=0.1, max_iter=2000)
        else:
            estimator = clone(self.estimator)
        if "random_state" in estimator.get_params():
            estimator.set_params(random_state=random_state)
        return estimator

    # -- features -------------------------------------------------------------

    def featurize(self, images):
        """Raw (unstandardised) features of a uint8 batch, as float arrays ``(N, D)``."""
        features = np.asarray(self.feature_fn(images))
        if features.ndim != 2 or features.shape[0] != len(images):
            raise ValueError(
                f"feature_fn must return a 2-D array with one row per image; got shape "
                f"{features.shape} for {len(images)} images."
            )
        return features

    def scaled(self, features):
        """Standardise raw features with the scaler learned in fit."""
        check_is_fitted(self, "estimator_")
        features = np.asarray(features)
        if features.ndim != 2 or features.shape[1] != self.scaler_.n_features_in_:
            raise ValueError(
                f"features must have shape (N, {self.scaler_.n_features_in_}); got {features.shape}."
            )
        return self.scaler_.transform(features.astype(np.float64, copy=False))

    # -- fitting --------------------------------------------------------------

    def fit(self, images, labels):
        """Featurize ``images`` and fit; see `fit_features`. Returns self."""
        return self.fit_features(self.featurize(images), labels)

    def fit_features(self, features, labels):
        """Fit scaler and estimator on raw features and measure cross-validated accuracy.

        Parameters
        ----------
        features : array_like, shape (N, D)
            Raw features from `featurize` (or the same ``feature_fn``).
        labels : array_like, shape (N,)
            Class labels (strings or integers); at least two classes.

        Returns
        -------
        FeatureModel
            self.
        """
        # One BLAS thread: augplan parallelises with processes (parallel_map),
        # and BLAS threads on top oversubscribe the cores and make small fits
        # many times slower on a busy machine.
        with single_threaded():
            return self._fit_features(features, labels)

    def _checked_inputs(self, features, labels):
        try:
            solver_dtype = np.dtype(self.solver_dtype)
        except TypeError:
            solver_dtype = None
        if solver_dtype not in (np.float32, np.float64):
            raise ValueError(f"solver_dtype must be numpy.float32 or numpy.float64; got {self.solver_dtype!r}.")
        # float64 for scaling; the solver gets solver_dtype (float32 input makes
        # scikit-learn fit and report probabilities in single precision).
        features = np.asarray(features, dtype=np.float64)
        labels = np.asarray(labels)
        if features.ndim != 2:
            raise ValueError(f"features must be 2-D (N, D); got shape {features.shape}.")
        if labels.ndim != 1 or labels.shape[0] != features.shape[0]:
            raise ValueError(
                f"labels must be 1-D with one entry per feature row ({features.shape[0]}); "
                f"got shape {labels.shape}."
            )
        return features, labels, solver_dtype

    def _fit_features(self, features, labels):
        from sklearn.model_selection import StratifiedKFold, cross_val_predict
        from sklearn.pipeline import make_pipeline
        from sklearn.preprocessing import StandardScaler

        features, labels, solver_dtype = self._checked_inputs(features, labels)
        classes, counts = np.unique(labels, return_counts=True)
        if classes.size < 2:
            raise ValueError(f"at least two classes are needed to fit; got {classes.tolist()!r}.")
        random_state = self._random_state()

        self.classes_ = classes
        self.chance_ = float(counts.max() / counts.sum())
        folds = _count_folds(labels) if self.cross_validate else 0
        if folds >= 2:
            splitter = StratifiedKFold(n_splits=folds, shuffle=True, random_state=random_state)
            pipeline = make_pipeline(StandardScaler(), self._make_estimator(random_state))
            predictions = cross_val_predict(pipeline, features, labels, cv=splitter)
            correct = int(np.count_nonzero(predictions == labels))
            self.cv_predictions_ = predictions
            self.cv_accuracy_ = correct / labels.size
            self.cv_accuracy_ci_ = wilson_interval(correct, labels.size)
        else:
            self.cv_predictions_ = None
            self.cv_accuracy_ = float("nan")
            self.cv_accuracy_ci_ = (0.0, 1.0)
        self.weak_ = folds < 2 or is_weak(self.cv_accuracy_, self.cv_accuracy_ci_[0], self.chance_)
        self.scaler_ = StandardScaler().fit(features)
        scaled = self.scaler_.transform(features).astype(solver_dtype, copy=False)
        self.estimator_ = self._make_estimator(random_state).fit(scaled, labels)
        return self

    # -- prediction -----------------------------------------------------------

    def predict_proba_features(self, features):
        """Class probabilities ``(N, n_classes)`` for raw features, columns in `classes_` order."""
        scaled = self.scaled(features)
        return self.estimator_.predict_proba(scaled)

    def predict_features(self, features):
        """Predicted labels for raw features."""
        scaled = self.scaled(features)
        return self.estimator_.predict(scaled)

    def predict_proba(self, images):
        """Class probabilities for a uint8 batch."""
        return self.predict_proba_features(self.featurize(images))

    def predict(self, images):
        """Predicted labels for a uint8 batch."""
        return self.predict_features(self.featurize(images))
