"""The vetting run's verdict sentence (augplan.vet.verdict): one voice, no claim beyond the verdicts.

The rows are invented; the recommendation comes from the one rule
(`augplan.evaluate.ranking.decide`)."""

import pytest

from augplan.evaluate.ranking import decide
from augplan.results import RecipeScore, VettedForm, VettingChange
from augplan.vet.verdict import verdict_sentence


def _score(name, gain, gain_ci, field=None):
    return RecipeScore(name=name, recipe_hash="0" * 64, n_transforms=2, accuracy=0.8, accuracy_ci=[0.7, 0.9],
                       balanced_accuracy=0.8, macro_f1=0.8, per_class_recall={}, repeat_accuracy=[0.8],
                       gain=gain, gain_ci=list(gain_ci), p_value=0.01, confusion=None, p_holm=0.01,
                       per_class_gain={}, verdict="gains", flagged=False, augmented_training_images=10,
                       field=field)


def _form(unchanged, changes=()):
    return VettedForm(name="v", recipe={}, changes=list(changes), signoff=[], unchanged=unchanged)


def _sentence(forms, best, top, model_name="linear", decided_on="val"):
    return verdict_sentence(forms, best=best, top=top, model_name=model_name, decided_on=decided_on,
                            baseline_accuracy=0.9)


@pytest.mark.parametrize("gain_ci,field_ci,start", [
    ((0.01, 0.05), None, "Use best-one (scored with the linear proxy): validation gain over no augmentation "
                         "+3.5 points [95% CI +1.0, +5.0]"),
    ((-0.02, 0.03), None, "No recipe clearly beat no augmentation on validation, scored with the linear proxy"),
    ((0.0, 0.0), (0.2, 0.4), "Use best-one (scored with the linear proxy): gain over no augmentation "
                             "+30.0 points [95% CI +20.0, +40.0] on the labelled field sample, which decides"),
], ids=["val-gain", "unclear", "field-gain"])
def test_verdict_sentence_leads_with_what_to_do(gain_ci, field_ci, start):
    field = {"gain": sum(field_ci) / 2, "gain_ci": list(field_ci)} if field_ci else None
    row = _score("best-one", sum(gain_ci) / 2 + 0.005, gain_ci, field)
    decision = decide([row])
    sentence = _sentence([("draft", _form(False))], row if decision.best else None, row,
                         decided_on=decision.decided_on)
    assert sentence.startswith(start) and "augplan changed draft" in sentence
    # One voice: without a recommendation nothing is "used" or recommended.
    assert ("Use " in sentence) == (decision.best is not None)
    assert ("none recommended" in sentence) == (decision.best is None)


@pytest.mark.parametrize("model, says", [
    ("linear", "(whose gains are biased against augmentation: this is not evidence of harm; its order puts "
               "least-bad first"),
    ("cnn", "scored with the cnn model; the highest-ranked is least-bad"),
], ids=["linear", "cnn"])
def test_verdict_sentence_names_no_best_when_none_gains(model, says):
    top = _score("least-bad", -0.015, [-0.03, -0.002])
    sentence = _sentence([("draft", _form(True))], None, top, model_name=model)
    assert sentence.startswith("No recipe clearly beat no augmentation on validation")
    assert says in sentence
    assert "Use " not in sentence and "best" not in sentence


def _change_list(*pairs):
    return [VettingChange(i, "rotate", verdict, action, "") for i, (verdict, action) in enumerate(pairs)]


@pytest.mark.parametrize("changes, unchanged, says, never", [
    (_change_list(("safe", "keep"), ("unverified", "keep"), ("unverified", "keep")), True,
     "2 kept transforms are unverified and need a person's sign-off", "kept its labels"),
    (_change_list(("breaks", "remove"), ("unverified", "keep")), False,
     "1 kept transform is unverified", "label-safe"),
    (_change_list(("safe", "keep"), ("safe", "keep")), True, "every transform kept its labels", "sign-off"),
], ids=["approved-unverified", "changed-and-unverified", "all-safe"])
def test_verdict_sentence_claims_no_more_than_the_verdicts(changes, unchanged, says, never):
    best = _score("r", 0.02, [0.01, 0.03])
    sentence = _sentence([("r", _form(unchanged, changes))], best, best)
    assert says in sentence and never not in sentence


def test_a_saturated_baseline_is_said():
    # thresholds.SATURATED_ACCURACY: at or above it the sentence says there is little room to gain.
    best = _score("r", 0.002, [0.001, 0.003])
    forms = [("r", _form(True))]
    saturated = verdict_sentence(forms, best=best, top=best, model_name="cnn", decided_on="val",
                                 baseline_accuracy=0.995)
    room = verdict_sentence(forms, best=best, top=best, model_name="cnn", decided_on="val", baseline_accuracy=0.9)
    assert "saturated (100% without augmentation)" in saturated and "saturated" not in room
