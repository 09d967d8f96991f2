"""The vetted recipe file: checksum, write, read back, verify."""

import hashlib
import json

import pytest

from augplan.vet.vetted_file import read_vetted, verify_vetted, vetted_checksum, vetted_text, write_vetted
from augplan.recipe.parse import parse_recipe, recipe_to_dict
from augplan.results import VettingChange

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


def _change_list(*pairs):
    return [VettingChange(i, "rotate", verdict, action, "") for i, (verdict, action) in enumerate(pairs)]


@pytest.mark.parametrize("changes, says, never", [
    (_change_list(("safe", "keep"), ("safe", "keep")), "every transform kept as written", "removed"),
    (_change_list(("breaks", "remove"), ("safe", "clip")), "2 transforms relabelled, scoped, clipped or removed",
     "sign-off"),
    (_change_list(("unverified", "keep")), "1 kept transform is unverified", "clipped or removed"),
], ids=["nothing-broke", "two-changed", "unverified-kept"])
def test_vetted_file_header_says_what_vetting_did(changes, says, never):
    text = vetted_text(parse_recipe("name: v\n"), {"n": 1}, changes=changes)
    header = "".join(line for line in text.splitlines(keepends=True) if line.startswith("#"))
    assert says in header and never not in header
    assert "Transforms that broke labels" not in header
