"""A recipe's ``seed:`` is where its own draws start: preview's and the training loader's, never an analysis's."""

import json

from augplan.recipe import parse_recipe, recipe_hash
from conftest import TINY_RECIPE, write_digits_dataset

SEEDED = TINY_RECIPE.replace("seed: 0", "seed: 9")


def _files(tmp_path):
    data = write_digits_dataset(tmp_path / "DATA", {"train": 4, "val": 2}, size=16)
    plain, seeded = tmp_path / "plain.yaml", tmp_path / "seeded.yaml"
    plain.write_text(TINY_RECIPE, encoding="utf-8")
    seeded.write_text(SEEDED, encoding="utf-8")
    return data, plain, seeded


def test_preview_draws_start_from_the_recipes_seed_unless_seed_is_given(tmp_path, run_cli):
    data, _, seeded = _files(tmp_path)
    sheets = {}
    for name, extra in (("default", ()), ("nine", ("--seed", 9)), ("zero", ("--seed", 0))):
        out = tmp_path / f"{name}.png"
        result = run_cli("preview", data, "--recipe", seeded, "-o", out, "--quiet", *extra)
        assert result.code == 0, result.err
        sheets[name] = out.read_bytes()
    assert sheets["default"] == sheets["nine"]
    assert sheets["default"] != sheets["zero"]


def test_an_analysis_does_not_read_the_recipes_seed(tmp_path, run_cli):
    data, plain, seeded = _files(tmp_path)
    documents = []
    for recipe in (plain, seeded):
        result = run_cli("coverage", data, "--recipe", recipe, "--json", "--quiet", "--workers", 1)
        assert result.code in (0, 1), result.err
        documents.append(json.loads(result.out))
    assert documents[0] == documents[1]


def test_the_seed_is_part_of_the_recipes_hash():
    assert recipe_hash(parse_recipe(TINY_RECIPE)) != recipe_hash(parse_recipe(SEEDED))
    assert parse_recipe(SEEDED).seed == 9
