"""Draft recipes: ranges that reach the field's lighting; defaults without a field."""

import numpy as np
import pytest

from augplan.coverage.draft import DEFAULTS, draft_ranges
from augplan.measure.factors import brightness
from augplan.augment.transforms import OPS


def _tiles(level, n, rng):
    """Grey tiles with a darker square; ``level`` is the sRGB code of the background."""
    images = np.full((n, 32, 32, 3), level, dtype=np.uint8)
    images[:, 10:22, 10:22] = level // 2
    noise = rng.integers(-3, 4, size=images.shape)
    return np.clip(images.astype(int) + noise, 0, 255).astype(np.uint8)


def test_without_field_the_defaults_are_proposed():
    rng = np.random.default_rng(0)
    assert draft_ranges(_tiles(180, 10, rng)) == DEFAULTS


def test_darker_field_gets_a_brightness_range_that_reaches_it():
    rng = np.random.default_rng(1)
    train, field = _tiles(180, 20, rng), _tiles(110, 20, rng)
    low, high = draft_ranges(train, field)["brightness"]
    assert low < DEFAULTS["brightness"][0] and high >= 1.0
    # Applying the proposed darkest exposure to a training image must reach the
    # field's darker lighting, measured by the same BT.709 luminance factor.
    darkened = OPS["brightness"].function(train[0], {"factor": low}, np.random.default_rng(0))
    assert brightness(darkened[None])[0] <= np.percentile(brightness(field), 5) * 1.05


def test_blurrier_field_proposes_blur():
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(2)
    train = _tiles(160, 10, rng)
    field = np.stack([gaussian_filter(img, sigma=(2, 2, 0)) for img in train])
    assert draft_ranges(train, field)["blur"] == (0.0, 1.0)


@pytest.mark.parametrize("op", ["rotate", "zoom", "shift", "brightness", "contrast"])
def test_every_range_contains_the_unchanged_image(op):
    rng = np.random.default_rng(3)
    ranges = draft_ranges(_tiles(150, 10, rng), _tiles(90, 10, rng))
    identity = OPS[op].identity
    assert ranges[op][0] <= identity <= ranges[op][1]


def _camera_crops():
    # scikit-image's "camera" sample, four 64x64 crops as RGB.
    from skimage import data

    camera = data.camera()
    crops = [camera[r:r + 64, c:c + 64] for r, c in ((100, 100), (200, 250), (300, 150), (150, 300))]
    return np.stack([np.repeat(crop[..., None], 3, axis=2) for crop in crops])


def test_a_field_that_differs_only_in_exposure_gets_no_blur():
    train = _camera_crops()
    # Exposure alone: linear light times 0.25 (two stops darker), no blur.
    field = np.stack([OPS["brightness"].function(image, {"factor": 0.25}, np.random.default_rng(0))
                      for image in train])
    assert "blur" not in draft_ranges(train, field)


def test_normalised_sharpness_ignores_exposure_and_falls_with_blur():
    from scipy.ndimage import gaussian_filter, laplace

    from augplan.imaging.colour import relative_luminance
    from augplan.measure.factors import normalised_sharpness

    train = _camera_crops()
    # Reference: scipy's Laplacian of the luminance scaled to unit mean.
    lum = relative_luminance(train).astype(np.float64)
    expected = [np.var(laplace(y / y.mean(), mode="reflect")) for y in lum]
    # float32 luminance into a float32 Laplacian: about 1e-6 relative error.
    assert normalised_sharpness(train) == pytest.approx(expected, rel=1e-4)
    darker = np.stack([OPS["brightness"].function(i, {"factor": 0.5}, None) for i in train])
    # 8-bit rounding of the darker image adds a little Laplacian variance.
    assert normalised_sharpness(darker) == pytest.approx(normalised_sharpness(train), rel=0.1)
    blurred = np.stack([gaussian_filter(i, sigma=(1.5, 1.5, 0)) for i in train])
    assert np.all(normalised_sharpness(blurred) < 0.5 * normalised_sharpness(train))


def test_draft_takes_workers_and_drafts_the_same_recipe(tmp_path, run_cli):
    # scikit-learn's digits with a labelled field split.
    from conftest import write_digits_dataset

    data = write_digits_dataset(tmp_path / "DATA", {"train": 3, "val": 1, "field": 2}, size=16)
    drafts = []
    for workers in ("1", "2"):
        out = tmp_path / f"draft-{workers}.yaml"
        result = run_cli("draft", data, "-o", out, "--workers", workers, "--quiet")
        assert result.code == 0, result.err
        drafts.append(out.read_text(encoding="utf-8"))
    assert drafts[0] == drafts[1] and "the field sample (20 images)" in drafts[0]
