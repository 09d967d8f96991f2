"""Examples in the docstrings run as written (standard library doctest)."""

import doctest
import importlib

import pytest

MODULES = ["augplan.augment.augmenter", "augplan.measure.stats", "augplan.measure.features"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    result = doctest.testmod(importlib.import_module(name))
    assert result.attempted > 0 and result.failed == 0


def test_readme_limits_list_every_bound_with_its_value():
    # Each bound in the code appears in README's "Limits" with the value the code enforces.
    from pathlib import Path

    from augplan.cli import COUNT_BOUNDS
    from augplan.data.decoding import MAX_IMAGE_BYTES, MAX_IMAGE_PIXELS, REDUCE_ABOVE_PIXELS
    from augplan.data.manifest import MAX_MANIFEST_BYTES
    from augplan.parallel import MAX_WORKERS
    from augplan.recipe.parse import MAX_COPIES, MAX_NAME_BYTES, MAX_RECIPE_BYTES, MAX_SEED, MAX_TRANSFORMS
    from augplan.thresholds import MIN_AUDIT_IMAGES

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    limits = readme.split("## Limits", 1)[1].split("\n## ", 1)[0]
    rows = {line.split("|")[1].strip(): line.split("|")[2].strip()
            for line in limits.splitlines() if line.startswith("| ") and "---" not in line}
    assert f"{MAX_IMAGE_BYTES:,} bytes" in rows["image file"]
    assert f"{MAX_IMAGE_PIXELS:,} pixels" in rows["image size"]
    assert f"{MAX_MANIFEST_BYTES // 2**20} MiB" in rows["manifest file"]
    assert f"{MAX_RECIPE_BYTES:,} bytes" in rows["recipe file"]
    assert rows["transforms in a recipe"].startswith(f"{MAX_TRANSFORMS} ")
    assert rows["`copies`"] == f"1 to {MAX_COPIES}"
    assert MAX_SEED == 2**32 - 1 and rows["`seed`, `--seed`, `--split-seed`"] == "0 to 2^32 - 1"
    assert rows["recipe `name`"].startswith(f"{MAX_NAME_BYTES} bytes")
    for option, bound in COUNT_BOUNDS.items():
        row = next(value for key, value in rows.items() if key.startswith(f"`{option}`"))
        assert row.startswith(f"1 to {bound:,}"), (option, row)
    assert rows["`--workers`"].startswith(f"1 to {MAX_WORKERS}")
    assert rows["shortcut audit"].startswith(f"at least {MIN_AUDIT_IMAGES} ")
    assert f"{REDUCE_ABOVE_PIXELS:,} pixels" in limits
