"""The vetting policy (augplan.vet.policy): verdicts applied, rewrites re-checked, sign-off named.

Invented check documents whose right answer is known by construction (the
rules of `vet_transforms`)."""

from augplan.recipe.parse import parse_recipe
from augplan.results import CheckResult, VettingChange
from augplan.vet.policy import settle_rewrites, signoff_items, vet_recipe, vet_transforms

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
    actions = [change.action for change in changes]
    assert actions == ["relabel", "clip", "clip", "remove", "remove"]
    ops = [step.op for step in vetted.transforms]
    assert ops == ["flip", "hue", "rotate"]
    assert dict(vetted.transforms[0].relabel) == {"left": "right", "right": "left"}
    assert vetted.transforms[1].params["degrees"] == (-10.0, 10.0)
    assert vetted.transforms[2].params["degrees"] == (-20.0, 20.0)


def test_approved_unverified_transform_is_kept():
    vetted, changes = vet_transforms(RECIPE, CHECK, approve=(3,))
    assert "blur" in [step.op for step in vetted.transforms]
    assert changes[3].action == "keep"


def test_safe_recipe_is_unchanged():
    check = {"transforms": [_entry(i, step.op, "safe") for i, step in enumerate(RECIPE.transforms)]}
    vetted, changes = vet_transforms(RECIPE, check)
    assert vetted.transforms == RECIPE.transforms
    assert {change.action for change in changes} == {"keep"}


def test_unverified_shortcut_move_is_kept_when_the_recipe_breaks_that_shortcut():
    check = {"transforms": [_entry(0, "flip", "safe"), _entry(1, "hue", "safe"),
                            _entry(2, "rotate", "safe"), _entry(3, "blur", "safe"),
                            _entry(4, "noise", "safe")]}
    check["transforms"][3].update(verdict="unverified", shortcut={"factor": "sharpness", "class": "x"})
    cleared = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": False, "link": "broken"}]}
    weakened = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": False, "link": "weakened"}]}
    persisting = {"shortcuts": [{"factor": "sharpness", "flagged": True, "persists": True, "link": "persists"}]}
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=cleared)
    assert changes[3].action == "keep" and "recipe breaks the sharpness shortcut" in changes[3].detail
    # Weakened, not broken: still kept (removing the step brings the shortcut back), and said so.
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=weakened)
    assert changes[3].action == "keep" and "recipe weakens the sharpness shortcut" in changes[3].detail
    vetted, changes = vet_transforms(RECIPE, check, coverage_result=persisting)
    assert changes[3].action == "remove"


def test_a_safe_limit_of_one_value_removes_the_step():
    check = {"transforms": [_entry(i, step.op, "safe") for i, step in enumerate(RECIPE.transforms)]}
    check["transforms"][1].update(verdict="breaks", safe_limit=[0.0, 0.0])
    vetted, changes = vet_transforms(RECIPE, check)
    assert changes[1].action == "remove"
    assert "hue" not in [step.op for step in vetted.transforms]


def test_a_clip_carries_its_range_as_data():
    # Issue 27: the range reaches the report as data (clipped_to), not parsed back from the text.
    _, changes = vet_transforms(RECIPE, CHECK)
    assert all(isinstance(change, VettingChange) for change in changes)
    assert changes[1].clipped_to == [-10.0, 10.0] and changes[2].clipped_to == [-20.0, 20.0]
    assert "clipped_to" not in changes[0].to_json() and "clipped_to" not in changes[3].to_json()


def test_signoff_names_the_kept_unverified_steps_only():
    _, changes = vet_transforms(RECIPE, CHECK, approve=(3,))
    assert [(item.index, item.op) for item in signoff_items(changes)] == [(3, "blur")]
    assert signoff_items(vet_transforms(RECIPE, CHECK)[1]) == []


_ORIGINAL = ("name: o\ntransforms:\n  - op: hue\n    degrees: [-90, 90]\n  - op: rotate\n"
             "    degrees: [-30, 30]\n  - op: rotate\n    degrees: [-5, 5]\n")
_REWRITTEN = ("name: v\ntransforms:\n  - op: rotate\n    degrees: [-30, 30]\n    only: [a]\n"
              "  - op: rotate\n    degrees: [-5, 5]\n")


def _rewrite_case(limit):
    changes = [VettingChange(0, "hue", "breaks", "remove", "removed: breaks"),
               VettingChange(1, "rotate", "breaks", "scope", "applied only to a"),
               VettingChange(2, "rotate", "safe", "keep", "")]
    check = {"transforms": [{"index": 0, "verdict": "breaks", "safe_limit": None},
                            {"index": 1, "verdict": "breaks", "safe_limit": limit},
                            {"index": 2, "verdict": "safe", "safe_limit": [-5.0, 5.0]}]}
    rechecked = {"transforms": [{"index": 0, "verdict": "breaks"}, {"index": 1, "verdict": "safe"}]}
    return parse_recipe(_REWRITTEN), changes, rechecked, parse_recipe(_ORIGINAL), check


def test_a_rewrite_that_still_breaks_and_has_no_safe_limit_is_removed():
    vetted, changes, rechecked, recipe, check = _rewrite_case(None)
    result, changes = settle_rewrites(vetted, changes, rechecked, recipe, check)
    assert [step.params for step in result.transforms] == [{"degrees": (-5.0, 5.0)}]
    assert changes[1].action == "remove" and "still breaks" in changes[1].detail


def test_a_rejected_rewrite_falls_back_to_the_safe_limit():
    # Issue: vet removed a transform it could clip when the re-check rejected its rewrite.
    vetted, changes, rechecked, recipe, check = _rewrite_case([-10.0, 10.0])
    result, changes = settle_rewrites(vetted, changes, rechecked, recipe, check)
    assert [step.params["degrees"] for step in result.transforms] == [(-10.0, 10.0), (-5.0, 5.0)]
    assert result.transforms[0].only is None  # the original step, clipped; not the rejected scope
    assert changes[1].action == "clip" and "safe limit" in changes[1].detail
    assert changes[1].to_json()["clipped_to"] == [-10.0, 10.0]  # typed: the report formats the range


def test_vet_recipe_rechecks_rewrites_and_names_the_vetted_form():
    recipe = parse_recipe(_ORIGINAL)
    check = {"transforms": [_entry(0, "hue", "breaks"),
                            _entry(1, "rotate", "breaks", safe_limit=[-10.0, 10.0], suggestion={"only": ["a"]}),
                            _entry(2, "rotate", "safe", safe_limit=[-5.0, 5.0])]}
    seen = []

    def recheck(rewritten):
        seen.append(rewritten)
        return CheckResult(recipe=rewritten.name, model={}, baseline={}, warnings=[], decision_rule="", n_images=0,
                           transforms=[{"index": 0, "verdict": "breaks"}, {"index": 1, "verdict": "safe"}])

    vetted, form = vet_recipe(recipe, check, recheck=recheck)
    assert len(seen) == 1 and seen[0].transforms[0].only == ("a",)
    assert vetted.name == form.name == "o-vetted" and not form.unchanged
    assert [change.action for change in form.changes] == ["remove", "clip", "keep"]
    assert form.changes[1].clipped_to == [-10.0, 10.0]
    assert form.recheck is not None and form.recipe["transforms"][0]["degrees"] == [-10.0, 10.0]


def test_vet_recipe_without_rewrites_does_not_recheck():
    check = {"transforms": [_entry(i, step.op, "safe") for i, step in enumerate(RECIPE.transforms)]}

    def recheck(rewritten):
        raise AssertionError("nothing was rewritten: nothing to re-check")

    vetted, form = vet_recipe(RECIPE, check, recheck=recheck)
    assert form.unchanged and vetted.name == form.name == "tiles" and form.recheck is None
