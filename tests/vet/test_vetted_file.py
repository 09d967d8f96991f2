"""Vetted export: verdict rules, checksum, verify."""

import hashlib
import json

import pytest

from augplan.vet.vetted_file import read_vetted, verify_vetted, vet_transforms, vetted_checksum, write_vetted
from augplan.recipe.parse import parse_recipe, recipe_to_dict

RECIPE = parse_recipe("""
name: tiles
transforms:
  - op: flip
    axis: horizontal
  - op: hue
    degrees: [-150, 150]
  - op: rotate
    degrees: [-40, 40]
  - op: blur
    sigma: [0, 2]
  - op: noise
    sigma: [0, 0.2]
""")


def _entry(index, op, verdict, safe_limit=None, suggestion=None):
    return {"index": index, "op": op, "verdict": verdict, "safe_limit": safe_limit,
            "suggestion": suggestion, "change_rate": 0.0, "change_rate_ci": [0.0, 0.1]}


CHECK = {"transforms": [
    _entry(0, "flip", "breaks", suggestion={"relabel": {"left": "right", "right": "left"}}),
    _entry(1, "hue", "breaks", safe_limit=[-10.0, 10.0]),
    _entry(2, "rotate", "safe", safe_limit=[-20.0, 20.0]),
    _entry(3, "blur", "unverified"),
    _entry(4, "noise", "breaks"),
]}


def test_vet_rules_relabel_clip_remove():
    vetted, changes = vet_transforms(RECIPE, CHECK)
    actions = [change["action"] for change in changes]
    assert actions == ["relabel", "clip", "clip", "remove", "remove"]
    ops = [step.op for step in vetted.transforms]
    assert ops == ["flip", "hue", "rotate"]
    assert dict(vetted.transforms[0].relabel) == {"left": "right", "right": "left"}
    assert vetted.transforms[1].params["degrees"] == (-10.0, 10.0)
    assert vetted.transforms[2].params["degrees"] == (-20.0, 20.0)


def test_approved_unverified_transform_is_kept():
    vetted, changes = vet_transforms(RECIPE, CHECK, approve=(3,))
    assert "blur" in [step.op for step in vetted.transforms]
    assert changes[3]["action"] == "keep"


def test_safe_recipe_is_unchanged():
    check = {"transforms": [_entry(i, step.op, "safe") for i, step in enumerate(RECIPE.transforms)]}
    vetted, changes = vet_transforms(RECIPE, check)
    assert vetted.transforms == RECIPE.transforms
    assert {change["action"] for change in changes} == {"keep"}


def test_checksum_is_sha256_of_canonical_json():
    evidence = {"data_fingerprint": "ab" * 32, "created": "2026-12-01"}
    canonical = json.dumps({"recipe": recipe_to_dict(RECIPE), "evidence": evidence}, sort_keys=True,
                           separators=(",", ":"), ensure_ascii=True)
    # Outside reference: Python's hashlib (FIPS 180-4 SHA-256) on the same bytes.
    assert vetted_checksum(RECIPE, evidence) == hashlib.sha256(canonical.encode("ascii")).hexdigest()


def test_written_vetted_recipe_verifies_and_reads_back(tmp_path):
    evidence = {"data_fingerprint": "cd" * 32, "verdicts": [{"index": 0, "verdict": "safe"}]}
    path = write_vetted(RECIPE, evidence, tmp_path / "vetted.yaml")
    recipe, read_evidence, checksum = read_vetted(path)
    assert recipe == RECIPE
    assert read_evidence == evidence
    result = verify_vetted(path)
    assert result["ok"] and result["checksum_ok"]


@pytest.mark.parametrize("old,new", [("degrees: [-150.0, 150.0]", "degrees: [-151.0, 150.0]"),
                                     ("cdcd", "cdce")], ids=["recipe-edited", "evidence-edited"])
def test_editing_one_value_fails_verify(tmp_path, old, new):
    path = write_vetted(RECIPE, {"data_fingerprint": "cd" * 32}, tmp_path / "vetted.yaml")
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))
    result = verify_vetted(path)
    assert result["format_ok"] and not result["checksum_ok"] and not result["ok"]


def test_plain_recipe_is_not_vetted(tmp_path):
    path = tmp_path / "plain.yaml"
    path.write_text("name: plain\n")
    result = verify_vetted(path)
    assert result["format_ok"] and not result["ok"]
    assert "not a vetted one" in result["messages"][0]


def test_unverified_shortcut_move_is_kept_when_the_recipe_breaks_that_shortcut():
    check = {"transforms": [_entry(0, "flip", "safe"), _entry(1, "hue", "safe"),
                            _entry(2, "rotate", "safe"), _entry(3, "blur", "safe"),
                            _entry(4, "noise", "safe")]}
    check["transforms"][3].update(verdict="unverified", shortcut={"factor": "sharpness", "class": "x"})
    cleared = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": False, "link": "broken"}]}
    weakened = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": False, "link": "weakened"}]}
    persisting = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": True, "link": "persists"}]}
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=cleared)
    assert changes[3]["action"] == "keep" and "recipe breaks the sharpness shortcut" in changes[3]["detail"]
    # Weakened, not broken: still kept (removing the step brings the shortcut back), and said so.
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=weakened)
    assert changes[3]["action"] == "keep" and "recipe weakens the sharpness shortcut" in changes[3]["detail"]
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=persisting)
    assert changes[3]["action"] == "remove"


def test_a_safe_limit_of_one_value_removes_the_step():
    check = {"transforms": [_entry(i, step.op, "safe") for i, step in enumerate(RECIPE.transforms)]}
    check["transforms"][1].update(verdict="breaks", safe_limit=[0.0, 0.0])
    vetted, changes = vet_transforms(RECIPE, check)
    assert changes[1]["action"] == "remove"
    assert "hue" not in [step.op for step in vetted.transforms]
