"""The vetting policy: what happens to each transform of a recipe, given its label-safety verdict.

One home for the rule. `vet_transforms` applies the checker's verdicts;
`settle_rewrites` is the fallback for a rewrite (relabel, scope) whose own
re-check is not safe; `vet_recipe` runs both and names the sign-off items.
Each returns typed `augplan.results.VettingChange` rows, made once here: no
other module edits them, and only the render layer turns them into words
for the report (a clip carries ``clipped_to``, its range, as data).
"""

import dataclasses
import math

from augplan.augment.transforms import OPS
from augplan.recipe.parse import recipe_to_dict
from augplan.results import SignoffItem, VettedForm, VettingChange, range_text

__all__ = ["vet_transforms", "settle_rewrites", "signoff_items", "vet_recipe", "vetted_name", "clip_change"]

# A clipped range is rounded inward to this many decimals, so it never
# exceeds what was measured safe and reads short in the file.
_CLIP_DECIMALS = 3


def vetted_name(recipe):
    """The name of a recipe's vetted form when vetting changed it."""
    return f"{recipe.name}-vetted"


def clip_change(index, original, clipped, verdict, safe_limit, detail=None):
    """The `VettingChange` of step ``original`` clipped to ``safe_limit`` (``clipped`` is the clipped step)."""
    return VettingChange(index, original.op, verdict, "clip",
                         detail or f"clipped to the safe limit {range_text(safe_limit)}",
                         clipped_to=tuple(clipped.params[OPS[original.op].magnitude]))


def _clip_to_limit(step, check_entry):
    """The step with its magnitude range clipped to the measured safe limit, or None.

    None when the op has no magnitude, the checker measured no limit, or at
    most a single value is safe (the step is then removed).
    """
    magnitude = OPS[step.op].magnitude
    limit = check_entry.get("safe_limit")
    if magnitude is None or limit is None:
        return None
    low, high = step.params[magnitude]
    low, high = max(low, limit[0]), min(high, limit[1])
    scale = 10 ** _CLIP_DECIMALS
    clipped = (math.ceil(low * scale - 1e-9) / scale, math.floor(high * scale + 1e-9) / scale)
    if clipped[0] >= clipped[1]:
        return None
    return dataclasses.replace(step, params={**step.params, magnitude: clipped})


def _loosened_shortcuts(coverage_result):
    """Factor -> ``'breaks'`` or ``'weakens'``: the flagged shortcuts the recipe no longer lets persist."""
    rows = coverage_result["shortcuts"] if coverage_result is not None else []
    return {row["factor"]: ("breaks" if row.get("link") == "broken" else "weakens")
            for row in rows if row.get("flagged") and not row.get("persists")}


def _rule(index, step, entry, approve, loosened):
    """The action on one step by the rules of `vet_transforms`: ``(action, new step or None, detail)``."""
    verdict = entry["verdict"]
    suggestion = entry.get("suggestion") or {}
    if verdict == "breaks" and "relabel" in suggestion and step.relabel is None:
        relabel = suggestion["relabel"]
        pairs = ", ".join(f"{a} -> {b}" for a, b in sorted(relabel.items()))
        return "relabel", dataclasses.replace(step, relabel=relabel), f"label follows the image: {pairs}"
    if verdict == "breaks" and suggestion.get("only"):
        only = tuple(suggestion["only"])
        return "scope", dataclasses.replace(step, only=only, exclude=None), f"applied only to {', '.join(only)}"
    if verdict == "unverified" and index in approve:
        return "keep", step, "unverified, kept: approved by a person (--approve)"
    factor = (entry.get("shortcut") or {}).get("factor")
    if verdict == "unverified" and factor in loosened:
        return "keep", step, (f"unverified, kept: the recipe {loosened[factor]} the {factor} shortcut of the "
                              "data (coverage's link rule), and the proxy model's objection follows that "
                              "shortcut; a person signs it off from the evidence")
    clipped = _clip_to_limit(step, entry)
    if clipped is not None and clipped != step:
        return "clip", clipped, None
    if verdict in ("breaks", "unverified"):
        return "remove", None, f"removed: {verdict}"
    return "keep", step, ""


def vet_transforms(recipe, check_result, *, approve=(), coverage_result=None):
    """Apply the checker's verdicts to a recipe.

    Rules, in order, for transform ``i`` with verdict ``v``:

    - ``breaks``: rewritten with the checker's suggested ``relabel`` (when
      the step has none) or ``only`` scope when there is one; otherwise
      clipped to its safe limit when it has one; otherwise removed.
    - ``unverified``: kept as it is when ``i`` is in ``approve``, or when
      the checker traced it to a shortcut of the data (``shortcut``) that
      the coverage analysis shows this recipe breaks or weakens (its factor
      is flagged and no longer persists): removing it would keep the
      shortcut, and a person signs it off from the evidence; otherwise
      clipped to its safe limit when it has one; otherwise removed.
    - ``safe``: clipped to its safe limit when the limit is narrower than the
      range (a pooled verdict can be safe while the ends of the range are not).

    Parameters
    ----------
    recipe : augplan.recipe.Recipe
    check_result : augplan.results.CheckResult
        The label-safety check of this recipe.
    approve : iterable of int
        Indices of unverified transforms a person has looked at and approved.
    coverage_result : augplan.results.CoverageResult, optional
        The coverage of this recipe (its shortcut audit).

    Returns
    -------
    vetted : augplan.recipe.Recipe
        Same name, seed, copies and fill; the vetted transforms.
    changes : list of VettingChange
        One for every transform, ``action`` one of keep, relabel, scope,
        clip, remove; a clip carries the range it was clipped to.
    """
    approve = set(approve)
    entries = {entry["index"]: entry for entry in check_result["transforms"]}
    loosened = _loosened_shortcuts(coverage_result)
    kept, changes = [], []
    for index, step in enumerate(recipe.transforms):
        entry = entries[index]
        action, new_step, detail = _rule(index, step, entry, approve, loosened)
        if new_step is not None:
            kept.append(new_step)
        changes.append(clip_change(index, step, new_step, entry["verdict"], entry["safe_limit"]) if action == "clip"
                       else VettingChange(index, step.op, entry["verdict"], action, detail))
    vetted = dataclasses.replace(recipe, transforms=tuple(kept), source=None)
    return vetted, changes


def settle_rewrites(vetted, changes, rechecked, recipe, check):
    """Undo relabelled or scoped steps whose re-check is not safe.

    A rejected rewrite falls back to the original step clipped to its safe
    limit when the first check measured one, and is removed otherwise.

    Parameters
    ----------
    vetted : augplan.recipe.Recipe
        The recipe `vet_transforms` made.
    changes : list of VettingChange
        Its changes.
    rechecked : augplan.results.CheckResult
        The label-safety check of ``vetted``.
    recipe : augplan.recipe.Recipe
        The original recipe.
    check : augplan.results.CheckResult
        The original recipe's check.

    Returns
    -------
    (Recipe, list of VettingChange)
        The vetted recipe and the changes, the rejected rewrites' replaced.
    """
    verdicts = {t["index"]: t["verdict"] for t in rechecked["transforms"]}
    entries = {t["index"]: t for t in check["transforms"]}
    steps, updated, position = [], [], 0
    kept_steps = iter(vetted.transforms)
    for change in changes:
        if change.action == "remove":
            updated.append(change)
            continue
        step = next(kept_steps)
        still = verdicts[position]
        position += 1
        if change.action not in ("relabel", "scope") or still == "safe":
            updated.append(change)
            steps.append(step)
            continue
        original = recipe.transforms[change.index]
        clipped = _clip_to_limit(original, entries[change.index])
        if clipped is not None and clipped != original:
            limit = entries[change.index]["safe_limit"]
            updated.append(clip_change(change.index, original, clipped, change.verdict, limit,
                                       f"{change.detail}; re-checked as rewritten it is still {still}: "
                                       f"clipped to the safe limit {range_text(limit)} instead"))
            steps.append(clipped)
        else:
            updated.append(VettingChange(change.index, change.op, change.verdict, "remove",
                                         f"{change.detail}; removed: re-checked as rewritten, it is still {still}"))
    return dataclasses.replace(vetted, transforms=tuple(steps)), updated


def signoff_items(changes):
    """The transforms a person must approve: unverified ones that vetting kept, as `SignoffItem` rows."""
    return [SignoffItem(index=c.index, op=c.op, detail=c.detail)
            for c in changes if c.verdict == "unverified" and c.action == "keep"]


def vet_recipe(recipe, check, *, approve=(), coverage=None, recheck=None):
    """The whole policy on one recipe: verdicts applied, rewrites re-checked, sign-off named.

    Parameters
    ----------
    recipe : augplan.recipe.Recipe
    check : augplan.results.CheckResult
    approve : iterable of int
        Unverified transforms a person approved.
    coverage : augplan.results.CoverageResult, optional
    recheck : callable, optional
        ``recheck(vetted_recipe) -> CheckResult``: measures a recipe whose
        steps were relabelled or scoped (the checker suggested the rewrite
        but did not measure it). Without it rewrites stand unmeasured.

    Returns
    -------
    vetted : augplan.recipe.Recipe
        Named ``<name>-vetted`` when vetting changed it.
    form : augplan.results.VettedForm
        Its name and body, the changes, the sign-off items, whether it is
        unchanged and the re-check (None when none was needed).
    """
    vetted, changes = vet_transforms(recipe, check, approve=approve, coverage_result=coverage)
    rechecked = None
    if recheck is not None and any(change.action in ("relabel", "scope") for change in changes):
        rechecked = recheck(vetted)
        vetted, changes = settle_rewrites(vetted, changes, rechecked, recipe, check)
    unchanged = vetted.transforms == recipe.transforms
    if not unchanged:
        vetted = dataclasses.replace(vetted, name=vetted_name(recipe))
    form = VettedForm(name=vetted.name, recipe=recipe_to_dict(vetted), changes=changes,
                      signoff=signoff_items(changes), unchanged=unchanged, recheck=rechecked)
    return vetted, form
