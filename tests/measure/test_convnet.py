"""The small network's input statistics (augplan.measure.convnet)."""

import numpy as np
import pytest

pytest.importorskip("torch")

from augplan.measure.convnet import _channel_statistics  # noqa: E402


@pytest.mark.parametrize("shape", [(7, 5, 4, 3), (3, 9, 9, 1)])
def test_channel_statistics_match_numpy_on_the_float_copy(shape):
    # Reference: numpy's own mean and (population) std of the float64 copy the
    # statistics avoid making. Both sum the same 256 exact values in float64,
    # in different orders: agreement to 1e-12 relative is float64 rounding.
    images = np.random.default_rng(3).integers(0, 256, size=shape, dtype=np.uint8)
    pixels = images.reshape(-1, shape[-1]).astype(np.float64) / 255.0
    mean, std = _channel_statistics(images)
    np.testing.assert_allclose(mean, pixels.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(std, pixels.std(axis=0), rtol=1e-12)


def test_channel_statistics_of_a_flat_channel_are_its_value_and_zero():
    images = np.full((2, 4, 4, 3), 51, dtype=np.uint8)
    mean, std = _channel_statistics(images)
    # 51 / 255 = 0.2 exactly in decimal; float64 division is correctly rounded.
    np.testing.assert_array_equal(mean, np.full(3, 51 / 255.0))
    np.testing.assert_array_equal(std, np.zeros(3))
