"""The report's scores: the leaderboard, recall per class and the confusion matrix.

Rows appear in the evaluator's ranking (`EvaluateResult.ranked`) and the
recommended row is the evaluator's (`EvaluateResult.best_score`), the one home
of the "best recipe" rule; the report never re-sorts or re-decides.
"""

from __future__ import annotations

from augplan.measure.models import model_phrase
from augplan.render.formatting import (
    DASH, escape, is_number, number_pair, percent, points_text, points_ci, p_text, number_text,
    table_html, ci_text, accuracy_text,
)

__all__ = ["leaderboard_section", "per_class_section", "confusion_section"]


def _flags(row, best_name, vetted_names):
    """The leaderboard's flags of one scored recipe, in words."""
    flags = []
    if row.name == best_name:
        flags.append("recommended")
    if row.name in vetted_names:
        flags.append("vetted")
    if row.flagged:
        flags.append("loses accuracy")
    elif row.verdict == "loses":
        flags.append("lower on the linear proxy")
    pair = number_pair(row.gain_ci)
    if pair and pair[0] > 0 and not row.flagged:
        flags.append("gain above zero")
    return flags


def _model_note(model):
    note = f" {model['note'][0].upper()}{model['note'][1:]}." if model["note"] else ""
    return (f'<p class="note">Scored with <strong>{escape(model_phrase(model["name"]))}</strong>: '
            f'{escape(model["description"])}.{escape(note)}</p>')


def leaderboard_section(report):
    """The leaderboard: no augmentation first, then every scored recipe in the evaluator's ranking.

    Parameters
    ----------
    report : augplan.results.VetReport

    Returns
    -------
    str
        A ``<section id="leaderboard">``.
    """
    evaluation = report.evaluation
    vetted_names = {entry.vetted.name for entry in report.recipes if not entry.vetted.unchanged}
    best_name = evaluation.best
    field = evaluation.field or {}
    rows = [["", "no augmentation (baseline)", accuracy_text(evaluation.baseline), DASH, DASH,
             accuracy_text(field["baseline"]) if field else DASH, DASH, "reference"]]
    row_classes = ["baseline"]
    ranked = evaluation.ranked()
    for rank, row in enumerate(ranked, start=1):
        row_field = row.field  # the labelled field sample's block, None without one
        rows.append([str(rank), escape(row.name), accuracy_text(row), ci_text(row.gain, row.gain_ci),
                     p_text(row.p_holm), accuracy_text(row_field) if row_field else DASH,
                     ci_text(row_field["gain"], row_field["gain_ci"]) if row_field else DASH,
                     escape(", ".join(_flags(row, best_name, vetted_names))) or DASH])
        row_classes.append("best" if row.name == best_name else "")
    out = ['<section id="leaderboard"><h2>Leaderboard</h2>', _model_note(evaluation.model),
           f'<p class="note">Ordered by the rule that makes the recommendation: {escape(report.ranking_rule)}</p>']
    out.append(table_html(["rank", "recipe", "validation accuracy [95% CI]", "validation gain, points [95% CI]",
                           "p (Holm)", "field accuracy [95% CI]", "field gain, points [95% CI]", "flags"],
                          rows, numeric=(0, 2, 3, 4, 5, 6), row_classes=row_classes))
    facts = [f"Scored on {escape(evaluation.scored_on)}",
             f"augmented validation images: {escape(evaluation.augmented_validation_images)}",
             f"repeats per recipe: {escape(evaluation.repeats)}"]
    if field:
        facts.append(f"field sample: {escape(field['n_images'])} labelled images")
    out.append(f"<p class=\"note\">{'; '.join(facts)}.</p>")
    out.append(_per_class_table(ranked))
    out.append(_confirm_block(evaluation.confirm))
    out.extend(f'<p class="warn">{escape(warning)}</p>' for warning in evaluation.warnings)
    out.append("</section>")
    return "".join(out)


def _per_class_table(ranked):
    classes = []
    for row in ranked:
        classes.extend(label for label in row.per_class_gain if label not in classes)
    if not classes:
        return ""
    rows = [[escape(row.name)] + [points_text(row.per_class_gain.get(label)) for label in classes]
            for row in ranked]
    return ("<h3>Change in recall per class</h3>"
            '<p class="note">Percentage points against the baseline; a negative value means the recipe '
            "hurts that class.</p>"
            + table_html(["recipe"] + [escape(label) for label in classes], rows,
                         numeric=tuple(range(1, len(classes) + 1))))


def _short_score(score):
    """Accuracy with its interval, and (a recipe's block only) the gain and p."""
    text = accuracy_text(score)
    if is_number(score.get("gain")):
        text += f", gain {points_ci(score['gain'], score.get('gain_ci'))} points"
    if is_number(score.get("p_value")):
        text += f", p {p_text(score['p_value'])}"
    return text


def _confirm_block(confirm):
    """The confirmation split's scores of the baseline and the top-ranked recipe; "" without one."""
    if not confirm:
        return ""
    rows = [["no augmentation (baseline)", _short_score(confirm["baseline"])],
            [escape(confirm["recipe"]), _short_score(confirm["recipe_scores"])]]
    return (f"<h3>Confirmation on {escape(confirm['source'])} ({escape(confirm['n_images'])} images)</h3>"
            f'<p class="note">{escape(confirm["note"])}.</p>'
            + table_html(["model", "accuracy [95% CI]"], rows))


def _shown_row(evaluation):
    """The recommended row, or (when none is recommended) the top-ranked one; None when nothing was scored."""
    ranked = evaluation.ranked()
    return evaluation.best_score() or (ranked[0] if ranked else None)


def per_class_section(report):
    """Recall per class on validation: no augmentation beside the recommended (else top-ranked) recipe.

    Parameters
    ----------
    report : augplan.results.VetReport

    Returns
    -------
    str
        A ``<section id="per-class">``, or "" when nothing was scored.
    """
    evaluation = report.evaluation
    # The recommended recipe, or (when none is recommended) the top-ranked one, named: never "recommended".
    row = _shown_row(evaluation)
    baseline = evaluation.baseline.get("per_class_recall")
    if row is None or not baseline:
        return ""
    counts = report.data.class_counts
    rows = []
    for label in report.data.classes:
        n = counts.get(label, {})
        base, new = baseline.get(label), row.per_class_recall.get(label)
        change = points_text(new - base) if is_number(base) and is_number(new) else DASH
        rows.append([escape(label), number_text(n.get("train")), number_text(n.get("val")),
                     number_text(n.get("field")), percent(base, 1), percent(new, 1), change])
    head = ["class", "train images", "validation images", "field images", "recall, no augmentation",
            f"recall, {escape(row.name)}", "change, points"]
    return ('<section id="per-class"><h2>Per class, on validation</h2>'
            '<p class="note">Recall is the share of a class\'s validation images predicted as that class, '
            "averaged over the training repeats.</p>"
            + table_html(head, rows, numeric=(1, 2, 3, 4, 5, 6)) + "</section>")


def confusion_section(report):
    """The confusion matrix of the recommended recipe, shaded by share; "" when none is recommended.

    Parameters
    ----------
    report : augplan.results.VetReport

    Returns
    -------
    str
    """
    row = report.evaluation.best_score()
    confusion = row.confusion if row is not None else None
    if not confusion:
        return ""
    cells = []
    for label, line in zip(confusion["classes"], confusion["counts"]):
        total = sum(line) or 1
        row_cells = [f"<th scope=\"row\">{escape(label)}</th>"]
        for value in line:
            share = value / total
            # Shade by the share of the true class's images; the number is printed too.
            row_cells.append(f'<td class="num" style="background: rgba(0, 90, 170, {0.75 * share:.2f});'
                             f'{" color: #fff;" if share > 0.55 else ""}">{number_text(value)}</td>')
        cells.append(row_cells)
    header = "".join(f'<th scope="col" class="num">{escape(label)}</th>' for label in confusion["classes"])
    body = "".join("<tr>" + "".join(r) + "</tr>" for r in cells)
    note = (f"Counts of validation predictions of {escape(row.name)}, summed over "
            f"{escape(confusion['repeats'])} training repeats; rows are the true class, columns the predicted "
            "class.")
    return ('<section id="confusion"><h2>Confusion matrix of the recommended recipe</h2>'
            f'<p class="note">{note}</p><div class="scroll"><table class="confusion"><thead><tr>'
            f"<th scope=\"col\">true \\ predicted</th>{header}</tr></thead><tbody>{body}</tbody></table></div>"
            "</section>")
