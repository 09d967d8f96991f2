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
