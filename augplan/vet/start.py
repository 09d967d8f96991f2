"""A draft that begins from a starting recipe (`augplan draft DATA --start NAME`).

The starting recipe (a file, or one of the recipes that ship with augplan,
`augplan.recipe.shipped`) is adapted to the data in three steps:

1. lighting is widened toward the field sample: each brightness and
   contrast range grows to take in the factors that reach the field's
   lighting (`augplan.coverage.draft.field_lighting`), and a missing
   brightness or contrast step is added with that range;
2. the label-safety check (`augplan.check.check_recipe`) measures every
   transform of the widened recipe on the training images;
3. its verdicts rewrite the recipe by vet's rules
   (`augplan.vet.policy.vet_transforms`): a transform that breaks one
   class is scoped away from it (or relabelled), ranges are narrowed to
   their safe limits, and a transform that breaks with no safe range is
   removed. An unverified transform without a safe range is kept as the
   start has it, marked so: ``vet`` removes it unless a person approves it.

The draft's header says what changed from the start, transform by
transform. A draft is a proposal: ``augplan vet`` decides.
"""

import dataclasses
import json

from augplan.check import check_recipe
from augplan.coverage.draft import field_lighting
from augplan.data import load_images
from augplan.recipe.parse import Transform, check_recipe_classes, dump_recipe, parse_recipe, recipe_name_fault
from augplan.results import range_text
from augplan.vet.policy import vet_transforms

__all__ = ["StartedDraft", "draft_from_start", "widen_lighting", "change_text"]

_LIGHTING = ("brightness", "contrast")


@dataclasses.dataclass(frozen=True)
class StartedDraft:
    """A draft adapted from a starting recipe.

    Attributes
    ----------
    recipe : augplan.recipe.Recipe
        The drafted recipe.
    text : str
        Its YAML text with a header saying what changed from the start.
    changes : list of dict
        One entry per transform of the start, in order, then one per added
        transform: ``{"index", "op", "action", "detail"}``. ``index`` is the
        transform's 0-based position in the start (None for an added one);
        ``action`` is one of keep, widen, add, relabel, scope, clip, remove
        (widen may be followed by a check's action: "widen, clip").
    """

    recipe: object
    text: str
    changes: list


def widen_lighting(recipe, reach):
    """Widen brightness and contrast toward the field; add a step that is missing.

    Parameters
    ----------
    recipe : augplan.recipe.Recipe
    reach : dict
        ``{op: (low, high)}`` for ``brightness`` and ``contrast``, the
        factors that reach the field's lighting (`field_lighting`).

    Returns
    -------
    widened : augplan.recipe.Recipe
        Every range of those ops is the union of its own and ``reach``; an op
        of ``reach`` the recipe lacks is appended unscoped with the reach's
        range.
    changes : list of dict
        ``{"index", "op", "action", "detail"}`` for each widened (action
        ``widen``) or added (``add``, index None) step.
    """
    steps, changes = [], []
    for index, step in enumerate(recipe.transforms):
        pair = reach.get(step.op)
        if pair is not None:
            low, high = step.params["factor"]
            wide = (min(low, pair[0]), max(high, pair[1]))
            if wide != (low, high):
                changes.append({"index": index, "op": step.op, "action": "widen",
                                "detail": f"widened toward the field's lighting: {range_text((low, high))} -> "
                                          f"{range_text(wide)}"})
                step = dataclasses.replace(step, params={**step.params, "factor": wide})
        steps.append(step)
    present = {step.op for step in recipe.transforms}
    for op in _LIGHTING:
        if op in reach and op not in present:
            steps.append(Transform(op, {"factor": tuple(reach[op])}))
            changes.append({"index": None, "op": op, "action": "add",
                            "detail": f"added to reach the field's lighting: {range_text(reach[op])}"})
    return dataclasses.replace(recipe, transforms=tuple(steps)), changes


def _keep_unverified(adapted, widened, vetting):
    """Put back the unverified steps vet's rules removed: a draft leaves them to ``vet`` and a person.

    Vet removes an unverified transform without a safe limit unless a person
    approves it; a draft is the step before, so it keeps the start's step and
    says so.

    Returns
    -------
    (Recipe, list of dict)
        The draft's recipe and its change records (the draft's own words;
        vet's `VettingChange` rows are left as the policy made them).
    """
    vetted_steps = iter(adapted.transforms)
    steps, changes = [], []
    for change, step in zip(vetting, widened.transforms):
        record = change.to_json()
        if change.action == "remove" and change.verdict == "unverified":
            record.update(action="keep", detail="unverified, kept: the check could not vouch for it; 'augplan vet' "
                                                "removes it unless a person approves it (--approve)")
            steps.append(step)
        elif change.action != "remove":
            steps.append(next(vetted_steps))
        changes.append(record)
    return dataclasses.replace(adapted, transforms=tuple(steps)), changes


def _draft_name(start, name):
    if name is not None:
        return name
    candidate = f"{start.name}-draft"
    return candidate if recipe_name_fault(candidate) is None else "draft"


def _merge(start, widened_changes, checked_changes):
    """One change record per step of the start (then per added step), in order."""
    by_index = {c["index"]: c for c in widened_changes if c["index"] is not None}
    added = [c for c in widened_changes if c["index"] is None]
    n_start = len(start.transforms)
    merged = []
    for checked in checked_changes:
        position = checked["index"]
        widening = by_index.get(position) if position < n_start else None
        actions = [a for a in ((widening or {}).get("action"), checked["action"]) if a and a != "keep"]
        details = [d for d in ((widening or {}).get("detail"), checked["detail"]) if d]
        if position < n_start:
            entry = {"index": position, "op": checked["op"]}
        else:
            entry = {"index": None, "op": checked["op"]}
            details.insert(0, added[position - n_start]["detail"])
            actions.insert(0, "add")
        entry["action"] = ", ".join(actions) if actions else "keep"
        entry["detail"] = "; ".join(details) if details else "kept as written"
        entry["verdict"] = checked["verdict"]
        merged.append(entry)
    return merged


def _header(start, n_train, n_field, changes):
    source = f" ({start.source})" if start.source else ""
    field = (f"and the field sample ({n_field} images)" if n_field
             else "(no field sample: lighting left as the start has it)")
    lines = [f"# Drafted by augplan from the starting recipe '{start.name}'{source},",
             f"# adapted to {n_train} training images {field}.",
             "# A proposal, not a verdict: run 'augplan vet' before use. The starting recipe's",
             "# comments say why each transform is there and which are left out on purpose.",
             "# Changed from the start (label-safety verdict in brackets):"]
    lines += [f"#   {change_text(change)}" for change in changes]
    return "\n".join(lines) + "\n"


def change_text(change):
    """One change of a `StartedDraft` in words: ``transform 2 (flip) [breaks]: applied only to ...``."""
    where = f"transform {change['index'] + 1}" if change["index"] is not None else "new"
    return f"{where} ({change['op']}) [{change['verdict']}]: {change['detail']}"


def draft_from_start(dataset, start, rng, *, name=None, sample=None, size=64, workers=1, quiet=True):
    """Adapt a starting recipe to the data and the field sample.

    Parameters
    ----------
    dataset : augplan.data.Dataset
        Its ``train`` split is checked; its ``field`` split, when present,
        sets the lighting.
    start : augplan.recipe.Recipe
        The starting recipe (`augplan.recipe.shipped.read_start`).
    name : str, optional
        The draft's name; default ``<start>-draft``.
    rng : numpy.random.Generator
        The label-safety check's generator. The draft keeps the start's own
        ``seed``, ``copies`` and ``fill``.
    sample : int, optional
        At most this many training images per class for the check.
    size : int
        Side of the squares images are measured and checked at.
    workers : int or augplan.parallel.Cluster
    quiet : bool

    Returns
    -------
    StartedDraft

    Raises
    ------
    augplan.recipe.RecipeError
        The start's class scopes or relabels name a class the data lacks
        (the message names the line and the closest class).
    """
    check_recipe_classes(start, dataset.classes)
    field_records = dataset.split("field")
    reach = {}
    if field_records:
        train = load_images(dataset.split("train"), size=size)
        reach = field_lighting(train, load_images(field_records, size=size))
    widened, widened_changes = widen_lighting(start, reach)
    check = check_recipe(dataset, widened, rng=rng, sample=sample, size=size, workers=workers, quiet=quiet)
    adapted, vetting = vet_transforms(widened, check)
    kept, checked_changes = _keep_unverified(adapted, widened, vetting)
    recipe = dataclasses.replace(kept, name=_draft_name(start, name))
    changes = _merge(start, widened_changes, checked_changes)
    text = _header(start, len(dataset.split("train")), len(field_records), changes) + dump_recipe(recipe)
    parse_recipe(text, source=f"draft {json.dumps(recipe.name)}")  # a draft must always be a valid recipe
    return StartedDraft(recipe=recipe, text=text, changes=changes)
