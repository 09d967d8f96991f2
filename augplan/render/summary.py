"""The report's first screen: the verdict, what vetting changed, sign-off and cautions."""

from __future__ import annotations

from augplan.measure.models import model_phrase
from augplan.render.changes import change_phrase
from augplan.render.formatting import escape, is_number, bullet_list, anchor_id, evidence_anchor
from augplan.render.leaderboard import recommended_row, ranked_rows

__all__ = ["summary_section", "changes_list", "signoff_list"]


def summary_section(evidence, recipes):
    verdict = evidence.get("verdict") or "No verdict was recorded for this run."
    cautions = [c for c in (evidence.get("cautions") or []) if c]
    out = ['<section id="summary" class="summary">',
           f'<p class="verdict" id="verdict">{escape(verdict)}</p>']
    note = (evidence.get("evaluation") or {}).get("decision_note")
    if note:
        # Which evidence decides and what validation can show: beside the recommendation, never collapsed.
        shared = (evidence.get("evaluation") or {}).get("val_shares_shortcut")
        out.append(f'<p class="decision{" shortcut" if shared else ""}" id="decision">{escape(note)}</p>')
    if evidence.get("evaluation"):
        out.append(f'<p class="source">{_evidence_source(evidence)}</p>')
    out.append('<div class="cols">' + changes_list(recipes) + signoff_list(recipes) + "</div>")
    if cautions:
        out.append('<div class="cautions" id="cautions"><h2>Cautions</h2>' + bullet_list(cautions) + "</div>")
    out.append("</section>")
    return "".join(out)


def _evidence_source(evidence):
    """Which model and which images the recommendation rests on, in one line."""
    evaluation = evidence.get("evaluation") or {}
    model = evaluation.get("model")
    model_text = model_phrase((model.get("name") if isinstance(model, dict) else model) or "linear")
    # The recommended row, else the top-ranked one: the field sample is named whether or not one is recommended.
    recommended = recommended_row(evidence) or next(iter(ranked_rows(evidence)), None) or {}
    parts = []
    field = recommended.get("field") or {}
    if is_number(field.get("gain")):
        n = field.get("n_images")
        parts.append("the labelled field sample" + (f" ({n} images)" if is_number(n) else ""))
    baseline = evaluation.get("baseline") or {}
    n_val = baseline.get("n_images")
    scored_on = str(evaluation.get("scored_on") or "val")
    scored_on = "validation" + scored_on[3:] if scored_on.startswith("val") else scored_on
    parts.append(scored_on + (f" ({n_val} images)" if is_number(n_val) else ""))
    repeats = evaluation.get("repeats")
    tail = f", {repeats} training repeat{'s' if repeats != 1 else ''}" if is_number(repeats) else ""
    return (f"Evidence: the accuracy gain of {escape(model_text)}, trained with each recipe, over the "
            f"same model trained without augmentation, scored on {escape(' and '.join(parts))}{escape(tail)}; "
            "validation images are never augmented.")


def changes_list(recipes):
    items = []
    for number, entry in enumerate(recipes):
        name = entry.get("name", f"recipe {number + 1}")
        vetted = entry.get("vetted") or {}
        changes = [c for c in (vetted.get("changes") or []) if isinstance(c, dict)]
        link = f'<a href="#{anchor_id("recipe", name, number)}"><strong>{escape(name)}</strong></a>'
        if vetted.get("unchanged") or not changes:
            kept = f"{len(changes)} transform{'s' if len(changes) != 1 else ''}" if changes else "as written"
            items.append(f"<li>{link}: kept ({escape(kept)} unchanged)</li>")
            continue
        changed = [c for c in changes if c.get("action") != "keep"]
        phrases = [change_phrase(c) for c in changed]
        kept = len(changes) - len(changed)
        if kept:
            phrases.append(f"{kept} kept")
        target = f" \u2192 {escape(vetted['name'])}" if vetted.get("name") else ""
        items.append(f"<li>{link}{target}: {escape('; '.join(phrases))}</li>")
    if not items:
        return ""
    return f'<div class="box"><h2>What vetting changed</h2><ul>{"".join(items)}</ul></div>'


def signoff_list(recipes):
    items = []
    for number, entry in enumerate(recipes):
        name = entry.get("name", f"recipe {number + 1}")
        sheets = {t.get("index"): t.get("evidence_sheet") for t in ((entry.get("check") or {}).get("transforms")
                                                                   or []) if isinstance(t, dict)}
        for item in (entry.get("vetted") or {}).get("signoff") or []:
            if not isinstance(item, dict):
                continue
            index = item.get("index")
            where = (evidence_anchor(number, index) if sheets.get(index)
                     else anchor_id("recipe", name, number))
            items.append(f'<li><a href="#{where}">{escape(name)}, transform {escape(index)} ({escape(item.get("op", "?"))})'
                         f"</a>: {escape(item.get('detail') or 'unverified, kept')}</li>")
    if not items:
        body = "<p>None: every transform kept is verified safe, rewritten, clipped or removed.</p>"
    else:
        body = f"<ul>{''.join(items)}</ul>"
    return f'<div class="box signoff" id="signoff"><h2>Sign-off needed</h2>{body}</div>'
