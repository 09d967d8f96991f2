"""The self-contained HTML report of ``augplan vet``: the page and its assembly.

One page, read top to bottom: the verdict, the cautions, then for each recipe
the label-safety table with its evidence sheets, the coverage of nuisance
factors and the shortcut audit, then the leaderboard and the data notes.

The page loads nothing: every figure is a PNG embedded as a base64 data URI,
the style sheet is inline, there are no scripts, and the only links are
in-page anchors. Every piece of text that comes from the user (class names,
recipe names, paths) goes through `html.escape`.

The page reads a typed `augplan.results.VetReport` by attribute; the rows
the analyses leave as JSON objects (a transform's verdict, a factor's
summary) are read by the keys their schemas require.
"""

from __future__ import annotations

from augplan.render.coverage import coverage_section
from augplan.render.figures import figure_html
from augplan.render.formatting import escape, anchor_id
from augplan.render.leaderboard import leaderboard_section, per_class_section, confusion_section
from augplan.render.notes import data_notes_section, appendix_section
from augplan.render.safety import safety_section
from augplan.render.summary import summary_section
from augplan.results import VetReport

__all__ = ["recipe_details", "draws_block", "render_report"]

_STYLE = """
:root { --ink: #1b1b1b; --muted: #555; --rule: #c9c9c9; --soft: #f4f4f2; }
* { box-sizing: border-box; }
body { margin: 0 auto; max-width: 78rem; padding: .6rem 1.25rem 3rem; color: var(--ink);
       font: 15px/1.4 system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial, sans-serif; }
h1 { font-size: .95rem; font-weight: 600; color: var(--muted); margin: 0 0 .2rem; letter-spacing: .02em; }
h2 { font-size: 1.2rem; margin: 1.8rem 0 .5rem; padding-bottom: .15rem; border-bottom: 2px solid var(--ink); }
h3 { font-size: 1.05rem; margin: 1.3rem 0 .4rem; }
h4 { font-size: .98rem; margin: 1rem 0 .35rem; }
p, li { max-width: 64rem; }
.summary { margin: .3rem 0 1rem; }
.summary h2 { font-size: 1rem; border: 0; margin: 0 0 .25rem; padding: 0; }
.summary ul { margin: 0; padding-left: 1.1rem; }
.summary li { margin: .1rem 0; }
.verdict { font-size: 1.22rem; line-height: 1.32; font-weight: 600; margin: .2rem 0 .35rem;
           padding: .55rem .8rem; border-left: 6px solid var(--ink); background: var(--soft); }
.source { font-size: .9rem; color: var(--muted); margin: 0 0 .5rem; }
.decision { font-size: 1rem; margin: 0 0 .4rem; padding: .3rem .8rem; border-left: 6px solid var(--rule); }
.decision.shortcut { border-left-color: #8a5a00; background: #fff6e0; font-weight: 600; }
.cols { display: grid; grid-template-columns: 1fr 1fr; gap: .6rem 1.2rem; }
.box { border: 1px solid var(--rule); padding: .45rem .8rem; }
.signoff { border: 2px solid var(--ink); }
.meta { color: var(--muted); font-size: .85rem; margin: 0 0 .3rem; }
.meta span { margin-right: 1.2rem; white-space: nowrap; }
.cautions { border: 2px solid #8a5a00; background: #fff6e0; padding: .4rem .8rem; margin: .6rem 0 0;
            font-size: .9rem; }
.cautions ul { margin: .1rem 0 .2rem; padding-left: 1.2rem; }
.note { color: var(--muted); font-size: .9rem; }
.warn { border-left: 4px solid #8a5a00; padding: .2rem .7rem; margin: .5rem 0; }
details.recipe { border: 1px solid var(--rule); margin: .5rem 0; padding: 0 .8rem; }
details.recipe > summary { cursor: pointer; padding: .5rem 0; font-size: 1.02rem; }
details.recipe[open] > summary { border-bottom: 1px solid var(--rule); }
.scroll { overflow-x: auto; margin: .5rem 0 1rem; }
table { border-collapse: collapse; font-size: .9rem; min-width: 28rem; }
table.wide { width: 100%; }
table.confusion { min-width: 0; }
.swap { display: inline-block; min-width: 12rem; }
th, td { border: 1px solid var(--rule); padding: .3rem .5rem; text-align: left; vertical-align: top; }
th { background: var(--soft); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.baseline td { font-style: italic; }
tr.best td, tr.flagged td { font-weight: 600; }
.badge { display: inline-block; padding: 0 .45rem; border: 1px solid; border-radius: .3rem;
         font-weight: 700; white-space: nowrap; }
.badge.safe { color: #0b5a1e; background: #dff3e3; }
.badge.breaks { color: #8b0f0f; background: #fbe1e1; }
.badge.unverified { color: #6b4a00; background: #fff0c2; }
.badge.other { color: var(--ink); background: var(--soft); }
.flag { font-weight: 700; }
figure { margin: .8rem 0 1.2rem; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: .88rem; color: var(--muted); margin-top: .25rem; }
.plots { display: flex; flex-wrap: wrap; gap: 1rem; align-items: flex-start; }
.plots figure { flex: 0 1 auto; max-width: 34rem; }
code { font-size: .88em; background: var(--soft); padding: 0 .2rem; word-break: break-all; }
@media (max-width: 52rem) {
  body { padding: .6rem .7rem 2rem; font-size: 14px; }
  .verdict { font-size: 1.1rem; }
  .cols { grid-template-columns: 1fr; }
}
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  .verdict, th, .cautions, code { background: none; }
  .scroll { overflow: visible; }
  table { min-width: 0; width: 100%; }
  thead { display: table-header-group; }
  tr, figure, img, .cautions, .verdict, .box { break-inside: avoid; page-break-inside: avoid; }
  h2, h3, h4 { break-after: avoid; page-break-after: avoid; }
  details.recipe { border: 0; padding: 0; }
  details::details-content { content-visibility: visible; display: block; }
  .badge { background: none; }
}
"""


def _head(report):
    fingerprint = report.data.fingerprint
    meta = [
        f"<span>data fingerprint <code title=\"{escape(fingerprint)}\">"
        f"{escape(fingerprint.split(':')[-1][:12])}</code></span>",
        f"<span>created {escape(report.created)}</span>",
        f"<span>augplan {escape(report.augplan_version)}</span>",
        f"<span>seed {escape(report.seed)}</span>",
        f"<span>data <code>{escape(report.data.root)}</code></span>",
    ]
    if report.best is not None:
        meta.append(f"<span>recommended: <strong>{escape(report.best)}</strong> (vetted)</span>")
    return ("<header><h1>augplan vet: augmentation recipe report</h1>"
            f'<p class="meta">{" ".join(meta)}</p></header>')


def recipe_details(entry, number, base_dir):
    """One recipe's collapsible section: label safety, augmented draws, coverage and shortcuts.

    Parameters
    ----------
    entry : augplan.results.VettedRecipe
    number : int
        Its position in the report (makes its ids unique).
    base_dir : str or Path or None
        Folder that relative figure paths are resolved against.

    Returns
    -------
    str
        A ``<details>`` element.
    """
    transforms = entry.check.transforms
    tally = {}
    for transform in transforms:
        tally[transform["verdict"]] = tally.get(transform["verdict"], 0) + 1
    status = ", ".join(f"{n} {verdict}" for verdict, n in sorted(tally.items()))
    after = "kept as written" if entry.vetted.unchanged else f"vetted as {entry.vetted.name}"
    summary = (f"<summary>Recipe <strong>{escape(entry.name)}</strong>: {len(transforms)} transforms"
               + (f" ({escape(status)})" if status else "") + f"; {escape(after)}</summary>")
    body = [safety_section(entry, number, base_dir), draws_block(entry, base_dir),
            coverage_section(entry, number, base_dir)]
    return (f'<details class="recipe" id="{anchor_id("recipe", entry.name, number)}">{summary}'
            + "".join(body) + "</details>")


def draws_block(entry, base_dir):
    """The contact sheet of draws of a recipe's vetted form, or "" when none was drawn."""
    if not entry.draws_sheet:
        return ""
    name = entry.vetted.name
    return ("<h3>Augmented draws</h3>"
            + figure_html(entry.draws_sheet,
                          f"recipe {name} (as vetted): an original of each class, then independent draws",
                          f"contact sheet of augmented draws of {name}", base_dir))


def render_report(report, *, base_dir=None):
    """Render the evidence of ``augplan vet`` as one self-contained HTML page.

    Parameters
    ----------
    report : augplan.results.VetReport
        What `augplan.vet.vet_recipes` produced (its JSON is
        ``evidence.json``; ``VetReport.from_json`` reads one back).
    base_dir : str or Path, optional
        Folder that relative figure paths (such as ``figures/x.png`` in a
        written ``evidence.json``) are resolved against.

    Returns
    -------
    str
        The HTML page. Figures are embedded as PNG data URIs; a figure whose
        file is missing is named in a note instead.

    Raises
    ------
    TypeError
        When ``report`` is not a `VetReport`.
    """
    if not isinstance(report, VetReport):
        raise TypeError("render_report expects an augplan.results.VetReport (VetReport.from_json reads "
                        f"evidence.json); got {type(report).__name__}.")
    title = "augplan report"
    if report.recipes:
        title += ": " + ", ".join(entry.name for entry in report.recipes)
    body = [_head(report), summary_section(report), leaderboard_section(report), per_class_section(report),
            confusion_section(report)]
    if report.recipes:
        body.append('<h2 id="recipes">Recipes</h2><p class="note">Open a recipe for its label-safety table, '
                    "evidence sheets, augmented draws, coverage and shortcut audit.</p>")
    body.extend(recipe_details(entry, number, base_dir) for number, entry in enumerate(report.recipes))
    body.append(appendix_section(report))
    body.append(data_notes_section(report.data))
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(title)}</title><style>{_STYLE}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")
