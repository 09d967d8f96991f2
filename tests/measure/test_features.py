import colorsys
import pickle

import numpy as np
import pytest
from skimage import data, feature, transform

from augplan.imaging.colour import relative_luminance
from augplan.measure.features import (
    FEATURE_BLOCKS,
    FEATURE_LENGTH,
    MIN_IMAGE_SIDE,
    image_features,
)
from augplan.measure.model import FeatureModel


def _sample(name, side):
    """A scikit-image sample picture downsized to side x side uint8 RGB."""
    picture = getattr(data, name)()
    small = transform.resize(picture, (side, side), anti_aliasing=True)
    return np.clip(np.round(small * 255), 0, 255).astype(np.uint8)


def _uniform(rgb, side=32):
    return np.broadcast_to(np.array(rgb, dtype=np.uint8), (side, side, 3)).copy()


@pytest.fixture(scope="module")
def digits():
    """scikit-learn's bundled digits (UCI optical recognition of handwritten
    digits), 600 of them, upsampled 8x8 -> 32x32 and grey -> RGB uint8."""
    from sklearn.datasets import load_digits

    bunch = load_digits()
    keep = np.random.default_rng(0).permutation(len(bunch.images))[:600]
    grey = np.kron(bunch.images[keep], np.ones((4, 4))) * (255.0 / 16.0)
    images = np.repeat(np.clip(np.round(grey), 0, 255).astype(np.uint8)[..., None], 3, axis=-1)
    return images, bunch.target[keep]


@pytest.fixture(scope="module")
def digit_features(digits):
    return image_features(digits[0])


# --------------------------------------------------------------------------
# image_features


def test_layout_and_dtype():
    images = np.stack([_sample("astronaut", 64), _sample("chelsea", 64)])
    features = image_features(images)
    assert features.shape == (2, FEATURE_LENGTH)
    assert features.dtype == np.float32
    assert np.isfinite(features).all()
    blocks = sorted(FEATURE_BLOCKS.values(), key=lambda s: s.start)
    assert blocks[0].start == 0 and blocks[-1].stop == FEATURE_LENGTH
    assert all(a.stop == b.start for a, b in zip(blocks, blocks[1:]))
    assert image_features(images[:0]).shape == (0, FEATURE_LENGTH)


# Features are float32 values of order 1 (eps 1.2e-7) built from sums over up
# to a few thousand pixels, whose order the BLAS kernel picks by batch shape;
# the rounding of such sums grows like sqrt(n) * eps, so 1e-5 (~80 eps).
FLOAT32_FEATURE_ATOL = 1e-5


def test_batch_rows_do_not_depend_on_batch_company():
    images = np.stack([_sample("astronaut", 40), _sample("coffee", 40), _sample("chelsea", 40)])
    together = image_features(images)
    alone = np.concatenate([image_features(images[i:i + 1]) for i in range(3)])
    np.testing.assert_allclose(together, alone, rtol=0, atol=FLOAT32_FEATURE_ATOL)


@pytest.mark.parametrize(
    "images",
    [
        np.zeros((32, 32, 3), np.uint8),
        np.zeros((2, 32, 32, 3), np.float32),
        np.zeros((2, 32, 32, 4), np.uint8),
        np.zeros((2, 32, 32), np.uint8),
        np.zeros((2, MIN_IMAGE_SIDE - 1, 32, 3), np.uint8),
    ],
    ids=["single-image", "float", "four-channels", "grey", "too-small"],
)
def test_rejects_bad_batches(images):
    with pytest.raises(ValueError, match="images must"):
        image_features(images)


@pytest.mark.parametrize("name", ["astronaut", "chelsea"])
def test_orientation_block_agrees_with_scikit_image_hog(name):
    # Reference: skimage.feature.hog with the same layout (9 bins, 8-px cells
    # on 48 x 48 = 6 x 6 cells, 2 x 2 blocks, L2-Hys) on the same square-root
    # luminance. Not identical by design: skimage votes each pixel into one
    # bin and sets border gradients to zero, we split votes between the two
    # nearest bins (Dalal & Triggs 2005) and use one-sided border
    # differences, so we require a high correlation, not equality.
    image = _sample(name, 48)
    ours = image_features(image[None])[0, FEATURE_BLOCKS["orientation"]]
    reference = feature.hog(
        np.sqrt(relative_luminance(image)).astype(np.float64), orientations=9,
        pixels_per_cell=(8, 8), cells_per_block=(2, 2), block_norm="L2-Hys",
    )
    assert ours.shape == reference.shape
    assert np.corrcoef(ours, reference)[0, 1] > 0.9


def test_thumbnail_matches_scikit_image_local_mean():
    # Reference: skimage.transform.downscale_local_mean, 64 -> 8 per side.
    image = _sample("coffee", 64)
    ours = image_features(image[None])[0, FEATURE_BLOCKS["thumbnail"]].reshape(8, 8, 3)
    reference = transform.downscale_local_mean(image.astype(np.float64), (8, 8, 1)) / 255.0
    np.testing.assert_allclose(ours, reference, atol=FLOAT32_FEATURE_ATOL)


def test_horizontal_flip_changes_an_asymmetric_image():
    image = _sample("astronaut", 48)
    original, flipped = image_features(np.stack([image, image[:, ::-1]]))
    orientation = FEATURE_BLOCKS["orientation"]
    assert np.abs(original[orientation] - flipped[orientation]).max() > 0.1


def test_horizontal_flip_mirrors_the_orientation_grid():
    # Ground truth by geometry: a left-right flip mirrors the 5 x 5 block
    # grid, swaps left and right cells inside a block, and maps orientation
    # theta to pi - theta, i.e. bin k to bin 8 - k; colour histograms stay.
    image = _sample("astronaut", 48)
    original, flipped = image_features(np.stack([image, image[:, ::-1]]))
    grid = original[FEATURE_BLOCKS["orientation"]].reshape(5, 5, 2, 2, 9)
    expected = grid[:, ::-1, :, ::-1, ::-1].ravel()
    np.testing.assert_allclose(flipped[FEATURE_BLOCKS["orientation"]], expected, atol=FLOAT32_FEATURE_ATOL)
    thumb = original[FEATURE_BLOCKS["thumbnail"]].reshape(8, 8, 3)[:, ::-1].ravel()
    np.testing.assert_allclose(flipped[FEATURE_BLOCKS["thumbnail"]], thumb, atol=FLOAT32_FEATURE_ATOL)
    for name in ("hue", "saturation", "value"):
        np.testing.assert_allclose(flipped[FEATURE_BLOCKS[name]], original[FEATURE_BLOCKS[name]],
                                   atol=FLOAT32_FEATURE_ATOL)


def test_horizontal_flip_keeps_a_symmetric_image():
    # A synthetic left-right-symmetric image: a centred cross on a gradient.
    side = 48
    y, x = np.mgrid[:side, :side]
    image = np.zeros((side, side, 3), np.uint8)
    image[..., 0] = (y * 5).astype(np.uint8)
    image[..., 2] = np.abs(x - (side - 1) / 2).astype(np.uint8) * 9
    image[20:28, 8:40] = (250, 200, 30)
    image[6:42, 21:27] = (250, 200, 30)
    assert np.array_equal(image, image[:, ::-1])
    original, flipped = image_features(np.stack([image, image[:, ::-1]]))
    np.testing.assert_array_equal(original, flipped)


@pytest.mark.parametrize(
    "rgb",
    [(255, 0, 0), (0, 255, 0), (0, 0, 255), (200, 150, 40), (30, 120, 200)],
    ids=["red", "green", "blue", "ochre", "steel"],
)
def test_hue_histogram_of_uniform_colour(rgb):
    # Reference hue and saturation: Python's colorsys (hexcone HSV). A
    # uniform image puts all its saturation-weighted mass on the two bins
    # whose centres ((k + 0.5) / 12 of a turn) straddle its hue.
    hue, saturation, _ = colorsys.rgb_to_hsv(*(c / 255 for c in rgb))
    position = hue * 12 - 0.5
    lower = int(np.floor(position))
    upper_share = position - lower
    expected = np.zeros(12)
    expected[lower % 12] += saturation * (1 - upper_share)
    expected[(lower + 1) % 12] += saturation * upper_share
    features = image_features(_uniform(rgb)[None])[0]
    np.testing.assert_allclose(features[FEATURE_BLOCKS["hue"]], expected, atol=FLOAT32_FEATURE_ATOL)


def test_red_and_green_differ_and_grey_has_no_hue():
    red, green, grey = image_features(np.stack([_uniform((220, 30, 30)), _uniform((30, 220, 30)),
                                                _uniform((128, 128, 128))]))
    assert np.abs(red - green)[FEATURE_BLOCKS["hue"]].sum() > 1.0
    assert np.abs(red - green)[FEATURE_BLOCKS["thumbnail"]].max() > 0.5
    assert np.all(grey[FEATURE_BLOCKS["hue"]] == 0)


@pytest.mark.parametrize(
    "level,bin_index", [(0, 0), (255, 3)], ids=["black", "white"]
)
def test_value_histogram_ends(level, bin_index):
    features = image_features(_uniform((level, level, level))[None])[0]
    expected = np.zeros(4)
    expected[bin_index] = 1.0
    np.testing.assert_allclose(features[FEATURE_BLOCKS["value"]], expected, atol=FLOAT32_FEATURE_ATOL)


def _disc(centre, radius, side=64):
    y, x = np.mgrid[:side, :side]
    image = np.full((side, side, 3), 20, np.uint8)
    image[(y - centre[0]) ** 2 + (x - centre[1]) ** 2 <= radius ** 2] = (230, 230, 230)
    return image


@pytest.mark.parametrize(
    "first,second",
    [
        (_disc((16, 16), 8), _disc((48, 48), 8)),
        (_disc((32, 32), 6), _disc((32, 32), 20)),
    ],
    ids=["position", "scale"],
)
def test_responds_to_position_and_scale(first, second):
    a, b = image_features(np.stack([first, second]))
    for name in ("orientation", "thumbnail"):
        assert np.abs(a[FEATURE_BLOCKS[name]] - b[FEATURE_BLOCKS[name]]).max() > 0.1


def test_features_are_deterministic():
    images = np.stack([_sample("astronaut", 64), _sample("coffee", 64)])
    assert image_features(images).tobytes() == image_features(images.copy()).tobytes()


# --------------------------------------------------------------------------
# FeatureModel


def test_default_model_learns_digits(digits, digit_features):
    images, labels = digits
    model = FeatureModel().fit_features(digit_features, labels)
    # Measured 0.967 on these 600 images (0.989 on all 1797); the floor
    # leaves room for platform differences.
    assert model.cv_accuracy_ > 0.9
    assert model.chance_ == pytest.approx(np.bincount(labels).max() / labels.size)
    assert model.cv_accuracy_ci_[0] > model.chance_ + 0.5
    assert not model.weak_
    assert list(model.classes_) == list(range(10))
    probabilities = model.predict_proba_features(digit_features[:5])
    assert probabilities.shape == (5, 10)
    # float32 probabilities of a handful of classes: a few eps (1.2e-7) from 1.
    np.testing.assert_allclose(probabilities.sum(axis=1), 1.0, rtol=0, atol=1e-6)
    np.testing.assert_array_equal(model.predict(images[:20]), model.predict_features(digit_features[:20]))


def test_single_precision_solver_predicts_like_double(digits, digit_features):
    # scikit-learn's digits (UCI optdigits): trained on 400 images, the
    # float32 solver must label the other 200 as the float64 one does on at
    # least 99% of them (measured: all); a wrong label order or scaling
    # would disagree on most.
    _, labels = digits
    train, held_out = slice(0, 400), slice(400, 600)
    double = FeatureModel(cross_validate=False).fit_features(digit_features[train], labels[train])
    single = FeatureModel(cross_validate=False, solver_dtype=np.float32).fit_features(digit_features[train],
                                                                                      labels[train])
    assert single.estimator_.coef_.dtype == np.float32
    agreement = np.mean(single.predict_features(digit_features[held_out])
                        == double.predict_features(digit_features[held_out]))
    assert agreement >= 0.99


def test_solver_dtype_must_be_a_float_type(digit_features):
    with pytest.raises(ValueError, match="solver_dtype"):
        FeatureModel(solver_dtype=np.int32).fit_features(digit_features[:40], np.arange(40) % 2)


def test_weak_on_random_labels(digit_features):
    labels = np.random.default_rng(1).integers(0, 2, size=200)
    model = FeatureModel().fit_features(digit_features[:200], labels)
    assert model.weak_
    assert model.cv_accuracy_ < model.chance_ + 0.5 * (1 - model.chance_)


def test_replaced_estimator(digits, digit_features):
    from sklearn.neighbors import KNeighborsClassifier

    _, labels = digits
    model = FeatureModel(estimator=KNeighborsClassifier(n_neighbors=3)).fit_features(digit_features, labels)
    assert isinstance(model.estimator_, KNeighborsClassifier)
    assert model.cv_accuracy_ > 0.8
    assert model.predict_proba_features(digit_features[:3]).shape == (3, 10)


def _mean_colour(images):
    """A replacement feature function: the mean RGB of each image."""
    return np.asarray(images, dtype=np.float64).mean(axis=(1, 2))


def test_replaced_feature_function():
    rng = np.random.default_rng(2)
    dark = rng.integers(0, 90, size=(20, 16, 16, 3), dtype=np.uint8)
    light = rng.integers(160, 256, size=(20, 16, 16, 3), dtype=np.uint8)
    images = np.concatenate([dark, light])
    labels = np.array(["dark"] * 20 + ["light"] * 20)
    model = FeatureModel(feature_fn=_mean_colour).fit(images, labels)
    assert model.featurize(images).shape == (40, 3)
    assert model.cv_accuracy_ == 1.0 and not model.weak_
    assert list(model.predict(images[[0, 25]])) == ["dark", "light"]


def test_model_is_deterministic_and_picklable(digits, digit_features):
    images, labels = digits
    first = FeatureModel(random_state=3).fit_features(digit_features[:200], labels[:200])
    second = FeatureModel(random_state=3).fit_features(digit_features[:200], labels[:200])
    assert first.cv_accuracy_ == second.cv_accuracy_
    np.testing.assert_array_equal(first.cv_predictions_, second.cv_predictions_)
    probabilities = first.predict_proba(images[300:340])
    assert probabilities.tobytes() == second.predict_proba(images[300:340]).tobytes()
    restored = pickle.loads(pickle.dumps(first))
    assert restored.predict_proba(images[300:340]).tobytes() == probabilities.tobytes()
    assert restored.weak_ == first.weak_ and restored.cv_accuracy_ == first.cv_accuracy_


def test_model_input_errors(digit_features):
    model = FeatureModel()
    with pytest.raises(ValueError, match="not fitted"):
        model.predict_features(digit_features[:2])
    with pytest.raises(ValueError, match="two classes"):
        model.fit_features(digit_features[:4], [1, 1, 1, 1])
    with pytest.raises(ValueError, match="one entry per feature row"):
        model.fit_features(digit_features[:4], [0, 1])
    model.fit_features(digit_features[:40], np.arange(40) % 2)
    with pytest.raises(ValueError, match="features must have shape"):
        model.scaled(digit_features[:2, :10])


def test_single_image_class_cannot_be_cross_validated(digit_features):
    labels = np.array([0] * 19 + [1])
    model = FeatureModel().fit_features(digit_features[:20], labels)
    assert np.isnan(model.cv_accuracy_) and model.weak_
    assert model.predict_features(digit_features[:2]).shape == (2,)


# FeatureModel follows scikit-learn's estimator contract (scikit-learn's
# developer guide, "Rolling your own estimator"), checked with scikit-learn's own tools.


def test_model_parameters_round_trip_through_get_params_and_clone():
    from sklearn.base import clone
    from sklearn.neighbors import KNeighborsClassifier

    model = FeatureModel(estimator=KNeighborsClassifier(n_neighbors=3), random_state=7, cross_validate=False,
                         solver_dtype=np.float32)
    params = model.get_params(deep=False)
    assert set(params) == {"feature_fn", "estimator", "random_state", "cross_validate", "solver_dtype"}
    copy = clone(model)
    assert copy is not model and copy.get_params(deep=False)["random_state"] == 7
    assert copy.estimator is not model.estimator and copy.estimator.get_params() == model.estimator.get_params()
    assert copy.set_params(random_state=9).random_state == 9 and model.random_state == 7


def test_unfitted_model_raises_not_fitted_error(digit_features):
    from sklearn.exceptions import NotFittedError

    with pytest.raises(NotFittedError):
        FeatureModel().predict_features(digit_features[:2])


def test_clone_of_a_fitted_model_is_unfitted(digit_features):
    from sklearn.base import clone
    from sklearn.exceptions import NotFittedError

    fitted = FeatureModel().fit_features(digit_features[:40], np.arange(40) % 2)
    with pytest.raises(NotFittedError):
        clone(fitted).predict_features(digit_features[:2])


def test_random_state_accepts_what_check_random_state_accepts(digit_features, digits):
    # A fresh RandomState(3) drives the one fold shuffle exactly as the seed 3 does.
    _, labels = digits
    by_seed = FeatureModel(random_state=3).fit_features(digit_features[:200], labels[:200])
    by_generator = FeatureModel(random_state=np.random.RandomState(3)).fit_features(digit_features[:200],
                                                                                     labels[:200])
    np.testing.assert_array_equal(by_seed.cv_predictions_, by_generator.cv_predictions_)
    with pytest.raises(ValueError):
        FeatureModel(random_state="three").fit_features(digit_features[:40], np.arange(40) % 2)


def test_score_is_accuracy_on_images(digits):
    # ClassifierMixin.score: mean accuracy of predict on the images themselves.
    images, labels = digits
    model = FeatureModel().fit(images[:300], labels[:300])
    expected = np.mean(model.predict(images[300:400]) == labels[300:400])
    assert model.score(images[300:400], labels[300:400]) == pytest.approx(expected)
