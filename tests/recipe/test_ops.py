"""The op table (augplan.recipe.ops) is the one home of each op's facts.

The shipped JSON Schema of the recipe format and the transform engine's op
specs must say what the table says.
"""

import json

import pytest

from augplan.augment.transforms import FILLS as BORDERS
from augplan.augment.transforms import OPS
from augplan.recipe.ops import AXES, FILLS, OP_TABLE
from augplan.recipe.parse import RECIPE_SCHEMA_PATH


@pytest.fixture(scope="module")
def schema():
    return json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))


def test_schema_lists_the_tables_ops_in_order(schema):
    assert schema["$defs"]["transform"]["properties"]["op"]["enum"] == list(OP_TABLE)


@pytest.mark.parametrize("op", [name for name, rule in OP_TABLE.items() if rule.magnitude])
def test_schema_range_of_each_op_is_the_tables_bound(schema, op):
    rule = OP_TABLE[op]
    properties = schema["$defs"][f"op_{op}"]["properties"]
    assert properties[rule.magnitude] == rule.range_schema()
    assert schema["$defs"][f"op_{op}"]["required"] == ["op", rule.magnitude]


def test_schema_fills_and_axes_are_the_tables(schema):
    assert schema["properties"]["fill"]["enum"] == list(FILLS)
    assert schema["properties"]["fill"]["default"] == FILLS[0]
    axis = schema["$defs"]["op_flip"]["properties"]["axis"]
    assert axis["enum"] == list(AXES) and axis["default"] == AXES[0]


@pytest.mark.parametrize("op", list(OP_TABLE))
def test_engine_takes_each_ops_facts_from_the_table(op):
    rule, spec = OP_TABLE[op], OPS[op]
    assert (spec.magnitude, spec.identity, spec.log_scale, spec.geometric) == (
        rule.magnitude, rule.identity, rule.log_scale, rule.geometric)


def test_engine_has_a_border_for_every_fill():
    assert list(BORDERS) == list(FILLS)


@pytest.mark.parametrize("op", [name for name, rule in OP_TABLE.items() if rule.magnitude])
def test_identity_and_example_ends_are_admitted(op):
    rule = OP_TABLE[op]
    low, high = json.loads(rule.example)
    assert rule.bound.admits(low) and rule.bound.admits(high) and low <= high
    # The identity lies inside every bound (it is the unchanged image).
    assert rule.bound.admits(rule.identity)
