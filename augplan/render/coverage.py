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
    """``[(factor, path)]`` for a coverage result's ``plots`` (a list of paths), each named by its factor."""
    return [(_plot_factor(path, factors), path) for path in plots]


def _suggestion_text(suggestion):
    """``brightness: add brightness with factor [0.5, 1.6] (shortcut)``."""
    return (f"{suggestion['factor']}: add {suggestion['op']} with {suggestion['parameter']} "
            f"{value_text(suggestion['range'])} ({suggestion['reason']})")


def _percentile_range(stats, factor):
    """The 5th to 95th percentile of a factor summary, with its standard deviation."""
    low, high = stats["p05"], stats["p95"]
    if is_number(low) and is_number(high):
        # Angles on their own circle, as in the text table and the plots.
        text = (factor_range(factor, low, high) if FACTORS[factor].circular
                else f"{number_text(low)} to {number_text(high)}")
    else:
        text = DASH
    if is_number(stats["std"]):
        text += f" <span class=\"note\">(sd {number_text(stats['std'])})</span>"
    return text


def _widening(original, augmented):
    a, b = original["std"], augmented["std"]
    if is_number(a) and is_number(b) and a > 0:
        return f"\u00d7{b / a:.2f}"
    return DASH


def _field_text(field):
    """Share of the field sample covered, and the distance before and after the recipe."""
    if field is None:
        return DASH
    return (f"covers {percent(field['coverage'])}<br>distance {number_text(field['wasserstein_before'])} "
            f"\u2192 {number_text(field['wasserstein_after'])}")


def _score_cell(value):
    return percent(value, 0) if is_number(value) else DASH


def _factor_table(factors):
    rows = []
    for factor, info in factors.items():
        unit = f' <span class="note">({escape(info["unit"])})</span>'
        if info.get("note"):
            # No training image has a value (hue of grey images).
            rows.append([escape(factor) + unit, escape(info["note"]), DASH, DASH, DASH])
            continue
        rows.append([escape(factor) + unit, _percentile_range(info["original"], factor),
                     _percentile_range(info["augmented"], factor),
                     _widening(info["original"], info["augmented"]), _field_text(info.get("field"))])
    return ("<h4>How far the recipe widens each factor</h4>"
            + table_html(["factor", "original 5th to 95th percentile", "augmented 5th to 95th percentile",
                          "spread widened", "field sample (share covered; distance before \u2192 after)"],
                         rows, numeric=(3,)))


def _shortcut_flags(row):
    """The words of one shortcut-audit row: flagged, and what the recipe does to the link."""
    flags = ["shortcut"] if row["flagged"] else []
    if row["persists"]:
        flags.append("survives the recipe")
    elif row["link"] == "weakened":
        flags.append("weakened, not broken, by the recipe")
    elif row["link"] == "broken":
        flags.append("broken by the recipe")
    if row["combined"]:
        flags.append("all factors together, for information")
    if row.get("note"):
        flags.append(row["note"])
    return flags


def _shortcut_table(shortcuts):
    rows, classes = [], []
    for row in shortcuts:
        flags = _shortcut_flags(row)
        rows.append([escape(row["factor"]), _score_cell(row["original"]), _score_cell(row["augmented"]),
                     _score_cell(row["val"]), _score_cell(row["field"]), _score_cell(row["chance"]),
                     f"<span class=\"flag\">{escape(', '.join(flags))}</span>" if flags else "no"])
        classes.append("flagged" if row["flagged"] else "")
    return ("<h4>Shortcut audit</h4>"
            '<p class="note">How well the class can be told from one factor alone (cross-validated '
            "balanced accuracy). Far above chance means the factor is a shortcut a model can learn "
            "instead of the object.</p>"
            + table_html(["factor", "original train", "augmented train", "validation", "field", "chance",
                          "flag"], rows, numeric=(1, 2, 3, 4, 5), row_classes=classes))


def coverage_section(entry, number, base_dir):
    """The coverage section of one recipe.

    Parameters
    ----------
    entry : augplan.results.VettedRecipe
    number : int
        Its position in the report (makes the section's id unique).
    base_dir : str or Path or None
        Folder that relative figure paths are resolved against.

    Returns
    -------
    str
        A ``<section>``: the factor histograms, how far the recipe widens
        each factor, the shortcut audit, the messages, suggested transforms
        and the field coverage.
    """
    coverage = entry.coverage
    out = [f'<section id="{anchor_id("coverage", entry.name, number)}"><h3>Coverage and shortcuts</h3>']
    grid = factor_grid(coverage.factors)
    if grid:
        out.append(inline_figure(grid, "original (solid), augmented (dashed) and field (dotted) distribution "
                                 "of every nuisance factor, each panel on its own scale",
                                 f"histograms of the nuisance factors of {entry.name}", css="wide"))
    plots = plot_items(coverage.get("plots", ()), coverage.factors)  # only `augplan coverage --plots` writes them
    if plots:
        out.append('<h4>Nuisance factors: original, augmented and field</h4><div class="plots">')
        out.extend(figure_html(path, f"{factor}: original, augmented and field distributions",
                               f"histogram of {factor}", base_dir) for factor, path in plots)
        out.append("</div>")
    if coverage.factors:
        out.append(_factor_table(coverage.factors))
    if coverage.shortcuts:
        out.append(_shortcut_table(coverage.shortcuts))
    out.append('<p class="note">Flags follow the shortcut rule in the <a href="#appendix">appendix</a>.</p>')
    out.extend(f'<p class="warn">{escape(message)}</p>' for message in coverage.messages)
    if coverage.suggestions:
        out.append("<p><strong>Suggested transforms</strong></p>"
                   + bullet_list([_suggestion_text(s) for s in coverage.suggestions]))
    out.append(_field_coverage(coverage.field_coverage))
    out.append("</section>")
    return "".join(out)


_FIELD_WORDS = {"k": "neighbours (k)", "sample_size": "training images sampled", "reference": "measured from"}


def _field_coverage(field):
    """Naeem et al.'s density and coverage of the field sample, before and after the recipe.

    Parameters
    ----------
    field : dict or None
        A coverage result's ``field_coverage`` (``density_before``,
        ``coverage_before``, ``density_after``, ``coverage_after``, ``k``,
        ``reference``, ``sample_size``); None without a field sample.

    Returns
    -------
    str

    References
    ----------
    .. [1] M. F. Naeem, S. J. Oh, Y. Uh, Y. Choi and J. Yoo, "Reliable
       fidelity and diversity metrics for generative models", ICML 2020.
    """
    if field is None:
        return ""
    rows = [[measure, number_text(field[f"{measure}_before"]), number_text(field[f"{measure}_after"])]
            for measure in ("density", "coverage")]
    settings = "; ".join(f"{_FIELD_WORDS[key]}: {escape(field[key])}" for key in _FIELD_WORDS)
    return ("<h4>Field coverage</h4>"
            '<p class="note">Density and coverage of the field sample by the training images '
            "(Naeem et al., 2020): coverage is the share of field images that have a training image "
            "close by; 1 means every field image is covered.</p>"
            + table_html(["measure", "original train", "augmented train"], rows, numeric=(1, 2))
            + f'<p class="note">{settings}</p>')
