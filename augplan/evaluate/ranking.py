"""Which recipe is best: the one ranking and recommendation rule (`BEST_RULE`).

The rule is decided here and nowhere else. `decide` returns a `Decision`
that the evaluator carries in its result (``ranking``, ``best``,
``decided_on``, ``val_shares_shortcut``, ``decision_note``); ``vet`` and the
report read it and never sort recipes themselves.

Why a labelled field sample comes first: validation is drawn like the
training set, so when both carry the same shortcut (one class photographed
darker, say) a validation score rewards the shortcut and cannot show the
gain of a recipe that breaks it. A labelled sample from where the model will
be deployed can. Without one, validation decides, and when it shares a
flagged shortcut every output says so and asks for a field sample.
"""

from dataclasses import dataclass

__all__ = ["BEST_RULE", "Decision", "decide", "rank_key", "best_recipe", "clear_gain", "primary_source"]

BEST_RULE = ("with a labelled field sample, it is the primary evidence: recipes are ranked by their gain over no "
             "augmentation on the field sample, a tie going to the larger validation gain (validation comes "
             "second: it breaks ties and is reported beside, and when it carries a flagged shortcut of the "
             "training set it cannot show the gain of a recipe that breaks that shortcut); without a labelled "
             "field sample recipes are ranked by their validation gain; the best (recommended) recipe is the "
             "highest-ranked one with at least one transform whose 95% gain interval on the primary evidence "
             "lies above zero; when no recipe has one, none is recommended: no recipe clearly beat no "
             "augmentation")


def _field_block(entry):
    field = entry.get("field") or {}
    return field if field.get("gain") is not None else None


def primary_source(entries):
    """``"field"`` when the rows carry a labelled field sample's gains, else ``"val"``."""
    return "field" if any(_field_block(entry) is not None for entry in entries) else "val"


def _primary(entry, source):
    return (_field_block(entry) or {}) if source == "field" else entry


def rank_key(entry, source="val"):
    """Sort key of a recipe row by `BEST_RULE`: the primary source's gain, then the other's."""
    field = _field_block(entry)
    field_gain = float("-inf") if field is None else field["gain"]
    return (field_gain, entry["gain"]) if source == "field" else (entry["gain"], field_gain)


def clear_gain(block):
    """True when a score block's 95% gain interval lies above zero."""
    interval = (block or {}).get("gain_ci")
    return bool(interval) and interval[0] is not None and interval[0] > 0


def best_recipe(entries, *, candidates=None):
    """The recipe row `BEST_RULE` recommends, or None when no recipe clearly beat no augmentation.

    Parameters
    ----------
    entries : sequence of dict
        ``evaluate`` recipe rows (``name``, ``gain``, ``gain_ci``, ``field``, ``n_transforms``).
    candidates : collection of str, optional
        Names that may be recommended (``vet`` passes its vetted recipes);
        default every row.
    """
    source = primary_source(entries)
    eligible = [entry for entry in entries
                if (candidates is None or entry["name"] in candidates) and entry["n_transforms"] > 0
                and clear_gain(_primary(entry, source))]
    return max(eligible, key=lambda entry: rank_key(entry, source), default=None)


@dataclass(frozen=True)
class Decision:
    """The outcome of `BEST_RULE` on one comparison.

    Attributes
    ----------
    decided_on : {'field', 'val'}
        The primary evidence.
    ranking : tuple of str
        Every scored recipe, best first.
    best : str or None
        The recommended recipe.
    val_shares_shortcut : tuple of str
        Flagged shortcut factors of the training set that validation carries too.
    note : str
        One sentence: which evidence decides, validation's role, and what a
        shared shortcut means for it.
    """

    decided_on: str
    ranking: tuple
    best: object
    val_shares_shortcut: tuple
    note: str


def _note(source, shared, n_field):
    factors = ", ".join(shared)
    plural = "s" if len(shared) > 1 else ""
    it = "them" if len(shared) > 1 else "it"
    if source == "field":
        images = f" ({n_field} images)" if n_field else ""
        text = (f"The labelled field sample{images} decides the recommendation; validation comes second and "
                "breaks ties")
        if shared:
            text += (f". The validation split carries the same {factors} shortcut{plural} as the training set, "
                     f"so validation cannot show the gain of a recipe that breaks {it}")
        return text + "."
    if shared:
        return (f"The validation split carries the same {factors} shortcut{plural} as the training set: "
                f"validation cannot reveal whether a recipe breaks {it}, so these scores cannot show that gain. "
                "Collect a labelled field sample (DATA/field/<class>/ or --field) and score again.")
    return "Validation decides the recommendation (no labelled field sample was given)."


def decide(entries, *, val_shares_shortcut=(), n_field=None, candidates=None):
    """Rank the recipe rows and pick the recommendation by `BEST_RULE`.

    Parameters
    ----------
    entries : sequence of dict
        ``evaluate`` recipe rows.
    val_shares_shortcut : sequence of str
        Flagged shortcut factors that the validation split shares
        (`augplan.measure.shortcuts.audit_shortcuts`, ``val_shares``).
    n_field : int, optional
        Labelled field images scored, for the note.
    candidates : collection of str, optional
        Names that may be recommended; default every row.

    Returns
    -------
    Decision
    """
    source = primary_source(entries)
    ordered = sorted(entries, key=lambda entry: rank_key(entry, source), reverse=True)
    best = best_recipe(entries, candidates=candidates)
    shared = tuple(val_shares_shortcut)
    return Decision(decided_on=source, ranking=tuple(entry["name"] for entry in ordered),
                    best=None if best is None else best["name"], val_shares_shortcut=shared,
                    note=_note(source, shared, n_field))
