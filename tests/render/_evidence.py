"""A small vetting report for the report's tests, of the shape `augplan.vet` produces.

The measurements are invented (the report only lays them out), but every
part has the shape its command writes (the schemas in ``augplan/schemas/``),
and what vetting changed comes from the real vetting policy
(`vet_transforms`) applied to the recipe and its check, as ``vet`` does.
`document` gives the plain JSON (``evidence.json``) for a test to edit;
`report` types it, as ``VetReport.from_json`` does for a file read back.
"""

import copy

from PIL import Image

from augplan.recipe.parse import parse_recipe, recipe_to_dict
from augplan.results import VetReport
from augplan.vet import vet_transforms

RECIPE = "name: {name}\ntransforms:\n  - op: flip\n    axis: horizontal\n    probability: 0.5\n" \
         "  - op: rotate\n    degrees: [-10, 10]\n"


def png(path, size=(6, 4), colour=(200, 30, 30)):
    """A one-colour PNG written with Pillow; its path as a string."""
    Image.new("RGB", size, colour).save(path, format="PNG")
    return str(path)


def summary(low, high, std):
    """A factor summary block of ``coverage`` (n, percentiles, histogram)."""
    return {"n": 80, "undefined": 0, "mean": (low + high) / 2, "std": std, "p01": low, "p05": low,
            "p95": high, "p99": high, "histogram": {"edges": [0.0, 0.25, 0.5, 0.75, 1.0], "counts": [5, 30, 40, 5]}}


def swap(source, target, rate, moved, n):
    """One confirmed swap of ``check`` (``source``'s transformed images took ``target``'s look)."""
    return {"from": source, "to": target, "confusion": f"{target} -> {source}", "rate": rate,
            "rate_ci": [rate - 0.05, min(rate + 0.05, 1.0)], "base_rate": 0.02, "augmented_rate": rate + 0.02,
            "moved": moved, "n": n, "witnessed": True}


def transform(index, op, params, verdict, *, change_rate=0.03, change_rate_ci=(0.01, 0.07), swaps=(),
              safe_limit=None, suggestion=None, sheet=None, magnitudes=()):
    """One entry of ``check``'s ``transforms``."""
    return {"index": index, "op": op, "params": params, "change_rate": change_rate,
            "change_rate_ci": list(change_rate_ci), "leave_rate": 0.02, "leave_rate_ci": [0.0, 0.05], "n": 80,
            "magnitudes": list(magnitudes), "screen_swaps": [], "evidence_sheet": sheet, "verdict": verdict,
            "decided_by": "confirmation" if verdict == "breaks" else "screen", "swaps": list(swaps),
            "other_swaps": [], "classes": {}, "safe_limit": safe_limit, "suggestion": suggestion}


def check(name, transforms):
    """A ``check`` result of ``transforms``."""
    return {"recipe": name, "model": {"cv_accuracy": 0.97, "chance": 0.5, "weak": False, "folds": 5,
                                     "confirmation": "linear", "side": 64}, "baseline": {},
            "transforms": transforms, "warnings": ["classes with fewer than 20 training images give wide intervals"],
            "decision_rule": "A class breaks when the lower bound exceeds its baseline by 0.10.", "n_images": 80}


def coverage(name, plot):
    """A ``coverage`` result with one factor, one flagged shortcut and field coverage."""
    return {
        "recipe": name, "copies": 1, "size": 64, "n_images": {"train": 80, "augmented": 80, "val": 40, "field": 30},
        "field_labelled": True,
        "factors": {"brightness": {"kind": "lighting", "unit": "mean relative luminance",
                                   "original": summary(0.2, 0.4, 0.05), "augmented": summary(0.1, 0.6, 0.11),
                                   "field": {"coverage": 0.93, "wasserstein_before": 0.12,
                                             "wasserstein_after": 0.03, "summary": summary(0.15, 0.5, 0.08)}}},
        "field_coverage": {"density_before": 0.41, "coverage_before": 0.55, "density_after": 0.83,
                           "coverage_after": 0.9, "k": 5, "reference": "field", "sample_size": 80},
        "shortcuts": [{"factor": "brightness", "original": 0.98, "augmented": 0.61, "val": 0.97, "field": None,
                       "chance": 0.5, "field_confirms": None, "flagged": True, "persists": False,
                       "link": "weakened", "augmented_ci": [0.55, 0.67], "link_bound": 0.67, "val_shares": True,
                       "class": None, "by_class": {}, "combined": False}],
        "shortcut_rule": "Flagged when balanced accuracy reaches the threshold.",
        "val_shares_shortcut": ["brightness"],
        "messages": ["The validation split carries the same shortcut (brightness)."],
        "suggestions": [{"factor": "brightness", "op": "brightness", "parameter": "factor", "range": [0.5, 1.6],
                         "reason": "shortcut"}],
        "plots": [plot],
    }


def score(name, accuracy, gain, gain_ci, p_holm, per_class_gain, *, flagged=False):
    """One row of ``evaluate``'s ``recipes``."""
    return {"name": name, "recipe_hash": "f" * 16, "n_transforms": 2, "accuracy": accuracy,
            "accuracy_ci": [round(accuracy - 0.03, 4), round(accuracy + 0.02, 4)], "balanced_accuracy": accuracy,
            "macro_f1": accuracy, "per_class_recall": {}, "repeat_accuracy": [accuracy] * 5, "gain": gain,
            "gain_ci": gain_ci, "p_value": p_holm / 2, "confusion": None, "p_holm": p_holm,
            "per_class_gain": per_class_gain, "verdict": "loses" if flagged else "gains", "flagged": flagged,
            "augmented_training_images": 400, "confirm": None, "field": None}


def evaluation(name, vetted_name, class_a, class_b):
    """An ``evaluate`` result of the recipe and its vetted form, in the evaluator's order."""
    return {
        "model": {"name": "linear", "description": "logistic regression on image features",
                  "note": "biased against augmentation"},
        "baseline": {"n_images": 40, "accuracy": 0.91, "accuracy_ci": [0.89, 0.93]},
        "recipes": [score(name, 0.88, -0.03, [-0.05, -0.01], 0.004, {class_a: -0.1, class_b: 0.0}, flagged=True),
                    score(vetted_name, 0.93, 0.02, [0.005, 0.035], 0.02, {class_a: 0.05, class_b: 0.01})],
        "best": vetted_name, "best_rule": "the highest gain whose interval lies above zero",
        "scored_on": "val", "accuracy_interval": "Wilson 95% intervals.", "gain_test": "paired sign-flip test",
        "verdict_rule": "Holm-adjusted p below 0.05", "augmented_validation_images": 0, "repeats": 5, "seed": 0,
        "confirm": None, "field": None, "warnings": ["an evaluation warning"], "from_ledger": False,
        # The evaluator's order (augplan.evaluate.ranking); the report never re-sorts.
        "ranking": [vetted_name, name], "decided_on": "val", "val_shares_shortcut": [], "decision_note": "",
    }


def document(tmp_path, *, class_a="chip-left", class_b="chip-right", name="tiles-draft", recipe_text=None,
             transforms=None, approve=()):
    """The plain JSON of a vetting report (``evidence.json``) of one recipe.

    ``recipe_text`` and ``transforms`` (its check's entries) replace the
    default recipe (a flip that breaks, the checker suggesting a relabel,
    and a safe rotate); the vetted form's changes come from `vet_transforms`
    (``approve``: the unverified transforms a person approved), and its
    sign-off list holds the unverified transforms it kept, as ``vet``'s does.
    """
    sheet = png(tmp_path / "sheet.png")
    plot = png(tmp_path / "brightness.png", size=(8, 5), colour=(20, 90, 200))
    recipe = parse_recipe(recipe_text or RECIPE.format(name='"' + name.replace('"', '\\"') + '"'))
    if transforms is None:
        transforms = [
            transform(0, "flip", {"axis": "horizontal"}, "breaks", change_rate=0.81, change_rate_ci=(0.74, 0.86),
                      swaps=[swap(class_a, class_b, 0.93, 37, 40)], suggestion={"relabel": {class_a: class_b,
                                                                                            class_b: class_a}},
                      sheet=sheet),
            transform(1, "rotate", {"degrees": [-10.0, 10.0]}, "safe", safe_limit=[-10.0, 10.0],
                      magnitudes=[{"value": 0.0, "verdict": "safe"}]),
        ]
    checked = check(name, transforms)
    vetted, changes = vet_transforms(recipe, checked, approve=approve)
    signoff = [{"index": change.index, "op": change.op, "detail": change.detail} for change in changes
               if change.verdict == "unverified" and change.action == "keep"]
    vetted_name = f"{name}-vetted"
    scored = evaluation(name, vetted_name, class_a, class_b)
    return {
        "augplan_version": "0.1.0", "created": "2024-05-01T10:00:00+00:00",
        "verdict": f"augplan had to change {name} to make it label-safe.",
        "data": {"root": "/data/tiles", "fingerprint": "sha256:0123456789abcdef0123", "classes": [class_a, class_b],
                 "counts": {"train": 80, "val": 40, "test": 0, "field": 0}, "class_counts": {},
                 "val_from_train": False, "split_seed": 0, "skipped": [["train/notes.txt", "not an image"]],
                 "leaks": [{"kind": "exact", "a": "train/a/1.png", "b": "val/a/9.png", "splits": ["train", "val"],
                            "distance": 0}]},
        "recipes": [{
            "name": name, "source": "recipes/tiles.yaml", "recipe": recipe_to_dict(recipe),
            "recipe_hash": "abc123def4567890", "check": checked, "coverage": coverage(name, plot),
            "draws_sheet": None,
            "vetted": {"name": vetted_name, "recipe": recipe_to_dict(vetted),
                       "changes": [change.to_json() for change in changes], "signoff": signoff,
                       "unchanged": all(change.action == "keep" for change in changes), "recheck": None,
                       "score": scored["recipes"][1]},
        }],
        "evaluation": scored, "best": name, "ranking": list(scored["ranking"]),
        "ranking_rule": "the highest gain whose interval lies above zero.",
        "cautions": ["A domain expert signs off on every recipe before it is used."], "seed": 0,
    }


def report(evidence):
    """The typed report of a JSON document (a copy: the test's document stays editable)."""
    return VetReport.from_json(copy.deepcopy(evidence))
