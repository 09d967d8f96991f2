"""The whole job: check, coverage and evaluation of recipes, then report and vetted export.

`vet_recipes` runs the steps in order: per recipe the label-safety check,
the coverage and the vetting policy (`augplan.vet.policy`); then one
evaluation of every recipe and its vetted form, whose ranking and
recommendation are carried as they are (`augplan.evaluate.ranking`); then
the verdict (`augplan.vet.verdict`), the evidence (`augplan.vet.evidence`)
and the files (`augplan.vet.outputs`), written last, all or none.
"""

import dataclasses
import sys
import tempfile
from pathlib import Path

from augplan import __version__
from augplan.atomic import check_output, output_lock, publish_folder
from augplan.check import check_recipe
from augplan.coverage.coverage import analyse_coverage
from augplan.data import fingerprint
from augplan.errors import BadInputError, printable
from augplan.evaluate.evaluate import evaluate_recipes
from augplan.measure.models import scoring_model
from augplan.recipe.parse import recipe_hash, recipe_to_dict
from augplan.results import VetResult, VettedRecipe
from augplan.vet.evidence import vet_report, vetted_evidence
from augplan.vet.outputs import draws_sheet, evidence_figures, output_files, render_with_figures
from augplan.vet.policy import vet_recipe
from augplan.vet.streams import vet_streams
from augplan.vet.verdict import verdict_sentence
from augplan.vet.vetted_file import creation_date, vetted_text

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


def _stage(quiet, text):
    if not quiet:
        print(printable(f"augplan vet: {text}"), file=sys.stderr, flush=True)


def _vet_one(dataset, recipe, number, approve, streams, settings):
    """Check, coverage and the vetted form of recipe ``number``.

    Returns its `VettedRecipe` (unscored), the vetted recipe and its figures
    (``{name: bytes}``: the evidence sheets drawn from the check's evidence
    items and the draws sheet, whose paths in the entry are already the
    output folder's); the factor histograms stay data, drawn by the report.
    """
    check = check_recipe(dataset, recipe, rng=streams.check[number], **settings)
    check, figures = evidence_figures(check, number, recipe.name)
    coverage = analyse_coverage(dataset, recipe, rng=streams.coverage[number], workers=settings["workers"],
                                quiet=settings["quiet"])

    def recheck(rewritten):
        # A rewrite was suggested by the checker but not itself measured: measure it.
        return check_recipe(dataset, rewritten, rng=streams.recheck[number], **settings)

    vetted, form = vet_recipe(recipe, check, approve=approve, coverage=coverage, recheck=recheck)
    draws = draws_sheet(dataset, vetted, streams.sheets[number])
    draws_name = None if draws is None else f"{number}-{recipe.name}-draws.jpg"
    if draws is not None:
        figures[draws_name] = draws
    entry = VettedRecipe(name=recipe.name, source=recipe.source, recipe=recipe_to_dict(recipe),
                         recipe_hash=recipe_hash(recipe), check=check, coverage=coverage,
                         draws_sheet=None if draws is None else f"figures/{draws_name}", vetted=form)
    return entry, vetted, figures


def _evaluate(dataset, recipes, entries, vetted_recipes, rng, *, seed, options):
    """Score every recipe and each changed vetted form; each entry gets its vetted form's score."""
    to_score = list(recipes) + [v for v, e in zip(vetted_recipes, entries) if not e.vetted.unchanged]
    # The shortcut audit of the original images is the same in every recipe's coverage.
    evaluation = evaluate_recipes(dataset, to_score, rng, seed=seed,
                                  val_shares_shortcut=entries[0].coverage.val_shares_shortcut,
                                  candidates={v.name for v in vetted_recipes}, **options)
    entries = [dataclasses.replace(entry, vetted=dataclasses.replace(entry.vetted,
                                                                     score=evaluation.score(vetted.name)))
               for entry, vetted in zip(entries, vetted_recipes)]
    return evaluation, entries


def _verdict(entries, evaluation):
    """The run's verdict sentence, from the evaluation's own ranking and recommendation (never re-sorted)."""
    vetted_names = {entry.vetted.name for entry in entries}
    top = next(evaluation.score(name) for name in evaluation.ranking if name in vetted_names)
    return verdict_sentence([(entry.name, entry.vetted) for entry in entries], best=evaluation.best_score(),
                            top=top, model_name=evaluation.model["name"], decided_on=evaluation.decided_on,
                            baseline_accuracy=evaluation.baseline.get("accuracy"))


def _documents(entries, vetted_recipes, evaluation, header, seed, classes):
    """The vetted recipe files' texts, ``vetted-recipe.yaml`` being the recommended one's."""
    documents = {f"vetted-{entry.name}.yaml": vetted_text(vetted, vetted_evidence(entry, vetted, evaluation, header,
                                                                                  seed, classes),
                                                          changes=entry.vetted.changes)
                 for entry, vetted in zip(entries, vetted_recipes)}
    best = next((entry for entry in entries if entry.vetted.name == evaluation.best), None)
    if best is not None:
        documents["vetted-recipe.yaml"] = documents[f"vetted-{best.name}.yaml"]
    return documents


def _result(report, out_dir):
    """The `VetResult`: where the outputs went, and per recipe what vetting changed and who must sign off."""
    evaluation, best = report.evaluation, report.best
    signoff = []
    for entry in report.recipes:
        sheets = {t.index: t.evidence_sheet for t in entry.check.transforms}
        signoff += [{"recipe": entry.name, **item,
                     "evidence_sheet": str(out_dir / sheets[item.index]) if sheets.get(item.index) else None}
                    for item in entry.vetted.signoff]
    return VetResult(verdict=report.verdict, report=str(out_dir / "report.html"),
                     vetted_recipe=None if best is None else str(out_dir / "vetted-recipe.yaml"),
                     evidence=str(out_dir / "evidence.json"),
                     unchanged=all(entry.vetted.unchanged for entry in report.recipes), best=best,
                     model=evaluation.model["name"], decision_note=evaluation.decision_note,
                     changes=[{"recipe": entry.name, "vetted": entry.vetted.name,
                               "unchanged": entry.vetted.unchanged, "transforms": entry.vetted.changes}
                              for entry in report.recipes],
                     signoff=signoff)


def _check_recipes_outside(recipes, out_dir):
    for recipe in recipes:
        if recipe.source is not None and _inside(Path(recipe.source), out_dir):
            raise BadInputError(f"{recipe.source}: the recipe lies inside the output folder {out_dir}, "
                                "whose files vet replaces; choose another output folder.")


def vet_recipes(dataset, recipes, out_dir, *, rng, seed=None, force=False, approve=(), repeats=5, sample=None,
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
    rng : numpy.random.Generator
        Split once (`augplan.vet.streams.vet_streams`): the checks, the
        re-checks, the coverage analyses, the evaluation and the draws
        sheets each get their own child.
    seed : int, optional
        The seed ``rng`` was made from, recorded as provenance (the report,
        the evaluation, each vetted file's ``seeds``).
    approve : tuple of int
        Indices of unverified transforms a person approved (applies to every recipe).
    repeats, sample, workers, quiet, ledger_path, cache_dir
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
        ``best`` and ``vetted_recipe`` are None when no recipe beat no
        augmentation (`BEST_RULE`); ``changes`` lists per recipe what vetting
        did to each transform; ``signoff`` the transforms a person must
        approve, each with its evidence sheet.
    """
    check_output(out_dir, folder=True, protected=dataset.input_folders())
    scoring = scoring_model(model)  # a bad --model fails before the long steps
    out_dir = prepare_output(out_dir, force=force, replace=replace)
    _check_recipes_outside(recipes, out_dir)
    streams = vet_streams(rng, len(recipes))
    # The check takes the model as asked: with none named it confirms with its
    # own default (CHECK_DEFAULT_MODEL), while the scoring uses DEFAULT_MODEL.
    settings = dict(sample=sample, workers=workers, quiet=quiet, model=model, size=size)
    options = dict(repeats=repeats, workers=workers, quiet=quiet, ledger_path=ledger_path, cache_dir=cache_dir,
                   model=scoring, size=size)
    # One run at a time writes a folder; under the lock its state is checked again.
    with output_lock(out_dir), tempfile.TemporaryDirectory(prefix="augplan-vet-") as scratch:
        prepare_output(out_dir, force=force, replace=replace)
        scratch = Path(scratch)
        entries, vetted_recipes, figures = [], [], {}
        for number, recipe in enumerate(recipes):
            _stage(quiet, f"[{number + 1}/{len(recipes)}] {recipe.name}: label safety and coverage")
            entry, vetted, drawn = _vet_one(dataset, recipe, number, approve, streams, settings)
            entries.append(entry)
            vetted_recipes.append(vetted)
            figures.update(drawn)
        _stage(quiet, "scoring every recipe and its vetted form against no augmentation")
        evaluation, entries = _evaluate(dataset, recipes, entries, vetted_recipes, streams.evaluate, seed=seed,
                                        options=options)
        seed = evaluation.seed  # the provenance the evaluation recorded (the root when none was given)
        header = {"augplan_version": __version__, "created": creation_date(), "data_fingerprint": fingerprint(dataset)}
        documents = _documents(entries, vetted_recipes, evaluation, header, seed, dataset.classes)
        report = vet_report(dataset, entries, evaluation, verdict=_verdict(entries, evaluation), header=header,
                            seed=seed)
        html = render_with_figures(report, figures, scratch / "staged")
        # Everything is computed: now write, all files or none.
        publish_folder(output_files(documents, figures, report, html), out_dir, replace=replace, last="report.html")
    return _result(report, out_dir)
