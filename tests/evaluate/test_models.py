"""Tests of the scoring models (augplan/measure/models.py) and of evaluating with each.

Real data: scikit-learn's digits (UCI optdigits) written as 32x32 PNGs, as in
tests/evaluate/test_evaluate.py. The team's training functions live in
tests/team_training.py.
"""

import dataclasses
import hashlib
import json

import numpy as np
import pytest

import augplan.augment.transforms as transforms
import team_training
from augplan.data import load_images, open_dataset
from augplan.errors import BadInputError
from augplan.evaluate import evaluate_recipes
from augplan.measure.models import ConvNet, LinearProxy, TeamTrainer, scoring_model
from augplan.recipe.parse import Recipe, Transform
from conftest import write_digits_dataset
from evaluate.test_evaluate import FLIPS, PER_CLASS, SIZE, SMALL_AFFINE, _by_name  # tests/evaluate/

# A network small and short enough for the suite (about a second a fit on
# 150 digits); the defaults are measured in benchmarks/bench_transfer.py.
SMALL_CNN = ConvNet(params=(("widths", (8, 16)), ("steps", 60), ("min_epochs", 1)))
TEAM = "team_training:fit_nearest_mean"


@pytest.fixture(scope="module")
def digits_data(tmp_path_factory):
    root = tmp_path_factory.mktemp("digits") / "DATA"
    write_digits_dataset(root, PER_CLASS, size=SIZE)
    return open_dataset(root)


@pytest.mark.parametrize("spec, kind, name", [
    (None, LinearProxy, "linear"),
    ("linear", LinearProxy, "linear"),
    ("cnn", ConvNet, "cnn"),
    (TEAM, TeamTrainer, TEAM),
], ids=["default", "linear", "cnn", "team"])
def test_model_choice_names_its_model(spec, kind, name):
    model = scoring_model(spec)
    assert isinstance(model, kind)
    assert model.name == name == model.describe()["name"] == model.settings()["name"]


@pytest.mark.parametrize("spec, fault", [
    ("svm", "--model must be cnn (default, the network), linear (the quick proxy), or module:callable; got 'svm'"),
    ("no_such_module_here:train", "cannot import module 'no_such_module_here'"),
    ("team_training:no_such_function", "module 'team_training' has no callable 'no_such_function'"),
    ("team_training:CALLS", "module 'team_training' has no callable 'CALLS'"),
], ids=["unknown-name", "missing-module", "missing-function", "not-callable"])
def test_bad_model_choices_are_named(spec, fault):
    with pytest.raises(BadInputError, match=fault.replace("(", r"\(").replace(")", r"\)")):
        scoring_model(spec)


def test_only_the_linear_proxy_carries_the_bias_note():
    assert "biased against augmentation" in scoring_model("linear").describe()["note"]
    assert scoring_model("cnn").describe()["note"] is None


def _recording_rotate(monkeypatch):
    """Make the rotate op record a digest of every image it is given."""
    seen = []
    real = transforms.OPS["rotate"]

    def digest(image):
        seen.append(hashlib.sha256(np.ascontiguousarray(image).tobytes()).hexdigest())

    def function(image, params, rng):
        digest(image)
        return real.function(image, params, rng)

    def kernel(image, degrees, border, rng):
        digest(image)
        return real.kernel(image, degrees, border, rng)

    monkeypatch.setitem(transforms.OPS, "rotate", dataclasses.replace(real, function=function, kernel=kernel))
    return seen


@pytest.mark.parametrize("model", ["linear", SMALL_CNN, TEAM], ids=["linear", "cnn", "team"])
def test_validation_images_never_reach_a_transform_for_any_model(digits_data, monkeypatch, model):
    seen = _recording_rotate(monkeypatch)
    recipe = Recipe(name="recorded", copies=1, transforms=(Transform("rotate", {"degrees": (-5.0, 5.0)}),))
    document = evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=False, model=model)

    def digests(split):
        return {hashlib.sha256(np.ascontiguousarray(im).tobytes()).hexdigest()
                for im in load_images(digits_data.split(split), SIZE)}

    assert digests("train") <= set(seen)  # every training image was drawn
    assert not digests("val") & set(seen)
    assert not digests("field") & set(seen)
    assert document["augmented_validation_images"] == 0
    assert document["model"]["name"] == scoring_model(model).name


def test_the_team_function_gets_augmented_training_data_and_predicts_originals(digits_data):
    team_training.CALLS.clear()
    team_training.PREDICTED.clear()
    recipe = Recipe(name="affine-2", copies=2, transforms=SMALL_AFFINE.transforms)
    evaluate_recipes(digits_data, [recipe], np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=False, model=TEAM)
    n_train = 10 * PER_CLASS["train"]
    baseline, augmented = team_training.CALLS  # the baseline arm trains first
    assert baseline["shape"] == (n_train, SIZE, SIZE, 3) and baseline["dtype"] == np.uint8
    # The originals plus the recipe's copies of each, with integer labels
    # that index the sorted class names.
    assert augmented["shape"] == (n_train * 3, SIZE, SIZE, 3)
    assert augmented["labels"].dtype.kind == "i"
    assert sorted(set(augmented["labels"].tolist())) == list(range(10))
    assert isinstance(augmented["rng"], np.random.Generator)
    assert baseline["digests"] < augmented["digests"]
    # The predictor is shown the original val and field images, nothing else.
    originals = {hashlib.sha256(np.ascontiguousarray(im).tobytes()).hexdigest()
                 for split in ("val", "field") for im in load_images(digits_data.split(split), SIZE)}
    assert set(team_training.PREDICTED) == originals


@pytest.mark.parametrize("spec, fault", [
    ("team_training:returns_no_predictor", "must return an object with predict"),
    ("team_training:predicts_names", "predict must return one integer class index"),
], ids=["no-predictor", "names-not-indices"])
def test_a_team_function_that_breaks_the_contract_is_named(digits_data, spec, fault):
    with pytest.raises(BadInputError, match=fault):
        evaluate_recipes(digits_data, [SMALL_AFFINE], np.random.default_rng(0), repeats=1, size=SIZE, cache_dir=False, model=spec)


@pytest.fixture(scope="module")
def cnn_comparison(digits_data):
    return evaluate_recipes(digits_data, [FLIPS, SMALL_AFFINE], np.random.default_rng(0), repeats=2, size=SIZE,
                            cache_dir=False, model=SMALL_CNN)


def test_the_network_finds_flipped_digits_harmful(cnn_comparison):
    # Mirrored digits are not handwriting (UCI optdigits via scikit-learn):
    # a network trained on them loses accuracy, and a network's loss flags.
    flips = _by_name(cnn_comparison)["flips"]
    assert flips["gain_ci"][1] < 0
    assert flips["verdict"] == "loses" and flips["flagged"] is True
    assert cnn_comparison.flagged
    assert flips["gain"] < _by_name(cnn_comparison)["small-affine"]["gain"]


@pytest.fixture(scope="module")
def default_comparison(digits_data):
    # The default network with its documented settings (300 optimiser steps),
    # as a user gets it: about 6 CPU s a fit at 32 px.
    return evaluate_recipes(digits_data, [FLIPS, SMALL_AFFINE], np.random.default_rng(0), repeats=2, size=SIZE,
                            cache_dir=False, model="cnn", workers=2)


def test_the_default_network_finds_flips_harmful_and_small_affine_not(default_comparison):
    # UCI optdigits via scikit-learn, 15 training images a class: mirrored
    # digits are not handwriting, so the flip recipe's interval lies below
    # zero; small affine distortions help on handwritten digits (Simard,
    # Steinkraus & Platt, ICDAR 2003), so they must at least not lose.
    recipes = _by_name(default_comparison)
    assert default_comparison["model"]["name"] == "cnn"
    assert recipes["flips"]["gain_ci"][1] < 0 and recipes["flips"]["verdict"] == "loses"
    assert recipes["small-affine"]["gain_ci"][1] > 0 and recipes["small-affine"]["verdict"] != "loses"


def test_the_network_sees_fresh_draws_every_epoch(cnn_comparison):
    # Every image once per epoch, per repeat: the epochs of SMALL_CNN on 150
    # images (3 batches) take 60 optimiser steps, i.e. 20 epochs.
    flips = _by_name(cnn_comparison)["flips"]
    assert flips["augmented_training_images"] == 2 * 20 * 10 * PER_CLASS["train"]
    assert cnn_comparison["model"]["name"] == "cnn"


def test_the_network_gives_the_same_json_for_one_seed_across_worker_counts(digits_data):
    recipe = Recipe(name="affine-1", copies=1, transforms=SMALL_AFFINE.transforms)
    # Shorter still: the point is the determinism, not the accuracy.
    model = ConvNet(params=(("widths", (4, 8)), ("steps", 10), ("min_epochs", 3)))
    texts = [json.dumps(evaluate_recipes(digits_data, [recipe], np.random.default_rng(5), repeats=2, size=SIZE,
                                         workers=workers, cache_dir=False, model=model), sort_keys=True)
             for workers in (1, 2)]
    assert texts[0] == texts[1]


def test_every_arm_of_a_repeat_starts_from_the_same_network(digits_data, monkeypatch):
    # Common random numbers: the baseline and each recipe of one repeat share
    # the network's starting weights and batch order (the fit's generator
    # state); repeats differ. A recipe whose draws change no pixel therefore
    # trains the baseline's network exactly, and its gain is exactly zero.
    from augplan.measure.convnet import ConvNetClassifier

    starts, fit = [], ConvNetClassifier.fit

    def recording_fit(self, images, labels, rng, *args, **kwargs):
        starts.append(rng.bit_generator.state["state"]["state"])
        return fit(self, images, labels, rng, *args, **kwargs)

    monkeypatch.setattr(ConvNetClassifier, "fit", recording_fit)
    unchanged = Recipe(name="unchanged", copies=1, transforms=(Transform("brightness", {"factor": (1.0, 1.0)}),))
    model = ConvNet(params=(("widths", (4, 8)), ("steps", 10), ("min_epochs", 1)))
    document = evaluate_recipes(digits_data, [unchanged, FLIPS], np.random.default_rng(5), repeats=2, size=SIZE,
                                workers=1, cache_dir=False, model=model)
    # Fits in order: baseline, unchanged, flips; two repeats each.
    assert len(starts) == 6
    assert starts[0] == starts[2] == starts[4] and starts[1] == starts[3] == starts[5]
    assert starts[0] != starts[1]
    row = _by_name(document)["unchanged"]
    assert row["augmented_training_images"] > 0
    assert row["gain"] == 0.0 and row["gain_ci"] == [0.0, 0.0]


def test_an_edited_team_module_is_not_served_from_the_ledger(tmp_path, monkeypatch):
    # The ledger's key carries the module's bytes (hashlib's sha256 as the reference).
    module = tmp_path / "edited_team.py"
    module.write_text("def fit(images, labels, rng):\n    return None\n", encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    before = scoring_model("edited_team:fit").settings()
    assert before["module_sha256"] == hashlib.sha256(module.read_bytes()).hexdigest()
    module.write_text("def fit(images, labels, rng):\n    return 1\n", encoding="utf-8")
    assert scoring_model("edited_team:fit").settings() != before
