"""The report's scores: the leaderboard, recall per class and the confusion matrix.

Rows appear in the evaluator's ranking (``evaluation["ranking"]``), the one
home of the "best recipe" rule; the report never re-sorts them.
"""

from __future__ import annotations

from augplan.measure.models import model_phrase
from augplan.render.formatting import (
    DASH, escape, is_number, number_pair, percent, points_text, points_ci, p_text, number_text,
    table_html, ci_text, accuracy_text,
)

__all__ = ["recommended_row", "ranked_rows", "leaderboard_section", "per_class_section", "confusion_section"]


def recommended_row(evidence):
    """The evaluation row of the recommended (vetted) recipe, or None."""
    evaluation = evidence.get("evaluation") or {}
    wanted = None
    for entry in evidence.get("recipes") or []:
        if isinstance(entry, dict) and entry.get("name") == evidence.get("best"):
            wanted = (entry.get("vetted") or {}).get("name") or entry.get("name")
    for row in evaluation.get("recipes") or []:
        if isinstance(row, dict) and row.get("name") == wanted:
            return row
    return None


def ranked_rows(evidence):
    """Scored rows in the order of the recommendation rule (the evaluator's ``ranking``); never re-sorted here."""
    evaluation = evidence.get("evaluation") or {}
    scored = [r for r in (evaluation.get("recipes") or []) if isinstance(r, dict)]
    order = evaluation.get("ranking") or evidence.get("ranking") or []
    position = {name: i for i, name in enumerate(order)}
    return sorted(scored, key=lambda r: position.get(r.get("name"), len(position)))


def leaderboard_section(evidence):
    evaluation = evidence.get("evaluation") or {}
    recipes = evidence.get("recipes") or []
    out = ['<section id="leaderboard"><h2>Leaderboard</h2>']
    if not evaluation:
        out.append('<p class="note">No evaluation was recorded.</p></section>')
        return "".join(out)
    vetted_names = {(e.get("vetted") or {}).get("name") for e in recipes
                    if isinstance(e, dict) and not (e.get("vetted") or {}).get("unchanged")}
    best_name = (recommended_row(evidence) or {}).get("name")
    baseline = evaluation.get("baseline") or {}
    field = evaluation.get("field") or {}
    rows = [["", "no augmentation (baseline)", accuracy_text(baseline), DASH, DASH,
             accuracy_text(field.get("baseline")), DASH, "reference"]]
    row_classes = ["baseline"]
    ranked = ranked_rows(evidence)
    for rank, row in enumerate(ranked, start=1):
        flags = []
        if row.get("name") == best_name:
            flags.append("recommended")
        if row.get("name") in vetted_names:
            flags.append("vetted")
        if row.get("flagged"):
            flags.append("loses accuracy")
        elif row.get("verdict") == "loses":
            flags.append("lower on the linear proxy")
        pair = number_pair(row.get("gain_ci"))
        if pair and pair[0] > 0 and not row.get("flagged"):
            flags.append("gain above zero")
        row_field = row.get("field") if isinstance(row.get("field"), dict) else {}
        rows.append([str(rank), escape(row.get("name", "?")), accuracy_text(row),
                     ci_text(row.get("gain"), row.get("gain_ci")), p_text(row.get("p_holm")),
                     accuracy_text(row_field) if row_field else DASH,
                     ci_text(row_field.get("gain"), row_field.get("gain_ci")),
                     escape(", ".join(flags)) or DASH])
        row_classes.append("best" if row.get("name") == best_name else "")
    model = evaluation.get("model") or {}
    if model:
        note = f" {model['note'][0].upper()}{model['note'][1:]}." if model.get("note") else ""
        out.append(f'<p class="note">Scored with <strong>{escape(model_phrase(model.get("name")))}</strong>: '
                   f'{escape(model.get("description"))}.{escape(note)}</p>')
    rule = evidence.get("ranking_rule")
    if rule:
        out.append(f'<p class="note">Ordered by the rule that makes the recommendation: {escape(rule)}</p>')
    out.append(table_html(["rank", "recipe", "validation accuracy [95% CI]", "validation gain, points [95% CI]",
                       "p (Holm)", "field accuracy [95% CI]", "field gain, points [95% CI]", "flags"],
                      rows, numeric=(0, 2, 3, 4, 5, 6), row_classes=row_classes))

    facts = []
    if evaluation.get("scored_on"):
        facts.append(f"Scored on {escape(evaluation['scored_on'])}")
    if "augmented_validation_images" in evaluation:
        facts.append(f"augmented validation images: {escape(evaluation['augmented_validation_images'])}")
    if evaluation.get("repeats") is not None:
        facts.append(f"repeats per recipe: {escape(evaluation['repeats'])}")
    if field.get("n_images") is not None:
        facts.append(f"field sample: {escape(field['n_images'])} labelled images")
    if facts:
        out.append(f"<p class=\"note\">{'; '.join(facts)}.</p>")
    out.append(_per_class_table(ranked))
    out.append(_confirm_block(evaluation.get("confirm")))
    for warning in evaluation.get("warnings") or []:
        out.append(f'<p class="warn">{escape(warning)}</p>')
    out.append("</section>")
    return "".join(out)


def _per_class_table(ranked):
    classes = []
    for row in ranked:
        gains = row.get("per_class_gain")
        if isinstance(gains, dict):
            classes.extend(c for c in gains if c not in classes)
    if not classes:
        return ""
    rows = []
    for row in ranked:
        gains = row.get("per_class_gain") if isinstance(row.get("per_class_gain"), dict) else {}
        rows.append([escape(row.get("name", "?"))] + [points_text(gains.get(c)) for c in classes])
    return ("<h3>Change in recall per class</h3>"
            '<p class="note">Percentage points against the baseline; a negative value means the recipe '
            "hurts that class.</p>"
            + table_html(["recipe"] + [escape(c) for c in classes], rows, numeric=tuple(range(1, len(classes) + 1))))


def _short_score(score):
    if not isinstance(score, dict):
        return DASH
    text = percent(score.get("accuracy"), 1)
    pair = number_pair(score.get("accuracy_ci"))
    if pair:
        text += f" [{percent(pair[0], 1)}, {percent(pair[1], 1)}]"
    if is_number(score.get("gain")):
        text += f", gain {points_ci(score.get('gain'), score.get('gain_ci'))} points"
    if is_number(score.get("p_value")):
        text += f", p {p_text(score.get('p_value'))}"
    return text


def _confirm_block(confirm):
    if not isinstance(confirm, dict) or not confirm:
        return ""
    n = f" ({confirm['n_images']} images)" if is_number(confirm.get("n_images")) else ""
    rows = [["no augmentation (baseline)", _short_score(confirm.get("baseline"))],
            [escape(confirm.get("recipe", "?")), _short_score(confirm.get("recipe_scores"))]]
    note = f'<p class="note">{escape(confirm["note"])}.</p>' if confirm.get("note") else ""
    return (f"<h3>Confirmation on {escape(confirm.get('source', 'a held-out split'))}{n}</h3>" + note
            + table_html(["model", "accuracy [95% CI]"], rows))


def per_class_section(evidence):
    evaluation = evidence.get("evaluation") or {}
    # The recommended recipe, or (when none is recommended) the top-ranked one, named: never "recommended".
    recommended = recommended_row(evidence) or next(iter(ranked_rows(evidence)), None)
    baseline = (evaluation.get("baseline") or {}).get("per_class_recall")
    data = evidence.get("data") or {}
    classes = list(data.get("classes") or (baseline or {}).keys())
    if not classes or not isinstance(baseline, dict):
        return ""
    counts = data.get("class_counts") if isinstance(data.get("class_counts"), dict) else {}
    recall = (recommended or {}).get("per_class_recall") or {}
    name = (recommended or {}).get("name")
    rows = []
    for label in classes:
        n = counts.get(label) if isinstance(counts.get(label), dict) else {}
        base, new = baseline.get(label), recall.get(label)
        change = points_text(new - base) if is_number(base) and is_number(new) else DASH
        rows.append([escape(label), number_text(n.get("train")), number_text(n.get("val")), number_text(n.get("field")),
                     percent(base, 1), percent(new, 1), change])
    head = ["class", "train images", "validation images", "field images", "recall, no augmentation",
            f"recall, {escape(name) if name else 'recipe'}", "change, points"]
    return ('<section id="per-class"><h2>Per class, on validation</h2>'
            '<p class="note">Recall is the share of a class\'s validation images predicted as that class, '
            "averaged over the training repeats.</p>"
            + table_html(head, rows, numeric=(1, 2, 3, 4, 5, 6)) + "</section>")


def confusion_section(evidence):
    row = recommended_row(evidence)
    confusion = (row or {}).get("confusion")
    if not isinstance(confusion, dict):
        return ""
    classes, counts = confusion.get("classes") or [], confusion.get("counts") or []
    if not classes or len(counts) != len(classes):
        return ""
    cells = []
    for label, line in zip(classes, counts):
        total = sum(v for v in line if is_number(v)) or 1
        row_cells = [f"<th scope=\"row\">{escape(label)}</th>"]
        for value in line:
            share = value / total if is_number(value) else 0.0
            # Shade by the share of the true class's images; the number is printed too.
            row_cells.append(f'<td class="num" style="background: rgba(0, 90, 170, {0.75 * share:.2f});'
                             f'{" color: #fff;" if share > 0.55 else ""}">{number_text(value)}</td>')
        cells.append(row_cells)
    header = "".join(f'<th scope="col" class="num">{escape(c)}</th>' for c in classes)
    body = "".join("<tr>" + "".join(r) + "</tr>" for r in cells)
    repeats = confusion.get("repeats")
    note = (f"Counts of validation predictions of {escape(row.get('name'))}, summed over "
            f"{escape(repeats)} training repeats; rows are the true class, columns the predicted class."
            if repeats else "Rows are the true class, columns the predicted class.")
    return ('<section id="confusion"><h2>Confusion matrix of the recommended recipe</h2>'
            f'<p class="note">{note}</p><div class="scroll"><table class="confusion"><thead><tr>'
            f"<th scope=\"col\">true \\ predicted</th>{header}</tr></thead><tbody>{body}</tbody></table></div>"
            "</section>")
