"""The training-side augmenter: determinism, types, relabels, pickling."""

import pickle
import threading

import numpy as np
import pytest
from PIL import Image

from augplan import load_recipe
from augplan.augment.augmenter import Augmenter
from augplan.recipe.parse import parse_recipe

RECIPE_TEXT = """
name: loader
transforms:
  - op: rotate
    degrees: [-10, 10]
  - op: brightness
    factor: [0.7, 1.3]
  - op: flip
    axis: horizontal
    only: [left, right]
    relabel: {left: right, right: left}
"""


@pytest.fixture
def image():
    rng = np.random.default_rng(3)
    return rng.integers(0, 256, size=(24, 32, 3), dtype=np.uint8)


@pytest.fixture
def aug(tmp_path):
    path = tmp_path / "recipe.yaml"
    path.write_text(RECIPE_TEXT)
    return load_recipe(path)


def test_same_seed_same_draw(aug, image):
    first = aug(image, rng=np.random.default_rng(11))
    second = aug(image, rng=np.random.default_rng(11))
    assert first.shape == image.shape and first.dtype == np.uint8
    assert np.array_equal(first, second)


def test_pil_in_pil_out(aug, image):
    out = aug(Image.fromarray(image), rng=np.random.default_rng(0))
    assert isinstance(out, Image.Image) and out.size == (32, 24) and out.mode == "RGB"


def test_apply_relabels_scoped_flip(aug, image):
    _, label = aug.apply(image, "left", np.random.default_rng(0))
    assert label == "right"
    _, label = aug.apply(image, "other", np.random.default_rng(0))
    assert label == "other"


def test_flip_without_label_is_skipped_because_scoped(image):
    aug = Augmenter(parse_recipe("name: f\ntransforms:\n  - op: flip\n    only: [left]\n"))
    assert np.array_equal(aug(image, rng=np.random.default_rng(0)), image)


def test_pickle_round_trip_keeps_behaviour(aug, image):
    clone = pickle.loads(pickle.dumps(aug))
    assert np.array_equal(clone(image, rng=np.random.default_rng(5)), aug(image, rng=np.random.default_rng(5)))


def test_threads_with_own_generators_match_serial(aug, image):
    expected = [aug(image, rng=np.random.default_rng(seed)) for seed in range(8)]
    results = [None] * 8

    def work(seed):
        results[seed] = aug(image, rng=np.random.default_rng(seed))

    threads = [threading.Thread(target=work, args=(seed,)) for seed in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert all(np.array_equal(a, b) for a, b in zip(expected, results))


@pytest.mark.parametrize("bad", [np.zeros((4, 4), np.uint8), np.zeros((4, 4, 3), np.float32), "image"],
                         ids=["grey-2d", "float", "string"])
def test_bad_image_is_refused_clearly(aug, bad):
    with pytest.raises((ValueError, TypeError), match="image"):
        aug(bad, rng=np.random.default_rng(0))
