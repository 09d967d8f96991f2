"""The report's first screen: the verdict, what vetting changed, sign-off and cautions."""

from __future__ import annotations

from augplan.measure.models import model_phrase
from augplan.render.changes import change_phrase
from augplan.render.formatting import escape, bullet_list, anchor_id, evidence_anchor

__all__ = ["summary_section", "changes_list", "signoff_list"]


def summary_section(report):
    """The first screen: the verdict, the decision note, the evidence, changes, sign-off and cautions.

    Parameters
    ----------
    report : augplan.results.VetReport

    Returns
    -------
    str
        A ``<section id="summary">``.
    """
    evaluation = report.evaluation
    out = ['<section id="summary" class="summary">',
           f'<p class="verdict" id="verdict">{escape(report.verdict)}</p>']
    if evaluation.decision_note:
        # Which evidence decides and what validation can show: beside the recommendation, never collapsed.
        shortcut = " shortcut" if evaluation.val_shares_shortcut else ""
        out.append(f'<p class="decision{shortcut}" id="decision">{escape(evaluation.decision_note)}</p>')
    out.append(f'<p class="source">{_evidence_source(report)}</p>')
    out.append('<div class="cols">' + changes_list(report.recipes) + signoff_list(report.recipes) + "</div>")
    if report.cautions:
        out.append('<div class="cautions" id="cautions"><h2>Cautions</h2>' + bullet_list(report.cautions)
                   + "</div>")
    out.append("</section>")
    return "".join(out)


def _evidence_source(report):
    """Which model and which images the recommendation rests on, in one line."""
    evaluation = report.evaluation
    # The recommended row, else the top-ranked one: the field sample is named whether or not one is recommended.
    ranked = evaluation.ranked()
    row = evaluation.best_score() or (ranked[0] if ranked else None)
    parts = []
    if row is not None and row.field:
        parts.append(f"the labelled field sample ({row.field['n_images']} images)")
    scored_on = evaluation.scored_on
    scored_on = "validation" + scored_on[3:] if scored_on.startswith("val") else scored_on
    parts.append(f"{scored_on} ({evaluation.baseline['n_images']} images)")
    repeats = evaluation.repeats
    return (f"Evidence: the accuracy gain of {escape(model_phrase(evaluation.model['name']))}, trained with "
            "each recipe, over the same model trained without augmentation, scored on "
            f"{escape(' and '.join(parts))}, {repeats} training repeat{'s' if repeats != 1 else ''}; "
            "validation images are never augmented.")


def changes_list(recipes):
    """"What vetting changed": one line per recipe, its changes said by `change_phrase`.

    Parameters
    ----------
    recipes : list of augplan.results.VettedRecipe

    Returns
    -------
    str
        A box with the list, or "" when there are no recipes.
    """
    items = []
    for number, entry in enumerate(recipes):
        changes = entry.vetted.changes
        link = f'<a href="#{anchor_id("recipe", entry.name, number)}"><strong>{escape(entry.name)}</strong></a>'
        if entry.vetted.unchanged:
            kept = f"{len(changes)} transform{'s' if len(changes) != 1 else ''}" if changes else "as written"
            items.append(f"<li>{link}: kept ({escape(kept)} unchanged)</li>")
            continue
        changed = [change for change in changes if change.action != "keep"]
        phrases = [change_phrase(change) for change in changed]
        if len(changes) > len(changed):
            phrases.append(f"{len(changes) - len(changed)} kept")
        items.append(f"<li>{link} \u2192 {escape(entry.vetted.name)}: {escape('; '.join(phrases))}</li>")
    if not items:
        return ""
    return f'<div class="box"><h2>What vetting changed</h2><ul>{"".join(items)}</ul></div>'


def signoff_list(recipes):
    """"Sign-off needed": every unverified transform vetting kept, linked to its evidence sheet.

    Parameters
    ----------
    recipes : list of augplan.results.VettedRecipe

    Returns
    -------
    str
    """
    items = []
    for number, entry in enumerate(recipes):
        sheets = {t["index"]: t["evidence_sheet"] for t in entry.check.transforms}
        for item in entry.vetted.signoff:
            where = (evidence_anchor(number, item.index) if sheets.get(item.index)
                     else anchor_id("recipe", entry.name, number))
            items.append(f'<li><a href="#{where}">{escape(entry.name)}, transform {escape(item.index)} '
                         f"({escape(item.op)})</a>: {escape(item.detail)}</li>")
    if not items:
        body = "<p>None: every transform kept is verified safe, rewritten, clipped or removed.</p>"
    else:
        body = f"<ul>{''.join(items)}</ul>"
    return f'<div class="box signoff" id="signoff"><h2>Sign-off needed</h2>{body}</div>'
