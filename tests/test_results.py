"""Typed results (augplan.results): document order, unknown keys, the exit-code flag."""

import dataclasses
import json

import pytest

from augplan.results import CheckResult, CoverageResult, VetResult, VerifyResult, json_number


def _transform_row(index, verdict):
    return {"index": index, "op": "flip", "params": {}, "change_rate": 0.0, "change_rate_ci": [0.0, 1.0],
            "leave_rate": 0.0, "leave_rate_ci": [0.0, 1.0], "n": 0, "magnitudes": [], "screen_swaps": [],
            "evidence_sheet": None, "verdict": verdict, "decided_by": "screen", "swaps": [], "other_swaps": [],
            "classes": {}, "safe_limit": None, "suggestion": None}


def _check_document(*verdicts):
    return {"recipe": "r", "model": {"cv_accuracy": 0.9, "chance": 0.5, "weak": False}, "baseline": {},
            "transforms": [_transform_row(i, v) for i, v in enumerate(verdicts)], "warnings": [],
            "decision_rule": "rule", "n_images": 10}


@pytest.mark.parametrize("verdicts, flagged", [(("safe",), False), (("safe", "unverified"), True),
                                               (("breaks",), True), ((), False)])
def test_check_is_flagged_unless_every_transform_is_safe(verdicts, flagged):
    assert CheckResult.from_json(_check_document(*verdicts)).flagged is flagged


def test_an_unknown_key_keeps_its_place_in_the_document():
    document = _check_document("safe")
    document = {**dict(list(document.items())[:2]), "new_key": [1, 2], **dict(list(document.items())[2:])}
    result = CheckResult.from_json(document)
    assert list(result.to_json()) == list(document) and result.extra == {"new_key": [1, 2]}


def test_a_field_set_later_goes_after_the_document_keys():
    result = dataclasses.replace(CheckResult.from_json(_check_document("safe")), leaks=[])
    assert list(result.to_json())[-1] == "leaks" and result["leaks"] == []


def test_coverage_samples_stay_out_of_the_json():
    document = {"recipe": "r", "copies": 1, "size": 8, "n_images": {}, "field_labelled": False, "factors": {},
                "field_coverage": None, "shortcuts": [{"flagged": True, "persists": False, "link": "broken"}],
                "shortcut_rule": "", "val_shares_shortcut": [], "messages": [], "suggestions": []}
    result = dataclasses.replace(CoverageResult.from_json(document), samples={"original": object()})
    assert json.loads(json.dumps(result.to_json())) == document
    # A shortcut the recipe breaks (flagged but not persisting) does not flag the run.
    assert not result.flagged


@pytest.mark.parametrize("unchanged", [True, False])
def test_vet_is_flagged_when_it_changed_a_recipe(unchanged):
    result = VetResult(verdict="v", report="r", vetted_recipe="y", evidence="e", unchanged=unchanged, best="b")
    assert result.flagged is (not unchanged)


def test_verify_is_flagged_when_not_ok():
    result = VerifyResult(path="p", ok=False, format_ok=True, checksum_ok=False, fingerprint_match=None,
                          messages=[])
    assert result.flagged


@pytest.mark.parametrize("value, expected", [(None, None), (float("nan"), None), (float("inf"), None),
                                             (1 / 3, 0.333333), (123456789.0, 123457000.0)])
def test_json_number_keeps_six_significant_digits(value, expected):
    assert json_number(value) == expected
