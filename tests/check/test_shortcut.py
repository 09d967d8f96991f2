"""Tests of the lighting-shortcut pass (augplan/check/shortcut.py).

Ground truth: the bundled demo scenario (augplan/demo.py), whose cracked
tiles were all photographed dim and the other classes in normal light.
"""

import numpy as np
import pytest

from augplan.check import check_recipe
from augplan.data import open_dataset
from augplan.recipe.parse import Recipe, Transform


# --------------------------------------------------------------------------
# moves that follow a lighting shortcut (the demo scenario is the ground truth:
# its cracked tiles were all photographed dim, the other classes in normal light)


@pytest.fixture(scope="module")
def small_demo(tmp_path_factory):
    from augplan.demo import make_demo_dataset

    root = tmp_path_factory.mktemp("demo-lighting")
    make_demo_dataset(root, n_train=20, n_val=4, n_field=10)
    return root


DARKEN = Recipe(name="darken", transforms=(
    Transform("brightness", {"factor": 0.35}, exclude=("hairline-crack",)),))


@pytest.fixture(scope="module")
def darkened(small_demo):
    return check_recipe(open_dataset(small_demo), DARKEN, rng=np.random.default_rng(0))


def test_move_along_a_lighting_shortcut_never_breaks(darkened):
    entry = darkened["transforms"][0]
    # The screen sees darkened tiles land in the dim class; training with them
    # confirms no label change (the labels are right: darkening breaks the shortcut).
    assert any(swap["to"] == "hairline-crack" and swap["rate"] >= 0.1 for swap in entry["screen_swaps"])
    assert entry["swaps"] == [] and entry["verdict"] != "breaks"
    # Whether the equivalence test calls it safe depends on the draws (its
    # upper bounds sit near the margin here); when it does not, the pass names
    # the shortcut.
    assert ("shortcut" in entry) == (entry["verdict"] == "unverified")


def _sample(root):
    from augplan.data import load_images

    dataset = open_dataset(root)
    records = sorted(dataset.split("train"), key=lambda r: r.relpath)
    classes = tuple(dataset.classes)
    labels = np.array([classes.index(r.label) for r in records])
    return dataset, load_images(records, size=64), labels, classes


def _draft(op="brightness", verdict="unverified"):
    return {"index": 0, "op": op, "verdict": verdict, "swaps": [],
            "screen_swaps": [{"from": "chevron-left", "to": "hairline-crack", "rate": 0.8}]}


def test_the_pass_names_a_lighting_move_into_the_class_lighting_singles_out(small_demo):
    # Only the demo's cracked tiles are dim: brightness alone singles them out.
    from augplan.check.shortcut import shortcut_findings

    dataset, images, labels, classes = _sample(small_demo)
    findings = shortcut_findings([_draft()], images, labels, classes, dataset, 64, np.random.default_rng(0))
    assert list(findings) == [0]
    assert findings[0].shortcut == {**findings[0].shortcut, "factor": "brightness", "class": "hairline-crack"}
    assert findings[0].shortcut["train_score"] >= 0.9 and "shortcut" in findings[0].note
    # A safe step, and a move no lighting op makes (hue keeps its verdict), are never excused.
    assert shortcut_findings([_draft(verdict="safe"), {**_draft(op="hue"), "index": 1}], images, labels, classes,
                             dataset, 64, np.random.default_rng(0)) == {}


def test_the_pass_builds_no_row_and_the_row_is_built_once():
    # transform_verdict applies a finding when the row is made: unverified, and
    # a class scope drawn from the shortcut dropped.
    from augplan.check.shortcut import ShortcutFinding
    from augplan.check.verdicts import transform_verdict

    fields = {"index": 0, "op": "brightness", "params": {"factor": 0.35}, "change_rate": 0.8,
              "change_rate_ci": [0.7, 0.9], "leave_rate": 0.0, "leave_rate_ci": [0.0, 0.1], "n": 80,
              "magnitudes": [], "screen_swaps": [], "evidence_sheet": None, "verdict": "breaks",
              "decided_by": "confirmation", "swaps": [], "other_swaps": [], "classes": {}, "safe_limit": None,
              "suggestion": {"only": ["a"]}}
    finding = ShortcutFinding({"factor": "brightness", "class": "b", "train_score": 1.0, "field_score": None},
                              "images move to b")
    row = transform_verdict(fields, finding)
    assert (row.verdict, row.suggestion, row["note"]) == ("unverified", None, "images move to b")
    assert list(row)[-2:] == ["shortcut", "note"]
    plain = transform_verdict(fields)
    assert plain.verdict == "breaks" and "shortcut" not in plain and fields["verdict"] == "breaks"


def test_field_that_shares_the_lighting_takes_away_the_shortcut_excuse(small_demo, tmp_path):
    # A labelled field where cracked tiles are dim too: lighting then carries the
    # class where the model is deployed, so the move into the dim class is not
    # excused as a shortcut. It is still no label change: a darkened chevron is
    # a chevron, and training with it confuses no class on original images, so
    # only a confirmed confusion could make it break.
    import shutil

    root = tmp_path / "data"
    shutil.copytree(small_demo, root)
    shutil.rmtree(root / "field")
    shutil.copytree(root / "train", root / "field")
    entry = check_recipe(open_dataset(root), DARKEN, rng=np.random.default_rng(0))["transforms"][0]
    assert "shortcut" not in entry and "note" not in entry
    assert any(swap["to"] == "hairline-crack" for swap in entry["screen_swaps"])
    assert entry["swaps"] == [] and entry["verdict"] != "breaks"


