"""The report's label-safety section of one recipe: the verdict table, evidence sheets and the vetted recipe."""

from __future__ import annotations

from augplan.render.changes import vetting_text
from augplan.render.figures import EVIDENCE_COLOURS, figure_html
from augplan.render.formatting import (
    DASH, escape, is_number, percent, rate_ci, points_ci, value_text, verdict_badge, table_html,
    evidence_anchor,
)
from augplan.results import range_text

__all__ = ["safety_section"]


def _transform_text(step, fallback):
    """``rotate degrees=[-8, 8], probability=0.5``, from the recipe step or the check params."""
    source = step if isinstance(step, dict) else {}
    op = source.get("op") or fallback.get("op") or "?"
    params = {k: v for k, v in source.items() if k != "op"} or dict(fallback.get("params") or {})
    text = ", ".join(f"{k}={value_text(v)}" for k, v in params.items())
    return f"<strong>{escape(op)}</strong>" + (f" <span class=\"note\">{escape(text)}</span>" if text else "")


def _stage_text(stage):
    names = {"screen": "by the screen", "confirmation": "by training"}
    return f'<br><span class="note">{names[stage]}</span>' if stage in names else ""


def _swaps_text(swaps, limit=2):
    swaps = [s for s in (swaps or []) if isinstance(s, dict)]
    if not swaps:
        return DASH
    parts = []
    for swap in swaps[:limit]:
        # The count that moved, of the class's images checked (not the class size alone).
        n = (f", {swap['moved']} of {swap['n']} images moved" if is_number(swap.get("moved"))
             and is_number(swap.get("n")) else "")
        parts.append(f"<span class=\"swap\">{escape(swap.get('from', '?'))} \u2192 {escape(swap.get('to', '?'))} "
                     f"{percent(swap.get('rate'))}{n}</span>")
    more = f"<br><span class=\"note\">and {len(swaps) - limit} more</span>" if len(swaps) > limit else ""
    return "<br>".join(parts) + more


def _limit_text(transform):
    pair = transform.get("safe_limit")
    if isinstance(pair, (list, tuple)) and len(pair) == 2:
        if pair[0] == pair[1]:
            return f"{range_text(pair)} only (no change is safe)"
        return range_text(pair)
    if transform.get("magnitudes"):
        return "no safe magnitude"
    return DASH


def safety_section(entry, number, base_dir):
    check = entry.get("check") or {}
    vetted = entry.get("vetted") or {}
    steps = (entry.get("recipe") or {}).get("transforms") or []
    changes = {c.get("index"): c for c in (vetted.get("changes") or []) if isinstance(c, dict)}
    out = ["<section><h3>Label safety</h3>"]
    facts = []
    if entry.get("source"):
        facts.append(f"file <code>{escape(entry['source'])}</code>")
    if entry.get("recipe_hash"):
        facts.append(f"recipe hash <code>{escape(str(entry['recipe_hash'])[:12])}</code>")
    model = check.get("model") or {}
    if is_number(model.get("cv_accuracy")):
        facts.append(f"checking model: cross-validated accuracy {percent(model['cv_accuracy'], 1)}"
                     + (f" against chance {percent(model.get('chance'), 1)}" if is_number(model.get("chance"))
                        else ""))
    if is_number(check.get("n_images")):
        facts.append(f"{check['n_images']} training images checked")
    if facts:
        out.append(f"<p class=\"note\">{'; '.join(facts)}.</p>")
    if model.get("weak"):
        out.append('<p class="warn">The checking model is weak on this data: its verdicts say little. '
                   "Treat every verdict as unverified and look at the images.</p>")

    transforms = [t for t in (check.get("transforms") or []) if isinstance(t, dict)]
    rows = []
    row_classes = []
    for position, transform in enumerate(transforms):
        index = transform.get("index", position)
        step = steps[index] if isinstance(index, int) and 0 <= index < len(steps) else None
        rows.append([
            escape(index),
            _transform_text(step, transform),
            verdict_badge(transform.get("verdict")) + _stage_text(transform.get("decided_by")),
            rate_ci(transform.get("change_rate"), transform.get("change_rate_ci")),
            rate_ci(transform.get("leave_rate"), transform.get("leave_rate_ci")),
            _swaps_text(transform.get("swaps")),
            _limit_text(transform),
            vetting_text(changes.get(index), transform.get("suggestion")),
        ])
        row_classes.append("")
    if rows:
        out.append(table_html(
            ["#", "transform", "verdict", "moved to another class<br>(screen, 95% CI)",
             "outside every class<br>(screen, 95% CI)", "confirmed swaps", "safe limit", "what vetting did"],
            rows, numeric=(0, 3, 4), row_classes=row_classes, wide=True))
    else:
        out.append('<p class="note">The check recorded no transforms.</p>')
    if check.get("decision_rule"):
        out.append('<p class="note">Verdicts follow the label-safety rule in the '
                   '<a href="#appendix">appendix</a>.</p>')
    for warning in check.get("warnings") or []:
        out.append(f'<p class="warn">{escape(warning)}</p>')

    sheets = [t for t in transforms if t.get("evidence_sheet")]
    if sheets:
        out.append("<h3>Images that moved</h3>"
                   '<p class="note">Each pair shows an original at its own aspect ratio and the transformed '
                   "image, captioned with the magnitude; the row label says its class and where the "
                   "transformed image landed (another class, or outside every class).</p>")
        out.append('<div class="plots">')
        for transform in sheets:
            caption = (f"transform {transform.get('index', '?')} ({transform.get('op', '?')}): "
                       f"{transform.get('verdict', 'unknown')}; shown in {EVIDENCE_COLOURS} colours, "
                       f"the full-colour sheet is {transform['evidence_sheet']}")
            out.append(figure_html(transform["evidence_sheet"], caption, f"evidence sheet, {caption}", base_dir,
                               anchor=evidence_anchor(number, transform.get("index", "x")),
                               colours=EVIDENCE_COLOURS))
        out.append("</div>")

    out.append(_vetted_block(vetted))
    out.append("</section>")
    return "".join(out)


def _vetted_block(vetted):
    if not vetted:
        return ""
    out = ["<h4>The vetted recipe</h4>"]
    name = vetted.get("name")
    if vetted.get("unchanged"):
        out.append(f"<p>Every transform is kept as written; the vetted recipe is <strong>{escape(name)}</strong>.</p>")
    else:
        out.append(f"<p>Vetting changed the recipe; the result is <strong>{escape(name)}</strong>.</p>")
    score = vetted.get("score") or {}
    if score:
        out.append(f"<p>Validation accuracy {percent(score.get('accuracy'), 1)}, gain over no augmentation "
                   f"{points_ci(score.get('gain'), score.get('gain_ci'))} percentage points "
                   "(95% CI).</p>")
    recheck = vetted.get("recheck") or {}
    transforms = [t for t in (recheck.get("transforms") or []) if isinstance(t, dict)]
    if transforms:
        rows = [[escape(t.get("index", i)), f"<strong>{escape(t.get('op', '?'))}</strong>", verdict_badge(t.get("verdict")),
                 rate_ci(t.get("change_rate"), t.get("change_rate_ci")), _swaps_text(t.get("swaps"))]
                for i, t in enumerate(transforms)]
        out.append("<p>The rewritten transforms were checked again:</p>")
        out.append(table_html(["#", "transform", "verdict", "moved to another class (95% CI)", "main swaps"],
                          rows, numeric=(0, 3)))
    return "".join(out)
