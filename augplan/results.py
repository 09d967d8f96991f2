"""Typed results of every command that reports: one frozen dataclass each.

Each result's fields are the top-level keys of the command's ``--json``
document, in that order; `to_json` gives the document itself (nested parts are
already plain JSON values: lists, dicts, strings, numbers, None). The schema of
each document ships beside this module (``augplan/schemas/<command>.schema.json``,
see `schema_path`) and the test suite validates every command's output
against it. ``flagged`` is the rule behind exit code 1 ("done, something was
flagged"), so the command line reads no document keys of its own.

A result is also the dict of its document (``result["transforms"]``,
``json.dumps(result)``), so code that consumes documents works on results
unchanged. Keys a result type does not know yet are kept, in order, in
``extra``, so a new key added by an analysis reaches the JSON before the type
lists it as a field.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

__all__ = [
    "Record",
    "CheckResult",
    "CoverageResult",
    "EvaluateResult",
    "VetResult",
    "VerifyResult",
    "HistoryResult",
    "RecipeScore",
    "HistoryRun",
    "VettingChange",
    "Suggestion",
    "TransformVerdict",
    "Swap",
    "ScreenSwap",
    "EvidenceItem",
    "SignoffItem",
    "VettedForm",
    "VettedRecipe",
    "RecipeChanges",
    "DatasetSummary",
    "VetReport",
    "RESULT_TYPES",
    "schema_path",
    "json_number",
    "range_text",
]

SCHEMA_DIR = Path(__file__).with_name("schemas")



class _Absent:
    """Marks an optional key that is absent from the document (None is a value)."""

    def __repr__(self):
        return "<absent>"


_ABSENT = _Absent()


def _optional():
    return field(default=_ABSENT)


@dataclass(frozen=True, eq=False)
class Record(dict):
    """Base of every typed result and of the rows inside them.

    A record is a frozen dataclass whose fields are the keys of its JSON
    object, in order, and also the `dict` of that object (filled once, when
    it is made), so ``json.dumps(record)`` and ``record["verdict"]`` work as
    well as ``record.verdict``; two records are equal when their documents
    are. A row type (one transform's verdict, one recipe's score) subclasses
    it like a command's result does; a field holding rows holds the row
    objects, which are already dicts of their JSON.
    """

    extra: Mapping = field(default_factory=dict, kw_only=True)
    # Key order of the document a result was read from, so the JSON keeps it
    # even where an analysis places a key the type does not list yet.
    key_order: tuple = field(default=(), kw_only=True, repr=False, metadata={"json": False})

    def __post_init__(self):
        dict.update(self, self.to_json())

    @classmethod
    def from_json(cls, document):
        """Build the record from its JSON object (unknown keys go to ``extra``)."""
        names = {f.name for f in dataclasses.fields(cls) if f.name != "extra" and f.metadata.get("json", True)}
        known = {key: value for key, value in document.items() if key in names}
        extra = {key: value for key, value in document.items() if key not in names}
        return cls(**known, extra=extra, key_order=tuple(document))

    def to_json(self) -> dict[str, Any]:
        """The record's JSON object (for a result, the command's ``--json`` document), keys in order."""
        document = {}
        for f in dataclasses.fields(self):
            if f.name == "extra" or not f.metadata.get("json", True):
                continue
            value = getattr(self, f.name)
            if value is not _ABSENT:
                document[f.name] = value
        document.update(self.extra)
        if self.key_order:
            rank = {key: position for position, key in enumerate(self.key_order)}
            document = dict(sorted(document.items(), key=lambda item: rank.get(item[0], len(rank))))
        return document



def _as_row(value, cls):
    """``value`` as a ``cls`` record: a plain JSON object (read back from a file) is typed; None stays None."""
    if value is None or value is _ABSENT or isinstance(value, cls):
        return value
    return cls.from_json(value)


def _as_rows(values, cls):
    """A list of ``cls`` records from a list of records or plain JSON objects."""
    if values is None or values is _ABSENT:
        return values
    return [_as_row(value, cls) for value in values]


def _type_fields(record, **types):
    """Type the named fields of a frozen record in place (``name=cls`` for one row, ``name=[cls]`` for a list)."""
    for name, cls in types.items():
        value = getattr(record, name)
        typed = _as_rows(value, cls[0]) if isinstance(cls, list) else _as_row(value, cls)
        object.__setattr__(record, name, typed)


# Rows: the parts of a result that are lists of like objects. Each is a
# `Record`, so it is the dict of its JSON too. Sections per analysis, lowest
# layer first.

# --- rows of check ---

class _RenamedKeys(Record):
    """A row whose JSON keys include a Python keyword (``from``): the field is ``from_``."""

    @classmethod
    def from_json(cls, document):
        return super().from_json({("from_" if key == "from" else key): value for key, value in document.items()})

    def to_json(self):
        return {("from" if key == "from_" else key): value for key, value in super().to_json().items()}


@dataclass(frozen=True, eq=False)
class Swap(_RenamedKeys):
    """A confusion rise measured by the confirmation: ``from``'s transformed images took ``to``'s look.

    The rise is that of the confusion ``to -> from`` on held-out originals
    (`confusion`) for the model trained on transformed images; ``witnessed``
    says whether the screen saw ``from``'s images land in ``to``.
    """

    from_: str
    to: str
    confusion: str
    rate: float
    rate_ci: list
    base_rate: float
    augmented_rate: float
    moved: int
    n: int
    witnessed: bool


@dataclass(frozen=True, eq=False)
class ScreenSwap(_RenamedKeys):
    """A swap the screen witnessed: share ``rate`` of ``from``'s transformed images called ``to``.

    ``typical`` is the share of them typical of ``to`` and ``typical_low``
    its lower Wilson 95% bound (the relabel's bar).
    """

    from_: str
    to: str
    rate: float
    moved: int
    n: int
    typical: float
    typical_low: float


@dataclass(frozen=True, eq=False)
class TransformVerdict(Record):
    """One entry of ``check``'s ``transforms[]``: a transform's label-safety verdict and its evidence.

    ``swaps`` and ``other_swaps`` hold `Swap` rows, ``screen_swaps``
    `ScreenSwap` rows. ``shortcut`` and ``note`` are present only when a
    lighting move may follow a shortcut of the data.
    """

    index: int
    op: str
    params: Mapping
    change_rate: float
    change_rate_ci: list
    leave_rate: float
    leave_rate_ci: list
    n: int
    magnitudes: list
    screen_swaps: list
    evidence_sheet: Any
    verdict: str
    decided_by: str
    swaps: list
    other_swaps: list
    classes: Mapping
    safe_limit: Any
    suggestion: Any
    shortcut: Mapping = _optional()
    note: str = _optional()

    @classmethod
    def from_json(cls, document):
        document = dict(document)
        for key, row in (("swaps", Swap), ("other_swaps", Swap), ("screen_swaps", ScreenSwap)):
            if key in document:
                document[key] = [item if isinstance(item, row) else row.from_json(item) for item in document[key]]
        return super().from_json(document)


@dataclass(frozen=True, eq=False)
class EvidenceItem(Record):
    """One evidence example of ``check``: an image that a transform moved, as data to draw.

    Attributes
    ----------
    index : int
        The transform's position in the recipe.
    op : str
    magnitude : float or None
        The grid value that moved it (None for a flip).
    params : dict
        The op's parameters at that magnitude (what the renderer applies).
    source : str
        The image's path relative to the data set.
    before, after : str
        Its class, and the class it landed in (or ``"outside"``).
    title : str
        Heading of the transform's evidence sheet (its final verdict and
        confirmed swaps).
    stream : int
        Root of the drawing's keyed stream (`augplan.seeding.keyed_generator`
        with ``(index, position)``), so a sheet draws the same pixels for
        the same seed.
    position : int
        The example's row on its sheet.
    record : augplan.data.ImageRecord
        Where the image's bytes are (not in the JSON).
    """

    index: int
    op: str
    magnitude: Any
    params: Mapping
    source: str
    before: str
    after: str
    title: str
    stream: int
    position: int
    record: Any = field(default=None, compare=False, repr=False, metadata={"json": False})


# --- rows of coverage ---

@dataclass(frozen=True, eq=False)
class Suggestion(Record):
    """A transform and range that coverage proposes for one factor (an item of ``suggestions``).

    Attributes
    ----------
    factor : str
        The factor a shortcut or poor field coverage was found on.
    op : str
        The op that moves it (a name of `augplan.recipe.ops.OP_TABLE`).
    parameter : str
        The op's magnitude field (``degrees``, ``factor``, ``fraction``, ``sigma``).
    range : list of float
        ``[low, high]`` for that field, inside the reader's bounds.
    reason : str
        Why, in words.
    warning : str, optional
        What to confirm before adopting it (the op may erase a class cue);
        absent from the JSON otherwise.
    """

    factor: str
    op: str
    parameter: str
    range: list
    reason: str
    warning: str = _optional()


# --- rows of evaluate ---

@dataclass(frozen=True, eq=False)
class RecipeScore(Record):
    """One recipe scored against no augmentation: a row of ``evaluate``'s ``recipes``.

    Validation figures are at the top level; ``field`` and ``confirm`` hold
    the short blocks (``n_images``, ``accuracy``, ``accuracy_ci``, ``gain``,
    ``gain_ci``, ``p_value``) of the labelled field sample and of the
    confirmation split (only the top-ranked recipe has one), else None.

    Attributes
    ----------
    name, recipe_hash : str
    n_transforms : int
    accuracy : float
        Mean validation accuracy over the repeats.
    accuracy_ci : list of float
        Its 95% Wilson interval.
    balanced_accuracy, macro_f1 : float
    per_class_recall, per_class_gain : dict
        Class -> recall, and -> recall minus the baseline's.
    repeat_accuracy : list of float
    gain : float
        Accuracy gain over no augmentation (fraction, not points).
    gain_ci : list of float
        Its 95% interval (paired sign-flip test inverted).
    p_value, p_holm : float
        The test's p and Holm's adjusted p across the run.
    confusion : dict or None
        ``classes``, ``counts`` (summed over repeats), ``repeats``.
    verdict : {'gains', 'no difference', 'loses'}
        `VERDICT_RULE` of ``augplan.evaluate.scoring``.
    flagged : bool
        It loses on a model that learns from pixels.
    augmented_training_images : int
    confirm, field : dict or None
    """

    name: str
    recipe_hash: str
    n_transforms: int
    accuracy: float
    accuracy_ci: list
    balanced_accuracy: float
    macro_f1: float
    per_class_recall: Mapping
    repeat_accuracy: list
    gain: float
    gain_ci: list
    p_value: float
    confusion: Any
    p_holm: float
    per_class_gain: Mapping
    verdict: str
    flagged: bool
    augmented_training_images: int
    confirm: Any = None
    field: Any = None

    def primary(self, decided_on):
        """The score block of the primary evidence: the field block for ``'field'``, else this row."""
        return (self.field or {}) if decided_on == "field" else self


@dataclass(frozen=True, eq=False)
class HistoryRun(Record):
    """One past comparison in the results ledger: an item of `HistoryResult.evaluations`.

    Attributes
    ----------
    run : int
        Its number (``augplan history RUN`` shows it).
    date : str
        UTC, ``YYYY-MM-DD HH:MM:SS``.
    fingerprint : str
        The data's fingerprint (its first 12 characters in the list).
    data : str or None
        The data folder.
    recipes : list of str
    best_recipe : str or None
    best_gain : float or None
        On the primary evidence.
    seed : int
        The seed the run was asked for.
    repeats : int
    from_ledger : bool
        Every result was read from the ledger.
    settings_key : str, optional
        With one run's details only.
    details : dict or None, optional
        With one run's details only: its scores (None for runs recorded
        before runs kept them).
    """

    run: int
    date: str
    fingerprint: str
    data: Any
    recipes: list
    best_recipe: Any
    best_gain: Any
    seed: Any
    repeats: int
    from_ledger: bool
    settings_key: str = _optional()
    details: Any = _optional()



# --- rows of vet ---

@dataclass(frozen=True, eq=False)
class VettingChange(Record):
    """What vetting did to one transform of a recipe.

    Attributes
    ----------
    index : int
        The transform's position in the recipe as written.
    op : str
    verdict : {'safe', 'unverified', 'breaks'}
        The label-safety verdict it was vetted on.
    action : {'keep', 'relabel', 'scope', 'clip', 'remove'}
    detail : str
        The reason, in words.
    clipped_to : list of float, optional
        For ``clip``, the range the step was clipped to (its magnitude field);
        absent from the JSON otherwise.
    """

    index: int
    op: str
    verdict: str
    action: str
    detail: str = ""
    clipped_to: list = _optional()

    def __post_init__(self):
        object.__setattr__(self, "index", int(self.index))
        if self.clipped_to is not _ABSENT:
            if self.clipped_to is None:
                object.__setattr__(self, "clipped_to", _ABSENT)
            else:
                object.__setattr__(self, "clipped_to", [float(v) for v in self.clipped_to])
        super().__post_init__()


@dataclass(frozen=True, eq=False, kw_only=True)
class SignoffItem(Record):
    """A transform a person must approve: unverified, and kept by vetting.

    Inside a `VettedForm` it names the step (``index``, ``op``, ``detail``);
    in `VetResult.signoff` it also names the ``recipe`` and the path of its
    ``evidence_sheet`` (None when the checker drew none).
    """

    recipe: str = _optional()
    index: int
    op: str
    detail: str
    evidence_sheet: Any = _optional()


@dataclass(frozen=True, eq=False)
class VettedForm(Record):
    """The vetted form of one recipe, as the vetting policy made it.

    Attributes
    ----------
    name : str
        The vetted recipe's name (``<name>-vetted`` when vetting changed it).
    recipe : dict
        Its body (`augplan.recipe.parse.recipe_to_dict`).
    changes : list of VettingChange
        One per transform of the original, in order.
    signoff : list of SignoffItem
    unchanged : bool
        Every transform kept as written.
    recheck : CheckResult or None
        The label-safety check of the rewritten steps, when a step was
        relabelled or scoped.
    score : RecipeScore, optional
        Its row of the evaluation (absent until it is scored).
    """

    name: str
    recipe: Mapping
    changes: list
    signoff: list
    unchanged: bool
    recheck: Any = None
    score: Any = _optional()

    def __post_init__(self):
        _type_fields(self, changes=[VettingChange], signoff=[SignoffItem], recheck=CheckResult,
                     score=RecipeScore)
        super().__post_init__()


@dataclass(frozen=True, eq=False)
class VettedRecipe(Record):
    """What ``vet`` produced for one recipe: its check, coverage and vetted form.

    Attributes
    ----------
    name : str
    source : str or None
        The file it was read from.
    recipe : dict
        The recipe as written (`augplan.recipe.parse.recipe_to_dict`).
    recipe_hash : str
    check : CheckResult
        Its ``evidence_sheet`` paths are relative to the output folder
        (``figures/...``) once the job has collected them.
    coverage : CoverageResult
    draws_sheet : str or None
        Contact sheet of draws of the vetted form, relative to the output folder.
    vetted : VettedForm
    """

    name: str
    source: Any
    recipe: Mapping
    recipe_hash: str
    check: Any
    coverage: Any
    draws_sheet: Any
    vetted: Any

    def __post_init__(self):
        _type_fields(self, check=CheckResult, coverage=CoverageResult, vetted=VettedForm)
        super().__post_init__()


@dataclass(frozen=True, eq=False)
class RecipeChanges(Record):
    """One item of `VetResult.changes`: what vetting did to each transform of one recipe."""

    recipe: str
    vetted: str
    unchanged: bool
    transforms: list

    def __post_init__(self):
        _type_fields(self, transforms=[VettingChange])
        super().__post_init__()


@dataclass(frozen=True, eq=False)
class DatasetSummary(Record):
    """The data a vetting run read, as the report describes it (``evidence.json``'s ``data``).

    Attributes
    ----------
    root, fingerprint : str
    classes : list of str
    counts : dict
        Split -> images (``train``, ``val``, ``test``, ``field``).
    class_counts : dict
        Class -> split -> images.
    val_from_train : bool
        Validation was split off train (no ``val/`` folder).
    split_seed : int or None
    skipped : list of [str, str]
        Files skipped and why.
    leaks : list of dict
        Near-duplicates across splits.
    """

    root: str
    fingerprint: str
    classes: list
    counts: Mapping
    class_counts: Mapping
    val_from_train: bool
    split_seed: Any
    skipped: list
    leaks: list


@dataclass(frozen=True, eq=False)
class VetReport(Record):
    """Everything the report is rendered from; its JSON is ``evidence.json``.

    Attributes
    ----------
    augplan_version, created : str
    verdict : str
        The report's first line.
    data : DatasetSummary
    recipes : list of VettedRecipe
        In the order given.
    evaluation : EvaluateResult
        Every recipe and every changed vetted form scored; its ``ranking``
        and ``best`` are the one decision (`augplan.evaluate.ranking`).
    best : str or None
        The recommended recipe's (original) name; None when no recipe clearly
        beat no augmentation.
    ranking : list of str
        The evaluation's ranking, best first.
    ranking_rule : str
    cautions : list of str
    seed : int
        The analysis seed the command line was given (provenance).
    """

    augplan_version: str
    created: str
    verdict: str
    data: Any
    recipes: list
    evaluation: Any
    best: Any
    ranking: list
    ranking_rule: str
    cautions: list
    seed: Any

    def __post_init__(self):
        _type_fields(self, data=DatasetSummary, recipes=[VettedRecipe], evaluation=EvaluateResult)
        super().__post_init__()

    def recommended(self):
        """The `VettedRecipe` recommended, or None."""
        return next((entry for entry in self.recipes if entry.name == self.best), None)



@dataclass(frozen=True, eq=False)
class _Result(Record):
    """Base of the command results: a `Record` with ``flagged``, the rule behind exit code 1."""

    @property
    def flagged(self) -> bool:
        """True when the command exits 1: done, and something was flagged."""
        return False


@dataclass(frozen=True, eq=False)
class CheckResult(_Result):
    """``augplan check``: label safety of each transform of one recipe.

    ``transforms`` holds `TransformVerdict` rows. ``evidence`` (not part of
    the JSON) holds the `EvidenceItem` examples of every transform that is
    not safe, for `augplan.render.sheets.evidence_sheets` to draw.
    """

    recipe: str
    model: Mapping
    baseline: Mapping
    transforms: list
    warnings: list
    decision_rule: str
    n_images: int
    leaks: list = _optional()
    evidence: Any = field(default=(), compare=False, repr=False, metadata={"json": False})

    @classmethod
    def from_json(cls, document):
        document = dict(document)
        if "transforms" in document:
            document["transforms"] = [row if isinstance(row, TransformVerdict) else TransformVerdict.from_json(row)
                                      for row in document["transforms"]]
        return super().from_json(document)

    def with_evidence_sheets(self, paths):
        """The same result with ``evidence_sheet`` set from ``paths`` (``{transform index: path}``).

        The renderer draws the sheets from `evidence`; this records where they went.
        """
        transforms = [dataclasses.replace(row, evidence_sheet=str(paths[row.index])) if row.index in paths else row
                      for row in self.transforms]
        return dataclasses.replace(self, transforms=transforms)

    @property
    def flagged(self):
        """Some transform is not safe (it breaks or is unverified)."""
        return any(transform["verdict"] != "safe" for transform in self.transforms)


@dataclass(frozen=True, eq=False)
class CoverageResult(_Result):
    """``augplan coverage``: widening, field coverage, shortcut audit, suggestions.

    ``samples`` (not part of the JSON) holds the factor values behind the
    summaries, ``{"original", "augmented", "field"}`` -> ``{factor: array}``,
    for the rendering layer's plots.
    """

    recipe: str
    copies: int
    size: int
    n_images: Mapping
    field_labelled: bool
    factors: Mapping
    field_coverage: Any
    shortcuts: list
    shortcut_rule: str
    val_shares_shortcut: list
    messages: list
    suggestions: list
    plots: list = _optional()
    samples: Any = field(default=None, compare=False, repr=False, metadata={"json": False})

    @property
    def flagged(self):
        """A shortcut is flagged and the recipe does not break its link (the words' rule, SHORTCUT_RULE)."""
        return any(row["flagged"] and row.get("link") != "broken" for row in self.shortcuts)


@dataclass(frozen=True, eq=False)
class EvaluateResult(_Result):
    """``augplan evaluate``: each recipe scored against no augmentation, by the model it names."""

    model: Mapping
    baseline: Mapping
    recipes: list
    best: Any
    best_rule: str
    scored_on: str
    accuracy_interval: str
    gain_test: str
    verdict_rule: str
    augmented_validation_images: int
    repeats: int
    seed: int
    confirm: Any
    field: Any
    warnings: list
    from_ledger: bool
    ranking: list = _optional()
    decided_on: str = _optional()
    val_shares_shortcut: list = _optional()
    decision_note: str = _optional()
    reused_from_ledger: list = _optional()
    leaks: list = _optional()

    def __post_init__(self):
        _type_fields(self, recipes=[RecipeScore])
        super().__post_init__()

    def score(self, name):
        """The `RecipeScore` of the recipe called ``name`` (KeyError when it was not scored)."""
        for row in self.recipes:
            if row.name == name:
                return row
        raise KeyError(name)

    def ranked(self):
        """The recipe rows in ``ranking`` order, best first (the evaluator's order; never re-sorted)."""
        return [self.score(name) for name in self.ranking]

    def best_score(self):
        """The recommended recipe's `RecipeScore`, or None when no recipe clearly beat no augmentation."""
        return None if self.best is None else self.score(self.best)

    @property
    def flagged(self):
        """Some recipe is flagged: its gain interval lies below zero on a model that learns from
        pixels (``cnn`` or the team's); the linear proxy's sign alone never flags."""
        return any(row["flagged"] for row in self.recipes)


@dataclass(frozen=True, eq=False)
class VetResult(_Result):
    """``augplan vet`` and ``augplan demo``: where the report and vetted recipe went."""

    verdict: str
    report: str
    vetted_recipe: Any
    evidence: str
    unchanged: bool
    best: Any
    model: str = _optional()
    decision_note: str = _optional()
    changes: list = _optional()
    signoff: list = _optional()

    def __post_init__(self):
        _type_fields(self, changes=[RecipeChanges], signoff=[SignoffItem])
        super().__post_init__()

    @property
    def flagged(self):
        """Vetting had to change some recipe."""
        return not self.unchanged


@dataclass(frozen=True, eq=False)
class VerifyResult(_Result):
    """``augplan verify``: format, checksum and data fingerprint of a vetted recipe."""

    path: str
    ok: bool
    format_ok: bool
    checksum_ok: bool
    fingerprint_match: Any
    messages: list

    @property
    def flagged(self):
        """The file is not as vetted (or not on the same data)."""
        return not self.ok


@dataclass(frozen=True, eq=False)
class HistoryResult(_Result):
    """``augplan history``: past comparisons in the results ledger (never flagged)."""

    ledger: str
    evaluations: list

    def __post_init__(self):
        _type_fields(self, evaluations=[HistoryRun])
        super().__post_init__()


RESULT_TYPES = {"check": CheckResult, "coverage": CoverageResult, "evaluate": EvaluateResult,
                "vet": VetResult, "verify": VerifyResult, "history": HistoryResult}


def schema_path(command):
    """Path of the JSON Schema of ``augplan COMMAND --json`` shipped with the package."""
    if command not in RESULT_TYPES:
        raise ValueError(f"no JSON document for command {command!r}; expected one of {', '.join(RESULT_TYPES)}")
    return SCHEMA_DIR / f"{command}.schema.json"


def range_text(pair, digits=3):
    """How a [low, high] range reads in every output: ``-6.67 to 6.67``.

    One spelling for tables, the HTML report and vetted-recipe notes alike;
    ``digits`` significant digits; a single value for low == high.
    """
    low, high = (float(v) for v in pair)
    if low == high:
        return f"{low:.{digits}g}"
    return f"{low:.{digits}g} to {high:.{digits}g}"


def json_number(x, digits=6):
    """A float for a JSON document: ``digits`` significant digits; None for None, NaN or infinity.

    Six digits keep documents short and byte-stable across platforms while
    staying far finer than any interval the analyses report.
    """
    if x is None:
        return None
    x = float(x)
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")
