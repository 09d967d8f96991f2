"""Label safety: would training with a transform teach wrong labels?

A transform breaks labels when training with it makes the model confuse
classes on original images. The checker decides in two stages.

Screen
------
1. The proxy feature model is fitted on stratified cross-validation folds of
   the original training images; every image gets the prediction of the
   fold model that did not see it (out-of-fold, never in-sample).
2. Every class owns a *region* of feature space (standardised features, PCA
   to 95% of the variance): ``d_c(x)`` is the mean distance from ``x`` to its
   ``k = 5`` nearest originals of ``c``, never counting ``x``'s own source,
   and ``t_c`` the 95th percentile of ``d_c`` over ``c``'s held-out
   originals; ``r_c = d_c / t_c`` is at most 1 inside the region.
3. Each transform runs with probability 1 on every image in its scope at
   each value of `augplan.augment.transforms.magnitude_grid` (a flip once). A
   transformed image *moves* to ``B`` when its out-of-fold prediction is
   ``B`` and ``B``'s region holds it; it is *outside* when no region vouches
   for its expected class (`locate`).
4. The image is the unit and each magnitude is judged on its own (each
   image counted once per magnitude, never pooled across magnitudes). The
   screen clears a transform when, at every magnitude, every class in its
   scope has at least ``MIN_EVIDENCE`` images and the upper Wilson 95%
   bounds of its moved and outside shares stay within ``MARGIN`` of the
   same shares for its held-out originals. A cleared transform is *safe*,
   decided by the screen.

Confirmation
------------
Every transform the screen does not clear is confirmed by training. On the
same folds with the same seed the proxy is trained on the originals, on the
training images with those in scope *replaced* by their transformed copies
(the transform with probability 1, one magnitude per image drawn from the
grid across the range, labels after any ``relabel``), and on the originals
*plus* those copies; each predicts the held-out *original* images of its
fold. `augplan.check.confirm` compares them per image with sign-flip test
intervals over images. A swap ``A -> B`` breaks when, for the replaced
model, the confusion ``B -> A`` on originals rises beyond its margin, with
its interval clear of zero and beyond the pair's own baseline confusion,
*and* the screen witnessed A's transformed images taking B's look (two
witnesses: a proxy that merely fails on a look it was never trained on
cannot call a label changed). The screen's witness is a real share
(`witness_holds`): the lower Wilson 95% bound of the share of A's
transformed images that the out-of-fold proxy calls B exceeds the share
of A's held-out originals it calls B by ``SWAP_WITNESS_MARGIN``, so one
moved image of 60 never names a swap. A transform is safe when, for the
originals-plus-copies model, no class's recall falls and no confusion rises
by as much as the equivalence margin (upper bounds); anything else is
unverified. A class with fewer than ``MIN_EVIDENCE`` images is "too few
images to judge". When the feature model is weak nothing is called safe.

A relabel writes labels for every draw, so it is held to a higher bar:
it is offered only for a mirror or a fixed turn (of the image or of hue)
whose confirmed swaps close a cycle and only when, at every step
``A -> B``, most of A's transformed images are *typical* of B
(`typical_share`: no farther from B's originals than the
``TYPICAL_PERCENTILE``-th percentile of B's own held-out originals; the
lower Wilson 95% bound of their share at least ``RELABEL_TYPICAL_SHARE``),
so in both directions of a pair. A turned letter that lands nearest
another class without being one falls short, and its class is scoped out
instead.

The safe limit applies the confirmation rule to ranges nested around the
identity magnitude (the grid values within one, two, ... steps of it) and
reports the widest one that is safe; a transform that is safe over its whole
range has that range as its limit.

References
----------
.. [1] E. B. Wilson, "Probable inference, the law of succession, and
   statistical inference", JASA 22(158), 209-212, 1927.
.. [2] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
   classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
.. [3] M. D. Ernst, "Permutation methods: a basis for exact inference",
   Statistical Science 19(4), 676-685, 2004.
"""

from __future__ import annotations

import functools
import hashlib
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.spatial.distance import cdist
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler

from augplan.check.confirm import (MIN_EVIDENCE, PAIR_MARGIN, RECALL_MARGIN, class_verdict,
                             compare_predictions, pair_breaks)
from augplan.errors import BadInputError
from augplan.measure.models import FALLBACK_NAME, FALLBACK_WARNING
from augplan.thresholds import (MAX_FOLDS, MIN_IMAGES_PER_CLASS, PCA_VARIANCE_KEPT, REGION_NEIGHBOURS,
                                REGION_PERCENTILE, REGION_REFERENCE_LIMIT, RELABEL_TYPICAL_SHARE, SCREEN_MARGIN,
                                SWAP_WITNESS_MARGIN, TURN_DEGREES, TYPICAL_PERCENTILE)
from augplan.parallel import parallel_map, single_threaded
from augplan.results import CheckResult

__all__ = [
    "DECISION_RULE",
    "check_recipe",
    "class_distances",
    "locate",
    "screen_clears",
    "nested_ranges",
    "typical_share",
    "witness_holds",
]

# The numbers of the rule live in augplan.thresholds, with their sources.
NEIGHBOURS = REGION_NEIGHBOURS
MARGIN = SCREEN_MARGIN
VARIANCE_KEPT = PCA_VARIANCE_KEPT
MIN_PER_CLASS = MIN_IMAGES_PER_CLASS
FOLDS = MAX_FOLDS
# Folds of the network's confirmation: each fold's network trains on the
# other half of the checked images and predicts this half, so every original
# is predicted out of fold by two fits per model (a network fit costs far
# more than the linear proxy's; common practice, no source).
NETWORK_FOLDS = 2
_NETWORK_PURPOSE = 22
EVIDENCE_IMAGES = 8
OUTSIDE = -1
# Ops whose images can take another class's look as a whole (a mirror, a
# turn of the image, a hue turn), so that a relabel can undo the swap.
# Rotations, zooms and shifts only widen a class: never relabelled.
SWAPPING_OPS = ("flip", "hue")

DECISION_RULE = (
    "Two stages. Screen: with out-of-fold predictions of the proxy model, the transform is "
    "cleared (safe) when at every magnitude every class in its scope has at least "
    f"{MIN_EVIDENCE} images and the upper Wilson 95% bounds of the shares of its transformed "
    "images that land in another class or outside every class stay within "
    f"{MARGIN:.2f} of the same shares for its held-out originals. Confirmation, for every "
    "transform the screen does not clear: the proxy is trained on the same folds without the "
    "transform, with the images in scope replaced by transformed copies (probability 1, across "
    "the range), and with the originals plus those copies, and each predicts the held-out "
    "original images. A swap A -> B breaks when, for the replaced model, the confusion B -> A "
    f"rises by more than {PAIR_MARGIN:.2f} with its sign-flip test interval over images above "
    "zero and by more than "
    "the pair's own baseline confusion (a label change is specific; a capacity loss is spread "
    "over pairs the model already confuses), and the screen witnessed it: the lower Wilson 95% "
    "bound of the share of A's transformed images that the proxy calls B exceeds the share of A's "
    f"held-out originals it calls B by more than {SWAP_WITNESS_MARGIN:.2f} (a real share, never "
    "one image). A transform is safe when, for the originals-plus-copies model, the upper bound of every "
    f"class's recall fall and of every confusion rise are below {RECALL_MARGIN:.2f} (an "
    "equivalence test); otherwise it is unverified. A relabel is offered only for a mirror or a "
    "fixed turn (of the image or of hue) whose confirmed swaps close a cycle and, at every step, "
    "most of A's transformed images are typical of B (no farther from B's originals than the "
    f"{TYPICAL_PERCENTILE:.0f}th percentile of B's own held-out originals; the lower Wilson 95% "
    f"bound of their share at least {RELABEL_TYPICAL_SHARE:.2f}), in both directions of a pair; "
    "otherwise the class is scoped out. Bounds are one-sided "
    f"95% bounds. A class with fewer than {MIN_EVIDENCE} "
    "images is too few images to judge, never breaks; nothing is safe when the proxy is weak. "
    "A lighting move into a class that lighting alone singles out in the training data, while "
    "structure also separates the classes, is unverified (a possible shortcut) unless a "
    "labelled field sample confirms lighting as the cue."
)


# --------------------------------------------------------------------------
# screen rule


def screen_clears(moved, left, n, baseline_change, baseline_leave, margin=MARGIN):
    """Whether the screen clears one class at one magnitude.

    Parameters
    ----------
    moved, left, n : int
        Transformed images (one per original) that moved to another class,
        landed outside every region, and in total.
    baseline_change, baseline_leave : float
        The same shares for the class's held-out originals.
    margin : float, default 0.10

    Returns
    -------
    bool
        True when ``n >= MIN_EVIDENCE`` and the upper Wilson 95% bounds of
        both shares are at most their baseline plus ``margin``.
    """
    from augplan.measure.stats import wilson_interval

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
    from augplan.measure.stats import wilson_interval

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


# --------------------------------------------------------------------------
# geometry


def class_distances(query, reference, reference_labels, n_classes, *, k=NEIGHBOURS,
                    exclude=None):
    """Mean distance from each query point to its ``k`` nearest points of each class.

    Parameters
    ----------
    query : numpy.ndarray, shape (M, D)
    reference : numpy.ndarray, shape (N, D)
    reference_labels : numpy.ndarray of int, shape (N,)
        Class index ``0 .. n_classes - 1`` of each reference point.
    n_classes : int
    k : int, default 5
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
    """Destination class of each image, or -1 when nothing in the data vouches for one.

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


def reference_rows(labels, n_classes, limit, seed):
    """Rows that stand as region reference points: every class's, or a seeded draw of ``limit`` of a larger class.

    Parameters
    ----------
    labels : numpy.ndarray of int, shape (N,)
    n_classes : int
    limit : int
        Most reference points per class.
    seed : int
        Seed of the draw (the check's seed), so the same check draws the same points.

    Returns
    -------
    numpy.ndarray of int
        Ascending row indices.
    """
    rng = np.random.default_rng([int(seed), 0x2EF])
    rows = []
    for c in range(n_classes):
        members = np.flatnonzero(labels == c)
        if len(members) > limit:
            members = np.sort(rng.choice(members, size=limit, replace=False))
        rows.append(members)
    return np.sort(np.concatenate(rows)) if rows else np.empty(0, dtype=np.int64)


class _Geometry:
    """Standardise + PCA projection with the reference points and thresholds.

    Every original is projected and judged, but each class's region is drawn
    from at most `REGION_REFERENCE_LIMIT` of its originals (`reference_rows`):
    distances are computed to those points only, so the work grows linearly
    with the images. An original among them is left out of its own distances.
    """

    def __init__(self, features, labels, n_classes, random_state):
        self.scaler = StandardScaler().fit(features)
        scaled = self.scaler.transform(features)
        n_components = VARIANCE_KEPT if min(scaled.shape) > 1 else None
        self.pca = PCA(n_components=n_components, svd_solver="full", random_state=random_state)
        projected = self.pca.fit_transform(scaled).astype(np.float64)
        rows = reference_rows(labels, n_classes, REGION_REFERENCE_LIMIT, random_state)
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
        points = self.pca.transform(self.scaler.transform(features))
        distances = class_distances(points, self.reference, self.labels, self.n_classes,
                                    exclude=self.position[sources])
        return distances / self.thresholds


# --------------------------------------------------------------------------
# work units


# The checked sample, decoded, in the process that last needed it: every
# work unit of one check reads the same images, so a worker decodes them once
# rather than once per unit. Keyed by the images' hashes and side, so another
# check (or another data set) never sees a stale sample.
_DECODED_SAMPLE = {}


def _sample_key(records, size):
    digest = hashlib.sha256(str(int(size)).encode())
    for record in records:
        digest.update(record.sha256.encode())
    return digest.hexdigest()


def _decoded_sample(context):
    """The checked images, decoded from the records' paths or carried bytes."""
    from augplan.data.dataset import load_images

    key = context["sample_key"]
    images = _DECODED_SAMPLE.get(key)
    if images is None:
        images = load_images(context["records"], size=context["size"])
        _DECODED_SAMPLE.clear()
        _DECODED_SAMPLE[key] = images
    return images


def _fit_fold(template, features, labels, folds, fold):
    """The template model fitted on every fold but ``fold`` (labels only are read later)."""
    from sklearn.base import clone

    # Single precision: the checker reads predicted labels and the argmax of
    # probabilities, which float32 solver products leave unchanged; the folds
    # are the checker's own, so the model's cross-validation is not run.
    model = clone(template).set_params(cross_validate=False, solver_dtype=np.float32)
    train = folds != fold
    return model.fit_features(features[train], labels[train])


def _fit_fold_unit(context, fold):
    return _fit_fold(context["template"], context["features"], context["labels"], context["folds"], fold)


def _out_of_fold_proba(models, features, folds, n_classes):
    """Each row's class probabilities from the fold model that did not see its source."""
    proba = np.zeros((len(features), n_classes))
    for fold, model in enumerate(models):
        rows = np.flatnonzero(folds == fold)
        if len(rows):
            columns = np.asarray(model.classes_, dtype=np.int64)
            proba[np.ix_(rows, columns)] = model.predict_proba_features(features[rows])
    return proba


def _screen_unit(context, unit):
    """Transform, featurise and locate the in-scope images of one (transform, magnitude)."""
    from augplan.augment.transforms import apply_op_batch, params_at

    transform_index, magnitude, rng, keep_rows = unit
    transform = context["transforms"][transform_index]
    sources = context["scope"][transform_index]
    images = _decoded_sample(context)
    params = params_at(transform, 0.0 if magnitude is None else magnitude, context["fill"])
    moved_images = apply_op_batch(images[sources], transform.op, params, rng)
    features = context["template"].featurize(moved_images)
    proba = _out_of_fold_proba(context["models"], features, context["folds"][sources], context["n_classes"])
    ratios = context["geometry"].ratios(features, sources)
    expected = context["expected"][transform_index][context["labels"][sources]]
    destinations = locate(ratios, proba, expected)
    examples = _examples(destinations, expected, sources, magnitude, context) if context["evidence"] else []
    # Rows the confirmation trains on at this magnitude (one per image).
    kept = np.asarray(features[keep_rows], dtype=np.float32)
    return destinations, examples, kept, ratios, np.argmax(proba, axis=1)


def _examples(destinations, expected, sources, magnitude, context):
    """Moved images first (the clearest evidence), the classes taken in turn, with the magnitude that moved them."""
    labels = context["labels"]
    off = [row for row in range(len(sources)) if destinations[row] != expected[row]]
    seen, rank = {}, {}
    for row in off:
        key = (destinations[row] == OUTSIDE, labels[sources[row]])
        rank[row] = seen.get(key, 0)
        seen[key] = rank[row] + 1
    off.sort(key=lambda row: (destinations[row] == OUTSIDE, rank[row], row))
    return [(int(sources[row]), int(destinations[row]), magnitude) for row in off[:EVIDENCE_IMAGES]]


def _confirm_unit(context, unit):
    """Out-of-fold predictions of held-out originals by the model trained with the transform."""
    train_features, train_labels, train_folds = unit
    features, folds = context["features"], context["folds"]
    predictions = np.empty(len(features), dtype=np.int64)
    for fold in range(context["n_folds"]):
        model = _fit_fold(context["template"], train_features, train_labels, train_folds, fold)
        rows = folds == fold
        predictions[rows] = model.predict_features(features[rows])
    return predictions


def _replaced_images(context, images, t_index, rng):
    """The checked images with every image in scope replaced by its transformed copy.

    Each image takes the grid value its plan drew for the whole range (the
    draws the linear confirmation trains on), applied through the batch
    engine, one call per grid value; labels follow any relabel.
    """
    from augplan.augment.transforms import apply_op_batch, params_at

    transform = context["transforms"][t_index]
    scope, draws, values = context["scope"][t_index], context["draws"][t_index], context["values"][t_index]
    replaced, labels = images.copy(), context["labels"].copy()
    for position, generator in zip(np.unique(draws), rng.spawn(len(np.unique(draws)))):
        rows = scope[draws == position]
        value = values[position]
        params = params_at(transform, 0.0 if value is None else value, context["fill"])
        replaced[rows] = apply_op_batch(images[rows], transform.op, params, generator)
    labels[scope] = context["expected"][t_index][labels[scope]]
    return replaced, labels


def _network_unit(context, unit):
    """Held-out originals of one network fold, predicted by the network trained on the other folds.

    ``unit`` is ``(t_index, fold, seed_sequence)``: ``t_index`` None trains
    on the originals (the one baseline every transform shares), otherwise on
    the originals with transform ``t_index``'s scope replaced (the first
    witness). Only original images are ever predicted.
    """
    from augplan.parallel import tick

    t_index, fold, seed_sequence = unit
    images = _decoded_sample(context)
    draw_seq, model_seq = seed_sequence.spawn(2)
    if t_index is None:
        train_images, train_labels = images, context["labels"]
    else:
        train_images, train_labels = _replaced_images(context, images, t_index, np.random.default_rng(draw_seq))
    folds = context["network_folds"]
    train = folds != fold
    predictor = context["network"].train(train_images[train], train_labels[train],
                                         np.random.default_rng(model_seq), None, progress=tick)
    return np.asarray(predictor.predict(images[folds == fold])).astype(np.int64)


def _network_witness(context, images, jobs, seed, workers, quiet):
    """Out-of-fold network predictions of the originals: the shared baseline and one per transform.

    Returns ``{None: baseline predictions, t_index: predictions of the
    network trained on replaced images}`` over all checked images.
    """
    from augplan.parallel import parallel_map as run

    folds = context["network_folds"]
    n_folds = int(folds.max()) + 1
    keys = [None] + sorted({t for t, _ in jobs})
    units = [(t, fold, np.random.SeedSequence([int(seed), _NETWORK_PURPOSE, 0 if t is None else t + 1, fold]))
             for t in keys for fold in range(n_folds)]
    epochs = getattr(context["network"], "epochs", None)
    ticks = epochs(int(np.sum(folds != 0))) if epochs else None
    _DECODED_SAMPLE.clear()
    _DECODED_SAMPLE[context["sample_key"]] = images
    try:
        outputs = run(functools.partial(_network_unit, context), units, workers=workers, ticks=ticks, quiet=quiet,
                      desc=f"confirming with the {context['network'].name} model"
                           + (f" ({ticks} epochs a fit)" if ticks else ""))
    finally:
        _DECODED_SAMPLE.clear()
    predictions = {}
    for (t, fold, _), predicted in zip(units, outputs):
        predictions.setdefault(t, np.empty(len(folds), dtype=np.int64))[folds == fold] = predicted
    return predictions


# --------------------------------------------------------------------------
# the checker's stages


def _sample_training(dataset, sample, rng):
    records = sorted(dataset.split("train"), key=lambda record: record.relpath)
    classes = tuple(dataset.classes)
    by_class = {name: [] for name in classes}
    for record in records:
        if record.label in by_class:
            by_class[record.label].append(record)
    chosen, labels = [], []
    for index, name in enumerate(classes):
        group = by_class[name]
        if sample is not None and len(group) > sample:
            picks = np.sort(rng.choice(len(group), size=sample, replace=False))
            group = [group[i] for i in picks]
        chosen.extend(group)
        labels.extend([index] * len(group))
    return chosen, np.array(labels, dtype=np.int64), classes


def _checked_sample(dataset, sample, rng, warnings):
    """Records, class indices and names of the sampled training images with usable classes."""
    records, labels, classes = _sample_training(dataset, sample, rng)
    counts = np.bincount(labels, minlength=len(classes))
    small = [classes[c] for c in range(len(classes)) if counts[c] < MIN_PER_CLASS]
    if small:
        warnings.append(f"classes with fewer than {MIN_PER_CLASS} training images have no region "
                        f"and are left out of the check: {', '.join(small)}")
        keep_classes = [c for c in range(len(classes)) if counts[c] >= MIN_PER_CLASS]
        keep = np.isin(labels, keep_classes)
        records = [r for r, k in zip(records, keep) if k]
        remap = {old: new for new, old in enumerate(keep_classes)}
        labels = np.array([remap[c] for c in labels[keep]], dtype=np.int64)
        classes = tuple(classes[c] for c in keep_classes)
        counts = np.bincount(labels, minlength=len(classes))
    if len(classes) < 2:
        raise BadInputError(f"{dataset.root}: the label check needs at least two classes with "
                            f"{MIN_PER_CLASS} or more training images each; found {len(classes)}.")
    few = [classes[c] for c in range(len(classes)) if counts[c] < MIN_EVIDENCE]
    if few:
        warnings.append(f"classes with fewer than {MIN_EVIDENCE} training images are too few images "
                        f"to judge: {', '.join(few)}")
    return records, labels, classes


@dataclass
class _Baseline:
    """Out-of-fold state of the originals shared by both stages."""

    features: np.ndarray
    folds: np.ndarray
    models: list
    predictions: np.ndarray
    dest: np.ndarray
    geometry: object
    change: np.ndarray
    leave: np.ndarray
    cv_accuracy: float
    chance: float
    weak: bool


def _fit_baseline(images, labels, n_classes, template, seed, workers, quiet):
    """Fold models, out-of-fold predictions and regions of the original images."""
    from sklearn.model_selection import StratifiedKFold

    from augplan.measure.model import is_weak
    from augplan.measure.stats import wilson_interval

    features = template.featurize(images)
    counts = np.bincount(labels, minlength=n_classes)
    n_folds = int(min(FOLDS, counts.min()))
    folds = np.empty(len(labels), dtype=np.int64)
    splitter = StratifiedKFold(n_splits=n_folds, shuffle=True, random_state=seed)
    for fold, (_, rows) in enumerate(splitter.split(features, labels)):
        folds[rows] = fold
    context = {"template": template, "features": features, "labels": labels, "folds": folds}
    models = parallel_map(functools.partial(_fit_fold_unit, context), range(n_folds), workers=workers,
                          desc="fitting the proxy on folds", quiet=quiet)
    proba = _out_of_fold_proba(models, features, folds, n_classes)
    predictions = np.argmax(proba, axis=1)
    correct = int(np.sum(predictions == labels))
    cv_accuracy = correct / len(labels)
    chance = float(counts.max() / counts.sum())
    weak = is_weak(cv_accuracy, wilson_interval(correct, len(labels))[0], chance)
    with single_threaded():   # the PCA's SVD, as the shortcut audit's fits (augplan.parallel.single_threaded)
        geometry = _Geometry(features, labels, n_classes, seed)
    dest = locate(geometry.held_out_ratios, proba, labels)
    change = np.array([np.mean((dest[labels == c] != c) & (dest[labels == c] != OUTSIDE))
                       for c in range(n_classes)])
    leave = np.array([np.mean(dest[labels == c] == OUTSIDE) for c in range(n_classes)])
    return _Baseline(features, folds, models, predictions, dest, geometry, change, leave, cv_accuracy, chance,
                     weak)


@dataclass
class _Plan:
    """What one transform is checked on: scope, expected classes, grid and training draws."""

    scope: np.ndarray
    expected: np.ndarray
    values: list
    ranges: list
    draws: list


def _plan_transform(transform, classes, labels, magnitudes, rng):
    """Scope, expected class per class, grid values and, per range, one grid value per image."""
    from augplan.augment.transforms import OPS, magnitude_grid

    spec = OPS[transform.op]
    checked = [c for c in range(len(classes)) if transform.applies_to(classes[c])]
    scope = np.flatnonzero(np.isin(labels, checked))
    relabel = dict(transform.relabel or {})
    expected = np.array([classes.index(relabel[name]) if relabel.get(name) in classes else c
                         for c, name in enumerate(classes)])
    if spec.magnitude is None:
        values = [None]
    else:
        values = [float(v) for v in magnitude_grid(transform, int(magnitudes))]
        if values[0] <= spec.identity <= values[-1] and not any(
                math.isclose(v, spec.identity, abs_tol=1e-12) for v in values):
            values = sorted(values + [float(spec.identity)])
    # The whole grid first, then the ranges nested around the identity (safe limit).
    ranges = [list(values)] + (nested_ranges(values, spec.identity)[1:] if spec.magnitude else [])
    # Positions in ``values``: each image trains at one grid value of each range.
    draws = [np.array([values.index(v) for v in r])[rng.integers(0, len(r), size=len(scope))]
             for r in ranges]
    return _Plan(scope, expected, values, ranges, draws)


def _run_screen(context, images, plans, baseline, unit_root, workers, quiet):
    """Screen results ``{(transform, value position): (destinations, examples, kept rows, ratios)}``."""
    from augplan.augment.transforms import OPS

    work, known = [], {}
    for t_index, plan in enumerate(plans):
        if not len(plan.scope):
            continue
        transform = context["transforms"][t_index]
        identity = OPS[transform.op].identity
        for position, value in enumerate(plan.values):
            keep = np.flatnonzero(np.any([d == position for d in plan.draws], axis=0))
            # At the identity magnitude the images are the originals, whose
            # out-of-fold destinations and features are already known (unless
            # a relabel changes what they should be).
            if value is not None and math.isclose(value, identity, abs_tol=1e-12) and not transform.relabel:
                known[(t_index, position)] = (baseline.dest[plan.scope], [],
                                              baseline.features[plan.scope][keep].astype(np.float32),
                                              baseline.geometry.held_out_ratios[plan.scope],
                                              baseline.predictions[plan.scope])
            else:
                work.append((t_index, position, keep))
    rngs = unit_root.spawn(len(work))
    units = [(t, plans[t].values[p], r, keep) for (t, p, keep), r in zip(work, rngs)]
    _DECODED_SAMPLE.clear()
    _DECODED_SAMPLE[context["sample_key"]] = images
    try:
        results = parallel_map(functools.partial(_screen_unit, context), units, workers=workers,
                               desc="screening transforms", quiet=quiet)
    finally:
        _DECODED_SAMPLE.clear()
    known.update({(t, p): result for (t, p, _), result in zip(work, results)})
    return known


def _screen_transform(plan, results, t_index, labels, baseline, n_classes):
    """Per-magnitude screen rows, per-class screen counts and whether the screen clears."""
    from augplan.measure.stats import wilson_interval

    source_labels = labels[plan.scope]
    checked = sorted(set(source_labels.tolist()))
    rows, cleared, worst = [], bool(checked) and not baseline.weak, None
    for position, value in enumerate(plan.values):
        destinations = results[(t_index, position)][0]
        moved_total = left_total = 0
        for a in checked:
            dest = destinations[source_labels == a]
            moved = int(np.sum((dest != plan.expected[a]) & (dest != OUTSIDE)))
            left = int(np.sum(dest == OUTSIDE))
            cleared = cleared and screen_clears(moved, left, len(dest), baseline.change[a], baseline.leave[a])
            moved_total, left_total = moved_total + moved, left_total + left
        row = {"value": None if value is None else round(value, 4), "moved": moved_total,
               "outside": left_total, "n": len(destinations)}
        rows.append(row)
        if worst is None or moved_total > worst["moved"]:
            worst = row
    n = worst["n"] if worst else 0
    summary = {"change_rate": _rate(worst["moved"], n) if worst else 0.0,
               "change_rate_ci": _interval(worst["moved"], n) if worst else [0.0, 1.0],
               "leave_rate": _rate(worst["outside"], n) if worst else 0.0,
               "leave_rate_ci": _interval(worst["outside"], n) if worst else [0.0, 1.0], "n": n}
    magnitudes = [{"value": r["value"], "change_rate": _rate(r["moved"], r["n"]),
                   "leave_rate": _rate(r["outside"], r["n"])} for r in rows if r["value"] is not None]
    counts = {a: int(np.sum(source_labels == a)) for a in checked}
    summary["screen_swaps"] = _screen_flows(plan, results, t_index, labels, baseline, range(len(plan.values)))
    return cleared, checked, summary, magnitudes, counts


def _training_set(plan, results, t_index, range_index, baseline, labels, mode):
    """Features, labels and folds one augmented model trains on, for one range of one transform.

    ``mode`` ``"replace"``: every image in scope is replaced by its
    transformed copy (the transform with probability 1), so a transform that
    gives class A's images B's look teaches the model that B's look means A.
    ``"add"``: the originals plus one transformed copy of each image in scope,
    as a recipe's copies join the originals in training. A copy sits in its
    source's fold, so no image is predicted by a model that saw a copy of it.
    """
    draws = plan.draws[range_index]
    copies = np.empty((len(plan.scope), baseline.features.shape[1]), dtype=np.float32)
    for position in np.unique(draws):
        kept_rows = np.flatnonzero(np.any([d == position for d in plan.draws], axis=0))
        picked = np.flatnonzero(draws == position)
        # ``kept`` holds the rows of ``kept_rows`` in order; find each picked row there.
        copies[picked] = results[(t_index, position)][2][np.searchsorted(kept_rows, picked)]
    copy_labels = plan.expected[labels[plan.scope]]
    features = baseline.features.astype(np.float32)
    if mode == "replace":
        features[plan.scope] = copies
        train_labels = labels.copy()
        train_labels[plan.scope] = copy_labels
        return features, train_labels, baseline.folds
    return (np.concatenate([features, copies]), np.concatenate([labels, copy_labels]),
            np.concatenate([baseline.folds, baseline.folds[plan.scope]]))


MODES = ("replace", "add")


def _run_confirmation(context, jobs, plans, screen, baseline, labels, workers, quiet):
    """Out-of-fold predictions ``{(transform, range): {mode: predictions}}`` for each job."""
    units = [(job, mode) for job in jobs for mode in MODES]
    sets = [_training_set(plans[t], screen, t, r, baseline, labels, mode) for (t, r), mode in units]
    results = parallel_map(functools.partial(_confirm_unit, context), sets, workers=workers,
                           desc="confirming by training", quiet=quiet)
    out = {job: {} for job in jobs}
    for (job, mode), predictions in zip(units, results):
        out[job][mode] = predictions
    return out


def _screen_flows(plan, results, t_index, labels, baseline, positions):
    """Swaps the screen witnessed: ``{(a, b): (share, count, n, typical, typical_low)}``.

    At the grid value (among ``positions``) where the out-of-fold proxy
    calls the largest share of a's transformed images b; only flows that
    pass `witness_holds` against the share of a's held-out originals it
    calls b count. ``typical`` is the `typical_share` of a's transformed
    images for b at that grid value and ``typical_low`` its lower Wilson 95%
    bound.
    """
    from augplan.measure.stats import wilson_interval

    source_labels = labels[plan.scope]
    n_classes = len(baseline.change)
    own = [baseline.geometry.held_out_ratios[labels == b, b] for b in range(n_classes)]
    flows = {}
    for a in sorted(set(source_labels.tolist())):
        base = np.bincount(baseline.predictions[labels == a], minlength=n_classes) / np.sum(labels == a)
        rows = source_labels == a
        for position in positions:
            votes = results[(t_index, position)][4][rows]
            counts = np.bincount(votes, minlength=n_classes)
            for b in np.flatnonzero(counts):
                share = counts[b] / len(votes)
                if (b != plan.expected[a] and share > flows.get((a, int(b)), (0.0,))[0]
                        and witness_holds(counts[b], len(votes), base[b])):
                    typical = typical_share(results[(t_index, position)][3][rows, b], own[b])
                    low = wilson_interval(int(round(typical * len(votes))), len(votes))[0]
                    flows[(a, int(b))] = (float(share), int(counts[b]), len(votes), typical, low)
    return flows


def _witnessed(plan, results, t_index, range_index, labels, baseline, n_classes):
    """``W[a, b]``: within the range, the screen witnessed a's images taking b's look (`_screen_flows`)."""
    positions = sorted({plan.values.index(v) for v in plan.ranges[range_index]})
    seen = np.zeros((n_classes, n_classes), dtype=bool)
    for a, b in _screen_flows(plan, results, t_index, labels, baseline, positions):
        seen[a, b] = True
    return seen


def _judge(labels, base_pred, predictions, n_classes, checked, weak, seen, rng):
    """Confirmation verdict of one range: (verdict, class entries, passing and other pairs).

    A pair breaks when the model trained on replaced images shows a rise of
    the confusion ``B -> A`` that passes `pair_breaks` and the screen
    witnessed A's transformed images taking B's look (``seen[A, B]``,
    `witness_holds`): two witnesses, so a
    proxy that merely fails on a look it was not trained on (a domain
    shift) cannot call a label changed. Safety is judged on the model
    trained with the originals plus copies, as a recipe is used.
    """
    rng_replace, rng_add = rng.spawn(2)
    # The replaced model is compared with the baseline of its own kind (the
    # network's, when the network is the first witness).
    _, replaced = compare_predictions(labels, predictions.get("replace_base", base_pred), predictions["replace"],
                                      n_classes, rng_replace)
    changes, pairs = compare_predictions(labels, base_pred, predictions["add"], n_classes, rng_add)
    counts = np.bincount(labels, minlength=n_classes)
    passing = [p for p in replaced if pair_breaks(p) and seen[p.target, p.source]
               and counts[p.target] >= MIN_EVIDENCE]
    culprits = {p.target for p in passing}
    verdicts = {}
    for change in changes:
        own = class_verdict(change, [p for p in pairs if p.source == change.index])
        # Only the two witnesses can say breaks; a weak proxy vouches for nothing.
        verdicts[change.index] = "unverified" if own == "breaks" or (own == "safe" and weak) else own
    if passing:
        overall = "breaks"
    elif all(v == "safe" for v in verdicts.values()):
        overall = "safe"
    else:
        overall = "unverified"
    entries = {}
    for change in changes:
        if change.index in checked:
            entries[change.index] = {
                "verdict": "breaks" if change.index in culprits else verdicts[change.index], "n": change.n, "recall_base": round(change.recall_base, 4),
                "recall_augmented": round(change.recall_augmented, 4), "recall_fall": round(change.fall, 4),
                "recall_fall_ci": [round(change.low, 4), round(change.high, 4)]}
    shown = {(p.source, p.target) for p in passing}
    others = [p for p in replaced if (p.source, p.target) not in shown and p.rise > 0]
    return overall, entries, passing, [(p, bool(seen[p.target, p.source])) for p in others]


def _swap_rows(pairs, classes):
    """Swaps in the transform's direction: a rise of the confusion ``B -> A`` on originals
    means ``A``'s transformed images took ``B``'s look (``from`` A ``to`` B).

    ``pairs`` holds PairChange items, or ``(PairChange, witnessed)`` for
    the pairs that do not pass, with whether the screen saw the move.
    """
    rows = []
    for item in pairs:
        p, witnessed = item if isinstance(item, tuple) else (item, True)
        rows.append({"from": classes[p.target], "to": classes[p.source],
                     "confusion": f"{classes[p.source]} -> {classes[p.target]}", "rate": round(p.rise, 4),
                     "rate_ci": [round(p.low, 4), round(p.high, 4)], "base_rate": round(p.base, 4),
                     "augmented_rate": round(p.augmented, 4), "moved": p.moved, "n": p.n,
                     "witnessed": witnessed})
    rows.sort(key=lambda s: (-s["rate"], s["from"], s["to"]))
    return rows


def _can_swap_classes(transform):
    """Whether the op can give an image another class's look as a whole (mirror, turn, hue).

    A relabel applies to every draw of the step, so the step must do the
    same thing to every image it changes: a mirror, or a fixed turn. A hue or
    rotation *range* also draws small turns that keep the label; relabelling
    those would teach wrong labels, so a range is clipped or scoped instead.
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


def _suggestion(transform, checked, entries, passing, classes, typical):
    """Relabel for typical swaps that close a cycle; `only` for the safe classes and the relabelled ones.

    A confirmed confusion ``B -> A`` means the transformed images of ``A``
    taught the model ``B``'s look: ``A``'s images take ``B``'s class. A
    relabel writes labels for every draw, so it is held to a higher bar than
    "breaks": it is offered only for ops that can swap classes, only where
    these moves close a cycle (``A -> B`` and ``B -> A``, or a hue turn's
    ``A -> B -> C -> A``), never for a one-way move, and only when at every
    step of the cycle most of ``A``'s transformed images are typical of
    ``B``: ``typical[(A, B)]``, the lower Wilson 95% bound of their
    `typical_share`, is at least ``RELABEL_TYPICAL_SHARE``; for a pair, in
    both directions. A class whose swap falls short is scoped out instead.
    """
    main = {}
    for pair in sorted(passing, key=lambda p: -p.rise):
        main.setdefault(pair.target, pair.source)
    in_cycle = set()
    if _can_swap_classes(transform) and transform.relabel is None:
        for a in main:
            path, node = [], a
            while node in main and node not in path:
                path.append(node)
                node = main[node]
            cycle = path[path.index(node):] if node in path else []
            if cycle and all(typical.get((c, main[c]), 0.0) >= RELABEL_TYPICAL_SHARE for c in cycle):
                in_cycle.update(cycle)
    in_cycle &= set(checked)
    suggestion = {}
    if in_cycle:
        suggestion["relabel"] = dict(sorted((classes[a], classes[main[a]]) for a in in_cycle))
    at_fault = set(main) - in_cycle
    keep = [a for a in checked if a in in_cycle or entries.get(a, {}).get("verdict") == "safe"]
    if at_fault and keep and len(keep) < len(checked):
        suggestion["only"] = sorted(classes[a] for a in keep)
    return suggestion or None


def _safe_limit(plan, verdicts):
    """Widest confirmed-safe range of the grid, ``[low, high]``, or None."""
    for values, verdict in zip(plan.ranges, verdicts):
        if verdict == "safe" and values and values[0] is not None and values[0] < values[-1]:
            return [round(values[0], 4), round(values[-1], 4)]
    return None


def _options(sample, magnitudes, evidence_dir):
    """Validate the checker's options; the evidence folder is written at the end, whole."""
    if sample is not None and (isinstance(sample, bool) or int(sample) != sample or sample < MIN_PER_CLASS):
        raise BadInputError(f"--sample must be an integer of at least {MIN_PER_CLASS}; got {sample!r}.")
    if isinstance(magnitudes, bool) or int(magnitudes) != magnitudes or magnitudes < 2:
        raise BadInputError(f"magnitudes must be an integer of at least 2; got {magnitudes!r}.")
    if evidence_dir is not None:
        from augplan.atomic import check_output

        evidence_dir = Path(evidence_dir)
        check_output(evidence_dir, folder=True)
    return evidence_dir


class _Clock:
    """Wall time of each stage into a caller's dict (or nowhere)."""

    def __init__(self, timings):
        import time

        self._now, self.timings = time.perf_counter, timings
        self._start = self._now()

    def lap(self, stage):
        now = self._now()
        if self.timings is not None:
            self.timings[stage] = now - self._start
        self._start = now


def _confirm_jobs(plans, cleared):
    """(transform, range) pairs to train: the whole range of each uncleared transform, then its limits."""
    whole = [(t, 0) for t, plan in enumerate(plans) if len(plan.scope) and not cleared[t]]
    nested = [(t, r) for t, _ in whole for r in range(1, len(plans[t].ranges))]
    return whole, nested


def _confirm_all(context, plans, screen, screened, baseline, labels, n_classes, boot_rng, workers, quiet,
                 clock, images=None, seed=0):
    """Judge every uncleared transform over its whole range, then the nested ranges of those not safe.

    With a network (``context["network"]``), the model trained on replaced
    images over the whole range, the first witness, is the network, compared
    with the network's own baseline; safety (originals plus copies) and the
    nested ranges of the safe limit stay with the linear proxy.
    """
    whole, nested = _confirm_jobs(plans, [s[0] for s in screened])
    boot = dict(zip(whole + nested, boot_rng.spawn(len(whole) + len(nested))))
    witness = (_network_witness(context, images, whole, seed, workers, quiet)
               if context.get("network") is not None and whole else None)

    def judge(jobs):
        trained = _run_confirmation(context, jobs, plans, screen, baseline, labels, workers, quiet)
        if witness is not None:
            for t, r in jobs:
                if r == 0:
                    trained[(t, r)].update(replace=witness[t], replace_base=witness[None])
        return {job: _judge(labels, baseline.predictions, trained[job], n_classes, screened[job[0]][1],
                            baseline.weak, _witnessed(plans[job[0]], screen, *job, labels, baseline, n_classes),
                            boot[job]) for job in jobs}

    judged = judge(whole)
    clock.lap("confirmation")
    judged.update(judge([job for job in nested if judged[(job[0], 0)][0] != "safe"]))
    clock.lap("safe limits")
    return judged


def check_recipe(dataset, recipe, *, model=None, sample=None, size=64, magnitudes=7, seed=0,
                 workers=1, quiet=True, evidence_dir=None, timings=None):
    """Check every transform of a recipe for label safety (screen, then confirmation).

    Parameters
    ----------
    dataset : augplan.data.Dataset
        Only its ``train`` split is used.
    recipe : augplan.recipe.Recipe
    model : {'cnn', 'linear'} or str or FeatureModel, optional
        The model trained on replaced images in confirmation, the first
        witness of a break (`augplan.measure.models`): None (the default,
        `CHECK_DEFAULT_MODEL`, the linear proxy: the network as first witness
        gave wrong verdicts on the outside sets of the tests) or ``'linear'``,
        the proxy; ``'cnn'``, the network;
        ``'module:callable'``, the team's training function. The screen,
        the safety test (originals plus copies) and the safe limits use the
        linear proxy in every case; a `FeatureModel` replaces that proxy and
        serves as the first witness too. ``model.confirmation`` in the
        document names the first witness.
    sample : int, optional
        At most this many training images per class (drawn with ``seed``).
    size : int, default 64
        Side of the squares images are read and trained at (``--side``);
        larger images are reduced by area averaging. ``model.side`` says it.
    magnitudes : int, default 7
        Grid values per magnitude range (both ends included).
    seed : int, default 0
    workers : int, default 1
        Processes for the work units; results do not depend on it.
    quiet : bool, default True
        Hide the progress bar.
    evidence_dir : str or Path, optional
        Folder for a contact sheet of moved and outside images of each
        transform that breaks or is unverified.
    timings : dict, optional
        Filled with the wall time in seconds of each stage (``"baseline"``,
        ``"screen"``, ``"confirmation"``, ``"safe limits"``); kept out of the
        document so that it stays the same for the same seed.

    Returns
    -------
    dict
        The ``check --json`` document; ``decision_rule`` states the module's
        rule. Each transform carries ``verdict``, ``decided_by`` (``"screen"``
        or ``"confirmation"``), ``swaps`` (confirmed confusions, largest
        first), ``other_swaps`` (rises that do not pass the rule),
        ``classes``, ``magnitudes`` (screen rates per grid value) and
        ``safe_limit``.

    Raises
    ------
    BadInputError
        Fewer than two classes with at least 3 training images, an unusable
        ``sample``, ``magnitudes`` or ``evidence_dir``.
    """
    from augplan.data.dataset import load_images

    evidence_dir = _options(sample, magnitudes, evidence_dir)
    clock = _Clock(timings)
    sample_rng, unit_root, draw_rng, boot_rng = np.random.default_rng(seed).spawn(4)
    warnings = []
    records, labels, classes = _checked_sample(dataset, sample, sample_rng, warnings)
    images = load_images(records, size=size)
    model, network = _check_models(model, seed)
    if network is not None and network.name == FALLBACK_NAME:
        warnings.append(FALLBACK_WARNING)
    baseline = _fit_baseline(images, labels, len(classes), model, seed, workers, quiet)
    if baseline.weak:
        warnings.append(f"the feature model is weak (cross-validated accuracy {baseline.cv_accuracy:.2f}, "
                        f"chance {baseline.chance:.2f}); nothing is called safe")
    clock.lap("baseline")
    transforms = list(recipe.transforms)
    plans = [_plan_transform(t, classes, labels, magnitudes, rng)
             for t, rng in zip(transforms, draw_rng.spawn(len(transforms)))]
    context = {"transforms": transforms, "scope": [p.scope for p in plans], "records": records, "size": size,
               "sample_key": _sample_key(records, size), "fill": recipe.fill, "template": model,
               "models": baseline.models, "n_classes": len(classes), "geometry": baseline.geometry,
               "evidence": evidence_dir is not None, "expected": [p.expected for p in plans],
               "labels": labels, "folds": baseline.folds, "features": baseline.features,
               "n_folds": len(baseline.models), "draws": [p.draws[0] for p in plans],
               "values": [p.values for p in plans],
               "network": network if network is not None and not network.uses_features else None,
               "network_folds": _network_folds(labels, seed)}
    screen = _run_screen(context, images, plans, baseline, unit_root, workers, quiet)
    screened = [_screen_transform(plan, screen, t, labels, baseline, len(classes)) if len(plan.scope)
                else (False, [], None, [], {}) for t, plan in enumerate(plans)]
    clock.lap("screen")
    judged = _confirm_all(context, plans, screen, screened, baseline, labels, len(classes), boot_rng,
                          workers, quiet, clock, images=images, seed=seed)
    report = [_entry(t, transforms[t], plans[t], screened[t], judged, classes, warnings)
              for t in range(len(transforms))]
    _mark_shortcut_moves(report, images, labels, classes, dataset, size, seed)
    if evidence_dir is not None:
        # After the shortcut pass, so each sheet's heading carries the final verdict.
        _attach_evidence(report, screen, plans, evidence_dir, transforms, records, labels, classes, recipe.fill,
                         seed)
    witness = context["network"].name if context["network"] is not None else (
        network.name if network is not None else "linear")
    return _document(recipe, baseline, labels, classes, report, warnings, witness, size)


def _check_models(model, seed):
    """The screen's feature model and the confirmation's model for ``check_recipe``'s ``model``.

    Returns ``(template, scoring)``: the `FeatureModel` the screen (and the
    linear confirmation) use, and the `augplan.measure.models` choice the
    first witness trains (None for a `FeatureModel` passed in, which then
    serves both stages).
    """
    from augplan.measure.models import CHECK_DEFAULT_MODEL, scoring_model
    from augplan.measure.model import FeatureModel

    if isinstance(model, FeatureModel):
        return model, None
    return FeatureModel(random_state=seed), scoring_model(CHECK_DEFAULT_MODEL if model is None else model)


def _network_folds(labels, seed):
    """Stratified `NETWORK_FOLDS` folds of the checked images for the network's confirmation."""
    from sklearn.model_selection import StratifiedKFold

    counts = np.bincount(labels)
    n_folds = int(min(NETWORK_FOLDS, counts[counts > 0].min()))
    folds = np.zeros(len(labels), dtype=np.int64)
    if n_folds < 2:
        return folds
    splitter = StratifiedKFold(n_splits=n_folds, shuffle=True, random_state=int(seed) % (2**32))
    for fold, (_, rows) in enumerate(splitter.split(np.zeros(len(labels)), labels)):
        folds[rows] = fold
    return folds


def _document(recipe, baseline, labels, classes, report, warnings, witness="linear", side=64):
    """The ``check --json`` document, typed."""
    return CheckResult.from_json({
        "recipe": recipe.name,
        "model": {"cv_accuracy": round(baseline.cv_accuracy, 4), "chance": round(baseline.chance, 4),
                  "weak": baseline.weak, "folds": len(baseline.models),
                  # The model trained on replaced images (the first witness of a break) and
                  # the side every image was read and trained at.
                  "confirmation": witness, "side": int(side)},
        "baseline": {classes[c]: {"change_rate": round(float(baseline.change[c]), 4),
                                  "leave_rate": round(float(baseline.leave[c]), 4),
                                  "cv_recall": round(float(np.mean(baseline.predictions[labels == c] == c)), 4)}
                     for c in range(len(classes))},
        "transforms": report,
        "warnings": warnings,
        "decision_rule": DECISION_RULE,
        "n_images": int(len(labels)),
    })


def _entry(t_index, transform, plan, screened, judged, classes, warnings):
    """The JSON entry of one transform from its screen and confirmation results."""
    cleared, checked, summary, magnitudes, counts = screened
    if not checked:
        warnings.append(f"transform {t_index} ({transform.op}) applies to no class of the data; "
                        f"nothing to check")
    summary = dict(summary or {"change_rate": 0.0, "change_rate_ci": [0.0, 1.0], "leave_rate": 0.0,
                               "leave_rate_ci": [0.0, 1.0], "n": 0, "screen_swaps": {}})
    flows = summary.pop("screen_swaps")
    screen_swaps = sorted(({"from": classes[a], "to": classes[b], "rate": round(share, 4), "moved": moved, "n": n,
                            "typical": round(typical, 4), "typical_low": round(typical_low, 4)}
                           for (a, b), (share, moved, n, typical, typical_low) in flows.items()),
                          key=lambda s: (-s["rate"], s["from"], s["to"]))
    entry = {"index": t_index, "op": transform.op, "params": _json_params(transform), **summary,
             "magnitudes": magnitudes, "screen_swaps": screen_swaps, "evidence_sheet": None}
    if not checked:
        entry.update(verdict="safe", decided_by="screen", swaps=[], other_swaps=[], classes={},
                     safe_limit=None, suggestion=None)
    elif cleared:
        entry.update(verdict="safe", decided_by="screen", swaps=[], other_swaps=[],
                     classes={classes[a]: {"verdict": "safe", "n": counts[a]} for a in checked},
                     safe_limit=_safe_limit(plan, ["safe"]), suggestion=None)
    else:
        verdict, entries, passing, others = judged[(t_index, 0)]
        limits = [judged[(t_index, r)][0] if (t_index, r) in judged else "unverified"
                  for r in range(len(plan.ranges))]
        entry.update(verdict=verdict, decided_by="confirmation", swaps=_swap_rows(passing, classes),
                     other_swaps=_swap_rows(others, classes),
                     classes={classes[a]: value for a, value in entries.items()},
                     safe_limit=_safe_limit(plan, limits),
                     suggestion=None if verdict != "breaks" else
                     _suggestion(transform, checked, entries, passing, classes,
                                 {pair: flow[4] for pair, flow in flows.items()}))
    return entry


def _swap_examples(groups, swaps, labels, classes):
    """The screen's moves that show a confirmed swap (an image of A that landed in B); all moves without one."""
    pairs = {(swap["from"], swap["to"]) for swap in swaps}
    shown = [[move for move in group if move[1] != OUTSIDE and (classes[labels[move[0]]], classes[move[1]]) in pairs]
             for group in groups]
    return shown if pairs and any(shown) else groups


def _sheet_title(index, transform, verdict, swaps, limit=2):
    """``transform 2 (flip): breaks; confirmed swap pullover -> tshirt``."""
    title = f"transform {index} ({transform.op}): {verdict}"
    if swaps:
        named = ", ".join(f"{swap['from']} -> {swap['to']}" for swap in swaps[:limit])
        more = f" and {len(swaps) - limit} more" if len(swaps) > limit else ""
        title += f"; confirmed swap{'s' if len(swaps) > 1 else ''} {named}{more}"
    return title


def _attach_evidence(report, screen, plans, evidence_dir, transforms, records, labels, classes, fill, seed):
    """Contact sheets for every transform not safe: its confirmed swaps' moves when it has any.

    Where training confirmed a swap A -> B, the sheet shows the images of A
    that the screen saw land in B, and its title names the swap; otherwise
    the screen's moved and outside images. Every sheet is drawn first; the
    folder is then written whole or not at all.
    """
    from augplan.atomic import publish_folder

    sheets = {}
    for entry, plan in zip(report, plans):
        if entry["verdict"] == "safe":
            continue
        groups = [screen[(entry["index"], p)][1] for p in range(len(plan.values))
                  if (entry["index"], p) in screen]
        swaps = entry.get("swaps") or []
        picked = _round_robin(_swap_examples(groups, swaps, labels, classes), EVIDENCE_IMAGES)
        if picked:
            title = _sheet_title(entry["index"], transforms[entry["index"]], entry["verdict"], swaps)
            name, sheets[name] = _evidence_sheet(entry["index"], transforms[entry["index"]], title,
                                                 picked, records, labels, classes, fill, seed)
            entry["evidence_sheet"] = str(Path(evidence_dir) / name)
    publish_folder(sheets, evidence_dir)


def _rate(count, n):
    return round(count / n, 4) if n else 0.0


def _interval(count, n):
    from augplan.measure.stats import wilson_interval

    low, high = wilson_interval(count, n)
    return [round(low, 4), round(high, 4)]


def _json_params(transform):
    params = {}
    for key, value in transform.params.items():
        params[key] = [float(v) for v in value] if isinstance(value, (tuple, list)) else value
    return params


_EVIDENCE_CELL = 96


# Short enough to fit under the smallest evidence cell (64 pixels at 12 points).
_MAGNITUDE_FORMATS = {"degrees": "{:+.3g}\u00b0", "factor": "\u00d7{:.3g}", "sigma": "\u03c3 {:.3g}",
                      "fraction": "shift {:+.2g}"}


def _magnitude_caption(transform, magnitude):
    """``+15°``, ``×1.2``, ``σ 0.02``: the magnitude a pair of an evidence sheet shows."""
    from augplan.augment.transforms import OPS

    field = OPS[transform.op].magnitude
    if field is None or magnitude is None:
        return "flipped" if transform.op == "flip" else transform.op
    return _MAGNITUDE_FORMATS.get(field, field + " {:.3g}").format(magnitude)


def _evidence_sheet(index, transform, title, examples, records, labels, classes, fill, seed):
    """Contact sheet of moved and outside images: one row per image, original then transformed.

    The pair is drawn from the image file at its own aspect ratio (the check
    itself ran on the squares the proxy model reads), with the transform at
    the magnitude that moved it, captioned with that magnitude.
    """
    from augplan.augment.transforms import OPS, params_at
    from augplan.data.dataset import read_record
    from augplan.render.sheets import contact_sheet, png_bytes

    function = OPS[transform.op].function
    originals = [read_record(records[source], max_side=_EVIDENCE_CELL) for source, _, _ in examples]
    # Never enlarged past the largest image shown: a small image keeps its own pixels.
    cell = max(8, min(_EVIDENCE_CELL, max(max(image.shape[:2]) for image in originals)))
    rows, row_labels, captions = [], [], []
    draw_rngs = np.random.default_rng([seed, index]).spawn(len(examples))
    for (source, destination, magnitude), original, rng in zip(examples, originals, draw_rngs):
        params = params_at(transform, 0.0 if magnitude is None else magnitude, fill)
        target = "outside" if destination == OUTSIDE else classes[destination]
        rows.append([original, function(original, params, rng)])
        row_labels.append(f"{classes[labels[source]]} -> {target}")
        captions.append(["", _magnitude_caption(transform, magnitude)])
    sheet = contact_sheet(rows, row_labels, column_labels=["original", "transformed"], cell=cell,
                          title=title, captions=captions)
    return f"transform-{index:02d}-{transform.op}.png", png_bytes(sheet)


# The lighting factor each lighting op changes (augplan.measure.factors names). When
# such a transform moves images into a class that this factor alone singles
# out, while the two classes also differ in structure that lighting does not
# touch, the proxy model may be following a lighting shortcut of the data
# rather than the label. Hue, saturation and geometric moves are not excused
# this way: colour, laterality and scale often define a class (see the
# cautions), so they keep their verdict.
LIGHTING_OP_FACTORS = {"brightness": ("brightness",), "contrast": ("contrast",)}


def _separable_by_structure(images, labels, first, second, seed):
    """Whether two classes differ in lighting-blind gradient structure alone.

    Uses only the block-normalised oriented-gradient histograms of
    `augplan.measure.features.image_features` (Dalal & Triggs 2005), which a change
    of exposure or contrast barely moves; separable means a cross-validated
    balanced accuracy of at least 0.9 between the two classes.
    """
    from augplan.measure.shortcuts import shortcut_scores
    from augplan.measure.features import FEATURE_BLOCKS, image_features

    pair = np.isin(labels, [first, second])
    gradients = image_features(images[pair])[:, FEATURE_BLOCKS["orientation"]]
    overall, _ = shortcut_scores(gradients, labels[pair], rng=np.random.default_rng(seed))
    return overall is not None and overall >= 0.9


def _singled_out(images, labels, classes, factor, seed):
    """One-vs-rest cross-validated balanced accuracy of each class from one factor."""
    from augplan.measure.shortcuts import factor_columns, shortcut_scores
    from augplan.measure.factors import FACTORS

    values = {factor: FACTORS[factor].function(images)}
    names = np.array([classes[c] for c in labels])
    return shortcut_scores(factor_columns(values, [factor]), names, rng=np.random.default_rng(seed))[1]


def _mark_shortcut_moves(report, images, labels, classes, dataset, size, seed):
    """Mark moves that follow a shortcut of the data; ``breaks`` becomes ``unverified``.

    A lighting transform that is not safe may move its images into another
    class B (a confirmed swap, or a move the screen saw). If
    the lighting factor it changes (`LIGHTING_OP_FACTORS`) singles out B by
    itself in the training data (one-vs-rest balanced accuracy at least
    ``ONE_VS_REST_THRESHOLD``) while the source classes and B also differ in
    lighting-blind gradient structure, lighting is not what defines B: the
    proxy model learned it as B's mark and its verdict cannot tell a changed
    label from a broken shortcut.
    A labelled field sample in which the factor still singles out B settles
    it as a cue, and the verdict stays as confirmed; otherwise a person must
    look.
    """
    from augplan.thresholds import ONE_VS_REST_THRESHOLD
    from augplan.data.dataset import load_images

    field_records = [r for r in dataset.split("field") if r.label in classes]
    field_images = field_labels = None
    for entry in report:
        if entry["verdict"] == "safe":
            continue
        moves = [swap for swap in entry["swaps"] + entry["screen_swaps"] if swap["rate"] >= 0.1]
        destinations = {swap["to"] for swap in moves}
        for factor in LIGHTING_OP_FACTORS.get(entry["op"], ()):
            train_scores = _singled_out(images, labels, classes, factor, seed)
            hits = sorted(b for b in destinations if (train_scores.get(b) or 0.0) >= ONE_VS_REST_THRESHOLD
                          and all(_separable_by_structure(images, labels, classes.index(swap["from"]),
                                                          classes.index(b), seed)
                                  for swap in moves if swap["to"] == b))
            if not hits:
                continue
            field_scores = {}
            if field_records and len({r.label for r in field_records}) >= 2:
                if field_images is None:
                    field_images = load_images(field_records, size=size)
                    field_labels = np.array([classes.index(r.label) for r in field_records])
                field_scores = _singled_out(field_images, field_labels, classes, factor, seed)
            unconfirmed = [b for b in hits if (field_scores.get(b) or 0.0) < ONE_VS_REST_THRESHOLD]
            if not unconfirmed:
                continue
            target = unconfirmed[0]
            entry["verdict"] = "unverified"
            # A class scope drawn from shortcut-driven verdicts would keep the shortcut.
            if entry["suggestion"] and "only" in entry["suggestion"]:
                entry["suggestion"] = None
            entry["shortcut"] = {"factor": factor, "class": target,
                                 "train_score": round(float(train_scores[target]), 4),
                                 "field_score": (round(float(field_scores[target]), 4)
                                                 if field_scores.get(target) is not None else None)}
            entry["note"] = (f"images move to {target}, which {factor} alone singles out in the training "
                             f"data (one-vs-rest {train_scores[target]:.2f}): the proxy model may follow "
                             f"that shortcut rather than the label; a person must look"
                             + ("" if field_scores else ", or a labelled field sample can settle it"))
            break


def _round_robin(groups, limit):
    """Take items from each group in turn so a sheet spans the magnitudes."""
    picked, position = [], 0
    while len(picked) < limit and any(position < len(g) for g in groups):
        for group in groups:
            if position < len(group) and len(picked) < limit:
                picked.append(group[position])
        position += 1
    return picked
