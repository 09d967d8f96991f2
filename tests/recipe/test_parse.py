"""Tests for augplan.recipe.parse: parsing, validation messages, round trip, hash, schema."""

import hashlib
import json
import pickle

import jsonschema
import pytest
import yaml

from augplan.recipe import parse as recipe_module
from augplan.errors import BadInputError
from augplan.recipe.parse import (
    MAX_RECIPE_BYTES,
    OP_FIELDS,
    RECIPE_SCHEMA_PATH,
    Recipe,
    RecipeError,
    Transform,
    dump_recipe,
    parse_recipe,
    read_recipe,
    recipe_hash,
    recipe_to_dict,
    write_recipe,
)


# A recipe that uses every op, with the comments a user would write (README, "Recipe format").
DESIGN_EXAMPLE = """\
name: tiles-draft            # required, used in reports
seed: 7                      # default 0
copies: 4                    # augmented copies per training image, default 4
fill: reflect                # reflect (default) | constant | edge, for geometric ops
transforms:                  # applied in order
  - op: flip
    axis: horizontal         # horizontal | vertical
    probability: 0.5         # every op takes it; default 1.0
  - op: rotate
    degrees: [-15, 15]       # uniform; positive = counterclockwise
  - op: zoom
    factor: [0.9, 1.2]       # >1 enlarges the content; output keeps its size
  - op: shift
    fraction: [-0.1, 0.1]    # of width and height
  - op: brightness
    factor: [0.6, 1.4]       # multiplies linear-light intensity (an exposure change)
  - op: contrast
    factor: [0.8, 1.2]
  - op: saturation
    factor: [0.7, 1.3]
  - op: hue
    degrees: [-10, 10]       # rotates the HSV hue angle; +120 takes red to green
  - op: blur
    sigma: [0, 1.5]          # Gaussian, pixels
  - op: noise
    sigma: [0, 0.03]         # Gaussian, fraction of full scale
  - op: flip
    axis: horizontal
    only: [chip-left, chip-right]      # class scope: apply only to these (or `except:`)
    relabel: {chip-left: chip-right, chip-right: chip-left}   # label follows the image
"""


def _schema_validator():
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    return jsonschema.Draft202012Validator(schema)


def _load_document(text):
    # The reader's own YAML loader, so the schema sees exactly what the
    # validator sees (for example 1e-3 read as a number).
    return yaml.load(text, Loader=recipe_module._RecipeLoader)


# --------------------------------------------------------------------------
# Parsing the design example
# --------------------------------------------------------------------------

def test_design_example_parses_with_lines_and_normalised_params(tmp_path):
    path = tmp_path / "recipe.yaml"
    path.write_text(DESIGN_EXAMPLE, encoding="utf-8")
    recipe = read_recipe(path)
    assert (recipe.name, recipe.seed, recipe.copies, recipe.fill) == ("tiles-draft", 7, 4, "reflect")
    assert recipe.source == str(path)
    assert [t.op for t in recipe.transforms] == [
        "flip", "rotate", "zoom", "shift", "brightness", "contrast", "saturation",
        "hue", "blur", "noise", "flip"]
    # Each transform's line is the line of its "- op:" item in the text above.
    expected_lines = [i + 1 for i, text in enumerate(DESIGN_EXAMPLE.splitlines())
                      if text.lstrip().startswith("- op:")]
    assert [t.line for t in recipe.transforms] == expected_lines
    first, rotate, last = recipe.transforms[0], recipe.transforms[1], recipe.transforms[-1]
    assert dict(first.params) == {"axis": "horizontal"} and first.probability == 0.5
    assert rotate.params["degrees"] == (-15.0, 15.0)
    assert all(isinstance(v, float) for v in rotate.params["degrees"])
    assert last.only == ("chip-left", "chip-right") and last.exclude is None
    assert dict(last.relabel) == {"chip-left": "chip-right", "chip-right": "chip-left"}


def test_defaults_and_flip_axis_default():
    recipe = parse_recipe("name: plain\ntransforms:\n  - op: flip\n")
    assert (recipe.seed, recipe.copies, recipe.fill) == (0, 4, "reflect")
    assert dict(recipe.transforms[0].params) == {"axis": "horizontal"}
    assert recipe.transforms[0].probability == 1.0
    assert parse_recipe("name: empty\n").transforms == ()
    assert parse_recipe("name: empty\ntransforms: []\n").transforms == ()


def test_exponent_without_dot_reads_as_number():
    # YAML 1.1 would read 1e-3 as text; people write it as a number.
    recipe = parse_recipe("name: n\ntransforms:\n  - op: noise\n    sigma: 1e-3\n")
    assert recipe.transforms[0].params["sigma"] == (0.001, 0.001)


def test_class_names_that_look_like_numbers_become_text():
    recipe = parse_recipe("name: d\ntransforms:\n  - op: flip\n    only: [0, 1]\n"
                          "    relabel: {0: 1}\n")
    assert recipe.transforms[0].only == ("0", "1")
    assert dict(recipe.transforms[0].relabel) == {"0": "1"}


# --------------------------------------------------------------------------
# Malformed recipes: each names the file, the line and the field
# --------------------------------------------------------------------------

MALFORMED = [
    pytest.param("name: x\ntransforms:\n  - op: flip\n  - op: rotate\n    degrees: ten\n",
                 ["recipe.yaml line 5", "'degrees' field of transform 2 (rotate)",
                  "must be a number or a [low, high] pair", "got 'ten'"], id="range-is-text"),
    pytest.param("name: x\ntransforms:\n  - op: rotat\n    degrees: 5\n",
                 ["recipe.yaml line 3", "unknown op 'rotat'", "did you mean 'rotate'?",
                  "Allowed: flip, rotate"], id="misspelled-op"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n    degree: 5\n",
                 ["recipe.yaml line 4", "unknown field 'degree'", "transform 1 (rotate)",
                  "did you mean 'degrees'?"], id="misspelled-field"),
    pytest.param("name: x\nseeds: 3\n",
                 ["recipe.yaml line 2", "unknown field 'seeds'", "did you mean 'seed'?"],
                 id="misspelled-top-level"),
    pytest.param("seed: 3\n", ["recipe.yaml line 1", "no 'name' field"], id="missing-name"),
    pytest.param("name: x\ntransforms:\n  - op: zoom\n    factor: [1.2, 0.9]\n",
                 ["recipe.yaml line 4", "'factor' field of transform 1 (zoom)",
                  "low <= high", "[1.2, 0.9]"], id="inverted-range"),
    pytest.param("name: x\ntransforms:\n  - op: blur\n    sigma: [0, 1, 2]\n",
                 ["recipe.yaml line 4", "'sigma' field of transform 1 (blur)",
                  "[low, high] pair", "[0, 1, 2]"], id="range-of-three"),
    pytest.param("name: x\ntransforms:\n  - op: blur\n    sigma: [[0, 1]]\n",
                 ["recipe.yaml line 4", "'sigma'", "[[0, 1]]"], id="nested-list"),
    pytest.param("name: x\ntransforms:\n  - op: brightness\n    factor: .nan\n",
                 ["recipe.yaml line 4", "'factor' field of transform 1 (brightness)",
                  "not a finite number"], id="nan"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n    degrees: [-.inf, 3]\n",
                 ["recipe.yaml line 4", "'degrees'", "-inf"], id="infinity"),
    pytest.param("name: x\ntransforms:\n  - op: contrast\n    factor: yes\n",
                 ["recipe.yaml line 4", "'factor' field of transform 1 (contrast)",
                  "yes/no value"], id="boolean-for-number"),
    pytest.param("name: x\ntransforms:\n  - op: zoom\n    factor: [0, 2]\n",
                 ["recipe.yaml line 4", "numbers between 0.1 and 10", "[0, 2]"], id="zoom-not-positive"),
    pytest.param("name: x\ntransforms:\n  - op: shift\n    fraction: [-1.5, 0.1]\n",
                 ["recipe.yaml line 4", "between -1 and 1"], id="shift-out-of-range"),
    pytest.param("name: x\ntransforms:\n  - op: noise\n    sigma: -0.1\n",
                 ["recipe.yaml line 4", "numbers between 0 and 1", "-0.1"], id="negative-sigma"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    probability: 1.5\n",
                 ["recipe.yaml line 4", "'probability' field of transform 1 (flip)",
                  "between 0 and 1", "1.5"], id="probability-above-one"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    axis: diagonal\n",
                 ["recipe.yaml line 4", "'axis'", "horizontal, vertical", "'diagonal'"],
                 id="unknown-axis"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    only: [a]\n    except: [b]\n",
                 ["recipe.yaml line 5", "transform 1 (flip)", "both 'only' and 'except'"],
                 id="only-and-except"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    relabel: [a, b]\n",
                 ["recipe.yaml line 4", "'relabel' field of transform 1 (flip)", "mapping"],
                 id="relabel-not-mapping"),
    pytest.param("name: x\nfill: wrap\n",
                 ["recipe.yaml line 2", "'fill'", "reflect, constant, edge", "'wrap'"],
                 id="unknown-fill"),
    pytest.param("name: x\ncopies: 0\n", ["recipe.yaml line 2", "'copies'", ">= 1"],
                 id="zero-copies"),
    pytest.param("name: x\nseed: -3\n", ["recipe.yaml line 2", "'seed'", ">= 0", "-3"],
                 id="negative-seed"),
    pytest.param("name: x\nseed: 1\nseed: 2\n",
                 ["recipe.yaml line 3", "'seed' appears twice", "first on line 2"],
                 id="duplicate-key"),
    pytest.param("name: x\ntransforms:\n  - op: blur\n    sigma: 1\n    sigma: 2\n",
                 ["recipe.yaml line 5", "'sigma' appears twice"], id="duplicate-field"),
    pytest.param("name: x\ntransforms:\n\t- op: flip\n", ["recipe.yaml line 3", "tab"],
                 id="tab-indent"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n", ["recipe.yaml line 3",
                 "transform 1 (rotate) has no 'degrees' field"], id="missing-magnitude"),
    pytest.param("name: x\ntransforms:\n  - rotate\n",
                 ["recipe.yaml line 3", "transform 1 must be a mapping", "'rotate'"],
                 id="transform-not-mapping"),
    pytest.param("name: x\ntransforms: {op: flip}\n",
                 ["recipe.yaml line 2", "'transforms' field must be a list"],
                 id="transforms-not-list"),
    pytest.param("name: ''\n", ["recipe.yaml line 1", "'name' field", "non-empty"],
                 id="empty-name"),
    pytest.param("- name: x\n", ["recipe.yaml line 1", "must be a mapping"], id="top-level-list"),
    pytest.param("name: x\nfill: &f reflect\ncopies: *f\n",
                 ["recipe.yaml line 3", "alias '*f'"], id="alias"),
    pytest.param("name: [x\n", ["recipe.yaml line", "not valid YAML"], id="broken-yaml"),
    pytest.param("", ["recipe.yaml", "empty"], id="empty-file"),
]


@pytest.mark.parametrize("text, fragments", MALFORMED)
def test_malformed_recipe_is_refused_with_file_line_and_field(tmp_path, text, fragments):
    path = tmp_path / "recipe.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(RecipeError) as caught:
        read_recipe(path)
    message = str(caught.value)
    assert isinstance(caught.value, BadInputError)
    assert message.startswith(str(path))
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in {message!r}"


def test_non_utf8_bytes_name_the_line(tmp_path):
    path = tmp_path / "recipe.yaml"
    path.write_bytes(b"name: x\nfill: r\xe9flect\n")  # Latin-1 e-acute
    with pytest.raises(RecipeError, match=r"recipe\.yaml line 2: .*not UTF-8.*0xe9"):
        read_recipe(path)


def test_large_file_is_refused_before_parsing(tmp_path, monkeypatch):
    path = tmp_path / "recipe.yaml"
    path.write_bytes(b"name: x\n" + b"#" * MAX_RECIPE_BYTES)

    def must_not_parse(*args):
        raise AssertionError("the YAML parser ran on an oversized file")

    monkeypatch.setattr(recipe_module, "_load_yaml", must_not_parse)
    with pytest.raises(RecipeError, match="too large"):
        read_recipe(path)


def test_alias_bomb_is_refused_quickly():
    # The "billion laughs" shape: each level repeats the previous nine times.
    lines = ["a0: &a0 [lol]"]
    lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]" for i in range(1, 10)]
    with pytest.raises(RecipeError, match="alias"):
        parse_recipe("\n".join(lines), source="bomb.yaml")


def test_deep_nesting_is_a_recipe_error():
    with pytest.raises(RecipeError, match="nested too deeply"):
        parse_recipe("name: x\ncopies: " + "[" * 20000)


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(RecipeError, match="not found"):
        read_recipe(tmp_path / "absent.yaml")
    with pytest.raises(RecipeError, match="folder"):
        read_recipe(tmp_path)


# --------------------------------------------------------------------------
# Round trip, normalisation, equality
# --------------------------------------------------------------------------

def test_round_trip_load_dump_load_is_equal(tmp_path):
    original = parse_recipe(DESIGN_EXAMPLE, source="design.yaml")
    again = parse_recipe(dump_recipe(original))
    assert again == original
    assert again.transforms == original.transforms
    path = write_recipe(original, tmp_path / "out.yaml")
    assert read_recipe(path) == original
    assert not list(tmp_path.glob(".*.tmp"))  # the atomic writer left no temporary


@pytest.mark.parametrize("written, expected", [
    pytest.param("10", (10.0, 10.0), id="int-scalar"),
    pytest.param("2.5", (2.5, 2.5), id="float-scalar"),
    pytest.param("[-5, 5]", (-5.0, 5.0), id="int-pair"),
    pytest.param("[3, 3]", (3.0, 3.0), id="degenerate-pair"),
])
def test_scalar_and_range_normalise_to_float_pair(written, expected):
    recipe = parse_recipe(f"name: r\ntransforms:\n  - op: rotate\n    degrees: {written}\n")
    value = recipe.transforms[0].params["degrees"]
    assert value == expected and all(type(v) is float for v in value)


def test_fixed_range_dumps_back_as_scalar():
    scalar = parse_recipe("name: r\ntransforms:\n  - op: hue\n    degrees: 30\n")
    pair = parse_recipe("name: r\ntransforms:\n  - op: hue\n    degrees: [30, 30]\n")
    assert scalar == pair
    assert recipe_to_dict(pair)["transforms"][0]["degrees"] == 30.0
    assert "degrees: 30.0\n" in dump_recipe(pair)


def test_equality_ignores_line_and_source():
    a = parse_recipe("name: r\ntransforms:\n  - op: flip\n", source="a.yaml")
    b = parse_recipe("\n\nname: r\ntransforms:\n\n\n  - op: flip\n", source="b.yaml")
    assert a.transforms[0].line != b.transforms[0].line and a.source != b.source
    assert a == b and hash(a) == hash(b)


def test_transform_is_read_only_hashable_and_picklable():
    step = Transform(op="rotate", params={"degrees": [-5, 5]}, only=["a"], relabel={"a": "b"})
    assert step.params["degrees"] == (-5.0, 5.0) and step.only == ("a",)
    with pytest.raises(TypeError):
        step.params["degrees"] = (0.0, 1.0)
    with pytest.raises(TypeError):
        step.relabel["a"] = "c"
    assert pickle.loads(pickle.dumps(step)) == step
    assert len({step, Transform(op="rotate", params={"degrees": (-5.0, 5.0)}, only=("a",),
                                relabel={"a": "b"}, line=99)}) == 1


# --------------------------------------------------------------------------
# Class scope
# --------------------------------------------------------------------------

@pytest.mark.parametrize("only, exclude, label, expected", [
    pytest.param(None, None, "cat", True, id="unscoped-any-label"),
    pytest.param(None, None, None, True, id="unscoped-no-label"),
    pytest.param(("cat",), None, "cat", True, id="only-member"),
    pytest.param(("cat",), None, "dog", False, id="only-non-member"),
    pytest.param(("cat",), None, None, False, id="only-no-label"),
    pytest.param(None, ("cat",), "cat", False, id="except-member"),
    pytest.param(None, ("cat",), "dog", True, id="except-non-member"),
    pytest.param(None, ("cat",), None, False, id="except-no-label"),
])
def test_applies_to(only, exclude, label, expected):
    step = Transform(op="flip", params={"axis": "vertical"}, only=only, exclude=exclude)
    assert step.applies_to(label) is expected


def test_except_key_is_stored_as_exclude():
    recipe = parse_recipe("name: s\ntransforms:\n  - op: flip\n    except: [dog]\n")
    assert recipe.transforms[0].exclude == ("dog",) and recipe.transforms[0].only is None
    assert recipe_to_dict(recipe)["transforms"][0]["except"] == ["dog"]


# --------------------------------------------------------------------------
# Hash
# --------------------------------------------------------------------------

def test_recipe_hash_is_sha256_of_canonical_json():
    recipe = parse_recipe("name: h\nseed: 3\ncopies: 2\nfill: edge\ntransforms:\n"
                          "  - op: blur\n    sigma: [0, 2]\n    probability: 0.25\n")
    # Canonical JSON written out by hand (keys sorted, no whitespace); the
    # digest comes from the standard library's sha256 (FIPS 180-4).
    canonical = ('{"copies":2,"fill":"edge","name":"h","seed":3,"transforms":'
                 '[{"op":"blur","probability":0.25,"sigma":[0.0,2.0]}]}')
    assert recipe_hash(recipe) == hashlib.sha256(canonical.encode("ascii")).hexdigest()


def test_recipe_hash_stable_across_spelling_and_changes_with_values():
    base = parse_recipe("name: h\ntransforms:\n  - op: hue\n    degrees: 5\n", source="a")
    same = parse_recipe("name: h\nseed: 0\ncopies: 4\nfill: reflect\ntransforms:\n"
                        "  - {op: hue, degrees: [5, 5], probability: 1}\n", source="b")
    assert recipe_hash(base) == recipe_hash(same) == recipe_hash(parse_recipe(dump_recipe(base)))
    changed = [
        "name: h\ntransforms:\n  - op: hue\n    degrees: 6\n",
        "name: h\nseed: 1\ntransforms:\n  - op: hue\n    degrees: 5\n",
        "name: h2\ntransforms:\n  - op: hue\n    degrees: 5\n",
        "name: h\ntransforms:\n  - op: hue\n    degrees: 5\n    probability: 0.5\n",
        "name: h\ntransforms:\n  - op: hue\n    degrees: 5\n    only: [a]\n",
    ]
    hashes = {recipe_hash(parse_recipe(text)) for text in changed}
    assert len(hashes) == len(changed) and recipe_hash(base) not in hashes


# --------------------------------------------------------------------------
# JSON Schema
# --------------------------------------------------------------------------

def test_schema_is_valid_draft_2020_12():
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    # jsonschema checks it against the draft 2020-12 meta-schema.
    jsonschema.Draft202012Validator.check_schema(schema)


def test_schema_ops_and_fields_match_the_validator():
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    assert schema["$defs"]["transform"]["properties"]["op"]["enum"] == list(OP_FIELDS)
    for op, fields in OP_FIELDS.items():
        declared = set(schema["$defs"][f"op_{op}"]["properties"])
        assert declared == {"op", *fields, "probability", "only", "except", "relabel"}


@pytest.mark.parametrize("op", [op for op in OP_FIELDS if op != "flip"])
def test_schema_states_the_checkers_bounds(op):
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    field_name, minimum, maximum, exclusive = recipe_module.magnitude_bounds(op)
    scalar, pair = schema["$defs"][f"op_{op}"]["properties"][field_name]["anyOf"]
    for number in (scalar, *pair["prefixItems"]):
        assert number.get("exclusiveMinimum" if exclusive else "minimum") == minimum
        assert number.get("maximum") == maximum
    # The bound is finite on both ends, so no magnitude overflows the engine.
    assert minimum is not None and maximum is not None


def test_schema_states_the_bounds_of_seed_and_copies():
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    assert schema["properties"]["seed"]["maximum"] == recipe_module.MAX_SEED
    assert schema["properties"]["copies"]["maximum"] == recipe_module.MAX_COPIES


def test_op_table_matches_the_transform_catalogue():
    transforms = pytest.importorskip("augplan.augment.transforms")
    assert set(OP_FIELDS) == set(transforms.OPS)
    for op, spec in transforms.OPS.items():
        assert OP_FIELDS[op] == ((spec.magnitude,) if spec.magnitude else ("axis",))


def test_schema_and_reader_accept_the_design_example():
    assert not list(_schema_validator().iter_errors(_load_document(DESIGN_EXAMPLE)))
    parse_recipe(DESIGN_EXAMPLE)


@pytest.mark.parametrize("text", [
    pytest.param("seed: 1\n", id="missing-name"),
    pytest.param("name: x\nextra: 1\n", id="unknown-top-level"),
    pytest.param("name: x\nfill: wrap\n", id="unknown-fill"),
    pytest.param("name: x\ncopies: 0\n", id="zero-copies"),
    pytest.param("name: x\ntransforms:\n  - op: rotat\n    degrees: 1\n", id="unknown-op"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n    degree: 1\n", id="unknown-field"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n", id="missing-magnitude"),
    pytest.param("name: x\ntransforms:\n  - op: blur\n    sigma: [0, 1, 2]\n", id="three-numbers"),
    pytest.param("name: x\ntransforms:\n  - op: blur\n    sigma: -1\n", id="negative-sigma"),
    pytest.param("name: x\ntransforms:\n  - op: zoom\n    factor: 0\n", id="zero-zoom"),
    pytest.param("name: x\ntransforms:\n  - op: contrast\n    factor: yes\n", id="boolean"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    probability: 2\n", id="probability"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    only: [a]\n    except: [b]\n",
                 id="only-and-except"),
    pytest.param("name: x\ntransforms:\n  - op: flip\n    only: []\n", id="empty-only"),
    pytest.param("name: x\ncopies: 1001\n", id="too-many-copies"),
    pytest.param("name: x\ntransforms:\n  - op: rotate\n    degrees: 1e308\n", id="huge-degrees"),
    pytest.param("name: x\ntransforms:\n  - op: noise\n    sigma: [0, 2]\n", id="noise-over-range"),
    pytest.param("name: a/b\n", id="name-with-slash"),
    pytest.param("name: .x\n", id="name-leading-dot"),
])
def test_schema_and_reader_reject_the_same_malformed_documents(text):
    errors = list(_schema_validator().iter_errors(_load_document(text)))
    assert errors, "the schema accepted a document the reader refuses"
    with pytest.raises(RecipeError):
        parse_recipe(text)


def test_every_shipped_recipe_passes_schema_and_reader():
    from augplan.demo import DEMO_RECIPE_DIR

    shipped = sorted((p for p in DEMO_RECIPE_DIR.iterdir() if p.name.endswith(".yaml")), key=lambda p: p.name)
    # An empty folder is a failure, not a skip: the package promises examples.
    assert shipped, f"no *.yaml recipes in {DEMO_RECIPE_DIR}"
    validator = _schema_validator()
    for path in shipped:
        errors = [e.message for e in validator.iter_errors(
            _load_document(path.read_text(encoding="utf-8")))]
        assert not errors, f"{path.name}: {errors}"
        recipe = read_recipe(path)
        assert parse_recipe(dump_recipe(recipe)) == recipe


def test_recipe_document_returns_allowed_extra_fields_only(tmp_path):
    text = "name: v\nchecksum: abc\nevidence: {n: 3}\ntransforms: []\n"
    path = tmp_path / "vetted.yaml"
    path.write_text(text, encoding="utf-8")
    recipe, extras = recipe_module.read_recipe_document(path, extra_fields=("evidence", "checksum"))
    assert recipe == Recipe(name="v") and extras == {"checksum": "abc", "evidence": {"n": 3}}
    # Without the permission the same fields are unknown, with their line.
    with pytest.raises(RecipeError, match=r"vetted\.yaml line 2: unknown field 'checksum'"):
        read_recipe(path)
