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


@pytest.mark.parametrize("bad, message", [(np.zeros((4, 4, 3), np.float32), r"uint8.*np\.round"),
                                          (np.zeros((4, 4, 2), np.uint8), r"shape \(H, W, 3\)"),
                                          ("image", "image must be a numpy array")],
                         ids=["float", "two-channel", "string"])
def test_bad_image_is_refused_clearly(aug, bad, message):
    with pytest.raises((ValueError, TypeError), match=message):
        aug(bad, rng=np.random.default_rng(0))


# ---------------------------------------------------------------- hand-off to a training loop

CLASSES = ["left", "right", "other"]  # index order of a training loop: 0 left, 1 right, 2 other


def _always_flip():
    return parse_recipe("name: f\ntransforms:\n  - op: flip\n    only: [left, right]\n"
                        "    relabel: {left: right, right: left}\n")


@pytest.mark.parametrize("label,expected", [(0, 1), (1, 0), (2, 2), (np.int64(0), 1)],
                         ids=["left", "right", "unscoped-class", "numpy-int"])
def test_integer_labels_map_through_classes(image, label, expected):
    aug = Augmenter(_always_flip(), classes=CLASSES)
    out, new_label = aug.apply(image, label, np.random.default_rng(0))
    assert new_label == expected and isinstance(new_label, int)
    # The flip ran exactly for the scoped classes: the label decides, not the index.
    assert np.array_equal(out, image[:, ::-1]) == (label in (0, 1))


def test_scoped_recipe_with_integer_label_and_no_classes_raises(image):
    aug = Augmenter(_always_flip())
    with pytest.raises(ValueError, match=r"classes=\[\.\.\.\]"):
        aug.apply(image, 0, np.random.default_rng(0))


def test_unscoped_recipe_passes_an_integer_label_through(image):
    aug = Augmenter(parse_recipe("name: r\ntransforms:\n  - op: rotate\n    degrees: [-5, 5]\n"))
    assert aug.apply(image, 4, np.random.default_rng(0))[1] == 4


@pytest.mark.parametrize("classes,message", [
    (["left", "other"], "'right'"), (["left", "left", "right"], "distinct"), ([], "at least one"),
    ("left", "sequence")], ids=["missing-scoped-class", "repeated", "empty", "a-string"])
def test_bad_class_lists_are_refused(classes, message):
    with pytest.raises((ValueError, TypeError), match=message):
        Augmenter(_always_flip(), classes=classes)


def test_an_index_outside_the_classes_is_refused(image):
    with pytest.raises(ValueError, match="outside classes"):
        Augmenter(_always_flip(), classes=CLASSES).apply(image, 3, np.random.default_rng(0))


@pytest.mark.parametrize("call", ["call", "apply"])
def test_no_generator_raises_and_says_how_to_pass_one(aug, image, call):
    with pytest.raises(TypeError, match=r"rng=np\.random\.default_rng\(1234\)"):
        aug(image) if call == "call" else aug.apply(image, "left")


def _vetted_file(tmp_path, evidence):
    from augplan.vet.vetted_file import vetted_text

    path = tmp_path / "vetted.yaml"
    path.write_text(vetted_text(_always_flip(), evidence))
    return path


def test_vetted_file_carries_its_class_list(tmp_path, image):
    aug = load_recipe(_vetted_file(tmp_path, {"classes": CLASSES}))
    assert aug.classes == tuple(CLASSES)
    assert aug.apply(image, 0, np.random.default_rng(0))[1] == 1


def test_classes_given_to_load_recipe_win_over_the_files(tmp_path):
    # The same classes in the training loop's own order; a list of other classes is refused
    # (tests/test_bad_inputs.py, test_load_recipe_refuses_a_class_list_of_another_vetting).
    aug = load_recipe(_vetted_file(tmp_path, {"classes": CLASSES}), classes=["right", "other", "left"])
    assert aug.classes == ("right", "other", "left")


@pytest.mark.parametrize("edit", [("left, right]", "left]"), ("- other", "- others")],
                         ids=["recipe-body", "evidence"])
def test_edited_vetted_file_is_refused_unless_verify_is_off(tmp_path, edit):
    from augplan.errors import BadInputError

    path = _vetted_file(tmp_path, {"classes": CLASSES})
    text = path.read_text()
    assert edit[0] in text
    path.write_text(text.replace(edit[0], edit[1], 1))
    with pytest.raises(BadInputError, match="checksum does not match.*verify=False"):
        load_recipe(path)
    assert isinstance(load_recipe(path, verify=False), Augmenter)


def test_plain_recipe_needs_no_checksum(aug):
    assert aug.classes is None


@pytest.mark.parametrize("shape", [(24, 32), (24, 32, 1)], ids=["2d", "1-channel"])
def test_grey_image_comes_back_in_its_shape(aug, image, shape):
    grey = np.ascontiguousarray(image[..., 0]).reshape(shape)
    out = aug(grey, rng=np.random.default_rng(4))
    assert out.shape == shape and out.dtype == np.uint8
    # The same draws as on the image with its grey in all three channels.
    rgb = aug(np.repeat(grey.reshape(24, 32, 1), 3, axis=-1), rng=np.random.default_rng(4))
    assert np.array_equal(out.reshape(24, 32), rgb[..., 0])


def test_grey_pil_image_stays_grey(aug, image):
    out = aug(Image.fromarray(image[..., 0]), rng=np.random.default_rng(0))
    assert isinstance(out, Image.Image) and out.mode == "L" and out.size == (32, 24)


@pytest.mark.parametrize("shape", [(5, 24, 32, 3), (5, 24, 32, 1), (5, 24, 32)], ids=["rgb", "1-channel", "2d"])
def test_apply_batch_equals_apply_in_turn(aug, shape):
    images = np.random.default_rng(6).integers(0, 256, size=shape, dtype=np.uint8)
    labels = ["left", "other", "right", None, "left"]
    batch, new_labels = aug.apply_batch(images, labels, np.random.default_rng(9))
    gen = np.random.default_rng(9)
    expected = [aug.apply(im, lab, gen) for im, lab in zip(images, labels)]
    assert batch.shape == shape and batch.dtype == np.uint8
    assert all(np.array_equal(b, e[0]) for b, e in zip(batch, expected))
    assert new_labels == [e[1] for e in expected] == ["right", "other", "left", None, "right"]


def test_apply_batch_refuses_mismatched_labels(aug):
    with pytest.raises(ValueError, match="one label per image: 2 images, 3 labels"):
        aug.apply_batch(np.zeros((2, 8, 8, 3), np.uint8), ["a", "b", "c"], np.random.default_rng(0))


def test_augmenter_and_apply_recipe_give_the_same_bytes(aug, image):
    from augplan.augment.transforms import apply_recipe

    ours, label = aug.apply(image, "left", np.random.default_rng(12))
    theirs, their_label = apply_recipe(image, aug.recipe, np.random.default_rng(12), "left")
    assert ours.tobytes() == theirs.tobytes() and label == their_label


def test_apply_batch_maps_integer_labels_through_classes(image):
    aug = Augmenter(_always_flip(), classes=CLASSES)
    batch = np.stack([image, image, image])
    out, labels = aug.apply_batch(batch, np.array([0, 1, 2]), np.random.default_rng(0))
    assert labels == [1, 0, 2]
    assert np.array_equal(out[0], image[:, ::-1]) and np.array_equal(out[2], image)
