"""augplan.seeding: the one seeding convention."""

import numpy as np
import pytest

from augplan.seeding import keyed_generator, require_generator, stream_root


def test_stream_root_is_reproducible_and_advances_the_generator():
    first, second = np.random.default_rng(3), np.random.default_rng(3)
    assert stream_root(first) == stream_root(second)
    assert stream_root(first) != stream_root(np.random.default_rng(3))  # `first` moved on


@pytest.mark.parametrize("key_a, key_b", [((0,), (1,)), ((1, 2), (2, 1)), ((5,), (5, 0))])
def test_keyed_streams_differ_by_key(key_a, key_b):
    a = keyed_generator(7, *key_a).integers(2**32, size=8)
    b = keyed_generator(7, *key_b).integers(2**32, size=8)
    assert not np.array_equal(a, b)


def test_keyed_stream_is_the_same_wherever_it_is_made():
    assert np.array_equal(keyed_generator(11, 3, 4).random(5), keyed_generator(11, 3, 4).random(5))


@pytest.mark.parametrize("value", [0, None, np.random.RandomState(0)])
def test_require_generator_names_what_came(value):
    with pytest.raises(TypeError, match=type(value).__name__):
        require_generator(value)
