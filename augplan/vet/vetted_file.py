"""The vetted recipe: what is safe to use, with its evidence and a checksum.

A vetted recipe file is an ordinary recipe (any loader of the format reads
it) with two more top-level keys: ``evidence`` (what the vetting measured)
and ``checksum`` (sha256 of the canonical JSON of the recipe body and the
evidence), so a training team can tell an untouched vetted recipe from an
edited one.
"""

import dataclasses
import json
import math
import os
import time
from pathlib import Path

import yaml

from augplan import __version__
from augplan.atomic import write_text_atomic
from augplan.errors import BadInputError
from augplan.results import VerifyResult, VettingChange, range_text
from augplan.recipe.parse import RecipeError, canonical_json, read_recipe_document, recipe_to_dict, vetted_checksum

__all__ = ["VettingChange", "vet_transforms", "vetted_checksum", "vetted_text", "write_vetted", "read_vetted",
           "verify_vetted", "creation_date"]


def creation_date():
    """Today's UTC date, or the one fixed by ``SOURCE_DATE_EPOCH`` for reproducible output."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    seconds = int(epoch) if epoch and epoch.isdigit() else time.time()
    return time.strftime("%Y-%m-%d", time.gmtime(seconds))


def clip_change(index, original, clipped, verdict, safe_limit, detail=None):
    """The `VettingChange` of a step clipped to its safe limit (``clipped`` is the clipped step)."""
    from augplan.augment.transforms import OPS

    return VettingChange(index, original.op, verdict, "clip",
                         detail or f"clipped to the safe limit {range_text(safe_limit)}",
                         clipped_to=tuple(clipped.params[OPS[original.op].magnitude]))


def _intersect(range_pair, limit):
    low, high = range_pair
    return (max(low, limit[0]), min(high, limit[1]))


def _clip_to_limit(step, check_entry):
    """The step with its magnitude range clipped to the measured safe limit, or None."""
    from augplan.augment.transforms import OPS

    magnitude = OPS[step.op].magnitude
    limit = check_entry.get("safe_limit")
    if magnitude is None or limit is None:
        return None
    low, high = _intersect(step.params[magnitude], limit)
    # Round inward to 3 decimals: the clipped range never exceeds what was measured safe.
    clipped = (math.ceil(low * 1000 - 1e-9) / 1000, math.floor(high * 1000 + 1e-9) / 1000)
    if clipped[0] >= clipped[1]:
        return None  # nothing but (at most) a single value is safe: the step is removed
    return dataclasses.replace(step, params={**step.params, magnitude: clipped})


def vet_transforms(recipe, check_result, *, approve=(), coverage_result=None):
    """Apply the checker's verdicts to a recipe.

    Rules, in order, for transform ``i`` with verdict ``v``:

    - ``breaks``: rewritten with the checker's suggested ``relabel`` (when
      the step has none) or ``only`` scope when there is one; otherwise
      clipped to its safe limit when it has one; otherwise removed.
    - ``unverified``: kept as it is when ``i`` is in ``approve``, or when
      the checker traced it to a shortcut of the data (``shortcut``) that
      the coverage analysis shows this recipe breaks (its factor is flagged
      and no longer persists: the recipe weakens or breaks its link): removing it would keep the shortcut, and a
      person signs it off from the evidence; otherwise clipped to its safe
      limit when it has one; otherwise removed.
    - ``safe``: clipped to its safe limit when the limit is narrower than the
      range (a pooled verdict can be safe while the ends of the range are not).

    Parameters
    ----------
    recipe : augplan.recipe.Recipe
    check_result : dict
        The document of ``augplan.check.check.check_recipe`` for this recipe.
    approve : iterable of int
        Indices of unverified transforms a person has looked at and approved.

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
    # The recipe's link to each shortcut it weakens or breaks (coverage's rule names which).
    loosened = {row["factor"]: ("breaks" if row.get("link") == "broken" else "weakens")
                for row in (coverage_result or {}).get("shortcuts", [])
                if row.get("flagged") and not row.get("persists")}
    kept, changes = [], []
    for index, step in enumerate(recipe.transforms):
        entry = entries[index]
        verdict = entry["verdict"]
        suggestion = entry.get("suggestion") or {}
        action, new_step, detail, clipped_to = "keep", step, "", None
        if verdict == "breaks" and "relabel" in suggestion and step.relabel is None:
            relabel = suggestion["relabel"]
            pairs = ", ".join(f"{a} -> {b}" for a, b in sorted(relabel.items()))
            action, detail = "relabel", f"label follows the image: {pairs}"
            new_step = dataclasses.replace(step, relabel=relabel)
        elif verdict == "breaks" and "only" in suggestion and suggestion["only"]:
            only = tuple(suggestion["only"])
            action, detail = "scope", f"applied only to {', '.join(only)}"
            new_step = dataclasses.replace(step, only=only, exclude=None)
        elif verdict == "unverified" and index in approve:
            detail = "unverified, kept: approved by a person (--approve)"
        elif verdict == "unverified" and (entry.get("shortcut") or {}).get("factor") in loosened:
            factor = entry["shortcut"]["factor"]
            detail = (f"unverified, kept: the recipe {loosened[factor]} the {factor} shortcut of the data "
                      "(coverage's link rule), and the proxy "
                      f"model's objection follows that shortcut; a person signs it off from the evidence")
        elif verdict in ("breaks", "unverified"):
            clipped = _clip_to_limit(step, entry)
            if clipped is not None and clipped != step:
                action, new_step = "clip", clipped
            else:
                action, new_step, detail = "remove", None, f"removed: {verdict}"
        else:
            clipped = _clip_to_limit(step, entry)
            if clipped is not None and clipped != step:
                action, new_step = "clip", clipped
        if new_step is not None:
            kept.append(new_step)
        changes.append(clip_change(index, step, new_step, verdict, entry["safe_limit"]) if action == "clip"
                       else VettingChange(index, step.op, verdict, action, detail))
    vetted = dataclasses.replace(recipe, transforms=tuple(kept), source=None)
    return vetted, changes


def _header(changes):
    """The file's opening comment: what vetting did, in words the changes bear out."""
    if changes is None:
        lines = ["# Vetted by augplan; what changed is in the evidence block."]
    else:
        altered = sum(1 for c in changes if c["action"] != "keep")
        signoff = sum(1 for c in changes if c["action"] == "keep" and c["verdict"] == "unverified")
        lines = [f"# Vetted by augplan: {altered} transform{'s' if altered != 1 else ''} relabelled, scoped, "
                 "clipped or removed by the label-safety check." if altered else
                 "# Vetted by augplan: every transform kept as written."]
        if signoff:
            lines.append(f"# {signoff} kept transform{'s are' if signoff != 1 else ' is'} unverified and "
                         "need a person's sign-off (needs_signoff).")
    return "\n".join(lines + ["# See the evidence block. Editing any value invalidates the checksum",
                              "# ('augplan verify' tells)."]) + "\n"


def vetted_text(recipe, evidence, *, changes=None):
    """The vetted recipe file's YAML text: a header, recipe body, evidence, checksum.

    ``changes`` (the per-transform changes of `vet_transforms`) word the
    header; the checksum covers body and evidence only.
    """
    evidence = json.loads(canonical_json(evidence))  # plain types only, so the YAML round-trips
    body = recipe_to_dict(recipe)
    header = _header(changes)
    text = yaml.safe_dump(body, sort_keys=False, default_flow_style=None, allow_unicode=True, width=100)
    text += yaml.safe_dump({"evidence": evidence}, sort_keys=True, default_flow_style=False,
                           allow_unicode=True, width=100)
    text += yaml.safe_dump({"checksum": vetted_checksum(recipe, evidence)})
    return header + text


def write_vetted(recipe, evidence, path):
    """Write the vetted recipe atomically; return the path."""
    return write_text_atomic(path, vetted_text(recipe, evidence))


def read_vetted(path):
    """Read a vetted recipe file.

    Returns
    -------
    recipe : augplan.recipe.Recipe
    evidence : dict or None
    checksum : str or None
    """
    recipe, extras = read_recipe_document(path, extra_fields=("evidence", "checksum"))
    return recipe, extras.get("evidence"), extras.get("checksum")


def verify_vetted(path, *, data=None):
    """Check a vetted recipe's format, checksum and (optionally) data fingerprint.

    Parameters
    ----------
    path : str or Path
        The vetted recipe file.
    data : str or Path, optional
        A data folder; its fingerprint is compared with the evidence's.

    Returns
    -------
    augplan.results.VerifyResult
        ``path``, ``ok``, ``format_ok``, ``checksum_ok``, ``fingerprint_match``
        (None without ``data``) and ``messages``.
    """
    if Path(path).is_dir():
        raise BadInputError(f"{path}: is a folder; expected a vetted recipe file (vetted-*.yaml).")
    if not Path(path).exists():
        raise BadInputError(f"{path}: vetted recipe file not found.")
    messages = []
    result = {"path": str(path), "ok": False, "format_ok": False, "checksum_ok": False,
              "fingerprint_match": None, "messages": messages}
    try:
        recipe, evidence, checksum = read_vetted(path)
    except RecipeError as error:
        messages.append(f"not a valid recipe: {error}")
        return VerifyResult.from_json(result)
    result["format_ok"] = True
    if evidence is None or checksum is None:
        messages.append(f"{path}: a valid recipe, but not a vetted one (no evidence or checksum).")
        return VerifyResult.from_json(result)
    if not isinstance(evidence, dict) or not isinstance(checksum, str):
        messages.append(f"{path}: not a vetted recipe: its 'evidence' must be a mapping and its "
                        f"'checksum' a text; got {type(evidence).__name__} and {type(checksum).__name__}. "
                        "Vet it again.")
        return VerifyResult.from_json(result)
    expected = vetted_checksum(recipe, evidence)
    result["checksum_ok"] = checksum == expected
    if result["checksum_ok"]:
        messages.append(f"{path}: checksum matches; recipe '{recipe.name}' is as vetted.")
    else:
        messages.append(f"{path}: checksum does NOT match: the recipe or its evidence was edited "
                        "after vetting. Vet it again.")
    if data is not None:
        import numpy as np

        from augplan.data.dataset import fingerprint, open_dataset

        # A data set without val/ is split as the default --split-seed (0) splits it.
        current = fingerprint(open_dataset(data, rng=np.random.default_rng(0), split_seed=0))
        vetted_on = evidence.get("data_fingerprint")
        result["fingerprint_match"] = current == vetted_on
        if result["fingerprint_match"]:
            messages.append(f"{data}: same data as at vetting (fingerprint {current[:12]}).")
        else:
            messages.append(f"{data}: the data changed since vetting (fingerprint {current[:12]}, "
                            f"vetted on {str(vetted_on)[:12]}). Vet again on the current data.")
    result["ok"] = result["checksum_ok"] and result["fingerprint_match"] is not False
    return VerifyResult.from_json(result)
