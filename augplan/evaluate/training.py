"""Training each arm of a comparison: the only place a recipe is applied.

Why validation can never be augmented, for every model: the transform
engine (`augplan.augment.transforms.augment_batch`) is called only by
`_augmented_copies` and `_EpochDraws`, and both are handed training images
alone, inside `train_linear` (the linear proxy) or `train_on_images` (the
other models). Evaluation images (val, test, field) are read by
`featurize_originals` or `_load_originals`, which take no recipe, and go
only to the trained model's ``predict``. So the count of augmented
validation images in ``evaluate``'s output is zero by construction, and
``tests/evaluate/test_models.py`` proves it for every model with a
transform that records every image it sees.

Randomness: each work unit (one recipe, one repeat) carries two
`numpy.random.Generator` objects (`augplan.seeding.keyed_generator`): the
model's, keyed by the repeat alone, and the draws', keyed by recipe and
repeat; the draws give one child per image. Every arm of one repeat, the
baseline included, so starts from the same weights and sees its batches in
the same order (common random numbers): a gain is the recipe's, not the
difference of two fits' luck.
"""

from collections import Counter

import numpy as np

from augplan.augment.transforms import augment_batch
from augplan.data import load_images
from augplan.parallel import parallel_map, single_threaded, tick

__all__ = ["CHUNK", "featurize_originals", "train_linear", "train_on_images", "load_originals"]

# Images per chunk when reading and featurising. Fixed (never derived from
# the worker count) so results do not depend on --workers.
CHUNK = 128

# Originals: the only path evaluation images take


def _single_thread():
    """One BLAS and OpenCV thread inside a work unit; see `augplan.parallel.single_threaded`."""
    return single_threaded()


def _featurize_chunk(unit):
    """Read and featurise original images (no recipe is in reach here)."""
    records, feature_fn, size = unit
    with _single_thread():
        return np.asarray(feature_fn(load_images(records, size)), dtype=np.float32)


def featurize_originals(records, feature_fn, size, cache, *, workers=1, quiet=True):
    """Feature rows of original images, from the disk cache where possible.

    Parameters
    ----------
    records : sequence of ImageRecord
        Images of any split, read as they are (never transformed).
    feature_fn : callable
        Batch feature function.
    size : int
        Side the images are downsized to.
    cache : FeatureCache
        Rows found here are reused; computed rows are stored.

    Returns
    -------
    numpy.ndarray of float32, shape (len(records), D)
    """
    records = list(records)
    rows = cache.lookup([r.sha256 for r in records])
    for _ in range(2):
        missing = [i for i, row in enumerate(rows) if row is None]
        if missing:
            chunks = [missing[i:i + CHUNK] for i in range(0, len(missing), CHUNK)]
            computed = parallel_map(_featurize_chunk,
                                    [([records[i] for i in chunk], feature_fn, size) for chunk in chunks],
                                    workers=workers, desc="features of originals", quiet=quiet)
            for chunk, block in zip(chunks, computed):
                for i, row in zip(chunk, block):
                    rows[i] = row
                    cache.put(records[i].sha256, row)
        # A stored row of another length than the rows just computed (or than
        # most stored rows) is damaged: recompute it once.
        lengths = Counter(row.size for row in rows)
        expected = rows[missing[0]].size if missing else (lengths.most_common(1)[0][0] if rows else 0)
        wrong = [i for i, row in enumerate(rows) if row.size != expected]
        if not wrong:
            break
        for i in wrong:
            cache.mark_damaged(records[i].sha256)
            rows[i] = None
    if not records:
        return np.zeros((0, 0), dtype=np.float32)
    return np.stack(rows).astype(np.float32, copy=False)


# --------------------------------------------------------------------------
# Training side: the only place a recipe is applied


def _new_model(model, random_state):
    """A fresh, unfitted copy of ``model`` with its own random state, set up for scoring.

    No trust check (scoring never reads it), and a single-precision solver:
    only predicted labels are used here.
    """
    from sklearn.base import clone

    return clone(model).set_params(random_state=int(random_state), cross_validate=False,
                                   solver_dtype=np.float32)


def _fit(model, features, targets):
    """Fit ``model`` on raw features; returns its label predictor."""
    return model.fit_features(features, targets).predict_features


def train_linear(unit):
    """Run `_train_one` with one BLAS thread; see `_single_thread`."""
    with _single_thread():
        return _train_one(unit)


def _augmented_copies(records, recipe, draws_rng, size):
    """Yield the recipe's ``copies`` draws of each training image, chunk by chunk.

    Each chunk is ``(images, labels)``, the labels after relabels; only
    training records ever reach here.
    """
    image_rngs = draws_rng.spawn(len(records))
    for start in range(0, len(records), CHUNK):
        chunk = records[start:start + CHUNK]
        generators = image_rngs[start:start + len(chunk)]
        batch, batch_labels = augment_batch(load_images(chunk, size), recipe, generators,
                                            [r.label for r in chunk], recipe.copies)
        yield batch, np.asarray(batch_labels).astype(str)


def _adds_draws(recipe):
    # A recipe without transforms adds only exact duplicates of the originals,
    # so it is trained like the baseline (the same data, without the copies).
    return recipe is not None and recipe.copies > 0 and bool(recipe.transforms)


def _train_one(unit):
    """Train the linear proxy once (one recipe, one repeat) and predict evaluation features.

    ``unit`` holds the training records and their original feature rows, the
    recipe (``None`` for the baseline), the model's and the draws' generators,
    and the feature rows of the evaluation splits. Augmented draws are made and featurised chunk by
    chunk; only their feature rows are kept.

    Returns
    -------
    dict
        ``{"predictions": {split: labels}, "augmented": n augmented rows}``.
    """
    (scoring, recipe, train_records, train_features, eval_features, size, model_rng, draws_rng) = unit
    model = scoring.template
    blocks = [train_features]
    block_labels = [np.array([r.label for r in train_records]).astype(str)]
    if _adds_draws(recipe):
        for batch, batch_labels in _augmented_copies(train_records, recipe, draws_rng, size):
            blocks.append(np.asarray(model.feature_fn(batch), dtype=np.float32))
            block_labels.append(batch_labels)
    features = np.concatenate(blocks, axis=0)
    targets = np.concatenate(block_labels).astype(str)
    random_state = int(model_rng.integers(2**31 - 1))
    predict = _fit(_new_model(model, random_state), features, targets)
    predictions = {split: (np.asarray(predict(F)).astype(str) if len(F) else np.zeros(0, dtype=str))
                   for split, F in eval_features.items()}
    return {"predictions": predictions, "augmented": len(features) - len(train_records)}


class _EpochDraws:
    """One fresh draw of every training image through the recipe, each epoch.

    Called by the network's training loop as ``draw(images, labels, rng)``;
    each call spawns new per-image generators from the unit's draws generator,
    so epoch ``e`` of a repeat always sees the same draws.
    """

    def __init__(self, recipe, rng):
        self.recipe, self.rng, self.count = recipe, rng, 0

    def __call__(self, images, labels, rng):
        generators = self.rng.spawn(len(images))
        batch, new_labels = augment_batch(images, self.recipe, generators, list(labels), 1)
        self.count += len(batch)
        return batch, np.asarray(new_labels)


def load_originals(records, size):
    """Original evaluation images, as they are: no recipe is in reach here."""
    return load_images(records, size) if records else np.zeros((0, size, size, 3), dtype=np.uint8)


def train_on_images(unit):
    """Run `_train_one_on_images` with one BLAS and OpenCV thread; see `_single_thread`."""
    with _single_thread():
        return _train_one_on_images(unit)


def _train_one_on_images(unit):
    """Train a model that learns from pixels (``cnn`` or the team's) once and predict evaluation images.

    The network draws every training image afresh each epoch
    (`_EpochDraws`); the team's function gets the originals plus the
    recipe's ``copies`` draws, with integer labels indexing ``classes``.
    Evaluation images are read from their records by `load_originals` and
    handed to ``predict`` only.

    Returns
    -------
    dict
        ``{"predictions": {split: labels}, "augmented": n augmented images trained on}``.
    """
    (scoring, recipe, train_records, classes, eval_records, size, model_rng, draws_rng) = unit
    images = load_images(train_records, size)
    labels = np.array([r.label for r in train_records]).astype(str)
    draw = None
    if scoring.fresh_draws_each_epoch:
        draw = _EpochDraws(recipe, draws_rng) if _adds_draws(recipe) else None
        predictor = scoring.train(images, labels, model_rng, draw, progress=tick)

        def predict(batch):
            return np.asarray(predictor.predict(batch)).astype(str)
    else:  # the team's contract: the copies made once, integer labels indexing the sorted classes
        if _adds_draws(recipe):
            drawn = list(_augmented_copies(train_records, recipe, draws_rng, size))
            images = np.concatenate([images] + [batch for batch, _ in drawn])
            labels = np.concatenate([labels] + [batch_labels for _, batch_labels in drawn])
        names = np.asarray(classes).astype(str)
        predictor = scoring.train(images, np.searchsorted(names, labels), model_rng)

        def predict(batch):
            return names[predictor.predict(batch)]
    predictions = {split: predict(load_originals(records, size)) for split, records in eval_records.items()}
    augmented = draw.count if draw is not None else len(images) - len(train_records)
    return {"predictions": predictions, "augmented": augmented}


