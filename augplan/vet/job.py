"""The whole job: check, coverage and evaluation of recipes, then report and vetted export.

Every output is computed first and written last, each file atomically, so an
interrupted run leaves the output folder without partial files.
"""

import dataclasses
import json
import os
import sys
import tempfile
from pathlib import Path

import numpy as np

from augplan import __version__
from augplan.atomic import check_output, output_lock, publish_folder, write_bytes_atomic
from augplan.cautions import CAUTIONS
from augplan.coverage.coverage import analyse_coverage
from augplan.data.dataset import find_duplicates, fingerprint
from augplan.errors import BadInputError, printable
from augplan.evaluate.evaluate import BEST_RULE, evaluate_recipes
from augplan.measure.models import is_linear, model_phrase, scoring_model
from augplan.vet.vetted_file import creation_date, vet_transforms, vetted_text
from augplan.check.check import check_recipe
from augplan.recipe.parse import recipe_hash, recipe_to_dict
from augplan.results import VetReport, VetResult

__all__ = ["vet_recipes", "prepare_output"]


#: Files that mark a folder as an earlier vet output, which ``replace`` may swap out.
_OUTPUT_MARKERS = ("report.html", "evidence.json")


def prepare_output(out_dir, *, force=False, replace=False):
    """Check that ``out_dir`` may receive the outputs; nothing is created yet.

    An existing non-empty folder needs ``force`` (files of the same name are
    overwritten) or ``replace`` (the whole folder is swapped for the new one;
    only an earlier vet output, holding ``report.html`` or ``evidence.json``).
    """
    out_dir = Path(out_dir)
    check_output(out_dir, folder=True)
    if out_dir.is_dir() and any(out_dir.iterdir()):
        if replace and not any((out_dir / name).is_file() for name in _OUTPUT_MARKERS):
            raise BadInputError(f"{out_dir}: not empty and not an earlier augplan output (no report.html); "
                                "choose another output folder.")
        if not (force or replace):
            raise BadInputError(f"{out_dir}: the output folder is not empty; pass --force to write into it "
                                "or choose another folder.")
    return out_dir


def _inside(path, folder):
    try:
        path.resolve().relative_to(Path(folder).resolve())
    except ValueError:
        return False
    return True


def _collect_figures(entries):
    """The evidence sheets (read from the checker's scratch folder) and draws sheet of every recipe.

    The paths in the entries become ``figures/<name>``, relative to the output
    folder, before anything reads them; the report is rendered from a staging
    folder laid out the same way.
    """
    figures = {}
    for number, entry in enumerate(entries):
        for transform in entry["check"]["transforms"]:
            sheet = transform.get("evidence_sheet")
            if sheet and Path(sheet).is_file():
                name = f"{number}-{entry['name']}-transform-{transform['index']}.png"
                figures[name] = Path(sheet).read_bytes()
                transform["evidence_sheet"] = f"figures/{name}"
        sheet = entry.get("draws_sheet")
        if sheet and Path(sheet).is_file():
            name = f"{number}-{entry['name']}-draws.jpg"
            figures[name] = Path(sheet).read_bytes()
            entry["draws_sheet"] = f"figures/{name}"
    return figures


def _drop_unsafe_rewrites(vetted, changes, rechecked, recipe, check):
    """Undo relabelled or scoped steps whose re-check is not safe.

    A rejected rewrite falls back to the original step clipped to its safe
    limit when the first check measured one, and is removed otherwise.

    Returns
    -------
    (Recipe, list of VettingChange)
        The vetted recipe and the changes, the rejected rewrites' replaced.
    """
    from augplan.results import range_text
    from augplan.vet.vetted_file import VettingChange, _clip_to_limit, clip_change

    verdicts = {t["index"]: t["verdict"] for t in rechecked["transforms"]}
    entries = {t["index"]: t for t in check["transforms"]}
    steps, updated, position = [], [], 0
    kept_steps = iter(vetted.transforms)
    for change in changes:
        if change["action"] == "remove":
            updated.append(change)
            continue
        step = next(kept_steps)
        if change["action"] in ("relabel", "scope") and verdicts[position] != "safe":
            original, entry = recipe.transforms[change["index"]], entries[change["index"]]
            clipped = _clip_to_limit(original, entry)
            if clipped is not None and clipped != original:
                detail = (f"{change['detail']}; re-checked as rewritten it is still {verdicts[position]}: "
                          f"clipped to the safe limit {range_text(entry['safe_limit'])} instead")
                updated.append(clip_change(change["index"], original, clipped, change["verdict"],
                                           entry["safe_limit"], detail))
                steps.append(clipped)
            else:
                updated.append(VettingChange(change["index"], change["op"], change["verdict"], "remove",
                                             f"{change['detail']}; removed: re-checked as rewritten, it is "
                                             f"still {verdicts[position]}"))
        else:
            updated.append(change)
            steps.append(step)
        position += 1
    return dataclasses.replace(vetted, transforms=tuple(steps)), updated


def _signoff_items(changes):
    """The transforms a person must approve: unverified ones that vetting kept."""
    return [{"index": c["index"], "op": c["op"], "detail": c["detail"]}
            for c in changes if c["verdict"] == "unverified" and c["action"] == "keep"]


def _evidence_sheet(entry, index, out_dir):
    """Path of the written evidence sheet of transform ``index`` of a recipe entry, or None."""
    for transform in entry["check"]["transforms"]:
        if transform["index"] == index and transform.get("evidence_sheet"):
            return str(out_dir / transform["evidence_sheet"])
    return None


def _vetted_name(recipe):
    return f"{recipe.name}-vetted"


def _stage(quiet, text):
    if not quiet:
        print(printable(f"augplan vet: {text}"), file=sys.stderr, flush=True)


def _class_counts(dataset):
    counts = {label: dict.fromkeys(("train", "val", "test", "field"), 0) for label in dataset.classes}
    for record in dataset.records:
        if record.label in counts:
            counts[record.label][record.split] += 1
    return counts


# Draws shown per recipe: one training image per class and five draws of it,
# in cells small enough that a report of several recipes stays compact.
_DRAWS_SHEET = {"per_class": 1, "draws": 5, "cell": 64}


def _draws_sheet(dataset, recipe, path, *, seed, number):
    """A contact sheet of augmented draws of ``recipe`` (as `preview` draws it), written as JPEG."""
    from augplan.render.plots import jpeg_bytes
    from augplan.render.sheets import preview_sheet

    if not dataset.split("train"):
        return None
    sheet = preview_sheet(dataset, recipe, rng=np.random.default_rng([seed, number]), **_DRAWS_SHEET)
    write_bytes_atomic(path, jpeg_bytes(sheet))
    return str(path)


def _gain_text(block):
    """A gain and its 95% interval in percentage points, the report's one unit."""
    low, high = block["gain_ci"]
    return f"{100 * block['gain']:+.1f} points [95% CI {100 * low:+.1f}, {100 * high:+.1f}]"


def _verdict_sentence(recipe_entries, evaluation, best, top):
    """The report's first line: what to use, how much it gains, what augplan changed.

    ``best`` is the score row `BEST_RULE` recommends (None when no recipe
    clearly beat no augmentation); ``top`` is the highest-ranked vetted row,
    whose figures are quoted either way. The evidence named first is the
    evaluator's primary evidence (``decided_on``). One voice: without a
    recommendation no recipe is called recommended or "used".
    """
    model = evaluation["model"]
    phrase = model_phrase(model["name"])
    row = best if best is not None else top
    on_field = evaluation.get("decided_on") == "field" and (row.get("field") or {}).get("gain") is not None
    if best is None:
        where = "the labelled field sample" if on_field else "validation"
        lead = f"No recipe clearly beat no augmentation on {where}, scored with {phrase}"
        if is_linear(model["name"]):
            lead += (" (whose gains are biased against augmentation: this is not evidence of harm; its order "
                     f"puts {top['name']} first; score with --model cnn before deciding)")
        else:
            lead += f"; the highest-ranked is {top['name']}"
        lead += "; the vetted recipes are exported, none recommended"
    else:
        lead = f"Use {best['name']} (scored with {phrase})"
    scores = (f"gain over no augmentation {_gain_text(row['field'])} on the labelled field sample, which "
              f"decides, and {_gain_text(row)} on validation" if on_field
              else f"validation gain over no augmentation {_gain_text(row)}")
    accuracy = evaluation["baseline"].get("accuracy")
    if accuracy is not None and accuracy >= 0.99:
        scores += f", which is saturated ({accuracy:.0%} without augmentation)"
    changed = [entry["name"] for entry in recipe_entries if not entry["vetted"]["unchanged"]]
    unverified = sum(1 for entry in recipe_entries for change in entry["vetted"].get("changes", ())
                     if change["verdict"] == "unverified" and change["action"] == "keep")
    # Each claim follows the verdicts: "label-safe" only when no kept step is unverified.
    if changed and not unverified:
        tail = f"augplan changed {', '.join(changed)} to make {'it' if len(changed) == 1 else 'them'} label-safe"
    elif changed:
        tail = f"augplan changed {', '.join(changed)}"
    else:
        tail = "every transform was checked and kept as written" if unverified else "every transform kept its labels"
    if unverified:
        tail += (f"; {unverified} kept transform{'s are' if unverified > 1 else ' is'} unverified and "
                 f"need{'' if unverified > 1 else 's'} a person's sign-off")
    return f"{lead}: {scores}; {tail}."


def vet_recipes(dataset, recipes, out_dir, *, force=False, approve=(), repeats=5, sample=None, seed=0,
                workers=1, quiet=True, ledger_path=None, cache_dir=None, replace=False, model=None, size=64):
    """Vet recipes end to end and write the report, vetted recipes and evidence.

    Parameters
    ----------
    dataset : augplan.data.Dataset
    recipes : list of augplan.recipe.Recipe
        Distinct names.
    out_dir : str or Path
        Written at the end, all at once (a temporary folder beside it is
        renamed into place); an existing non-empty folder needs ``force``
        (same-named files are overwritten) or ``replace`` (an earlier output
        is swapped out whole).
    approve : tuple of int
        Indices of unverified transforms a person approved (applies to every recipe).
    repeats, sample, seed, workers, quiet, ledger_path, cache_dir
        Passed to the check, coverage and evaluation steps.
    model : str, optional
        The model recipes are scored with (`augplan.evaluate.evaluate_recipes`'s
        ``model``): None (the default network, ``'cnn'``), ``'linear'`` or
        ``'module:callable'``. The label-safety check trains it as the first
        witness of a break; its screen and safety test use the linear proxy.
    size : int, default 64
        The side images are read and trained at (``--side``).

    Returns
    -------
    augplan.results.VetResult
        ``verdict``, ``report``, ``vetted_recipe``, ``evidence``, ``unchanged``,
        ``best``, ``changes`` and ``signoff``: ``best`` and ``vetted_recipe``
        are None when no recipe beat no augmentation (`BEST_RULE`); ``changes`` lists per recipe what
        vetting did to each transform (``action`` keep, relabel, scope, clip or
        remove); ``signoff`` lists the transforms a person must approve, each
        with its evidence sheet.
    """
    check_output(out_dir, folder=True, protected=dataset.input_folders())
    scoring = scoring_model(model)  # a bad --model fails before the long steps
    out_dir = prepare_output(out_dir, force=force, replace=replace)
    for recipe in recipes:
        if recipe.source is not None and _inside(Path(recipe.source), out_dir):
            raise BadInputError(f"{recipe.source}: the recipe lies inside the output folder {out_dir}, "
                                "whose files vet replaces; choose another output folder.")
    # The check takes the model as asked: with none named it confirms with its
    # own default (CHECK_DEFAULT_MODEL), while the scoring uses DEFAULT_MODEL.
    settings = dict(sample=sample, seed=seed, workers=workers, quiet=quiet, model=model, size=size)
    # One run at a time writes a folder; under the lock its state is checked again.
    with output_lock(out_dir), tempfile.TemporaryDirectory(prefix="augplan-vet-") as scratch:
        prepare_output(out_dir, force=force, replace=replace)
        scratch = Path(scratch)
        entries, vetted_recipes = [], []
        for number, recipe in enumerate(recipes):
            _stage(quiet, f"[{number + 1}/{len(recipes)}] {recipe.name}: label safety and coverage")
            entry, vetted = _vet_one(dataset, recipe, scratch, number, approve, settings)
            entries.append(entry)
            vetted_recipes.append(vetted)

        _stage(quiet, "scoring every recipe and its vetted form against no augmentation")
        to_score = list(recipes) + [v for v, e in zip(vetted_recipes, entries) if not e["vetted"]["unchanged"]]
        # The shortcut audit of the original images is the same in every recipe's coverage.
        evaluation = evaluate_recipes(dataset, to_score, repeats=repeats, seed=seed, workers=workers,
                                      quiet=quiet, ledger_path=ledger_path, cache_dir=cache_dir, model=scoring,
                                      size=size,
                                      val_shares_shortcut=entries[0]["coverage"]["val_shares_shortcut"],
                                      candidates={v.name for v in vetted_recipes})
        scores = {row["name"]: row for row in evaluation["recipes"]}
        for entry, vetted in zip(entries, vetted_recipes):
            entry["vetted"]["score"] = scores[vetted.name]
        # The ranking and the recommendation are the evaluator's (BEST_RULE); nothing is re-sorted here.
        ranking = evaluation["ranking"]
        by_vetted_name = {entry["vetted"]["name"]: entry for entry in entries}
        top_entry = next(by_vetted_name[name] for name in ranking if name in by_vetted_name)
        best_entry = None if evaluation["best"] is None else by_vetted_name[evaluation["best"]]
        best_row = None if best_entry is None else scores[evaluation["best"]]

        header = {"augplan_version": __version__, "created": creation_date(), "data_fingerprint": fingerprint(dataset)}
        documents = {f"vetted-{entry['name']}.yaml": vetted_text(vetted, _vetted_evidence(entry, vetted, evaluation,
                                                                                          header, seed,
                                                                                          dataset.classes),
                                                                     changes=entry["vetted"]["changes"])
                     for entry, vetted in zip(entries, vetted_recipes)}
        if best_entry is not None:
            documents["vetted-recipe.yaml"] = documents[f"vetted-{best_entry['name']}.yaml"]
        verdict = _verdict_sentence(entries, evaluation, best_row, top_entry["vetted"]["score"])
        figures = _collect_figures(entries)
        evidence_document = VetReport.from_json(_evidence_document(dataset, entries, evaluation, best_entry,
                                                                   verdict, header, seed, ranking))
        html = _render_with_figures(evidence_document, figures, scratch / "staged")
        # Everything is computed: now write, all files or none.
        publish_folder(_output_files(documents, figures, evidence_document, html), out_dir, replace=replace,
                       last="report.html")

    return VetResult(verdict=verdict, report=str(out_dir / "report.html"),
                     vetted_recipe=None if best_entry is None else str(out_dir / "vetted-recipe.yaml"),
                     evidence=str(out_dir / "evidence.json"),
                     unchanged=all(entry["vetted"]["unchanged"] for entry in entries),
                     best=None if best_entry is None else best_entry["name"], model=evaluation["model"]["name"],
                     decision_note=evaluation["decision_note"],
                     changes=[{"recipe": entry["name"], "vetted": entry["vetted"]["name"],
                               "unchanged": entry["vetted"]["unchanged"], "transforms": entry["vetted"]["changes"]}
                              for entry in entries],
                     signoff=[{"recipe": entry["name"], **item,
                               "evidence_sheet": _evidence_sheet(entry, item["index"], out_dir)}
                              for entry in entries for item in entry["vetted"]["signoff"]])


def _vet_one(dataset, recipe, scratch, number, approve, settings):
    """Check, coverage and the vetted form of recipe ``number``: its evidence entry and vetted recipe.

    Evidence sheets and the draws sheet are written into ``scratch``; the
    factor histograms stay data, drawn by the report.
    """
    check = check_recipe(dataset, recipe, evidence_dir=scratch / f"evidence-{number}", **settings)
    coverage = analyse_coverage(dataset, recipe, seed=settings["seed"], workers=settings["workers"],
                                quiet=settings["quiet"])
    vetted, changes = vet_transforms(recipe, check, approve=approve, coverage_result=coverage)
    rechecked = None
    if any(change["action"] in ("relabel", "scope") for change in changes):
        # A rewrite was suggested by the checker but not itself measured:
        # measure it, and drop a rewritten step that is still not safe.
        rechecked = check_recipe(dataset, vetted, **settings).to_json()
        vetted, changes = _drop_unsafe_rewrites(vetted, changes, rechecked, recipe, check)
    changes = [change.to_json() for change in changes]
    unchanged = vetted.transforms == recipe.transforms
    signoff = _signoff_items(changes)
    if not unchanged:
        vetted = dataclasses.replace(vetted, name=_vetted_name(recipe))
    draws = _draws_sheet(dataset, vetted, scratch / f"draws-{number}.jpg", seed=settings["seed"], number=number)
    entry = {"name": recipe.name, "source": recipe.source, "recipe": recipe_to_dict(recipe),
             "recipe_hash": recipe_hash(recipe), "check": check.to_json(), "coverage": coverage.to_json(),
             "draws_sheet": draws,
             "vetted": {"name": vetted.name, "recipe": recipe_to_dict(vetted),
                        "changes": changes, "signoff": signoff, "unchanged": unchanged, "recheck": rechecked}}
    return entry, vetted


def _vetted_evidence(entry, vetted, evaluation, header, seed, classes):
    """The evidence block written into one vetted recipe file (and covered by its checksum)."""
    score = entry["vetted"]["score"]
    evidence = {
        **header,
        "vetted_from": {"name": entry["name"], "recipe_hash": entry["recipe_hash"]},
        "model": {"cv_accuracy": entry["check"]["model"]["cv_accuracy"]},
        "verdicts": [{"index": t["index"], "op": t["op"], "verdict": t["verdict"],
                      "change_rate": t["change_rate"], "change_rate_ci": t["change_rate_ci"]}
                     for t in entry["check"]["transforms"]],
        "changes": [f"{c['index']} {c['op']}: {c['action']}" + (f" ({c['detail']})" if c["detail"] else "")
                    for c in entry["vetted"]["changes"]],
        "validation": {"scored_with": evaluation["model"]["name"], "scored_on": evaluation["scored_on"],
                       "gain": score["gain"],
                       "gain_ci": score["gain_ci"], "p_holm": score["p_holm"],
                       "repeats": evaluation["repeats"]},
        "seeds": {"analysis": seed, "recipe": vetted.seed},
    }
    field = score.get("field") or {}
    if field.get("gain") is not None:
        evidence["field"] = {"gain": field["gain"], "gain_ci": field["gain_ci"],
                             "n_images": field.get("n_images")}
    # Which evidence decided (BEST_RULE) and what validation can show, as every output of vet says it.
    evidence["decided_on"] = evaluation["decided_on"]
    if evaluation["val_shares_shortcut"]:
        evidence["validation_note"] = evaluation["decision_note"]
    evidence["classes"] = list(classes)
    signoff = [f"{item['index']} {item['op']}: {item['detail']}" for item in entry["vetted"]["signoff"]]
    if signoff:
        evidence["needs_signoff"] = signoff
    return evidence


def _evidence_document(dataset, entries, evaluation, best_entry, verdict, header, seed, ranking):
    """The whole job's evidence (``evidence.json``), which the report is rendered from."""
    return {
        "augplan_version": header["augplan_version"], "created": header["created"], "verdict": verdict,
        "data": {"root": str(dataset.root), "fingerprint": header["data_fingerprint"],
                 "classes": list(dataset.classes),
                 "counts": {split: len(dataset.split(split)) for split in ("train", "val", "test", "field")},
                 "class_counts": _class_counts(dataset),
                 "val_from_train": dataset.val_from_train, "split_seed": dataset.split_seed,
                 "skipped": [list(item) for item in dataset.skipped], "leaks": find_duplicates(dataset)},
        "recipes": entries, "evaluation": evaluation.to_json(),
        "best": None if best_entry is None else best_entry["name"],
        "ranking": ranking, "ranking_rule": BEST_RULE,
        "cautions": list(CAUTIONS), "seed": seed,
    }


def _render_with_figures(evidence_document, figures, staging):
    """The HTML report, its figures read from a staging folder laid out like the output folder."""
    from augplan.render import render_report

    (staging / "figures").mkdir(parents=True)
    for name, data in figures.items():
        (staging / "figures" / name).write_bytes(data)
    return render_report(evidence_document, base_dir=staging)


def _output_files(documents, figures, evidence_document, html):
    """Every output file as ``{relative path: bytes}``: vetted recipes, figures, evidence, report (last)."""
    evidence_text = json.dumps(evidence_document, indent=2, allow_nan=False, default=str)
    files = {name: text.encode("utf-8") for name, text in documents.items()}
    files.update({f"figures/{name}": data for name, data in figures.items()})
    files["evidence.json"] = (evidence_text + "\n").encode("utf-8")
    files["report.html"] = html.encode("utf-8")
    return files
