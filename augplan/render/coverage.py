"""The report's coverage section of one recipe: nuisance factors, the shortcut audit and field coverage."""

from __future__ import annotations

from pathlib import Path

from augplan.measure.factors import FACTORS
from augplan.render.figures import inline_figure, figure_html
from augplan.render.formatting import (
    DASH, escape, is_number, percent, number_text, value_text, table_html, bullet_list, anchor_id,
)
from augplan.render.plots import factor_grid
from augplan.render.text import factor_range

__all__ = ["plot_items", "coverage_section"]


def _plot_factor(path, factors):
    """The factor a plot file shows: its stem, or the known factor its stem ends with.

    ``vet`` names the files ``<number>-<recipe>-<factor>.png`` inside ``figures/``.
    """
    stem = Path(str(path)).stem
    for factor in sorted(factors, key=len, reverse=True):
        if stem == factor or stem.endswith(f"-{factor}"):
            return factor
    return stem


def plot_items(plots, factors=()):
    """``[(factor, path)]`` from plots given as ``{factor: path}`` or a list of paths."""
    if isinstance(plots, dict):
        return [(str(k), v) for k, v in plots.items() if v]
    if isinstance(plots, (list, tuple)):
        return [(_plot_factor(p, factors), p) for p in plots if p]
    return []


def _suggestion_text(suggestion):
    if isinstance(suggestion, str):
        return suggestion
    if not isinstance(suggestion, dict) or not suggestion:
        return ""
    if suggestion.get("op"):
        text = f"{suggestion.get('factor', '?')}: add {suggestion['op']}"
        if suggestion.get("parameter"):
            text += f" with {suggestion['parameter']} {value_text(suggestion.get('range', '?'))}"
        if suggestion.get("reason"):
            text += f" ({suggestion['reason']})"
        return text
    return value_text(suggestion)


def _percentile_range(stats, factor=None):
    if not isinstance(stats, dict):
        return DASH
    low, high = stats.get("p05"), stats.get("p95")
    circular = factor is not None and getattr(FACTORS.get(factor), "circular", False)
    if is_number(low) and is_number(high):
        # Angles on their own circle, as in the text table and the plots.
        text = factor_range(factor, low, high) if circular else f"{number_text(low)} to {number_text(high)}"
    else:
        text = DASH
    if is_number(stats.get("std")):
        text += f" <span class=\"note\">(sd {number_text(stats['std'])})</span>"
    return text


def _widening(original, augmented):
    if not (isinstance(original, dict) and isinstance(augmented, dict)):
        return DASH
    a, b = original.get("std"), augmented.get("std")
    if is_number(a) and is_number(b) and a > 0:
        return f"\u00d7{b / a:.2f}"
    return DASH


def _field_text(field):
    if not isinstance(field, dict) or not field:
        return DASH
    parts = []
    if is_number(field.get("coverage")):
        parts.append(f"covers {percent(field['coverage'])}")
    before, after = field.get("wasserstein_before"), field.get("wasserstein_after")
    if is_number(before) or is_number(after):
        parts.append(f"distance {number_text(before)} \u2192 {number_text(after)}")
    return "<br>".join(parts) or DASH


def _score_cell(value):
    return percent(value, 0) if is_number(value) else DASH


def coverage_section(entry, number, base_dir):
    name = entry.get("name", f"recipe {number + 1}")
    coverage = entry.get("coverage") or {}
    out = [f'<section id="{anchor_id("coverage", name, number)}"><h3>Coverage and shortcuts</h3>']
    grid = factor_grid(coverage.get("factors")) if isinstance(coverage.get("factors"), dict) else None
    if grid:
        out.append(inline_figure(grid, "original (solid), augmented (dashed) and field (dotted) distribution "
                                  "of every nuisance factor, each panel on its own scale",
                                  f"histograms of the nuisance factors of {name}", css="wide"))
    plots = plot_items(coverage.get("plots"), coverage.get("factors") or ())
    if plots:
        out.append("<h4>Nuisance factors: original, augmented and field</h4>")
        out.append('<div class="plots">')
        for factor, path in plots:
            out.append(figure_html(path, f"{factor}: original, augmented and field distributions",
                               f"histogram of {factor}", base_dir))
        out.append("</div>")

    factors = coverage.get("factors") or {}
    if isinstance(factors, dict) and factors:
        rows = []
        for factor, info in factors.items():
            info = info if isinstance(info, dict) else {}
            unit = f' <span class="note">({escape(info["unit"])})</span>' if info.get("unit") else ""
            if info.get("note"):
                # No training image has a value (hue of grey images).
                rows.append([escape(factor) + unit, escape(info["note"]), DASH, DASH, DASH])
                continue
            rows.append([escape(factor) + unit, _percentile_range(info.get("original"), factor), _percentile_range(info.get("augmented"), factor),
                         _widening(info.get("original"), info.get("augmented")), _field_text(info.get("field"))])
        out.append("<h4>How far the recipe widens each factor</h4>")
        out.append(table_html(["factor", "original 5th to 95th percentile", "augmented 5th to 95th percentile",
                           "spread widened", "field sample (share covered; distance before \u2192 after)"],
                          rows, numeric=(3,)))

    shortcuts = [s for s in (coverage.get("shortcuts") or []) if isinstance(s, dict)]
    if shortcuts:
        rows, classes = [], []
        for s in shortcuts:
            flags = []
            if s.get("flagged"):
                flags.append("shortcut")
            if s.get("persists"):
                flags.append("survives the recipe")
            elif s.get("link") == "weakened":
                flags.append("weakened, not broken, by the recipe")
            elif s.get("link") == "broken":
                flags.append("broken by the recipe")
            if s.get("combined"):
                flags.append("all factors together, for information")
            if s.get("note"):
                flags.append(s["note"])
            rows.append([escape(s.get("factor", "?")), _score_cell(s.get("original")), _score_cell(s.get("augmented")),
                         _score_cell(s.get("val")), _score_cell(s.get("field")), _score_cell(s.get("chance")),
                         f"<span class=\"flag\">{escape(', '.join(flags))}</span>" if flags else "no"])
            classes.append("flagged" if s.get("flagged") else "")
        out.append("<h4>Shortcut audit</h4>"
                   '<p class="note">How well the class can be told from one factor alone (cross-validated '
                   "balanced accuracy). Far above chance means the factor is a shortcut a model can learn "
                   "instead of the object.</p>")
        out.append(table_html(["factor", "original train", "augmented train", "validation", "field", "chance",
                           "flag"], rows, numeric=(1, 2, 3, 4, 5), row_classes=classes))
    if coverage.get("shortcut_rule"):
        out.append('<p class="note">Flags follow the shortcut rule in the <a href="#appendix">appendix</a>.</p>')
    for message in coverage.get("messages") or []:
        out.append(f'<p class="warn">{escape(message)}</p>')
    suggestions = [_suggestion_text(s) for s in (coverage.get("suggestions") or [])]
    if any(suggestions):
        out.append("<p><strong>Suggested transforms</strong></p>" + bullet_list(suggestions))

    out.append(_field_coverage(coverage.get("field_coverage")))
    if len(out) == 1:
        out.append('<p class="note">No coverage results were recorded for this recipe.</p>')
    out.append("</section>")
    return "".join(out)


def _field_coverage(field):
    """Naeem et al.'s density and coverage of the field sample, before and after the recipe.

    References
    ----------
    .. [1] M. F. Naeem, S. J. Oh, Y. Uh, Y. Choi and J. Yoo, "Reliable
       fidelity and diversity metrics for generative models", ICML 2020.
    """
    if not isinstance(field, dict) or not field:
        return ""
    out = ["<h4>Field coverage</h4>"]
    if "before" not in field and "after" not in field:
        # Flat form of augplan.coverage: density_before, coverage_after, ...
        flat = {"before": {}, "after": {}}
        rest = {}
        for key, value in field.items():
            measure, _, when = str(key).rpartition("_")
            if measure and when in flat:
                flat[when][measure] = value
            else:
                rest[key] = value
        if flat["before"] or flat["after"]:
            field = {**rest, **flat}
    before, after = field.get("before"), field.get("after")
    if isinstance(before, dict) or isinstance(after, dict):
        before = before if isinstance(before, dict) else {}
        after = after if isinstance(after, dict) else {}
        metrics = [k for k in ("density", "coverage") if k in before or k in after]
        metrics += [k for k in list(before) + list(after)
                    if k not in metrics and (is_number(before.get(k)) or is_number(after.get(k)))]
        metrics = list(dict.fromkeys(metrics))
        rows = [[escape(k), number_text(before.get(k)), number_text(after.get(k))] for k in metrics]
        out.append('<p class="note">Density and coverage of the field sample by the training images '
                   "(Naeem et al., 2020): coverage is the share of field images that have a training image "
                   "close by; 1 means every field image is covered.</p>")
        out.append(table_html(["measure", "original train", "augmented train"], rows, numeric=(1, 2)))
        rest = {k: v for k, v in field.items() if k not in ("before", "after")}
    else:
        rest = field
    words = {"k": "neighbours (k)", "sample_size": "training images sampled", "reference": "measured from"}
    scalars = [(k, v) for k, v in rest.items() if not isinstance(v, (dict, list)) and v is not None]
    if scalars:
        out.append("<p class=\"note\">" + "; ".join(
            f"{escape(words.get(k, k))}: {number_text(v) if is_number(v) else escape(v)}" for k, v in scalars) + "</p>")
    return "".join(out)
