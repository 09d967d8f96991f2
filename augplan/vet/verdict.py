"""The vetting run's verdict: the one sentence that leads the report and ``vet``'s output.

It says what to use (the recommendation of `augplan.evaluate.ranking`,
never re-decided here), how much it gains, and what vetting changed, and
claims no more than the verdicts bear out.
"""

from augplan.measure.models import is_linear, model_phrase
from augplan.thresholds import SATURATED_ACCURACY

__all__ = ["verdict_sentence"]


def _gain_text(block):
    """A gain and its 95% interval in percentage points, the report's one unit."""
    low, high = block["gain_ci"]
    return f"{100 * block['gain']:+.1f} points [95% CI {100 * low:+.1f}, {100 * high:+.1f}]"


def _lead(best, top, model_name, on_field):
    """What to use, or that nothing clearly beat no augmentation."""
    phrase = model_phrase(model_name)
    if best is not None:
        return f"Use {best.name} (scored with {phrase})"
    where = "the labelled field sample" if on_field else "validation"
    lead = f"No recipe clearly beat no augmentation on {where}, scored with {phrase}"
    if is_linear(model_name):
        lead += (" (whose gains are biased against augmentation: this is not evidence of harm; its order "
                 f"puts {top.name} first; score with --model cnn before deciding)")
    else:
        lead += f"; the highest-ranked is {top.name}"
    return lead + "; the vetted recipes are exported, none recommended"


def _tail(forms):
    """What vetting changed, claiming label safety only when no kept step is unverified."""
    changed = [name for name, form in forms if not form.unchanged]
    unverified = sum(1 for _, form in forms for change in form.changes
                     if change.verdict == "unverified" and change.action == "keep")
    if changed and not unverified:
        tail = f"augplan changed {', '.join(changed)} to make {'it' if len(changed) == 1 else 'them'} label-safe"
    elif changed:
        tail = f"augplan changed {', '.join(changed)}"
    else:
        tail = "every transform was checked and kept as written" if unverified else "every transform kept its labels"
    if unverified:
        tail += (f"; {unverified} kept transform{'s are' if unverified > 1 else ' is'} unverified and "
                 f"need{'' if unverified > 1 else 's'} a person's sign-off")
    return tail


def verdict_sentence(forms, *, best, top, model_name, decided_on, baseline_accuracy):
    """The report's first line: what to use, how much it gains, what augplan changed.

    Parameters
    ----------
    forms : sequence of (str, augplan.results.VettedForm)
        Each recipe's name and its vetted form, in the order given.
    best : augplan.results.RecipeScore or None
        The row `BEST_RULE` recommends (None when no recipe clearly beat no
        augmentation).
    top : augplan.results.RecipeScore
        The highest-ranked vetted row, whose figures are quoted either way.
    model_name : str
        The scoring model.
    decided_on : {'field', 'val'}
        The evaluator's primary evidence, named first.
    baseline_accuracy : float or None
        Validation accuracy without augmentation (a saturated one is said).

    Returns
    -------
    str
        One voice: without a recommendation no recipe is called recommended or "used".
    """
    row = best if best is not None else top
    on_field = decided_on == "field" and (row.field or {}).get("gain") is not None
    scores = (f"gain over no augmentation {_gain_text(row.field)} on the labelled field sample, which "
              f"decides, and {_gain_text(row)} on validation" if on_field
              else f"validation gain over no augmentation {_gain_text(row)}")
    if baseline_accuracy is not None and baseline_accuracy >= SATURATED_ACCURACY:
        scores += f", which is saturated ({baseline_accuracy:.0%} without augmentation)"
    return f"{_lead(best, top, model_name, on_field)}: {scores}; {_tail(forms)}."
