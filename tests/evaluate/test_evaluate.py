"""Tests of the recipe evaluator on scikit-learn's digits (UCI optdigits).

The data: scikit-learn's bundled copy of the UCI optical recognition of
handwritten digits test set (8x8 grey images), upsampled to 32x32 RGB PNGs in
a temporary DATA layout with 15 training images per class, 30 validation
images and 10 labelled field images per class.
"""

import dataclasses
import hashlib
import json
import time

import numpy as np
import pytest

import augplan.augment.transforms as transforms
from augplan.evaluate import ledger
from augplan.data import load_images, open_dataset
from augplan.errors import BadInputError
from augplan.evaluate import evaluate_recipes
from augplan.measure.features import image_features
from augplan.measure.model import FeatureModel
from augplan.recipe.parse import Recipe, Transform
from conftest import write_digits_dataset

SIZE = 32
PER_CLASS = {"train": 15, "val": 30, "field": 10}

FLIPS = Recipe(name="flips", copies=4, transforms=(
    Transform("flip", {"axis": "horizontal"}, probability=0.5),
    Transform("flip", {"axis": "vertical"}, probability=0.5),
))
SMALL_AFFINE = Recipe(name="small-affine", copies=4, transforms=(
    Transform("rotate", {"degrees": (-8.0, 8.0)}),
    Transform("shift", {"fraction": (-0.06, 0.06)}),
))


@pytest.fixture(scope="module")
def digits_data(tmp_path_factory):
    root = tmp_path_factory.mktemp("digits") / "DATA"
    write_digits_dataset(root, PER_CLASS, size=SIZE)
    return open_dataset(root)


@pytest.fixture(scope="module")
def cache_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("cache")


@pytest.fixture(scope="module")
def comparison(digits_data, cache_dir):
    return evaluate_recipes(digits_data, [FLIPS, SMALL_AFFINE], np.random.default_rng(0), repeats=3, size=SIZE,
                            cache_dir=cache_dir)


def _by_name(document):
    return {entry["name"]: entry for entry in document["recipes"]}


def test_flips_lose_accuracy_on_digits(comparison):
    # Flipping digits makes 2/5, 6/9-like confusions and mirror shapes absent
    # from real handwriting (UCI optdigits via scikit-learn): the gain
    # interval must lie entirely below zero.
    flips = _by_name(comparison)["flips"]
    assert flips["gain"] < 0
    assert flips["gain_ci"][1] < 0
    assert flips["verdict"] == "loses"


def test_the_linear_proxys_sign_alone_flags_nothing(comparison):
    # The linear proxy's gains are biased against augmentation: a loss it
    # measures is reported, never flagged as harm on its own.
    assert comparison["model"]["name"] == "linear"
    assert "biased against augmentation" in comparison["model"]["note"]
    assert not any(entry["flagged"] for entry in comparison["recipes"])
    assert not comparison.flagged


def test_small_affine_distortions_do_not_lose_on_digits(comparison):
    # Simard, Steinkraus & Platt (ICDAR 2003) report lower error on
    # handwritten digits with small affine distortions; with 15 images per
    # class we require at least that the loss is not significant.
    affine = _by_name(comparison)["small-affine"]
    assert affine["gain_ci"][1] > 0
    assert affine["flagged"] is False
    assert affine["gain"] > _by_name(comparison)["flips"]["gain"]


def test_document_shape_and_consistency(comparison):
    assert comparison["augmented_validation_images"] == 0
    assert comparison["scored_on"] == "val"
    assert comparison["repeats"] == 3
    assert comparison["from_ledger"] is False
    baseline = comparison["baseline"]
    assert baseline["n_images"] == 10 * PER_CLASS["val"]
    low, high = baseline["accuracy_ci"]
    assert low <= baseline["accuracy"] <= high
    # The pooled accuracy is the mean of the per-repeat accuracies (equal n).
    # JSON figures are rounded to 6 decimals: a difference of two rounded
    # figures against a rounded figure is at most 1.5e-6 off; 1e-5 allows it.
    assert baseline["accuracy"] == pytest.approx(np.mean(baseline["repeat_accuracy"]), abs=1e-5)
    for entry in comparison["recipes"]:
        assert entry["gain"] == pytest.approx(entry["accuracy"] - baseline["accuracy"], abs=1e-5)
        assert entry["gain_ci"][0] <= entry["gain"] <= entry["gain_ci"][1]
        assert 0 <= entry["p_value"] <= entry["p_holm"] <= 1
        for label, gain in entry["per_class_gain"].items():
            expected = entry["per_class_recall"][label] - baseline["per_class_recall"][label]
            assert gain == pytest.approx(expected, abs=1e-5)
        # Originals plus copies draws of each of the 150 training images, per repeat.
        assert entry["augmented_training_images"] == 3 * 4 * 10 * PER_CLASS["train"]
        # The labelled field sample is a second, separate source.
        assert entry["field"]["n_images"] == 10 * PER_CLASS["field"]
    assert comparison["field"]["baseline"]["n_images"] == 10 * PER_CLASS["field"]
    assert comparison["confirm"] is None
    assert all(entry["confirm"] is None for entry in comparison["recipes"])


def _tells_one_story(block):
    """The stated rule: p < 0.05 exactly when the 95% gain interval excludes zero."""
    low, high = block["gain_ci"]
    return (block["p_value"] < 0.05) == (low > 0 or high < 0) and low <= block["gain"] <= high


def test_p_value_and_interval_agree_on_every_digits_recipe(comparison):
    # UCI optdigits via scikit-learn: validation and the labelled field sample.
    assert "p < 0.05 exactly when the 95% interval excludes zero" in comparison["gain_test"]
    for entry in comparison["recipes"]:
        assert _tells_one_story(entry), entry["name"]
        assert _tells_one_story(entry["field"]), entry["name"]


def test_p_value_and_interval_agree_on_every_demo_recipe(tmp_path):
    from augplan.demo import DEFAULT_DEMO_DIR, read_demo_recipes

    if not DEFAULT_DEMO_DIR.is_dir():
        pytest.skip("demo_images/ is not part of this installation")
    recipes = read_demo_recipes()
    document = evaluate_recipes(open_dataset(DEFAULT_DEMO_DIR), recipes, np.random.default_rng(0), repeats=2, cache_dir=tmp_path)
    assert [e["name"] for e in document["recipes"]] == ["naive-draft", "cautious", "light-and-pose"]
    for entry in document["recipes"]:
        assert _tells_one_story(entry), entry["name"]
        assert _tells_one_story(entry["field"]), entry["name"]
    # 75 validation images: with the image as the unit no p-value can fall
    # below the sign-flip test's floor of 1/10,000 (the old pooled test gave 2^-50).
    assert min(e["p_value"] for e in document["recipes"]) >= 1e-4


def test_validation_images_never_reach_a_transform(digits_data, cache_dir, monkeypatch):
    seen = []
    real = transforms.OPS["rotate"]

    def recording_rotate(image, params, rng):
        seen.append(hashlib.sha256(np.ascontiguousarray(image).tobytes()).hexdigest())
        return real.function(image, params, rng)

    def recording_kernel(image, degrees, border, rng):  # the recipe runner's entry
        seen.append(hashlib.sha256(np.ascontiguousarray(image).tobytes()).hexdigest())
        return real.kernel(image, degrees, border, rng)

    monkeypatch.setitem(transforms.OPS, "rotate", dataclasses.replace(
        real, function=recording_rotate, kernel=recording_kernel))
    recipe = Recipe(name="recorded", copies=1, transforms=(Transform("rotate", {"degrees": (-5.0, 5.0)}),))
    document = evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=cache_dir)

    def hashes(split):
        images = load_images(digits_data.split(split), SIZE)
        return {hashlib.sha256(np.ascontiguousarray(im).tobytes()).hexdigest() for im in images}

    # Every training image was drawn once (copies=1), each seen by the recorder.
    assert hashes("train") <= set(seen)
    assert len(seen) == 10 * PER_CLASS["train"]
    assert not hashes("val") & set(seen)
    assert not hashes("field") & set(seen)
    assert document["augmented_validation_images"] == 0


def test_same_seed_gives_identical_json_across_worker_counts(digits_data, cache_dir):
    recipe = Recipe(name="affine-2", copies=2, transforms=SMALL_AFFINE.transforms)
    texts = [json.dumps(evaluate_recipes(digits_data, [recipe], np.random.default_rng(3), repeats=2, size=SIZE,
                                         workers=workers, cache_dir=cache_dir), sort_keys=True)
             for workers in (1, 1, 2)]
    assert texts[0] == texts[1] == texts[2]
    other_seed = evaluate_recipes(digits_data, [recipe], np.random.default_rng(4), repeats=2, size=SIZE,
                                  cache_dir=cache_dir)
    assert json.dumps(other_seed, sort_keys=True) != texts[0]


def test_ledger_reuses_stored_results_and_lists_history(digits_data, cache_dir, tmp_path):
    path = tmp_path / "ledger.sqlite"
    recipe = Recipe(name="affine-ledger", copies=2, transforms=SMALL_AFFINE.transforms)
    started = time.perf_counter()
    first = evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=2, size=SIZE, cache_dir=cache_dir,
                             ledger_path=path)
    computed = time.perf_counter() - started
    started = time.perf_counter()
    second = evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=2, size=SIZE, cache_dir=cache_dir,
                              ledger_path=path)
    reused = time.perf_counter() - started
    assert first["from_ledger"] is False and second["from_ledger"] is True
    assert {**first, "from_ledger": True, "reused_from_ledger": ["affine-ledger"]} == second
    assert reused < computed / 5
    # A different seed is a different key: computed afresh.
    third = evaluate_recipes(digits_data, [recipe], np.random.default_rng(1), repeats=2, size=SIZE,
                             cache_dir=cache_dir, ledger_path=path)
    assert third["from_ledger"] is False
    from augplan.data import fingerprint

    history = ledger.list_history(path, fingerprint=fingerprint(digits_data))
    assert [row["recipes"] for row in history] == [["affine-ledger"]] * 3
    assert [row["from_ledger"] for row in history] == [False, True, False]
    # The ledger records the recommendation of the one rule (none when its interval spans zero).
    assert history[0]["best_recipe"] == first["best"]
    assert history[0]["best_gain"] == (None if first["best"] is None else pytest.approx(first["recipes"][0]["gain"]))
    assert ledger.list_history(path, fingerprint="0" * 64) == []


_featurised_rows = []


def counting_features(images):
    _featurised_rows.append(len(images))
    return image_features(images)


def test_feature_cache_spares_originals_on_rerun(digits_data, tmp_path):
    model = FeatureModel(feature_fn=counting_features)
    recipe = Recipe(name="affine-cache", copies=1, transforms=SMALL_AFFINE.transforms)
    n_originals = len(digits_data.records)
    n_augmented = 10 * PER_CLASS["train"]

    _featurised_rows.clear()
    evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=1, size=SIZE, model=model, cache_dir=tmp_path)
    assert sum(_featurised_rows) == n_originals + n_augmented
    _featurised_rows.clear()
    evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=1, size=SIZE, model=model, cache_dir=tmp_path)
    # Only the augmented draws are featurised again.
    assert sum(_featurised_rows) == n_augmented


def test_many_recipes_without_confirmation_warn(digits_data, cache_dir):
    # Recipes without transforms train on originals only: cheap stand-ins.
    plain = [Recipe(name=f"plain-{i}", seed=i) for i in range(4)]
    document = evaluate_recipes(digits_data, plain, np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=cache_dir)
    assert any("overfits the validation set" in w for w in document["warnings"])
    assert document["confirm"] is None

    confirmed = evaluate_recipes(digits_data, plain, np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=cache_dir,
                                 confirm_fraction=0.3)
    assert not any("overfits" in w for w in confirmed["warnings"])
    confirm = confirmed["confirm"]
    # 30 val images per class, 30% of each class set aside: 9 per class.
    assert confirm["n_images"] == 90
    assert confirmed["baseline"]["n_images"] == 210
    assert confirm["recipe"] in {r.name for r in plain}
    chosen = [e for e in confirmed["recipes"] if e["confirm"] is not None]
    assert [e["name"] for e in chosen] == [confirm["recipe"]]


@pytest.mark.parametrize("kwargs, fault", [
    ({"repeats": 0}, "--repeats"),
    ({"confirm_fraction": 1.5}, "--confirm-fraction"),
    ({"workers": 0}, "--workers"),
], ids=["no-repeats", "fraction-above-one", "no-workers"])
def test_bad_settings_are_named(digits_data, cache_dir, kwargs, fault):
    with pytest.raises(BadInputError, match=fault):
        evaluate_recipes(digits_data, [FLIPS], np.random.default_rng(0), size=SIZE, cache_dir=cache_dir, **kwargs)


def test_bad_recipe_lists_are_refused(digits_data, cache_dir):
    with pytest.raises(BadInputError, match="no recipe"):
        evaluate_recipes(digits_data, [], np.random.default_rng(0), cache_dir=cache_dir)
    with pytest.raises(BadInputError, match="unique"):
        evaluate_recipes(digits_data, [FLIPS, FLIPS], np.random.default_rng(0), cache_dir=cache_dir)


def test_cache_inside_data_folder_is_refused(digits_data):
    with pytest.raises(BadInputError, match="inside the data folder"):
        evaluate_recipes(digits_data, [FLIPS], np.random.default_rng(0), size=SIZE, repeats=1,
                         cache_dir=digits_data.root / ".cache")


def test_ledger_reuses_the_recipes_it_has_and_trains_only_the_new_one(digits_data, cache_dir, tmp_path):
    path = tmp_path / "partial.sqlite"
    kept = Recipe(name="affine-kept", copies=2, transforms=SMALL_AFFINE.transforms)
    added = Recipe(name="flips-added", copies=2, transforms=FLIPS.transforms)
    evaluate_recipes(digits_data, [kept], np.random.default_rng(0), repeats=2, size=SIZE, cache_dir=cache_dir, ledger_path=path)
    partial = evaluate_recipes(digits_data, [kept, added], np.random.default_rng(0), repeats=2, size=SIZE, cache_dir=cache_dir,
                               ledger_path=path)
    fresh = evaluate_recipes(digits_data, [kept, added], np.random.default_rng(0), repeats=2, size=SIZE, cache_dir=cache_dir)
    assert partial["from_ledger"] is False and partial["reused_from_ledger"] == ["affine-kept"]
    # Reused and newly trained results are exactly those of a run without a ledger.
    assert partial["recipes"] == fresh["recipes"] and partial["baseline"] == fresh["baseline"]


def test_confusion_matrices_agree_with_recall_and_accuracy(comparison):
    # Every validation image is counted once per repeat; the diagonal over a
    # row is that class's recall and the trace over the total the accuracy.
    for block in [comparison["baseline"], *comparison["recipes"]]:
        confusion = block["confusion"]
        counts = np.array(confusion["counts"])
        assert confusion["repeats"] == comparison["repeats"]
        assert counts.shape == (10, 10)
        assert (counts.sum(axis=1) == comparison["repeats"] * PER_CLASS["val"]).all()
        for position, label in enumerate(confusion["classes"]):
            recall = counts[position, position] / counts[position].sum()
            assert recall == pytest.approx(block["per_class_recall"][label], abs=1e-6)  # rounded to 6 places
        assert np.trace(counts) / counts.sum() == pytest.approx(block["accuracy"], abs=1e-6)


def _row(name, gain, n_transforms=2, field_gain=None, half_width=0.01):
    row = {"name": name, "gain": gain, "gain_ci": [gain - half_width, gain + half_width],
           "n_transforms": n_transforms}
    if field_gain is not None:
        row["field"] = {"gain": field_gain, "gain_ci": [field_gain - half_width, field_gain + half_width]}
    return row


@pytest.mark.parametrize("rows, best", [
    ([_row("a", -0.015), _row("b", -0.039)], None),
    ([_row("a", -0.015), _row("emptied", 0.0, n_transforms=0)], None),
    ([_row("a", 0.0), _row("b", 0.0)], None),
    ([_row("a", 0.01, half_width=0.02), _row("b", 0.005, half_width=0.02)], None),
    ([_row("a", 0.02), _row("b", 0.03), _row("emptied", 0.05, n_transforms=0)], "b"),
    ([_row("a", 0.0, field_gain=0.29), _row("b", 0.0, field_gain=0.1)], "a"),
    ([_row("a", 0.02, field_gain=0.1), _row("b", 0.01, field_gain=0.1)], "a"),
    ([_row("a", 0.05, field_gain=-0.05), _row("b", -0.01, field_gain=0.2)], "b"),
    ([_row("a", 0.05, field_gain=0.0), _row("b", 0.04, field_gain=-0.2)], None),
], ids=["all-negative", "emptied-at-zero", "all-zero", "interval-spans-zero", "largest-gain",
        "field-decides", "validation-breaks-a-field-tie", "field-over-validation", "field-shows-no-gain"])
def test_best_follows_the_one_rule(rows, best):
    # BEST_RULE: the labelled field sample first, validation second; a recommendation needs
    # its 95% gain interval above zero on the primary evidence, and at least one transform.
    from augplan.evaluate.ranking import best_recipe, decide

    chosen = best_recipe(rows)
    assert (None if chosen is None else chosen["name"]) == best
    decision = decide(rows)
    assert decision.best == best
    assert decision.decided_on == ("field" if any("field" in row for row in rows) else "val")
    if best is not None:
        assert decision.ranking[0] == best or rows[[r["name"] for r in rows].index(decision.ranking[0])][
            "n_transforms"] == 0


def test_the_note_names_the_shared_shortcut_and_asks_for_a_field_sample():
    from augplan.evaluate.ranking import decide

    without_field = decide([_row("a", 0.02)], val_shares_shortcut=["brightness"])
    assert "carries the same brightness shortcut" in without_field.note
    assert "cannot reveal" in without_field.note and "Collect a labelled field sample" in without_field.note
    with_field = decide([_row("a", 0.0, field_gain=0.2)], val_shares_shortcut=["brightness"], n_field=40)
    assert with_field.note.startswith("The labelled field sample (40 images) decides the recommendation")
    assert "brightness" in with_field.note and "Collect" not in with_field.note
    assert "shortcut" not in decide([_row("a", 0.02)]).note


def test_history_records_no_best_when_no_recipe_gains(digits_data, cache_dir, tmp_path):
    from augplan.render.text import history_table

    ledger_path = tmp_path / "ledger.sqlite"
    document = evaluate_recipes(digits_data, [FLIPS], np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=cache_dir,
                                ledger_path=ledger_path)
    assert document["recipes"][0]["gain"] < 0 and document["best"] is None
    row = ledger.history(ledger_path)["evaluations"][-1]
    assert row["best_recipe"] is None
    assert "none gained" in history_table([row])


@pytest.mark.parametrize("gain, p_holm, verdict", [
    (0.02, 0.01, "gains"), (-0.027, 0.01, "loses"), (-0.027, 0.113, "no difference"),
    (0.02, 0.05, "no difference"), (0.0, 0.001, "no difference"),
], ids=["gains", "loses", "holm-not-significant", "at-the-level", "zero-gain"])
def test_verdict_follows_holms_adjusted_p(gain, p_holm, verdict):
    from augplan.evaluate.evaluate import gain_verdict

    assert gain_verdict(gain, p_holm) == verdict


def test_verdicts_never_contradict_the_gain_intervals(comparison):
    for entry in comparison["recipes"]:
        low, high = entry["gain_ci"]
        if entry["verdict"] == "gains":
            assert low > 0 and entry["p_holm"] < 0.05
        elif entry["verdict"] == "loses":
            assert high < 0 and entry["p_holm"] < 0.05
        else:
            assert entry["p_holm"] >= 0.05


def test_a_class_missing_from_validation_is_named_and_said_never_scored(tmp_path, run_cli):
    # scikit-learn's digits with no validation image of d7.
    import shutil

    from conftest import TINY_RECIPE

    data = write_digits_dataset(tmp_path / "DATA", {"train": 4, "val": 2}, size=16)
    shutil.rmtree(data / "val" / "d7")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(TINY_RECIPE, encoding="utf-8")
    result = run_cli("evaluate", data, "--recipe", recipe, "--repeats", 2, "--json",
                     "--ledger", tmp_path / "ledger.sqlite")
    assert result.code in (0, 1), result.err
    expected = "validation has no image of class 'd7' (1 of 10 training classes): it is never scored"
    assert result.err.count(expected) == 1
    assert any(w.startswith(expected) for w in json.loads(result.out)["warnings"])
    assert open_dataset(data).missing_classes("val") == ["d7"]


def test_the_missing_val_folder_is_said_once(tmp_path, tiny_recipe, run_cli):
    # Issue 27: the CLI said it and the result's warnings said it again.
    import shutil

    from conftest import write_tiny_dataset

    root = write_tiny_dataset(tmp_path / "DATA", train=10)
    shutil.rmtree(root / "val")
    result = run_cli("evaluate", root, "--recipe", tiny_recipe, "--repeats", "1")
    assert result.code in (0, 1), result.err
    assert result.err.count("no val/ folder") == 1
