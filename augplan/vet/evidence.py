"""What a vetting run records: the evidence block of each vetted file and the report's `VetReport`.

Both are built from typed results (`VettedRecipe`, `EvaluateResult`); the
report (``evidence.json``) is rendered from the `VetReport` and the vetted
file's block is covered by its checksum.
"""

from augplan.cautions import CAUTIONS
from augplan.data import find_duplicates
from augplan.evaluate.ranking import BEST_RULE
from augplan.results import DatasetSummary, VetReport

__all__ = ["vetted_evidence", "dataset_summary", "vet_report"]

_SPLITS = ("train", "val", "test", "field")


def _class_counts(dataset):
    counts = {label: dict.fromkeys(_SPLITS, 0) for label in dataset.classes}
    for record in dataset.records:
        if record.label in counts:
            counts[record.label][record.split] += 1
    return counts


def vetted_evidence(entry, vetted, evaluation, header, seed, classes):
    """The evidence block written into one vetted recipe file (and covered by its checksum).

    Parameters
    ----------
    entry : augplan.results.VettedRecipe
        With its vetted form's ``score``.
    vetted : augplan.recipe.Recipe
        The vetted recipe (its ``seed`` is recorded).
    evaluation : augplan.results.EvaluateResult
    header : dict
        ``augplan_version``, ``created``, ``data_fingerprint``.
    seed : int
        The analysis seed (provenance).
    classes : sequence of str

    Returns
    -------
    dict
    """
    score = entry.vetted.score
    evidence = {
        **header,
        "vetted_from": {"name": entry.name, "recipe_hash": entry.recipe_hash},
        "model": {"cv_accuracy": entry.check.model["cv_accuracy"]},
        "verdicts": [{"index": t.index, "op": t.op, "verdict": t.verdict,
                      "change_rate": t.change_rate, "change_rate_ci": t.change_rate_ci}
                     for t in entry.check.transforms],
        "changes": [f"{c.index} {c.op}: {c.action}" + (f" ({c.detail})" if c.detail else "")
                    for c in entry.vetted.changes],
        "validation": {"scored_with": evaluation.model["name"], "scored_on": evaluation.scored_on,
                       "gain": score.gain, "gain_ci": score.gain_ci, "p_holm": score.p_holm,
                       "repeats": evaluation.repeats},
        "seeds": {"analysis": seed, "recipe": vetted.seed},
    }
    field = score.field or {}
    if field.get("gain") is not None:
        evidence["field"] = {"gain": field["gain"], "gain_ci": field["gain_ci"], "n_images": field.get("n_images")}
    # Which evidence decided (BEST_RULE) and what validation can show, as every output of vet says it.
    evidence["decided_on"] = evaluation.decided_on
    if evaluation.val_shares_shortcut:
        evidence["validation_note"] = evaluation.decision_note
    evidence["classes"] = list(classes)
    signoff = [f"{item.index} {item.op}: {item.detail}" for item in entry.vetted.signoff]
    if signoff:
        evidence["needs_signoff"] = signoff
    return evidence


def dataset_summary(dataset, data_fingerprint):
    """The `DatasetSummary` of the data a run read: counts, the stand-in validation split, skips, leaks."""
    return DatasetSummary(
        root=str(dataset.root), fingerprint=data_fingerprint, classes=list(dataset.classes),
        counts={split: len(dataset.split(split)) for split in _SPLITS}, class_counts=_class_counts(dataset),
        val_from_train=dataset.val_from_train, split_seed=dataset.split_seed,
        skipped=[list(item) for item in dataset.skipped], leaks=find_duplicates(dataset))


def vet_report(dataset, entries, evaluation, *, verdict, header, seed):
    """The whole run's `VetReport` (``evidence.json``), which the report is rendered from.

    ``best`` names the recommended recipe by its original name; the ranking
    is the evaluation's, carried as it is.
    """
    best = next((entry.name for entry in entries if entry.vetted.name == evaluation.best), None)
    return VetReport(
        augplan_version=header["augplan_version"], created=header["created"], verdict=verdict,
        data=dataset_summary(dataset, header["data_fingerprint"]), recipes=list(entries), evaluation=evaluation,
        best=best, ranking=list(evaluation.ranking), ranking_rule=BEST_RULE, cautions=list(CAUTIONS), seed=seed)
