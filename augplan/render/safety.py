"""The report's label-safety section of one recipe: the verdict table, evidence sheets and the vetted recipe."""

from __future__ import annotations

from augplan.render.changes import vetting_text
from augplan.render.figures import EVIDENCE_COLOURS, figure_html
from augplan.render.formatting import (
    DASH, escape, percent, rate_ci, points_ci, value_text, verdict_badge, table_html,
    evidence_anchor,
)
from augplan.results import range_text

__all__ = ["safety_section"]


def _transform_text(step):
    """``rotate degrees=[-8, 8], probability=0.5``: a recipe step as written."""
    text = ", ".join(f"{key}={value_text(value)}" for key, value in step.items() if key != "op")
    return f"<strong>{escape(step['op'])}</strong>" + (f" <span class=\"note\">{escape(text)}</span>" if text else "")


def _stage_text(stage):
    names = {"screen": "by the screen", "confirmation": "by training"}
    return f'<br><span class="note">{names[stage]}</span>' if stage in names else ""


def _swaps_text(swaps, limit=2):
    """The first ``limit`` swaps of a transform (``a -> b 93%, 37 of 40 images moved``), then a count."""
    if not swaps:
        return DASH
    parts = []
    for swap in swaps[:limit]:
        # The count that moved, of the class's images checked (not the class size alone).
        parts.append(f"<span class=\"swap\">{escape(swap['from'])} \u2192 {escape(swap['to'])} "
                     f"{percent(swap['rate'])}, {swap['moved']} of {swap['n']} images moved</span>")
    more = f"<br><span class=\"note\">and {len(swaps) - limit} more</span>" if len(swaps) > limit else ""
    return "<br>".join(parts) + more


def _limit_text(transform):
    """The safe limit of a transform (`augplan.results.range_text`), or why there is none."""
    pair = transform["safe_limit"]
    if pair is not None:
        if pair[0] == pair[1]:
            return f"{range_text(pair)} only (no change is safe)"
        return range_text(pair)
    if transform["magnitudes"]:
        return "no safe magnitude"
    return DASH


def _facts(entry):
    """The line above the table: file, recipe hash and the checking model's accuracy."""
    model = entry.check.model
    facts = []
    if entry.source:
        facts.append(f"file <code>{escape(entry.source)}</code>")
    facts.append(f"recipe hash <code>{escape(entry.recipe_hash[:12])}</code>")
    facts.append(f"checking model: cross-validated accuracy {percent(model['cv_accuracy'], 1)} "
                 f"against chance {percent(model['chance'], 1)}")
    facts.append(f"{entry.check.n_images} training images checked")
    out = [f"<p class=\"note\">{'; '.join(facts)}.</p>"]
    if model["weak"]:
        out.append('<p class="warn">The checking model is weak on this data: its verdicts say little. '
                   "Treat every verdict as unverified and look at the images.</p>")
    return "".join(out)


def _verdict_table(entry):
    """One row per transform: its verdict, the screen's rates, swaps, safe limit and what vetting did."""
    steps = entry.recipe["transforms"]
    changes = {change.index: change for change in entry.vetted.changes}
    rows = []
    for transform in entry.check.transforms:
        index = transform["index"]
        rows.append([
            escape(index),
            _transform_text(steps[index]),
            verdict_badge(transform["verdict"]) + _stage_text(transform["decided_by"]),
            rate_ci(transform["change_rate"], transform["change_rate_ci"]),
            rate_ci(transform["leave_rate"], transform["leave_rate_ci"]),
            _swaps_text(transform["swaps"]),
            _limit_text(transform),
            vetting_text(changes.get(index), transform["suggestion"]),
        ])
    if not rows:
        return '<p class="note">The check recorded no transforms.</p>'
    return table_html(["#", "transform", "verdict", "moved to another class<br>(screen, 95% CI)",
                       "outside every class<br>(screen, 95% CI)", "confirmed swaps", "safe limit",
                       "what vetting did"], rows, numeric=(0, 3, 4), wide=True)


def _evidence_sheets(transforms, number, base_dir):
    """The evidence sheet of every transform that has one, each anchored for the sign-off links."""
    sheets = [transform for transform in transforms if transform["evidence_sheet"]]
    if not sheets:
        return ""
    out = ["<h3>Images that moved</h3>"
           '<p class="note">Each pair shows an original at its own aspect ratio and the transformed '
           "image, captioned with the magnitude; the row label says its class and where the "
           "transformed image landed (another class, or outside every class).</p>",
           '<div class="plots">']
    for transform in sheets:
        caption = (f"transform {transform['index']} ({transform['op']}): {transform['verdict']}; shown in "
                   f"{EVIDENCE_COLOURS} colours, the full-colour sheet is {transform['evidence_sheet']}")
        out.append(figure_html(transform["evidence_sheet"], caption, f"evidence sheet, {caption}", base_dir,
                               anchor=evidence_anchor(number, transform["index"]), colours=EVIDENCE_COLOURS))
    out.append("</div>")
    return "".join(out)


def safety_section(entry, number, base_dir):
    """The label-safety section of one recipe.

    Parameters
    ----------
    entry : augplan.results.VettedRecipe
    number : int
        Its position in the report (makes the evidence sheets' ids unique).
    base_dir : str or Path or None
        Folder that relative figure paths are resolved against.

    Returns
    -------
    str
        A ``<section>``: the checking model, the verdict table, the check's
        warnings, the evidence sheets and the vetted recipe.
    """
    out = ["<section><h3>Label safety</h3>", _facts(entry), _verdict_table(entry),
           '<p class="note">Verdicts follow the label-safety rule in the <a href="#appendix">appendix</a>.</p>']
    out.extend(f'<p class="warn">{escape(warning)}</p>' for warning in entry.check.warnings)
    out.append(_evidence_sheets(entry.check.transforms, number, base_dir))
    out.append(_vetted_block(entry.vetted))
    out.append("</section>")
    return "".join(out)


def _vetted_block(vetted):
    """The vetted form: its name, its score and, when steps were rewritten, their re-check."""
    out = ["<h4>The vetted recipe</h4>"]
    if vetted.unchanged:
        out.append("<p>Every transform is kept as written; the vetted recipe is "
                   f"<strong>{escape(vetted.name)}</strong>.</p>")
    else:
        out.append(f"<p>Vetting changed the recipe; the result is <strong>{escape(vetted.name)}</strong>.</p>")
    score = vetted.get("score")  # absent until the vetted form is scored
    if score:
        out.append(f"<p>Validation accuracy {percent(score.accuracy, 1)}, gain over no augmentation "
                   f"{points_ci(score.gain, score.gain_ci)} percentage points (95% CI).</p>")
    if vetted.recheck is not None and vetted.recheck.transforms:
        rows = [[escape(t["index"]), f"<strong>{escape(t['op'])}</strong>", verdict_badge(t["verdict"]),
                 rate_ci(t["change_rate"], t["change_rate_ci"]), _swaps_text(t["swaps"])]
                for t in vetted.recheck.transforms]
        out.append("<p>The rewritten transforms were checked again:</p>")
        out.append(table_html(["#", "transform", "verdict", "moved to another class (95% CI)", "main swaps"],
                              rows, numeric=(0, 3)))
    return "".join(out)
