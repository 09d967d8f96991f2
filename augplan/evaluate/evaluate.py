"""Score augmentation recipes against a no-augmentation baseline (``augplan evaluate``).

Each recipe trains the scoring model on the original training images plus
``copies`` augmented draws of each (labels from the recipe), once per repeat
with fresh draws and a fresh model seed; the baseline trains on the
originals alone. Every model is scored on original validation images: the
training side (`augplan.evaluate.training`) is the only place a recipe is
applied, and says why validation is never augmented.

The model is the ``--model`` choice (`augplan.measure.models`): the linear
proxy (``linear``), a small convolutional network (``cnn``, the default,
fresh draws of every image each epoch) or the team's own training function
(``module:callable``). Every result names it.

Module layout: this module is the entry point (inputs, splits, the ledger,
assembling the document); `augplan.evaluate.training` trains each arm;
`augplan.evaluate.scoring` holds the statistics of one arm and the verdict
word (`GAIN_RULE`, `VERDICT_RULE`); `augplan.evaluate.ranking` the ranking
and the recommendation (`BEST_RULE`), decided once and carried in the
result.

Randomness: `evaluate_recipes` takes a `numpy.random.Generator` and draws
one root from it (`augplan.seeding.stream_root`); every stream of the run is
keyed under that root by purpose, recipe hash and repeat
(`augplan.seeding.keyed_generator`), so a recipe's result does not depend on
which other recipes are compared, nor on worker order, and the ledger can
reuse it (the root is part of the ledger's key).
"""

import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np

from augplan.augment import transforms as _transforms_module
from augplan.data import Dataset, fingerprint, load_images, stratified_choice
from augplan.errors import BadInputError
from augplan.evaluate import ledger as _ledger
from augplan.evaluate import scoring as _scoring_module
from augplan.evaluate import training as _training_module
from augplan.evaluate.feature_cache import FeatureCache, default_cache_dir, feature_settings_key
from augplan.evaluate.ranking import BEST_RULE, decide
from augplan.evaluate.scoring import (GAIN_RULE, VERDICT_RULE, compare, gain_verdict, per_class_gain, round_p,
                                      score_predictions, short)
from augplan.evaluate.training import CHUNK, featurize_originals, train_linear, train_on_images
from augplan.measure import factors as _factors_module
from augplan.measure import shortcuts as _shortcuts_module
from augplan.measure import stats
from augplan.measure.factors import FACTORS, measure_factors
from augplan.measure.models import FALLBACK_NAME, FALLBACK_WARNING, is_linear, scoring_model
from augplan.measure.shortcuts import val_shared_shortcuts
from augplan.parallel import parallel_map, resolve_workers, single_threaded
from augplan.recipe.parse import Recipe, recipe_hash
from augplan.results import EvaluateResult, RecipeScore
from augplan.seeding import keyed_generator, require_generator, stream_root
from augplan.thresholds import MANY_RECIPES_WARNING_LIMIT
from augplan.workspace import ensure_outside_data

__all__ = ["evaluate_recipes", "no_val_warning"]


# Purposes that key the streams of a run, so streams for different jobs never
# coincide.
_PURPOSE_TRAIN, _PURPOSE_VAL, _PURPOSE_CONFIRM, _PURPOSE_FIELD, _PURPOSE_SPLIT, _PURPOSE_AUDIT, _PURPOSE_MODEL = range(7)
_BASELINE_KEY = int(hashlib.sha256(b"augplan-baseline").hexdigest(), 16)


def no_val_warning(dataset):
    """The warning of a data set without ``val/``: what stands in for validation (None when it has one).

    Written once here; every command that scores carries it in its result's
    ``warnings`` and the command line prints it from there.
    """
    if not dataset.val_from_train:
        return None
    return f"no val/ folder: a stratified split of train (seed {dataset.split_seed}) stands in for validation."


# --------------------------------------------------------------------------
# Input checks and keys


def _check_inputs(dataset, recipes, repeats, size, seed, workers, confirm_fraction):
    """Validate the arguments at the boundary; returns the recipes as a list."""
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
    for flag, value, low in (("--repeats", repeats, 1), ("size", size, 8), ("--seed", 0 if seed is None else seed, 0)):
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


def _carve_confirmation(val_records, fraction, root):
    """Stratified confirmation part of val: ``round(fraction * n)`` per class.

    Every class keeps at least one validation image; a class with a single
    validation image gives none.
    """
    chosen = stratified_choice(val_records, fraction, keyed_generator(root, _PURPOSE_SPLIT))
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
    import sys

    settings = {"model": scoring.settings(), "size": size, "confirm_fraction": confirm_fraction,
                "split_seed": dataset.split_seed, "val_from_train": dataset.val_from_train}
    # Since the evaluator is split, its training and scoring modules are part of its code.
    code = [sys.modules[__name__], _training_module, _scoring_module, _transforms_module, stats]
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


def _compute(dataset, recipes, hashes, scoring, *, repeats, size, root, workers, quiet, cache,
             splits):
    """Train every (recipe, repeat) and score; returns the ledger-shaped results."""
    classes = list(dataset.classes)
    train = dataset.split("train")
    truth = {name: np.array([r.label for r in records]).astype(str) for name, records in splits.items()}
    arms = [(None, _BASELINE_KEY)] + [(recipe, int(h, 16)) for recipe, h in zip(recipes, hashes)]
    if scoring.uses_features:
        train_features = featurize_originals(train, scoring.feature_fn, size, cache,
                                             workers=workers, quiet=quiet)
        eval_features = {name: featurize_originals(records, scoring.feature_fn, size, cache,
                                                   workers=workers, quiet=quiet)
                         for name, records in splits.items()}
        train_unit, shared = train_linear, (train_features, eval_features)
    else:
        train_unit, shared = train_on_images, (classes, splits)
    # Common random numbers: the model's stream is keyed by the repeat alone,
    # so every arm of a repeat starts from the same weights and batch order;
    # the recipe's draws have a stream of their own per (recipe, repeat).
    units = [(scoring, recipe, train, *shared, size, keyed_generator(root, _PURPOSE_MODEL, r),
              keyed_generator(root, _PURPOSE_TRAIN, key, r))
             for recipe, key in arms for r in range(repeats)]
    # The network's bar counts epochs within each fit, not whole fits.
    epochs = scoring.epochs(len(train)) if hasattr(scoring, "epochs") else None
    outputs = parallel_map(train_unit, units, workers=workers, ticks=epochs,
                           desc=(f"training the {scoring.name} model per recipe and repeat"
                                 + (f" ({epochs} epochs a fit)" if epochs else "")), quiet=quiet)

    def stacked(arm_index, split):
        rows = outputs[arm_index * repeats:(arm_index + 1) * repeats]
        return np.stack([o["predictions"][split] for o in rows])

    def score_arm(arm_index, split):
        return score_predictions(truth[split], stacked(arm_index, split), classes)

    purposes = {"val": _PURPOSE_VAL, "confirm": _PURPOSE_CONFIRM, "field": _PURPOSE_FIELD}
    base_scores, base_correct = {}, {}
    for split in splits:
        base_scores[split], base_correct[split] = score_arm(0, split)

    results = []
    for index, (recipe, h) in enumerate(zip(recipes, hashes), start=1):
        key = int(h, 16)
        scores = {}
        for split in splits:
            score, correct = score_arm(index, split)
            # The gain test's stream is keyed by recipe and split: the same whichever recipes run beside it.
            score.update(compare(base_correct[split], correct, keyed_generator(root, purposes[split], key)))
            score["per_class_gain"] = per_class_gain(base_scores[split]["per_class_recall"],
                                                     score["per_class_recall"])
            scores[split] = score
        augmented = sum(o["augmented"] for o in outputs[index * repeats:(index + 1) * repeats])
        results.append({"recipe_hash": h, "name": recipe.name, "copies": recipe.copies,
                        "augmented_training_images": augmented, "scores": scores})
    return base_scores, results


def _recipe_rows(results, n_transforms, scoring, has_field):
    """One `RecipeScore` per result: validation figures, Holm's p, the verdict word, the field block."""
    p_holm = stats.holm([r["scores"]["val"]["p_value"] for r in results])
    rows = []
    for result, adjusted, count in zip(results, p_holm, n_transforms):
        val = result["scores"]["val"]
        verdict = gain_verdict(val["gain"], adjusted)
        rows.append(RecipeScore(
            name=result["name"], recipe_hash=result["recipe_hash"], n_transforms=count,
            **{k: val[k] for k in ("accuracy", "accuracy_ci", "balanced_accuracy", "macro_f1", "per_class_recall",
                                   "repeat_accuracy", "gain", "gain_ci", "p_value", "confusion")},
            p_holm=round_p(adjusted), per_class_gain=val["per_class_gain"], verdict=verdict,
            # The linear proxy's gains are biased against augmentation: its sign
            # alone never calls a recipe harmful (LINEAR_PROXY_NOTE).
            flagged=verdict == "loses" and not is_linear(scoring.name),
            augmented_training_images=result["augmented_training_images"], confirm=None,
            field=short(result["scores"]["field"]) if has_field else None))
    return rows


def _confirmation(rows, results, base_scores, top_name, confirm_source):
    """The rows with the top-ranked one's confirmation scores, and the document's ``confirm`` block."""
    top = [row.name for row in rows].index(top_name)
    chosen = short(results[top]["scores"]["confirm"])
    rows = [dataclasses.replace(row, confirm=chosen) if position == top else row
            for position, row in enumerate(rows)]
    confirm = {"source": confirm_source, "n_images": base_scores["confirm"]["n_images"],
               "recipe": results[top]["name"], "baseline": short(base_scores["confirm"]),
               "recipe_scores": chosen,
               "note": "the top-ranked recipe (the recommendation rule) and the baseline, scored once"}
    return rows, confirm


def _run_warnings(dataset, scoring, model, n_results, confirmed, confirm_ignored, n_unlabelled_field, decision):
    """Every warning of the run, each written once; the command line prints them from the result."""
    warnings = [FALLBACK_WARNING] if scoring.name == FALLBACK_NAME else []
    if not confirmed and n_results > MANY_RECIPES_WARNING_LIMIT:
        warnings.append(
            f"{n_results} recipes compared without a confirmation split: choosing among many "
            "recipes by validation score overfits the validation set, so the best gain is "
            "optimistic. Add DATA/test/ or pass --confirm-fraction to score the chosen recipe "
            "on images that played no part in choosing it.")
    if confirm_ignored:
        warnings.append("--confirm-fraction ignored: DATA/test/ exists and serves as the confirmation split.")
    if n_unlabelled_field:
        warnings.append(f"{n_unlabelled_field} unlabelled field images are not scored "
                        "(accuracy needs labels).")
    if no_val_warning(dataset):
        warnings.append(no_val_warning(dataset))
    if dataset.missing_val_message():
        warnings.append(dataset.missing_val_message())
    if model["note"]:
        warnings.append(model["note"][0].upper() + model["note"][1:] + ".")
    if decision.decided_on == "val" and decision.val_shares_shortcut:
        warnings.append(decision.note)
    return warnings


def _assemble(dataset, base_scores, results, *, n_transforms, scoring, repeats, seed, confirm_source,
              n_unlabelled_field, confirm_ignored, from_ledger, val_shares_shortcut=(), candidates=None, size=64):
    """Build the ``evaluate --json`` document from per-arm scores; `BEST_RULE` (via `decide`) ranks them."""
    # The side every image is read, augmented and trained at (larger images
    # reduced by area averaging; see augplan.data.decoding.load_images).
    model = {**scoring.describe(), "side": int(size)}
    rows = _recipe_rows(results, n_transforms, scoring, "field" in base_scores)
    decision = decide(rows, val_shares_shortcut=val_shares_shortcut,
                      n_field=base_scores["field"]["n_images"] if "field" in base_scores else None,
                      candidates=candidates)
    confirm = None
    if "confirm" in base_scores:
        rows, confirm = _confirmation(rows, results, base_scores, decision.ranking[0], confirm_source)
    field = None
    if "field" in base_scores:
        field = {"source": "field", "n_images": base_scores["field"]["n_images"],
                 "baseline": short(base_scores["field"]),
                 "note": "labelled field sample, a separate source from validation"}
    scored_on = f"val (stratified split of train, seed {dataset.split_seed})" if dataset.val_from_train else "val"
    if confirm_source and confirm_source != "test":
        scored_on += f" minus the confirmation part ({confirm_source})"
    base_val = base_scores["val"]
    baseline = {k: base_val[k] for k in ("n_images", "accuracy", "accuracy_ci", "balanced_accuracy",
                                         "macro_f1", "per_class_recall", "repeat_accuracy", "confusion")}
    return {
        "model": model,
        "baseline": baseline,
        "recipes": rows,
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
        "warnings": _run_warnings(dataset, scoring, model, len(results), confirm is not None, confirm_ignored,
                                  n_unlabelled_field, decision),
        "from_ledger": bool(from_ledger),
    }


def _scoring_splits(dataset, confirm_fraction, root, seed):
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
        kept, carved = _carve_confirmation(val, float(confirm_fraction), root)
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
                                     repeats=run["repeats"], size=run["size"], root=run["root"],
                                     workers=run["workers"], quiet=run["quiet"], cache=cache, splits=splits)
    if ledger_path is not None:
        _ledger.store_results(ledger_path, baseline=base_scores, results=computed, **ledger_keys)
    stored.update({result["recipe_hash"]: result for result in computed})
    return base_scores, stored, missing, cache.damaged


def _factor_chunk(records_and_size):
    """Nuisance factors of original images (no recipe is in reach here)."""
    records, size = records_and_size
    with single_threaded():
        return measure_factors(load_images(records, size))


def _shared_shortcuts(dataset, splits, size, root, workers, quiet, cache_dir):
    """Flagged shortcut factors of the training set that the validation split carries too.

    The shortcut audit (`augplan.measure.shortcuts`, the rule ``coverage``
    follows) on the original train, validation and labelled field images; a
    factor the field sample confirms as a cue is not flagged. The answer
    depends only on those images, ``size`` and the run's root, so it is kept in the
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
                           size, root, len(dataset.classes), _file_digest(_factors_module, _shortcuts_module)])
    key = hashlib.sha256(key_text.encode("utf-8")).hexdigest()
    data_root = Path(dataset.root).resolve()
    cache_root = (None if cache_dir is False else Path(cache_dir) if cache_dir is not None
                  else default_cache_dir(data_root))
    if cache_root is not None:
        ensure_outside_data(cache_root, data_root, what="feature cache")
    cache = FeatureCache(cache_root, "shortcut-audit", row_length=len(names))
    row = cache.get(key)
    if row is None:
        audit = {}
        for name, records in sets.items():
            chunks = [records[i:i + CHUNK] for i in range(0, len(records), CHUNK)]
            parts = parallel_map(_factor_chunk, [(chunk, size) for chunk in chunks], workers=workers,
                                 desc=f"factors of {name} images", quiet=quiet)
            values = {factor: np.concatenate([part[factor] for part in parts]) for factor in names}
            audit[name] = (values, np.array([r.label for r in records]), None)
        shared = set(val_shared_shortcuts(audit, len(dataset.classes), rng=keyed_generator(root, _PURPOSE_AUDIT)))
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


def _evaluate(dataset, recipes, root, *, seed, repeats, model, size, workers, quiet, ledger_path, cache_dir,
              confirm_fraction, val_shares_shortcut, candidates):
    """The body of `evaluate_recipes` on checked inputs: streams keyed under ``root``, ``model`` resolved."""
    scoring = model
    splits, confirm_source, confirm_ignored, n_unlabelled = _scoring_splits(dataset, confirm_fraction, root, seed)

    hashes = [recipe_hash(r) for r in recipes]
    settings_key = _settings_key(scoring, size, confirm_fraction, dataset)
    # The ledger keys a result by the root its streams came from.
    ledger_keys = dict(fingerprint=fingerprint(dataset), settings_key=settings_key, seed=root, repeats=repeats)
    base_scores, stored, missing, damaged = _scores(dataset, recipes, hashes, scoring, ledger_path, ledger_keys,
                                                    splits, dict(repeats=repeats, size=size, root=root,
                                                                 workers=workers, quiet=quiet, cache_dir=cache_dir))
    if val_shares_shortcut is None:
        val_shares_shortcut, damaged_audit = _shared_shortcuts(dataset, splits, size, root, workers, quiet,
                                                               cache_dir)
        damaged = list(damaged) + damaged_audit
    document = _assemble(dataset, base_scores, [stored[h] for h in hashes],
                         n_transforms=[len(r.transforms) for r in recipes], from_ledger=not missing,
                         val_shares_shortcut=val_shares_shortcut, candidates=candidates, scoring=scoring,
                         repeats=repeats, seed=seed, size=size, confirm_source=confirm_source,
                         n_unlabelled_field=n_unlabelled, confirm_ignored=confirm_ignored)
    if damaged:
        document["warnings"].append(f"{len(damaged)} damaged feature-cache entries (for example "
                                    f"{damaged[0]}) were recomputed and rewritten.")
    document["reused_from_ledger"] = [r.name for r, h in zip(recipes, hashes)
                                      if h not in {m for _, m in missing}]

    result = EvaluateResult.from_json(document)
    if ledger_path is not None:
        best = result.best_score()
        _ledger.record_run(ledger_path, data_root=dataset.root, recipe_names=[r.name for r in recipes],
                           best_recipe=best and best.name,
                           best_gain=best and best.primary(result.decided_on)["gain"],
                           from_ledger=result.from_ledger, details=_run_summary(result),
                           # History shows the seed the run was asked for; results stay keyed by the root.
                           **{**ledger_keys, "seed": seed})
    return result


def evaluate_recipes(dataset, recipes, rng, *, seed=None, repeats=5, model=None, size=64, workers=1,
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
    rng : numpy.random.Generator
        One root is drawn from it (`augplan.seeding.stream_root`); every
        draw of the run is keyed under that root by purpose, recipe hash and
        repeat, so a recipe's result does not depend on the other recipes,
        and results stored in the ledger under the same root are reused.
    seed : int, optional
        The seed ``rng`` was made from, recorded in the result's ``seed`` as
        provenance (the command line passes ``--seed``); default the root.
    repeats : int, default 5
        Training repeats per recipe, each with fresh augmentation draws and
        a fresh model seed.
    model : {'cnn', 'linear'} or str or FeatureModel, optional
        The model each arm trains (`augplan.measure.models.scoring_model`):
        None or ``'cnn'`` (the small network; the linear proxy, with a
        warning, without PyTorch), ``'linear'``, ``'module:callable'`` (the
        team's function) or a `FeatureModel`. Every result names it.
    size : int, default 64
        The side images are read, augmented and trained at (``--side``).
    workers : int, default 1
        Processes for featurising and training (-1: every core).
    quiet : bool, default True
        Hide progress bars.
    ledger_path : str or Path, optional
        SQLite results ledger; results stored under the same keys are reused.
    cache_dir : str or Path or False, optional
        Folder of the feature cache of original images (never inside the
        data folder); default ``<data parent>/.augplan/features``; False: none.
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
        The ``evaluate --json`` document; its ``recipes`` are `RecipeScore`
        rows; ``ranking``, ``best``, ``decided_on`` and ``decision_note``
        follow `BEST_RULE` (`augplan.evaluate.ranking`), decided once.

    Raises
    ------
    BadInputError
        Empty or duplicate recipes, bad numbers, missing splits, a cache
        folder inside the data folder, an unusable ledger file.

    Notes
    -----
    The image is the unit: paired sign-flip tests over per-image differences
    give each gain's p and interval [1]_, Holm-adjusted across the run [2]_
    (`augplan.evaluate.scoring`).

    References
    ----------
    .. [1] M. D. Ernst, Statistical Science 19(4), 676-685, 2004.
    .. [2] S. Holm, Scandinavian Journal of Statistics 6(2), 65-70, 1979.
    """
    recipes = _check_inputs(dataset, recipes, repeats, size, seed, workers, confirm_fraction)
    root = stream_root(require_generator(rng))
    return _evaluate(dataset, recipes, root, seed=root if seed is None else int(seed), repeats=int(repeats),
                     model=scoring_model(model), size=int(size), workers=workers, quiet=quiet,
                     ledger_path=ledger_path, cache_dir=cache_dir, confirm_fraction=confirm_fraction,
                     val_shares_shortcut=val_shares_shortcut, candidates=candidates)
