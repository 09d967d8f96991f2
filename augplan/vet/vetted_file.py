"""The vetted recipe: what is safe to use, with its evidence and a checksum.

A vetted recipe file is an ordinary recipe (any loader of the format reads
it) with two more top-level keys: ``evidence`` (what the vetting measured)
and ``checksum`` (sha256 of the canonical JSON of the recipe body and the
evidence), so a training team can tell an untouched vetted recipe from an
edited one.
"""

import json
import os
import time
from pathlib import Path

import yaml

from augplan.atomic import write_text_atomic
from augplan.errors import BadInputError
from augplan.results import VerifyResult
from augplan.recipe.parse import RecipeError, canonical_json, read_recipe_document, recipe_to_dict, vetted_checksum

__all__ = ["vetted_checksum", "vetted_text", "write_vetted", "read_vetted", "verify_vetted", "creation_date"]


def creation_date():
    """Today's UTC date, or the one fixed by ``SOURCE_DATE_EPOCH`` for reproducible output."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    seconds = int(epoch) if epoch and epoch.isdigit() else time.time()
    return time.strftime("%Y-%m-%d", time.gmtime(seconds))


def _header(changes):
    """The file's opening comment: what vetting did, in words the changes bear out."""
    if changes is None:
        lines = ["# Vetted by augplan; what changed is in the evidence block."]
    else:
        altered = sum(1 for c in changes if c.action != "keep")
        signoff = sum(1 for c in changes if c.action == "keep" and c.verdict == "unverified")
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

    ``changes`` (the `augplan.results.VettingChange` rows of
    `augplan.vet.policy.vet_transforms`) word the header; the checksum covers
    body and evidence only.
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

        from augplan.data import fingerprint, open_dataset

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
