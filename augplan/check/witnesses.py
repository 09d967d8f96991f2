"""Confirmation by training: the models that witness whether a transform teaches wrong labels.

Every transform the screen does not clear is confirmed by training. On the
screen's folds the proxy is trained on the originals, on the training
images with those in scope *replaced* by their transformed copies (the
transform with probability 1, one magnitude per image drawn from the grid
across the range, labels after any ``relabel``), and on the originals
*plus* those copies; each predicts the held-out *original* images of its
fold. `augplan.check.confirm.judge` turns the predictions into a verdict.

With a network as the first witness (``check --model cnn``), the replaced
model over the whole range is the network, trained on `NETWORK_FOLDS` folds
and compared with the network's own baseline; safety (originals plus
copies) and the nested ranges of the safe limit stay with the linear proxy.
The transformed copies of each fit come from a stream keyed by (transform,
fold); the network's weights and batch order from a stream keyed by the
fold alone, the same for the baseline and every transform (common random
numbers), so no prediction depends on the worker count and a rise is not a
difference of two fits' luck.
"""

from __future__ import annotations

import functools

import numpy as np

from augplan.check import decoded
from augplan.check.confirm import judge
from augplan.check.folds import fit_fold, stratified_folds
from augplan.check.plan import kept_rows
from augplan.check.screen import witnessed
from augplan.parallel import parallel_map
from augplan.seeding import keyed_generator, stream_root

__all__ = ["NETWORK_FOLDS", "MODES", "confirm_all", "network_folds"]

# Folds of the network's confirmation: each fold's network trains on the
# other half of the checked images and predicts this half, so every original
# is predicted out of fold by two fits per model (a network fit costs far
# more than the linear proxy's; common practice, no source).
NETWORK_FOLDS = 2
MODES = ("replace", "add")


def network_folds(labels, rng):
    """Stratified `NETWORK_FOLDS` folds of the checked images for the network's confirmation."""
    counts = np.bincount(labels)
    return stratified_folds(labels, int(min(NETWORK_FOLDS, counts[counts > 0].min())), rng)


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
        kept = kept_rows(plan, position)
        picked = np.flatnonzero(draws == position)
        # The outcome's ``kept`` holds the rows of ``kept`` in order; find each picked row there.
        copies[picked] = results[(t_index, position)].kept[np.searchsorted(kept, picked)]
    copy_labels = plan.expected[labels[plan.scope]]
    features = baseline.features.astype(np.float32)
    if mode == "replace":
        features[plan.scope] = copies
        train_labels = labels.copy()
        train_labels[plan.scope] = copy_labels
        return features, train_labels, baseline.folds
    return (np.concatenate([features, copies]), np.concatenate([labels, copy_labels]),
            np.concatenate([baseline.folds, baseline.folds[plan.scope]]))


def _confirm_unit(context, unit):
    """Out-of-fold predictions of held-out originals by the model trained with the transform."""
    train_features, train_labels, train_folds = unit
    features, folds = context.features, context.folds
    predictions = np.empty(len(features), dtype=np.int64)
    for fold in range(context.n_folds):
        model = fit_fold(context.template, train_features, train_labels, train_folds, fold)
        rows = folds == fold
        predictions[rows] = model.predict_features(features[rows])
    return predictions


def _run_linear(context, jobs, plans, screen, baseline, labels, workers, quiet):
    """Linear proxy's out-of-fold predictions ``{(transform, range): {mode: predictions}}`` for each job."""
    units = [(job, mode) for job in jobs for mode in MODES]
    sets = [_training_set(plans[t], screen, t, r, baseline, labels, mode) for (t, r), mode in units]
    results = parallel_map(functools.partial(_confirm_unit, context), sets, workers=workers,
                           desc="confirming by training", quiet=quiet)
    out = {job: {} for job in jobs}
    for (job, mode), predictions in zip(units, results):
        out[job][mode] = predictions
    return out


def _replaced_images(context, images, t_index, rng):
    """The checked images with every image in scope replaced by its transformed copy.

    Each image takes the grid value its plan drew for the whole range (the
    draws the linear confirmation trains on), applied through the batch
    engine, one call per grid value; labels follow any relabel.
    """
    from augplan.augment.transforms import apply_op_batch, params_at

    transform = context.transforms[t_index]
    scope, draws, values = context.scope[t_index], context.draws[t_index], context.values[t_index]
    replaced, labels = images.copy(), context.labels.copy()
    for position, generator in zip(np.unique(draws), rng.spawn(len(np.unique(draws)))):
        rows = scope[draws == position]
        value = values[position]
        params = params_at(transform, 0.0 if value is None else value, context.fill)
        replaced[rows] = apply_op_batch(images[rows], transform.op, params, generator)
    labels[scope] = context.expected[t_index][labels[scope]]
    return replaced, labels


def _network_unit(context, unit):
    """Held-out originals of one network fold, predicted by the network trained on the other folds.

    ``unit`` is ``(t_index, fold, draw_rng, model_rng)``: ``t_index`` None trains on the
    originals (the one baseline every transform shares), otherwise on the
    originals with transform ``t_index``'s scope replaced (the first
    witness). Only original images are ever predicted.
    """
    from augplan.parallel import tick

    t_index, fold, draw_rng, model_rng = unit
    images = decoded.decoded_sample(context.records, context.size, context.sample_key)
    if t_index is None:
        train_images, train_labels = images, context.labels
    else:
        train_images, train_labels = _replaced_images(context, images, t_index, draw_rng)
    folds = context.network_folds
    train = folds != fold
    predictor = context.network.train(train_images[train], train_labels[train], model_rng, None,
                                         progress=tick)
    return np.asarray(predictor.predict(images[folds == fold])).astype(np.int64)


def _network_witness(context, images, jobs, rng, workers, quiet):
    """Out-of-fold network predictions of the originals: the shared baseline and one per transform.

    Returns ``{None: baseline predictions, t_index: predictions of the
    network trained on replaced images}`` over all checked images.
    """
    folds = context.network_folds
    n_folds = int(folds.max()) + 1
    root = stream_root(rng)
    keys = [None] + sorted({t for t, _ in jobs})
    # Common random numbers: every network of a fold starts from the same
    # weights and sees its batches in the same order (the model stream is
    # keyed by the fold alone), so the baseline and a replaced network differ
    # only by the transformed images, not by a fit's luck of the draw.
    units = [(t, fold, keyed_generator(root, 1, 0 if t is None else t + 1, fold), keyed_generator(root, 0, fold))
             for t in keys for fold in range(n_folds)]
    epochs = getattr(context.network, "epochs", None)
    ticks = epochs(int(np.sum(folds != 0))) if epochs else None
    with decoded.holding(context.sample_key, images):
        outputs = parallel_map(functools.partial(_network_unit, context), units, workers=workers, ticks=ticks,
                               quiet=quiet, desc=f"confirming with the {context.network.name} model"
                                                 + (f" ({ticks} epochs a fit)" if ticks else ""))
    predictions = {}
    for (t, fold, _, _), predicted in zip(units, outputs):
        predictions.setdefault(t, np.empty(len(folds), dtype=np.int64))[folds == fold] = predicted
    return predictions


def _jobs(plans, screened):
    """(transform, range) pairs to train: the whole range of each uncleared transform, then its limits."""
    whole = [(t, 0) for t, plan in enumerate(plans) if len(plan.scope) and not screened[t].cleared]
    nested = [(t, r) for t, _ in whole for r in range(1, len(plans[t].ranges))]
    return whole, nested


def confirm_all(context, images, plans, screen, screened, baseline, rngs, workers, quiet, clock):
    """Judge every uncleared transform over its whole range, then the nested ranges of those not safe.

    Parameters
    ----------
    rngs : (numpy.random.Generator, numpy.random.Generator)
        The check's bootstrap and network streams; each (transform, range)
        takes its keyed stream from the first, each network fit from the second.

    Returns
    -------
    dict
        ``{(transform, range): augplan.check.confirm.RangeVerdict}``.
    """
    boot_rng, network_rng = rngs
    labels, n_classes = context.labels, context.n_classes
    whole, nested = _jobs(plans, screened)
    boot_root = stream_root(boot_rng)
    witness = (_network_witness(context, images, whole, network_rng, workers, quiet)
               if context.network is not None and whole else None)

    def judge_jobs(jobs):
        trained = _run_linear(context, jobs, plans, screen, baseline, labels, workers, quiet)
        if witness is not None:
            for t, r in jobs:
                if r == 0:
                    trained[(t, r)].update(replace=witness[t], replace_base=witness[None])
        return {job: judge(labels, baseline.predictions, trained[job], n_classes, screened[job[0]].checked,
                           baseline.weak, witnessed(plans[job[0]], screen, *job, labels, baseline, n_classes),
                           keyed_generator(boot_root, *job)) for job in jobs}

    judged = judge_jobs(whole)
    clock.lap("confirmation")
    judged.update(judge_jobs([job for job in nested if judged[(job[0], 0)].overall != "safe"]))
    clock.lap("safe limits")
    return judged
