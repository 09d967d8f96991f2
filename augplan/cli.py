"""The command line: parse arguments, call the library, print, return an exit code.

Nothing here computes anything the library cannot compute on its own.
"""

import argparse
import dataclasses
import json
import os
import shutil
import signal
import sys
import threading
import traceback
from enum import IntEnum
from pathlib import Path

from augplan import __version__
from augplan.errors import BadInputError, printable
from augplan.workspace import default_feature_cache, default_ledger

__all__ = ["ExitCode", "main"]


class ExitCode(IntEnum):
    """Exit codes of every command (README, "Commands")."""

    OK = 0          # done, everything passed
    FLAGGED = 1     # done, something was flagged
    BAD_INPUT = 2   # bad input or usage
    INTERNAL = 3    # a bug in augplan: please report it
    INTERRUPTED = 130
    TERMINATED = 143  # 128 + SIGTERM, as a shell reports it


class _UsageError(BadInputError):
    """A command-line usage fault; its text already starts with the command's name."""


class _Parser(argparse.ArgumentParser):
    """An argument parser that raises instead of exiting, so main() returns codes."""

    def error(self, message):
        raise _UsageError(f"{self.prog}: error: {message} (see '{self.prog} --help')")


def _common(parser, *, data=True, json_flag=True, data_optional=False, seed_flag=True, recipe_seed=False):
    if data:
        parser.add_argument("data", metavar="DATA", nargs="?" if data_optional else None,
                            help="data folder (train/<class>/..., val/<class>/...) or a CSV manifest")
        parser.add_argument("--strict", action="store_true",
                            help="stop on the first file that is not a readable image instead of skipping it")
    if seed_flag and recipe_seed:  # the recipe's own seed: says where its draws start
        parser.add_argument("--seed", type=_seed, default=None,
                            help="seed of the draws (default: the recipe's own 'seed:')")
    elif seed_flag:  # verify and history draw nothing: a seed there would mean nothing
        parser.add_argument("--seed", type=_seed, default=0, help="seed of the analysis (default 0)")
    if data:
        parser.add_argument("--split-seed", type=_seed, default=0,
                            help="seed of the stratified validation split made when DATA has no val/ "
                                 "(default 0); apart from --seed so the data stay the same across analyses")
    parser.add_argument("--quiet", action="store_true", help="no progress bars, no warnings on stderr")
    if json_flag:
        parser.add_argument("--json", action="store_true",
                            help="print one JSON document on stdout; human text goes to stderr")
    parser.add_argument("--traceback", action="store_true", help="show the traceback of an unexpected error")


def _seed(text):
    """The one validation of --seed, shared by every command."""
    from augplan.recipe.parse import MAX_SEED

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number from 0 to {MAX_SEED}; got {text!r}") from None
    if not 0 <= value <= MAX_SEED:
        raise argparse.ArgumentTypeError(f"expected a whole number from 0 to {MAX_SEED}; got {value}")
    return value


def _recipe_name(text):
    from augplan.recipe.parse import recipe_name_fault

    fault = recipe_name_fault(text)
    if fault is not None:
        raise argparse.ArgumentTypeError(f"a recipe name {fault}; got {text!r}")
    return text


#: The bound of every count option (README, "Limits"): past these a run only
#: exhausts memory or time, never answers better (common practice, no source).
#: ``--workers`` is bounded where it is resolved (`augplan.parallel.MAX_WORKERS`).
COUNT_BOUNDS = {"--per-class": 100, "--draws": 50, "--sample": 100_000, "--repeats": 100}


def _count(option):
    """The argparse type of a count option: a whole number from 1 to its bound."""
    def parse(text):
        maximum = COUNT_BOUNDS[option]
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number from 1 to at most {maximum}; "
                                             f"got {text!r}") from None
        if not 1 <= value <= maximum:
            raise argparse.ArgumentTypeError(f"expected a whole number from 1 to at most {maximum}; got {value}")
        return value

    return parse


def _workers(parser, *, ship_images=True):
    parser.add_argument("--workers", type=int, default=1,
                        help="parallel worker processes (default 1; -1 uses every core)")
    parser.add_argument("--cluster", metavar="ADDRESS", default=os.environ.get("AUGPLAN_CLUSTER") or None,
                        help="run the heavy work on the Dask scheduler at tcp://HOST:PORT instead "
                             "(default: $AUGPLAN_CLUSTER; needs pip install 'augplan[cluster]')")
    if ship_images:
        parser.add_argument("--ship-images", action="store_true",
                            help="send the image files' bytes to the workers with the work, for "
                                 "workers that cannot see the data folder (files held in memory)")


def _side(text):
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a side between 16 and 1024 pixels; got {text!r}") from None
    if not 16 <= value <= 1024:
        raise argparse.ArgumentTypeError(f"expected a side between 16 and 1024 pixels; got {value}")
    return value


def _model_flag(parser, what="model each recipe is scored with"):
    from augplan.measure.models import MODEL_CHOICES

    parser.add_argument("--model", default=None, metavar="NAME",
                        help=f"{what}: {MODEL_CHOICES} (your training function; see the README)")
    parser.add_argument("--side", type=_side, default=64, metavar="N",
                        help="side in pixels images are read and trained at (default 64; larger images "
                             "are reduced by area averaging)")


def _cache_flag(parser):
    parser.add_argument("--cache", type=Path, default=None, metavar="DIR",
                        help="feature cache of the original images (default .augplan/features beside DATA)")


def _execution(args):
    """The cluster when --cluster (or AUGPLAN_CLUSTER) names one, else the worker count."""
    from augplan.parallel import resolve_workers

    return resolve_workers(args.workers, getattr(args, "cluster", None))


def _build_parser():
    parser = _Parser(prog="augplan", description=(
        "Plan and vet an image augmentation recipe before a long training run: label safety, "
        "nuisance coverage, shortcut audit and honest validation scores."))
    parser.add_argument("--version", action="version", version=f"augplan {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    _add_analyses(commands)
    _add_jobs(commands)
    return parser


def _add_analyses(commands):
    """The commands that look at one side of a recipe: preview, check, coverage, evaluate."""
    p = commands.add_parser("preview", help="contact sheet of originals and augmented draws per class")
    _common(p, json_flag=False, recipe_seed=True)
    p.add_argument("--recipe", required=True, type=Path, help="recipe YAML ('-': standard input)")
    p.add_argument("-o", "--output", required=True, type=Path, help="PNG file to write")
    p.add_argument("--per-class", type=_count("--per-class"), default=3, help="images per class (default 3)")
    p.add_argument("--draws", type=_count("--draws"), default=5, help="augmented draws per image (default 5)")

    p = commands.add_parser("check", help="label safety of each transform")
    _common(p)
    _workers(p)
    p.add_argument("--recipe", required=True, type=Path, help="recipe YAML ('-': standard input)")
    p.add_argument("--sample", type=_count("--sample"), default=None, help="at most N training images per class")
    p.add_argument("--evidence", type=Path, default=None,
                   help="folder for contact sheets of the images that moved")
    _model_flag(p, what="model trained on replaced images in confirmation (the first witness; "
                        "default here: linear, the quick proxy)")

    p = commands.add_parser("coverage", help="nuisance widening, field coverage, shortcut audit")
    _common(p)
    _workers(p)
    p.add_argument("--recipe", required=True, type=Path, help="recipe YAML ('-': standard input)")
    p.add_argument("--field", type=Path, default=None, help="field sample folder (default DATA/field)")
    p.add_argument("--plots", type=Path, default=None,
                   help="folder for factors.png: every factor's histograms, one panel each")

    p = commands.add_parser("evaluate", help="score recipes against a no-augmentation baseline")
    _common(p)
    _workers(p)
    p.add_argument("--recipe", required=True, type=Path, action="append",
                   help="recipe YAML (repeatable; '-': standard input)")
    p.add_argument("--repeats", type=_count("--repeats"), default=5, help="independent draws and model seeds (default 5)")
    p.add_argument("--confirm-fraction", type=float, default=None,
                   help="carve this share of val out as a confirmation split scored once")
    p.add_argument("--ledger", type=Path, default=None,
                   help="results ledger (default .augplan/ledger.sqlite beside DATA)")
    _cache_flag(p)
    _model_flag(p)
    p.add_argument("--field", type=Path, default=None, help="labelled field sample folder (default DATA/field)")


def _add_jobs(commands):
    """The commands that make or read a recipe: draft, vet, verify, history, demo."""
    p = commands.add_parser("draft", help="propose a candidate recipe from the data, or from a starting recipe")
    _common(p, json_flag=False, data_optional=True)
    _workers(p)
    p.add_argument("--field", type=Path, default=None, help="field sample folder (default DATA/field)")
    p.add_argument("-o", "--output", type=Path, default=None,
                   help="recipe YAML to write ('-': standard output); required unless --list")
    p.add_argument("--name", type=_recipe_name, default=None,
                   help="name of the drafted recipe (default 'draft', or NAME-draft with --start)")
    p.add_argument("--start", metavar="RECIPE", default=None,
                   help="begin from this recipe file or shipped recipe (see --list) and adapt it to the "
                        "data: lighting widened toward the field, the label-safety check's scopes and "
                        "safe limits applied")
    p.add_argument("--sample", type=_count("--sample"), default=None,
                   help="at most N training images per class for --start's label-safety check")
    p.add_argument("--list", action="store_true", help="list the shipped starting recipes and exit")

    p = commands.add_parser("vet", help="the whole job: check, coverage, evaluate, report, vetted export")
    _common(p)
    _workers(p)
    p.add_argument("--recipe", required=True, type=Path, action="append",
                   help="recipe YAML (repeatable; '-': standard input)")
    p.add_argument("--field", type=Path, default=None, help="field sample folder (default DATA/field)")
    p.add_argument("-o", "--output", required=True, type=Path, help="output folder")
    p.add_argument("--force", action="store_true", help="write into an existing non-empty output folder")
    p.add_argument("--approve", default="", help="indices of unverified transforms to keep, e.g. 3,5")
    p.add_argument("--repeats", type=_count("--repeats"), default=5, help="evaluation repeats (default 5)")
    p.add_argument("--sample", type=_count("--sample"), default=None, help="at most N training images per class for check")
    p.add_argument("--ledger", type=Path, default=None,
                   help="results ledger (default .augplan/ledger.sqlite beside DATA)")
    _cache_flag(p)
    _model_flag(p)

    p = commands.add_parser("verify", help="check a vetted recipe's checksum and validity")
    _common(p, data=False, seed_flag=False)
    p.add_argument("vetted", type=Path, metavar="VETTED", help="vetted recipe YAML")
    p.add_argument("--data", type=Path, default=None, help="data set whose fingerprint to compare")

    p = commands.add_parser("history", help="past comparisons stored in the results ledger")
    _common(p, data=False, seed_flag=False)
    p.add_argument("data", metavar="DATA|RUN", nargs="?", default=None,
                   help="only comparisons on the data set DATA, or the details of run number RUN "
                        "(as the list shows)")
    p.add_argument("--ledger", type=Path, default=None, help="results ledger path")

    p = commands.add_parser("demo", help="vet the bundled demo scenario")
    _common(p, data=False)
    _workers(p, ship_images=False)
    p.add_argument("-o", "--output", type=Path, default=Path("augplan-demo-output"),
                   help="output folder (default ./augplan-demo-output, replaced)")
    p.add_argument("--model", default=None, metavar="NAME",
                   help="model the demo's recipes are scored with, and confirmed with when named "
                        "(default: cnn, the network, for scoring and linear for the check; linear: the quick proxy)")


def _say_error(text):
    """One line on stderr, control characters escaped (a name may hold terminal escapes)."""
    print(printable(str(text)), file=sys.stderr)


class _Console:
    """Where human text goes: stdout normally, stderr under --json."""

    def __init__(self, as_json, quiet):
        self.as_json = as_json
        self.quiet = quiet
        self._warned = set()

    def say(self, text=""):
        self._write(sys.stderr if self.as_json else sys.stdout, f"{text}\n")

    def warn(self, text):
        """Print a warning once: a data warning the result repeats is not printed twice."""
        if not self.quiet and text not in self._warned:
            self._warned.add(text)
            _say_error(f"warning: {text}")

    def emit_json(self, document):
        self._write(sys.stdout, json.dumps(document, indent=2, sort_keys=False, allow_nan=False) + "\n")

    @staticmethod
    def _write(stream, text):
        try:
            stream.write(printable(text))
            stream.flush()
        except BrokenPipeError:
            # The reader went away (e.g. `| head`): stop writing there, quietly.
            # Only our own output is handled here; a broken pipe anywhere else
            # (a worker connection) is a real error.
            if stream is sys.stdout:
                sys.stdout = open(os.devnull, "w")


def _generator(args):
    """The run's one `numpy.random.Generator`, made from ``--seed``: the only place the seed becomes one."""
    import numpy as np

    return np.random.default_rng(args.seed)


def _open_data(args, *, field=None):
    import numpy as np

    from augplan.data import open_dataset

    # open_dataset reads a .csv path as a manifest; the split's generator is
    # made here from --split-seed, apart from --seed, so the data stay put.
    dataset = open_dataset(args.data, strict=args.strict, rng=np.random.default_rng(args.split_seed),
                           split_seed=args.split_seed, field=field)
    return dataset.with_image_bytes() if getattr(args, "ship_images", False) else dataset


def _read_recipes(paths, dataset):
    """Read each recipe and check its class names against the data's classes."""
    from augplan.recipe.parse import MAX_RECIPE_BYTES, check_recipe_classes, parse_recipe, read_recipe

    if sum(str(path) == "-" for path in paths) > 1:
        raise BadInputError("--recipe -: standard input can hold only one recipe")
    # "-" reads standard input, bounded as a file is.
    recipes = [parse_recipe(sys.stdin.buffer.read(MAX_RECIPE_BYTES + 1), source="<stdin>")
               if str(path) == "-" else read_recipe(path) for path in paths]
    for recipe in recipes:
        check_recipe_classes(recipe, dataset.classes)
    names = [recipe.name for recipe in recipes]
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise BadInputError(f"recipes must have distinct names; {', '.join(repeated)} appears more than once")
    return recipes


def _report_dataset(console, dataset, *, result_says_val=False):
    """Warnings about the data; the stand-in validation split only where the result does not say it itself."""
    for relpath, reason in dataset.skipped:
        console.warn(f"skipped {relpath}: {reason}")
    if dataset.val_from_train and not result_says_val:
        from augplan.evaluate import no_val_warning

        console.warn(no_val_warning(dataset))
    if dataset.missing_val_message():
        console.warn(dataset.missing_val_message())


def _report_leaks(console, dataset):
    """Duplicates across splits; they are listed once, as one warning of the result (see `_with_leaks`)."""
    from augplan.data import find_duplicates

    return find_duplicates(dataset)


def _with_leaks(result, leaks):
    """The result with its ``leaks`` and, when there are any, one warning naming them (JSON and text alike)."""
    warnings = list(result.warnings)
    if leaks:
        kinds = ", ".join(f"{sum(l['kind'] == kind for l in leaks)} {kind}" for kind in ("exact", "near")
                          if any(l["kind"] == kind for l in leaks))
        shown = "; ".join(f"{l['a']} and {l['b']}" for l in leaks[:3])
        more = f"; and {len(leaks) - 3} more" if len(leaks) > 3 else ""
        warnings.append(f"{len(leaks)} duplicate pairs across splits ({kinds}) inflate validation scores: "
                        f"{shown}{more} (every pair under 'leaks' in --json)")
    return dataclasses.replace(result, leaks=leaks, warnings=warnings)


def _stores(args, dataset, console):
    """The results ledger and feature cache of a run: outside the data folder.

    Both default to ``.augplan/`` beside the data folder (for a manifest, the
    folder it lies in). A cache folder that cannot be created (read-only
    storage) turns the disk cache off with a warning instead of failing.
    """
    from augplan.workspace import ensure_outside_data

    ledger = args.ledger or default_ledger(dataset.root)
    cache = args.cache or default_feature_cache(dataset.root)
    ensure_outside_data(ledger, dataset.root, what="results ledger")
    ensure_outside_data(cache, dataset.root, what="feature cache")
    try:
        Path(cache).mkdir(parents=True, exist_ok=True)
    except OSError as error:
        if args.cache is not None:
            raise
        console.warn(f"{cache}: cannot hold the feature cache ({error.strerror}); features are computed "
                     "afresh each run. Pass --cache DIR to keep them.")
        cache = False
    return ledger, cache


def _run_preview(args, console):
    from augplan.render.sheets import preview_sheet, save_png
    import numpy as np

    dataset = _open_data(args)
    _report_dataset(console, dataset)
    _ensure_parent(args.output, dataset, inputs=[args.recipe])
    recipe = _read_recipes([args.recipe], dataset)[0]
    seed = recipe.seed if args.seed is None else args.seed  # the draws start where the recipe says
    sheet = preview_sheet(dataset, recipe, per_class=args.per_class, draws=args.draws,
                          rng=np.random.default_rng(seed))
    save_png(sheet, args.output)
    console.say(f"wrote {args.output}")
    return ExitCode.OK


def _ensure_parent(path, dataset=None, inputs=(), *, folder=False):
    """The one check of every output the user names (`augplan.atomic.check_output`)."""
    from augplan.atomic import check_output

    check_output(path, folder=folder, protected=dataset.input_folders() if dataset is not None else (),
                 inputs=inputs)


def _emit(console, args, result, table):
    """Warnings on stderr, then the JSON document or the human table; the exit code."""
    for warning in getattr(result, "warnings", ()):
        console.warn(warning)
    if args.json:
        console.emit_json(result.to_json())
    else:
        console.say(table(result))
    return ExitCode.FLAGGED if result.flagged else ExitCode.OK


def _run_check(args, console):
    from augplan.check import check_recipe
    from augplan.render import text as tables
    from augplan.render.sheets import write_evidence_sheets

    dataset = _open_data(args)
    _report_dataset(console, dataset)
    if args.evidence is not None:
        _ensure_parent(args.evidence, dataset, folder=True)
    leaks = _report_leaks(console, dataset)
    recipe = _read_recipes([args.recipe], dataset)[0]
    result = check_recipe(dataset, recipe, rng=_generator(args), sample=args.sample,
                          workers=_execution(args), quiet=args.quiet, model=args.model, size=args.side)
    if args.evidence is not None:
        result = result.with_evidence_sheets(write_evidence_sheets(result.evidence, args.evidence))
    return _emit(console, args, _with_leaks(result, leaks), tables.check_table)


def _run_coverage(args, console):
    from augplan.coverage import analyse_coverage
    from augplan.render import text as tables

    dataset = _open_data(args, field=args.field)
    _report_dataset(console, dataset, result_says_val=True)  # among the result's messages
    if args.plots is not None:
        _ensure_parent(args.plots, dataset, folder=True)
    recipe = _read_recipes([args.recipe], dataset)[0]
    result = analyse_coverage(dataset, recipe, rng=_generator(args), workers=_execution(args),
                              quiet=args.quiet)
    if args.plots is not None:
        from augplan.render.plots import with_factor_plots

        result = with_factor_plots(result, args.plots)
    return _emit(console, args, result, tables.coverage_table)


def _run_evaluate(args, console):
    from augplan.evaluate import evaluate_recipes
    from augplan.render import text as tables

    dataset = _open_data(args, field=args.field)
    _report_dataset(console, dataset, result_says_val=True)  # among the result's warnings
    leaks = _report_leaks(console, dataset)
    recipes = _read_recipes(args.recipe, dataset)
    ledger, cache = _stores(args, dataset, console)
    result = evaluate_recipes(dataset, recipes, _generator(args), seed=args.seed,
                              repeats=args.repeats, workers=_execution(args),
                              quiet=args.quiet, ledger_path=ledger, cache_dir=cache,
                              confirm_fraction=args.confirm_fraction, model=args.model, size=args.side)
    return _emit(console, args, _with_leaks(result, leaks), tables.leaderboard_table)


def _run_draft(args, console):
    from augplan.atomic import write_text_atomic
    from augplan.recipe import shipped

    if args.list:
        print(shipped.listing() or "this installation of augplan ships no starting recipes")
        return ExitCode.OK
    if args.data is None or args.output is None:
        missing = "DATA" if args.data is None else "-o/--output"
        raise _UsageError(f"augplan draft: error: {missing} is required unless --list is given "
                          "(see 'augplan draft --help')")
    start = shipped.read_start(args.start) if args.start is not None else None  # a bad --start fails first
    dataset = _open_data(args, field=args.field)
    _report_dataset(console, dataset)
    to_stdout = str(args.output) == "-"
    if not to_stdout:
        _ensure_parent(args.output, dataset, inputs=[args.start] if args.start is not None else [])
    if start is None:
        from augplan.coverage.draft import draft_recipe_text

        text = draft_recipe_text(dataset, name=args.name or "draft", seed=args.seed, workers=_execution(args),
                                 quiet=args.quiet)
    else:
        from augplan.vet.start import change_text, draft_from_start

        drafted = draft_from_start(dataset, start, _generator(args), name=args.name, sample=args.sample,
                                   workers=_execution(args), quiet=args.quiet)
        text = drafted.text
        for change in drafted.changes:  # stderr when the draft itself goes to standard output
            console._write(sys.stderr if to_stdout else sys.stdout, f"from {start.name}: {change_text(change)}\n")
    if to_stdout:  # "-" writes standard output; the note goes to stderr
        console._write(sys.stdout, text)
        _say_error("augplan: drafted a recipe on standard output; run 'augplan check' on it before use")
        return ExitCode.OK
    write_text_atomic(args.output, text)
    console.say(f"wrote {args.output}; run 'augplan check' on it before use")
    return ExitCode.OK


def _parse_approve(text):
    if not text.strip():
        return ()
    try:
        return tuple(sorted({int(part) for part in text.split(",") if part.strip()}))
    except ValueError:
        raise BadInputError(f"--approve takes transform indices separated by commas, e.g. 3,5; got {text!r}")


def _run_vet(args, console):
    from augplan.vet import vet_recipes

    dataset = _open_data(args, field=args.field)
    _report_dataset(console, dataset)
    recipes = _read_recipes(args.recipe, dataset)
    ledger, cache = _stores(args, dataset, console)
    summary = vet_recipes(dataset, recipes, args.output, force=args.force, approve=_parse_approve(args.approve),
                          repeats=args.repeats, sample=args.sample, rng=_generator(args),
                          seed=args.seed, workers=_execution(args),
                          quiet=args.quiet, ledger_path=ledger, cache_dir=cache, model=args.model,
                          size=args.side)
    _say_vetted(console, args, summary)
    return ExitCode.FLAGGED if summary.flagged else ExitCode.OK


def _say_vetted(console, args, summary):
    if args.json:
        console.emit_json(summary.to_json())
    console.say(summary.verdict)
    if summary.get("decision_note"):
        console.say(summary["decision_note"])
    for item in summary.get("signoff") or []:
        console.say(f"sign-off needed: {item['recipe']} transform {item['index']} ({item['op']}): {item['detail']}")
    console.say(f"report: {summary.report}")
    if summary.vetted_recipe is not None:
        console.say(f"vetted recipe: {summary.vetted_recipe}")
    else:
        console.say("no vetted-recipe.yaml: no recipe clearly beat no augmentation (each recipe's vetted-NAME.yaml "
                    "is written beside the report)")


def _run_verify(args, console):
    from augplan.vet import verify_vetted

    result = verify_vetted(args.vetted, data=args.data)
    if args.json:
        console.emit_json(result.to_json())
    for line in result.messages:
        console.say(line)
    return ExitCode.FLAGGED if result.flagged else ExitCode.OK


def _terminal_width():
    """Columns of the terminal (``$COLUMNS`` first, 80 when not a terminal)."""
    return max(40, shutil.get_terminal_size((80, 24)).columns)


def _run_history(args, console):
    from augplan.evaluate import history, run_details
    import numpy as np

    from augplan.data import fingerprint, open_dataset
    from augplan.render import text as tables
    from augplan.results import HistoryResult

    if args.data is not None and args.data.isdigit() and not Path(args.data).exists():
        ledger = args.ledger or default_ledger(None)
        entry = run_details(ledger, int(args.data))
        if args.json:
            console.emit_json(HistoryResult(ledger=str(ledger), evaluations=[entry]).to_json())
        else:
            console.say(tables.run_table(entry, width=_terminal_width()))
        return ExitCode.OK
    # A data set without val/ is split as the default --split-seed (0) splits it, so its
    # fingerprint is the one the analyses stored.
    dataset = open_dataset(args.data, rng=np.random.default_rng(0), split_seed=0) if args.data else None
    ledger = args.ledger or default_ledger(dataset.root if dataset else None)
    result = history(ledger, fingerprint=fingerprint(dataset) if dataset else None)
    if args.json:
        console.emit_json(result.to_json())
    else:
        console.say(tables.history_table(result.evaluations, width=_terminal_width()))
    return ExitCode.OK


def _run_demo(args, console):
    from augplan.demo import run_demo

    summary = run_demo(args.output, _generator(args), seed=args.seed, workers=_execution(args),
                       quiet=args.quiet, model=args.model)
    _say_vetted(console, args, summary)
    return ExitCode.FLAGGED if summary.flagged else ExitCode.OK  # as vet exits


_COMMANDS = {
    "preview": _run_preview, "check": _run_check, "coverage": _run_coverage, "evaluate": _run_evaluate,
    "draft": _run_draft, "vet": _run_vet, "verify": _run_verify, "history": _run_history, "demo": _run_demo,
}


class _Terminated(BaseException):
    """SIGTERM arrived: unwound like Ctrl-C, so every output in progress is removed."""


def _on_sigterm(signum, frame):
    raise _Terminated()


def main(argv=None):
    """Run augplan with ``argv`` (default ``sys.argv[1:]``) and return the exit code."""
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    try:
        return _main(argv)
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _main(argv):
    argv = sys.argv[1:] if argv is None else list(argv)
    show_traceback = "--traceback" in argv
    try:
        args = _build_parser().parse_args(argv)
        if args.command is None:
            _build_parser().print_help(sys.stderr)
            return ExitCode.BAD_INPUT
        if hasattr(args, "workers"):
            _execution(args)  # a bad count or address, or a missing Dask, stops here before any data is read
        console = _Console(getattr(args, "json", False), args.quiet)
        return _COMMANDS[args.command](args, console)
    except SystemExit as stop:  # --help and --version
        return ExitCode.OK if stop.code in (0, None) else ExitCode.BAD_INPUT
    except _UsageError as error:
        _say_error(error)
        return ExitCode.BAD_INPUT
    except BadInputError as error:
        if show_traceback and getattr(error, "traceback_text", None):
            _say_error(error.traceback_text.rstrip("\n"))  # the team's own code failed: its traceback
        _say_error(f"augplan: error: {error}")
        return ExitCode.BAD_INPUT
    except OSError as error:  # the user's files or folders: permissions, disk full, missing paths
        where = error.filename or "a file"
        _say_error(f"augplan: error: {where}: {error.strerror or error}")
        return ExitCode.BAD_INPUT
    except KeyboardInterrupt:
        _say_error("augplan: interrupted; no partial output was kept")
        return ExitCode.INTERRUPTED
    except _Terminated:
        _say_error("augplan: terminated (SIGTERM); no partial output was kept")
        return ExitCode.TERMINATED
    except Exception as error:  # a bug: say so plainly, traceback on request
        if show_traceback:
            _say_error(traceback.format_exc().rstrip("\n"))
        _say_error(f"augplan: internal error: {type(error).__name__}: {error}. "
                   "This is a bug in augplan; rerun with --traceback and report it.")
        return ExitCode.INTERNAL


if __name__ == "__main__":
    sys.exit(main())
