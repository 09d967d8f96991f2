"""The one batch validator and the one float -> uint8 rounding (augplan.imaging.colour)."""

import numpy as np
import pytest

from augplan.imaging.colour import check_rgb_batch, unit_to_uint8


def test_a_uint8_rgb_batch_passes_unchanged():
    images = np.zeros((2, 4, 5, 3), np.uint8)
    assert check_rgb_batch(images) is images


@pytest.mark.parametrize("bad, needle", [
    (np.zeros((2, 4, 4, 3), np.float32), "np.round(image * 255)"),   # a float batch is told how to convert
    (np.zeros((2, 4, 4), np.uint8), "(N, H, W, 3)"),
    (np.zeros((4, 4, 3), np.uint8), "(N, H, W, 3)"),
    ([[[[0, 0, 0]]]], "list"),
])
def test_anything_else_is_refused_with_what_was_expected(bad, needle):
    with pytest.raises(ValueError, match="uint8 batch of RGB images") as error:
        check_rgb_batch(bad)
    assert needle in str(error.value)


def test_a_measurement_floor_on_the_side_is_enforced():
    with pytest.raises(ValueError, match="at least 8 x 8"):
        check_rgb_batch(np.zeros((1, 7, 9, 3), np.uint8), min_side=8)


def test_rounding_matches_pythons_round_half_even_and_clips():
    # Python's round() rounds halves to even (the language reference, "round");
    # exact halves 0.5/255 and 1.5/255 are representable closely enough that
    # 255 * v lands on .5 in float64.
    values = np.array([0.0, 0.5 / 255, 1.5 / 255, 0.25, 0.999, 1.0, -0.2, 1.3])
    expected = [min(255, max(0, round(v * 255))) for v in values.tolist()]
    assert unit_to_uint8(values).tolist() == expected
    assert unit_to_uint8(values).dtype == np.uint8
