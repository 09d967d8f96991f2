"""Property test: any recipe text either parses to a Recipe or raises RecipeError.

Documents are generated as YAML text from mostly-plausible recipes with
corruptions mixed in (misspelled ops and fields, NaN, text, nested lists,
negative numbers, booleans), plus text-level damage (tabs, truncation,
duplicated lines). Every recipe that parses must round-trip, pass the shipped
JSON Schema, and run through ``transforms.apply_recipe`` on a small image.
"""

import json

import jsonschema
import numpy as np
import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from augplan.recipe import parse as recipe_module
from augplan.augment import transforms
from augplan.recipe.parse import (
    OP_FIELDS,
    RECIPE_SCHEMA_PATH,
    Recipe,
    RecipeError,
    dump_recipe,
    parse_recipe,
)

CLASSES = ["cat", "dog", "0", "left"]
OPS = list(OP_FIELDS)
MISSPELLED_OPS = ["rotat", "Flip", "zooom", "bluur", "hue ", "", "noise2"]
SCHEMA = jsonschema.Draft202012Validator(
    json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8")))

odd_scalars = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(-10**6, 10**6),
    st.booleans(),
    st.text(max_size=6),
    st.none(),
)
odd_values = st.recursive(
    odd_scalars,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=4), inner,
                                                                max_size=2),
    max_leaves=6,
)
class_lists = st.lists(st.sampled_from(CLASSES), min_size=1, max_size=3, unique=True)


def _pair(low, high):
    """A [low, high] pair or a scalar inside the bounds."""
    number = st.floats(min_value=low, max_value=high, allow_nan=False)
    return number | st.tuples(number, number).map(lambda t: sorted(t))


# Valid magnitude ranges per op (kept small so blur and zoom stay fast).
GOOD_RANGES = {
    "rotate": _pair(-400, 400), "hue": _pair(-400, 400),
    "zoom": _pair(0.25, 4), "brightness": _pair(0.01, 10), "contrast": _pair(0.01, 10),
    "saturation": _pair(0, 10), "shift": _pair(-1, 1),
    "blur": _pair(0, 3), "noise": _pair(0, 1),
}
# Near misses: out of bounds, inverted, three numbers.
NEAR_MISSES = st.one_of(
    st.floats(min_value=-5, max_value=-0.001),
    st.tuples(st.floats(0.5, 2), st.floats(2.5, 5)).map(lambda t: [t[1], t[0]]),
    st.lists(st.floats(0, 1), min_size=3, max_size=3),
    st.just([]),
)


@st.composite
def transform_documents(draw, corrupt):
    def pick(good, bad=odd_values):
        # In a corrupt document about one field in four goes wrong.
        if corrupt and draw(st.integers(0, 3)) == 0:
            return draw(bad)
        return draw(good)

    op = pick(st.sampled_from(OPS), st.sampled_from(MISSPELLED_OPS) | odd_values)
    step = {"op": op}
    known = isinstance(op, str) and op in OP_FIELDS
    field = OP_FIELDS[op][0] if known else "factor"
    if corrupt and draw(st.integers(0, 9)) == 0:
        field = field[:-1] or "x"  # a misspelled field name
    if field == "axis":
        if draw(st.booleans()):
            step[field] = pick(st.sampled_from(["horizontal", "vertical"]))
    elif not corrupt or draw(st.integers(0, 9)):  # sometimes missing when corrupt
        step[field] = pick(GOOD_RANGES[op] if known and op != "flip" else _pair(0, 1), NEAR_MISSES | odd_values)
    if draw(st.booleans()):
        step["probability"] = pick(st.floats(0, 1), st.floats(-0.5, 1.5) | odd_values)
    scope = draw(st.sampled_from(["none", "none", "only", "except"]
                                 + (["both"] if corrupt else [])))
    if scope in ("only", "both"):
        step["only"] = pick(class_lists)
    if scope in ("except", "both"):
        step["except"] = pick(class_lists)
    if draw(st.integers(0, 3)) == 0:
        step["relabel"] = pick(st.dictionaries(st.sampled_from(CLASSES),
                                               st.sampled_from(CLASSES), min_size=1, max_size=2))
    return step


@st.composite
def recipe_texts(draw):
    corrupt = draw(st.booleans())

    def pick(good):
        if corrupt and draw(st.integers(0, 3)) == 0:
            return draw(odd_values)
        return draw(good)

    doc = {"name": pick(st.sampled_from(["fuzz", "a b", "yes", "0"]))}
    for key, good in (("seed", st.integers(0, 2**32)), ("copies", st.integers(1, 8)),
                      ("fill", st.sampled_from(["reflect", "constant", "edge"]))):
        if draw(st.booleans()):
            doc[key] = pick(good)
    doc["transforms"] = pick(st.lists(transform_documents(corrupt), max_size=4))
    if corrupt and draw(st.integers(0, 9)) == 0:
        doc[draw(st.sampled_from(["nme", "seeds", "extra"]))] = 1
    text = yaml.safe_dump(doc, sort_keys=False, allow_unicode=True)
    damage = draw(st.sampled_from(["none"] * 6 + (["truncate", "tab", "duplicate-line"]
                                                  if corrupt else [])))
    lines = text.splitlines(keepends=True)
    if damage == "truncate":
        text = text[:draw(st.integers(0, len(text)))]
    elif damage == "tab":
        index = draw(st.integers(0, len(lines) - 1))
        lines[index] = "\t" + lines[index]
        text = "".join(lines)
    elif damage == "duplicate-line":
        index = draw(st.integers(0, len(lines) - 1))
        text = "".join(lines[:index + 1] + lines[index:])
    return text


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=recipe_texts(), image_seed=st.integers(0, 2**16),
       label=st.sampled_from(CLASSES + [None]))
def test_any_text_gives_recipe_or_recipe_error(text, image_seed, label):
    try:
        recipe = parse_recipe(text, source="fuzz.yaml")
    except RecipeError as error:
        event("refused")
        assert str(error).startswith("fuzz.yaml")
        return
    assert isinstance(recipe, Recipe)
    event(f"accepted with {min(len(recipe.transforms), 2)}{'+' * (len(recipe.transforms) >= 2)}"
          " transforms")
    # What the reader accepts, the shipped schema accepts too.
    document = yaml.load(text, Loader=recipe_module._RecipeLoader)
    assert not [e.message for e in SCHEMA.iter_errors(document)]
    assert parse_recipe(dump_recipe(recipe)) == recipe

    rng = np.random.default_rng(image_seed)
    image = rng.integers(0, 256, size=(16, 16, 3), dtype=np.uint8)
    out, new_label = transforms.apply_recipe(image, recipe, rng, label)
    assert out.shape == (16, 16, 3) and out.dtype == np.uint8
    assert new_label is None or isinstance(new_label, str)


@settings(max_examples=150, deadline=None)
@given(text=st.text(max_size=200) | st.binary(max_size=200))
def test_arbitrary_text_or_bytes_gives_recipe_or_recipe_error(text):
    try:
        recipe = parse_recipe(text, source="noise.yaml")
    except RecipeError as error:
        assert str(error).startswith("noise.yaml")
        return
    assert isinstance(recipe, Recipe) and recipe.name.strip()
