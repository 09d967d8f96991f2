"""Score augmentation recipes against a no-augmentation baseline.

Each recipe trains the small CPU feature model on the original training
images plus ``copies`` augmented draws of each (labels from the recipe), once
per repeat with fresh draws and a fresh model seed; the baseline trains on
the originals alone. Every model is scored on original validation images.

The model is the ``--model`` choice (`augplan.measure.models`): the linear
proxy (``linear``, the default), a small convolutional network (``cnn``,
fresh draws of every image each epoch) or the team's own training function
(``module:callable``). Every result names it.

Why validation can never be augmented, for every model: the transform
engine (`augplan.augment.transforms.augment_batch`) is called only by
`_augmented_copies` and `_EpochDraws`, and both are handed training images
alone, inside `_train_one` (the linear proxy) or `_train_one_on_images`
(the other models). Evaluation images (val, test, field) are read by
`_featurize_originals` or `_load_originals`, which take no recipe, and go
only to the trained model's ``predict``. So the count of augmented
validation images in the output is zero by construction, and
``tests/test_evaluate.py`` proves it for every model with a transform that
records every image it sees.

Statistics (see `augplan.stats`): validation images are the sampling unit.
Each image's correctness is averaged over the repeats of an arm; the gain is
the mean over images of the per-image difference between recipe and
baseline. Its p-value is a paired sign-flip permutation test over those
per-image differences and its interval is the set of gains that test does
not reject, so ``p < 0.05`` exactly when the 95% interval excludes zero
(`GAIN_RULE`). Accuracy intervals are Wilson intervals with the validation
images as n; Holm adjusts the p-values across the recipes of one run.
Validation, confirmation and field splits are scored the same way.
"""

import hashlib
import json
from collections import Counter
from pathlib import Path

import numpy as np

from augplan.evaluate import ledger as _ledger
from augplan.measure import stats
from augplan.data.dataset import Dataset, fingerprint, load_images, stratified_choice
from augplan.errors import BadInputError
from augplan.evaluate.feature_cache import FeatureCache, default_cache_dir, feature_settings_key
from augplan.measure.models import FALLBACK_NAME, FALLBACK_WARNING, is_linear, scoring_model
from augplan.evaluate.ranking import BEST_RULE, best_recipe, decide, rank_key  # noqa: F401 (re-exported)
from augplan.measure.factors import FACTORS, measure_factors
from augplan.measure import factors as _factors_module
from augplan.measure import shortcuts as _shortcuts_module
from augplan.measure.shortcuts import val_shared_shortcuts
from augplan.parallel import parallel_map, resolve_workers, single_threaded, tick
from augplan.recipe.parse import Recipe, recipe_hash
from augplan.results import EvaluateResult
from augplan.thresholds import MANY_RECIPES_WARNING_LIMIT
from augplan.workspace import ensure_outside_data
from augplan.augment.transforms import augment_batch

__all__ = ["evaluate_recipes", "best_recipe", "rank_key", "gain_verdict", "MANY_RECIPES_WARNING_LIMIT", "GAIN_RULE",
           "VERDICT_RULE", "BEST_RULE"]


# Images per chunk when reading and featurising. Fixed (never derived from
# the worker count) so results do not depend on --workers.
_CHUNK = 128

# Purposes mixed into seed sequences so streams for different jobs never
# coincide.
_PURPOSE_TRAIN, _PURPOSE_VAL, _PURPOSE_CONFIRM, _PURPOSE_FIELD, _PURPOSE_SPLIT = range(5)
_BASELINE_KEY = int(hashlib.sha256(b"augplan-baseline").hexdigest(), 16)
_ROUND = 6

GAIN_RULE = ("image is the unit: per-image correctness averaged over repeats; gain interval and "
             "p-value from one paired sign-flip permutation test over the per-image differences "
             "(the interval holds every gain the test does not reject), so p < 0.05 exactly when "
             "the 95% interval excludes zero")

VERDICT_RULE = ("a recipe gains (or loses) when its Holm-adjusted p-value across the recipes of the run is below "
                "0.05 and its gain is above (below) zero; otherwise there is no difference; a recipe that gains or "
                "loses always has its 95% gain interval above or below zero")

# --------------------------------------------------------------------------
# Originals: the only path evaluation images take


def _single_thread():
    """One BLAS and OpenCV thread inside a work unit; see `augplan.parallel.single_threaded`."""
    return single_threaded()


def _featurize_chunk(unit):
    """Read and featurise original images (no recipe is in reach here)."""
    records, feature_fn, size = unit
    with _single_thread():
        return np.asarray(feature_fn(load_images(records, size)), dtype=np.float32)


def _featurize_originals(records, feature_fn, size, cache, *, workers=1, quiet=True):
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
            chunks = [missing[i:i + _CHUNK] for i in range(0, len(missing), _CHUNK)]
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


def _train_and_predict(unit):
    """Run `_train_one` with one BLAS thread; see `_single_thread`."""
    with _single_thread():
        return _train_one(unit)


def _augmented_copies(records, recipe, draws_seq, size):
    """Yield the recipe's ``copies`` draws of each training image, chunk by chunk.

    Each chunk is ``(images, labels)``, the labels after relabels; only
    training records ever reach here.
    """
    image_seqs = draws_seq.spawn(len(records))
    for start in range(0, len(records), _CHUNK):
        chunk = records[start:start + _CHUNK]
        generators = [np.random.default_rng(seq) for seq in image_seqs[start:start + len(chunk)]]
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
    recipe (``None`` for the baseline), a seed sequence, and the feature rows
    of the evaluation splits. Augmented draws are made and featurised chunk by
    chunk; only their feature rows are kept.

    Returns
    -------
    dict
        ``{"predictions": {split: labels}, "augmented": n augmented rows}``.
    """
    (scoring, recipe, train_records, train_features, eval_features, size, seed_sequence) = unit
    model = scoring.template
    model_seq, draws_seq = seed_sequence.spawn(2)
    blocks = [train_features]
    block_labels = [np.array([r.label for r in train_records]).astype(str)]
    if _adds_draws(recipe):
        for batch, batch_labels in _augmented_copies(train_records, recipe, draws_seq, size):
            blocks.append(np.asarray(model.feature_fn(batch), dtype=np.float32))
            block_labels.append(batch_labels)
    features = np.concatenate(blocks, axis=0)
    targets = np.concatenate(block_labels).astype(str)
    random_state = int(model_seq.generate_state(1)[0] % (2**31 - 1))
    predict = _fit(_new_model(model, random_state), features, targets)
    predictions = {split: (np.asarray(predict(F)).astype(str) if len(F) else np.zeros(0, dtype=str))
                   for split, F in eval_features.items()}
    return {"predictions": predictions, "augmented": len(features) - len(train_records)}


class _EpochDraws:
    """One fresh draw of every training image through the recipe, each epoch.

    Called by the network's training loop as ``draw(images, labels, rng)``;
    each call spawns new per-image generators from the unit's seed sequence,
    so epoch ``e`` of a repeat always sees the same draws.
    """

    def __init__(self, recipe, seed_sequence):
        self.recipe, self.seed_sequence, self.count = recipe, seed_sequence, 0

    def __call__(self, images, labels, rng):
        generators = [np.random.default_rng(seq) for seq in self.seed_sequence.spawn(len(images))]
        batch, new_labels = augment_batch(images, self.recipe, generators, list(labels), 1)
        self.count += len(batch)
        return batch, np.asarray(new_labels)


def _load_originals(records, size):
    """Original evaluation images, as they are: no recipe is in reach here."""
    return load_images(records, size) if records else np.zeros((0, size, size, 3), dtype=np.uint8)


def _train_on_images(unit):
    """Run `_train_one_on_images` with one BLAS and OpenCV thread; see `_single_thread`."""
    with _single_thread():
        return _train_one_on_images(unit)


def _train_one_on_images(unit):
    """Train a model that learns from pixels (``cnn`` or the team's) once and predict evaluation images.

    The network draws every training image afresh each epoch
    (`_EpochDraws`); the team's function gets the originals plus the
    recipe's ``copies`` draws, with integer labels indexing ``classes``.
    Evaluation images are read from their records by `_load_originals` and
    handed to ``predict`` only.

    Returns
    -------
    dict
        ``{"predictions": {split: labels}, "augmented": n augmented images trained on}``.
    """
    (scoring, recipe, train_records, classes, eval_records, size, seed_sequence) = unit
    model_seq, draws_seq = seed_sequence.spawn(2)
    images = load_images(train_records, size)
    labels = np.array([r.label for r in train_records]).astype(str)
    rng = np.random.default_rng(model_seq)
    draw = None
    if scoring.fresh_draws_each_epoch:
        draw = _EpochDraws(recipe, draws_seq) if _adds_draws(recipe) else None
        predictor = scoring.train(images, labels, rng, draw, progress=tick)

        def predict(batch):
            return np.asarray(predictor.predict(batch)).astype(str)
    else:  # the team's contract: the copies made once, integer labels indexing the sorted classes
        if _adds_draws(recipe):
            drawn = list(_augmented_copies(train_records, recipe, draws_seq, size))
            images = np.concatenate([images] + [batch for batch, _ in drawn])
            labels = np.concatenate([labels] + [batch_labels for _, batch_labels in drawn])
        names = np.asarray(classes).astype(str)
        predictor = scoring.train(images, np.searchsorted(names, labels), rng)

        def predict(batch):
            return names[predictor.predict(batch)]
    predictions = {split: predict(_load_originals(records, size)) for split, records in eval_records.items()}
    augmented = draw.count if draw is not None else len(images) - len(train_records)
    return {"predictions": predictions, "augmented": augmented}


# --------------------------------------------------------------------------
# Scoring


def _seed_sequence(seed, key, purpose, extra=0):
    return np.random.SeedSequence([int(seed), int(key), int(purpose), int(extra)])


def _round(value):
    return None if value is None else round(float(value), _ROUND)


def _round_p(value):
    # Significant digits, so a tiny p-value never prints as 0.
    return None if value is None else float(f"{float(value):.3g}")


def _score(y_true, predictions, classes, rng):
    """Pooled metrics of ``predictions`` (repeats, n) against ``y_true`` (n,)."""
    repeats = predictions.shape[0]
    correct = predictions == y_true[None, :]
    summary = stats.summarise_predictions(np.tile(y_true, repeats), predictions.ravel(), classes)
    # Wilson interval over the validation images (Wilson 1927): the mean
    # accuracy of the repeats, with the validation sample's size as n. Unlike a
    # bootstrap it does not collapse to a point when every image is right.
    accuracy = float(correct.mean())
    low, high = stats.wilson_interval(accuracy * y_true.size, y_true.size)
    return {
        "n_images": int(y_true.size),
        "accuracy": _round(accuracy),
        "accuracy_ci": [_round(low), _round(high)],
        "balanced_accuracy": _round(summary["balanced_accuracy"]),
        "macro_f1": _round(summary["macro_f1"]),
        "per_class_recall": {c: _round(v) for c, v in summary["per_class_recall"].items()},
        # Pooled over repeats: each validation image counts once per repeat.
        "confusion": {"classes": list(classes), "counts": summary["confusion"], "repeats": int(repeats)},
        "repeat_accuracy": [_round(v) for v in correct.mean(axis=1)],
    }, correct


def _round_bound(value):
    """A rounded interval end on the same side of zero as the end itself.

    The rule ``p < 0.05`` exactly when the interval excludes zero must
    survive rounding: an end a hair above zero never prints as zero.
    """
    rounded = _round(value)
    step = 10.0 ** -_ROUND
    if value > 0 and rounded <= 0:
        return step
    if value < 0 and rounded >= 0:
        return -step
    return rounded


def _compare(base_correct, new_correct, rng):
    test = stats.paired_gain_test(base_correct, new_correct, rng)
    return {"gain": _round(test.gain), "gain_ci": [_round_bound(test.low), _round_bound(test.high)],
            "p_value": _round_p(test.p_value)}


def _per_class_gain(base_recall, new_recall):
    return {c: (None if base_recall[c] is None or new_recall.get(c) is None
                else _round(new_recall[c] - base_recall[c])) for c in base_recall}


# --------------------------------------------------------------------------
# Input checks and keys


def _check_inputs(dataset, recipes, repeats, size, seed, workers, confirm_fraction):
    if not isinstance(dataset, Dataset):
        raise BadInputError(f"dataset must be an opened augplan Dataset; got {type(dataset).__name__}")
    recipes = list(recipes)
    if not recipes:
        raise BadInputError("no recipe to evaluate; pass at least one --recipe")
    for recipe in recipes:
        if not isinstance(recipe, Recipe):
            raise BadInputError(f"recipes must be augplan Recipe objects; got {type(recipe).__name__}")
    names = [r.name for r in recipes]
    duplicated = sorted({n for n in names if names.count(n) > 1})
    if duplicated:
        raise BadInputError(f"recipe names must be unique in one comparison; "
                            f"{', '.join(map(repr, duplicated))} appears more than once")
    for flag, value, low in (("--repeats", repeats, 1), ("size", size, 8), ("--seed", seed, 0)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise BadInputError(f"{flag} must be an integer of at least {low}; got {value!r}")
    resolve_workers(workers)  # a count or a Cluster; raises BadInputError otherwise
    if confirm_fraction is not None:
        if (isinstance(confirm_fraction, bool) or not isinstance(confirm_fraction, (int, float))
                or not 0.0 < float(confirm_fraction) < 1.0):
            raise BadInputError(f"--confirm-fraction must be a number between 0 and 1 (exclusive); "
                                f"got {confirm_fraction!r}")
    if not dataset.split("train"):
        raise BadInputError(f"{dataset.root}: no training images")
    if not dataset.split("val"):
        raise BadInputError(f"{dataset.root}: no validation images to score on")
    return recipes


def _carve_confirmation(val_records, fraction, seed):
    """Stratified confirmation part of val: ``round(fraction * n)`` per class.

    Every class keeps at least one validation image; a class with a single
    validation image gives none.
    """
    chosen = stratified_choice(val_records, fraction, np.random.default_rng(_seed_sequence(seed, 0, _PURPOSE_SPLIT)))
    keep = [r for r in val_records if r.relpath not in chosen]
    confirm = [r for r in val_records if r.relpath in chosen]
    return keep, confirm


def _file_digest(*modules):
    digest = hashlib.sha256()
    for module in modules:
        digest.update(Path(module.__file__).read_bytes())
    return digest.hexdigest()


def _settings_key(scoring, size, confirm_fraction, dataset):
    """Key of everything besides data, seed and repeats that shapes a result."""
    import augplan.augment.transforms as transforms_module
    import sys

    settings = {"model": scoring.settings(), "size": size, "confirm_fraction": confirm_fraction,
                "split_seed": dataset.split_seed, "val_from_train": dataset.val_from_train}
    code = [sys.modules[__name__], transforms_module, stats]
    if scoring.uses_features:
        settings["features"] = feature_settings_key(scoring.feature_fn, size)
        code.append(sys.modules[type(scoring.template).__module__])
    elif scoring.name == "cnn":
        code.append(sys.modules["augplan.measure.convnet"])
    # An edit of the scoring, transform or model code invalidates old results
    # (the team's module is in scoring.settings()).
    settings["code"] = _file_digest(*code)
    text = json.dumps(settings, sort_keys=True, default=repr)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:24]


# --------------------------------------------------------------------------
# The comparison


def _compute(dataset, recipes, hashes, scoring, *, repeats, size, seed, workers, quiet, cache,
             splits):
    """Train every (recipe, repeat) and score; returns the ledger-shaped results."""
    classes = list(dataset.classes)
    train = dataset.split("train")
    truth = {name: np.array([r.label for r in records]).astype(str) for name, records in splits.items()}
    arms = [(None, _BASELINE_KEY)] + [(recipe, int(h, 16)) for recipe, h in zip(recipes, hashes)]
    if scoring.uses_features:
        train_features = _featurize_originals(train, scoring.feature_fn, size, cache,
                                              workers=workers, quiet=quiet)
        eval_features = {name: _featurize_originals(records, scoring.feature_fn, size, cache,
                                                    workers=workers, quiet=quiet)
                         for name, records in splits.items()}
        train_unit, shared = _train_and_predict, (train_features, eval_features)
    else:
        train_unit, shared = _train_on_images, (classes, splits)
    units = [(scoring, recipe, train, *shared, size, _seed_sequence(seed, key, _PURPOSE_TRAIN, r))
             for recipe, key in arms for r in range(repeats)]
    # The network's bar counts epochs within each fit, not whole fits.
    epochs = scoring.epochs(len(train)) if hasattr(scoring, "epochs") else None
    outputs = parallel_map(train_unit, units, workers=workers, ticks=epochs,
                           desc=(f"training the {scoring.name} model per recipe and repeat"
                                 + (f" ({epochs} epochs a fit)" if epochs else "")), quiet=quiet)

    def stacked(arm_index, split):
        rows = outputs[arm_index * repeats:(arm_index + 1) * repeats]
        return np.stack([o["predictions"][split] for o in rows])

    def score_arm(arm_index, key, split, purpose):
        rng = np.random.default_rng(_seed_sequence(seed, key, purpose))
        return _score(truth[split], stacked(arm_index, split), classes, rng)

    purposes = {"val": _PURPOSE_VAL, "confirm": _PURPOSE_CONFIRM, "field": _PURPOSE_FIELD}
    base_scores, base_correct = {}, {}
    for split in splits:
        base_scores[split], base_correct[split] = score_arm(0, _BASELINE_KEY, split, purposes[split])

    results = []
    for index, (recipe, h) in enumerate(zip(recipes, hashes), start=1):
        key = int(h, 16)
        scores = {}
        for split in splits:
            score, correct = score_arm(index, key, split, purposes[split])
            rng = np.random.default_rng(_seed_sequence(seed, key, purposes[split], 1))
            score.update(_compare(base_correct[split], correct, rng))
            score["per_class_gain"] = _per_class_gain(base_scores[split]["per_class_recall"],
                                                      score["per_class_recall"])
            scores[split] = score
        augmented = sum(o["augmented"] for o in outputs[index * repeats:(index + 1) * repeats])
        results.append({"recipe_hash": h, "name": recipe.name, "copies": recipe.copies,
                        "augmented_training_images": augmented, "scores": scores})
    return base_scores, results


def _short(score):
    keys = ("n_images", "accuracy", "accuracy_ci", "gain", "gain_ci", "p_value")
    return {k: score[k] for k in keys if k in score}


def gain_verdict(gain, p_holm):
    """``gains``, ``no difference`` or ``loses``, by `VERDICT_RULE`.

    Holm's adjusted p is never below the test's own p, so a recipe that
    ``gains`` (``loses``) always has its 95% interval above (below) zero.
    """
    if p_holm >= 0.05 or gain == 0:
        return "no difference"
    return "gains" if gain > 0 else "loses"


def _assemble(dataset, base_scores, results, *, n_transforms, scoring, repeats, seed, confirm_source,
              n_unlabelled_field, confirm_ignored, from_ledger, val_shares_shortcut=(), candidates=None, size=64):
    """Build the ``evaluate --json`` document from per-arm scores; `BEST_RULE` (via `decide`) ranks them."""
    warnings = [FALLBACK_WARNING] if scoring.name == FALLBACK_NAME else []
    # The side every image is read, augmented and trained at (larger images
    # reduced by area averaging; see augplan.data.dataset.load_images).
    model = {**scoring.describe(), "side": int(size)}
    p_holm = stats.holm([r["scores"]["val"]["p_value"] for r in results])
    entries = []
    for result, adjusted, count in zip(results, p_holm, n_transforms):
        val = result["scores"]["val"]
        entry = {"name": result["name"], "recipe_hash": result["recipe_hash"], "n_transforms": count}
        entry.update({k: val[k] for k in ("accuracy", "accuracy_ci", "balanced_accuracy", "macro_f1",
                                          "per_class_recall", "repeat_accuracy", "gain", "gain_ci",
                                          "p_value")})
        entry["confusion"] = val.get("confusion")  # absent from results stored by older versions
        entry["p_holm"] = _round_p(adjusted)
        entry["per_class_gain"] = val["per_class_gain"]
        entry["verdict"] = gain_verdict(val["gain"], adjusted)
        # The linear proxy's gains are biased against augmentation: its sign
        # alone never calls a recipe harmful (LINEAR_PROXY_NOTE).
        entry["flagged"] = entry["verdict"] == "loses" and not is_linear(scoring.name)
        entry["augmented_training_images"] = result["augmented_training_images"]
        entry["confirm"] = None
        entry["field"] = _short(result["scores"]["field"]) if "field" in base_scores else None
        entries.append(entry)

    decision = decide(entries, val_shares_shortcut=val_shares_shortcut,
                      n_field=base_scores["field"]["n_images"] if "field" in base_scores else None,
                      candidates=candidates)
    confirm = None
    if "confirm" in base_scores:
        top = [entry["name"] for entry in entries].index(decision.ranking[0])
        chosen = _short(results[top]["scores"]["confirm"])
        entries[top]["confirm"] = chosen
        confirm = {"source": confirm_source, "n_images": base_scores["confirm"]["n_images"],
                   "recipe": results[top]["name"], "baseline": _short(base_scores["confirm"]),
                   "recipe_scores": chosen,
                   "note": "the top-ranked recipe (the recommendation rule) and the baseline, scored once"}
    elif len(results) > MANY_RECIPES_WARNING_LIMIT:
        warnings.append(
            f"{len(results)} recipes compared without a confirmation split: choosing among many "
            "recipes by validation score overfits the validation set, so the best gain is "
            "optimistic. Add DATA/test/ or pass --confirm-fraction to score the chosen recipe "
            "on images that played no part in choosing it.")
    if confirm_ignored:
        warnings.append("--confirm-fraction ignored: DATA/test/ exists and serves as the confirmation split.")

    field = None
    if "field" in base_scores:
        field = {"source": "field", "n_images": base_scores["field"]["n_images"],
                 "baseline": _short(base_scores["field"]),
                 "note": "labelled field sample, a separate source from validation"}
    if n_unlabelled_field:
        warnings.append(f"{n_unlabelled_field} unlabelled field images are not scored "
                        "(accuracy needs labels).")

    if dataset.val_from_train:
        scored_on = f"val (stratified split of train, seed {dataset.split_seed})"
        warnings.append(f"no val/ folder: scored on a stratified split of train (seed {dataset.split_seed}).")
    else:
        scored_on = "val"
    if dataset.missing_val_message():
        warnings.append(dataset.missing_val_message())
    if confirm_source and confirm_source != "test":
        scored_on += f" minus the confirmation part ({confirm_source})"

    base_val = base_scores["val"]
    baseline = {k: base_val[k] for k in ("n_images", "accuracy", "accuracy_ci", "balanced_accuracy",
                                         "macro_f1", "per_class_recall", "repeat_accuracy")}
    baseline["confusion"] = base_val.get("confusion")
    if model["note"]:
        warnings.append(model["note"][0].upper() + model["note"][1:] + ".")
    if decision.decided_on == "val" and decision.val_shares_shortcut:
        warnings.append(decision.note)
    return {
        "model": model,
        "baseline": baseline,
        "recipes": entries,
        "best": decision.best,
        "best_rule": BEST_RULE,
        "ranking": list(decision.ranking),
        "decided_on": decision.decided_on,
        "val_shares_shortcut": list(decision.val_shares_shortcut),
        "decision_note": decision.note,
        "scored_on": scored_on,
        "accuracy_interval": "95% Wilson interval over validation images (mean accuracy of the repeats)",
        "gain_test": GAIN_RULE,
        "verdict_rule": VERDICT_RULE,
        "augmented_validation_images": 0,
        "repeats": int(repeats),
        "seed": int(seed),
        "confirm": confirm,
        "field": field,
        "warnings": warnings,
        "from_ledger": bool(from_ledger),
    }


def _scoring_splits(dataset, confirm_fraction, seed):
    """The original images each model is scored on: val, a confirmation split, the labelled field.

    Returns
    -------
    (dict, str or None, bool, int)
        ``{"val", "confirm"?, "field"?} -> records``, where the confirmation
        split came from (None without one), whether ``confirm_fraction`` was
        ignored because ``test/`` exists, and the count of unlabelled field images.
    """
    val = dataset.split("val")
    splits = {"val": val}
    confirm_source, confirm_ignored = None, False
    if dataset.split("test"):
        splits["confirm"] = dataset.split("test")
        confirm_source = "test"
        confirm_ignored = confirm_fraction is not None
    elif confirm_fraction is not None:
        kept, carved = _carve_confirmation(val, float(confirm_fraction), seed)
        if carved:
            splits["val"], splits["confirm"] = kept, carved
            confirm_source = f"stratified {float(confirm_fraction):g} of val, seed {seed}"
    field_records = dataset.split("field")
    labelled_field = [r for r in field_records if r.label is not None]
    if labelled_field:
        splits["field"] = labelled_field
    return splits, confirm_source, confirm_ignored, len(field_records) - len(labelled_field)


def _feature_cache(dataset, cache_dir, scoring, size):
    """The cache of original images' features, beside the data (never inside it); ``cache_dir=False``: none.

    Only the linear proxy reads features: for the other models the cache
    stores nothing (a folder given is still checked).
    """
    root = Path(dataset.root).resolve()
    cache_root = None if cache_dir is False else (
        Path(cache_dir) if cache_dir is not None else default_cache_dir(root))
    if cache_root is not None:
        ensure_outside_data(cache_root, root, what="feature cache")
    if not scoring.uses_features:
        return FeatureCache(None, scoring.name)
    return FeatureCache(cache_root, feature_settings_key(scoring.feature_fn, size))


def _scores(dataset, recipes, hashes, scoring, ledger_path, ledger_keys, splits, run):
    """Baseline and recipe scores: from the ledger where it has them, trained for the rest.

    Returns the baseline scores, ``{recipe_hash: result}``, the ``(recipe,
    hash)`` pairs that had to be trained and the damaged feature-cache entries
    that were recomputed.
    """
    stored_baseline, stored = None, {}
    if ledger_path is not None:
        stored_baseline, stored = _ledger.lookup_stored(ledger_path, recipe_hashes=hashes, **ledger_keys)
    missing = [(recipe, h) for recipe, h in zip(recipes, hashes) if h not in stored]
    if not missing:
        return stored_baseline, stored, missing, []
    # Only the recipes the ledger lacks are trained; stored ones were scored
    # against the same deterministic baseline (same data, settings, seed,
    # repeats), so their results stand beside the new ones.
    cache = _feature_cache(dataset, run["cache_dir"], scoring, run["size"])
    base_scores, computed = _compute(dataset, [r for r, _ in missing], [h for _, h in missing], scoring,
                                     repeats=run["repeats"], size=run["size"], seed=run["seed"],
                                     workers=run["workers"], quiet=run["quiet"], cache=cache, splits=splits)
    if ledger_path is not None:
        _ledger.store_results(ledger_path, baseline=base_scores, results=computed, **ledger_keys)
    stored.update({result["recipe_hash"]: result for result in computed})
    return base_scores, stored, missing, cache.damaged


def _factor_chunk(records_and_size):
    """Nuisance factors of original images (no recipe is in reach here)."""
    records, size = records_and_size
    with _single_thread():
        return measure_factors(load_images(records, size))


def _shared_shortcuts(dataset, splits, size, seed, workers, quiet, cache_dir):
    """Flagged shortcut factors of the training set that the validation split carries too.

    The shortcut audit (`augplan.measure.shortcuts`, the rule ``coverage``
    follows) on the original train, validation and labelled field images; a
    factor the field sample confirms as a cue is not flagged. The answer
    depends only on those images, ``size`` and ``seed``, so it is kept in the
    feature cache folder (one row of flags, keyed by all of them and the
    audit's code) and a rerun reads it back.

    Returns
    -------
    (list of str, list of Path)
        The factors, and damaged cache entries that were recomputed.
    """
    sets = {"original": dataset.split("train"), "val": splits["val"]}
    if "field" in splits:
        sets["field"] = splits["field"]
    names = list(FACTORS)
    key_text = json.dumps([[[name, r.sha256, r.label] for name, records in sets.items() for r in records],
                           size, seed, len(dataset.classes), _file_digest(_factors_module, _shortcuts_module)])
    key = hashlib.sha256(key_text.encode("utf-8")).hexdigest()
    root = Path(dataset.root).resolve()
    cache_root = None if cache_dir is False else Path(cache_dir) if cache_dir is not None else default_cache_dir(root)
    if cache_root is not None:
        ensure_outside_data(cache_root, root, what="feature cache")
    cache = FeatureCache(cache_root, "shortcut-audit", row_length=len(names))
    row = cache.get(key)
    if row is None:
        audit = {}
        for name, records in sets.items():
            chunks = [records[i:i + _CHUNK] for i in range(0, len(records), _CHUNK)]
            parts = parallel_map(_factor_chunk, [(chunk, size) for chunk in chunks], workers=workers,
                                 desc=f"factors of {name} images", quiet=quiet)
            values = {factor: np.concatenate([part[factor] for part in parts]) for factor in names}
            audit[name] = (values, np.array([r.label for r in records]), None)
        shared = set(val_shared_shortcuts(audit, len(dataset.classes), rng=np.random.default_rng(seed)))
        row = np.array([float(name in shared) for name in names], dtype=np.float32)
        cache.put(key, row)
    return [name for name, flag in zip(names, row) if flag > 0.5], cache.damaged


def _run_summary(document):
    """What the ledger keeps of one comparison for ``augplan history RUN``."""
    keys = ("name", "recipe_hash", "accuracy", "accuracy_ci", "gain", "gain_ci", "p_value", "p_holm",
            "verdict", "flagged", "field")
    return {"model": document["model"]["name"], "scored_on": document["scored_on"],
            "baseline": {k: document["baseline"][k] for k in ("n_images", "accuracy", "accuracy_ci")},
            "recipes": [{k: row.get(k) for k in keys} for row in document["recipes"]],
            "warnings": list(document["warnings"])}


def evaluate_recipes(dataset, recipes, *, repeats=5, model=None, size=64, seed=0, workers=1,
                     quiet=True, ledger_path=None, cache_dir=None, confirm_fraction=None,
                     val_shares_shortcut=None, candidates=None):
    """Score recipes by their accuracy gain over a no-augmentation baseline.

    Parameters
    ----------
    dataset : augplan.data.Dataset
        Opened data set with train and val splits; optional test (the
        confirmation split) and labelled field images.
    recipes : sequence of augplan.recipe.Recipe
        Recipes to compare; names must be unique.
    repeats : int, default 5
        Training repeats per recipe, each with fresh augmentation draws and
        a fresh model seed.
    model : {'cnn', 'linear'} or str or FeatureModel, optional
        The model each arm trains (`augplan.measure.models`): None (the
        default) or ``'cnn'``, a small convolutional network (the ``cnn``
        extra; without PyTorch the default falls back to the linear proxy,
        named ``linear (network not installed)``, with a warning);
        ``'linear'``, the quick proxy; ``'module:callable'``, the team's own
        training function; a `FeatureModel` is the linear proxy with that
        template (picklable when ``workers != 1``). Every result names it.
    size : int, default 64
        The side images are read, augmented and trained at (``--side``);
        larger images are reduced by area averaging. The document's
        ``model.side`` says it.
    seed : int, default 0
        Every draw derives from ``(seed, recipe hash, repeat)``.
    workers : int, default 1
        Processes for featurising and training (-1: every core).
    quiet : bool, default True
        Hide progress bars.
    ledger_path : str or Path, optional
        SQLite results ledger; results stored under the same keys are reused.
        ``None``: no ledger.
    cache_dir : str or Path or False, optional
        ``False`` turns the disk cache off. Folder of the feature cache of original images; default
        ``<data parent>/.augplan/features``. Never inside the data folder.
    confirm_fraction : float, optional
        Without ``DATA/test/``, the share of each validation class set aside
        (stratified, seeded) as a confirmation split.
    val_shares_shortcut : sequence of str, optional
        Flagged shortcut factors the validation split shares, when the
        caller has audited them already (``vet`` passes coverage's); default:
        audited here on the original train, validation and field images.
    candidates : collection of str, optional
        Names of the recipes that may be recommended (``vet`` passes its
        vetted recipes); default every recipe.

    Returns
    -------
    EvaluateResult
        The ``evaluate --json`` document (docs/architecture.md, "Results").
        ``ranking``, ``best``, ``decided_on`` and ``decision_note`` follow
        `BEST_RULE` (`augplan.evaluate.ranking`): a labelled field sample is
        the primary evidence; without one, a shortcut that validation shares
        is named and a field sample asked for.

    Raises
    ------
    BadInputError
        Empty or duplicate recipes, bad numbers, missing splits, a cache
        folder inside the data folder, an unusable ledger file.

    Notes
    -----
    The image is the unit: gain p-values are paired sign-flip permutation
    tests over per-image differences (each image's correctness averaged over
    repeats) and gain intervals invert the same test [1]_, so ``p < 0.05``
    exactly when the 95% interval excludes zero; p-values are Holm-adjusted
    across the recipes of the run [2]_.

    References
    ----------
    .. [1] M. D. Ernst, Statistical Science 19(4), 676-685, 2004.
    .. [2] S. Holm, Scandinavian Journal of Statistics 6(2), 65-70, 1979.
    """
    recipes = _check_inputs(dataset, recipes, repeats, size, seed, workers, confirm_fraction)
    scoring = scoring_model(model)
    repeats, size, seed = int(repeats), int(size), int(seed)

    splits, confirm_source, confirm_ignored, n_unlabelled = _scoring_splits(dataset, confirm_fraction, seed)

    hashes = [recipe_hash(r) for r in recipes]
    data_key = fingerprint(dataset)
    settings_key = _settings_key(scoring, size, confirm_fraction, dataset)
    ledger_keys = dict(fingerprint=data_key, settings_key=settings_key, seed=seed, repeats=repeats)
    assemble = dict(scoring=scoring, repeats=repeats, seed=seed, size=size, confirm_source=confirm_source,
                    n_unlabelled_field=n_unlabelled, confirm_ignored=confirm_ignored)

    base_scores, stored, missing, damaged = _scores(dataset, recipes, hashes, scoring, ledger_path, ledger_keys,
                                                    splits, dict(repeats=repeats, size=size, seed=seed,
                                                                 workers=workers, quiet=quiet, cache_dir=cache_dir))
    results = [stored[h] for h in hashes]
    if val_shares_shortcut is None:
        val_shares_shortcut, damaged_audit = _shared_shortcuts(dataset, splits, size, seed, workers, quiet,
                                                               cache_dir)
        damaged = list(damaged) + damaged_audit
    document = _assemble(dataset, base_scores, results, n_transforms=[len(r.transforms) for r in recipes],
                         from_ledger=not missing, val_shares_shortcut=val_shares_shortcut,
                         candidates=candidates, **assemble)
    if damaged:
        document["warnings"].append(f"{len(damaged)} damaged feature-cache entries (for example "
                                    f"{damaged[0]}) were recomputed and rewritten.")
    document["reused_from_ledger"] = [r.name for r, h in zip(recipes, hashes)
                                      if h not in {m for _, m in missing}]

    if ledger_path is not None:
        best = next((row for row in document["recipes"] if row["name"] == document["best"]), None)
        _ledger.record_run(ledger_path, data_root=dataset.root,
                           recipe_names=[r.name for r in recipes], best_recipe=best and best["name"],
                           best_gain=best and (best["field"]["gain"] if document["decided_on"] == "field"
                                               else best["gain"]), from_ledger=document["from_ledger"],
                           details=_run_summary(document), **ledger_keys)
    return EvaluateResult.from_json(document)
