"""Examples in the docstrings run as written (standard library doctest)."""

import doctest
import importlib

import pytest

MODULES = ["augplan.augment.augmenter", "augplan.measure.stats", "augplan.measure.features"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    result = doctest.testmod(importlib.import_module(name))
    assert result.attempted > 0 and result.failed == 0
