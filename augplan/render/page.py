"""The self-contained HTML report of ``augplan vet``: the page and its assembly.

One page, read top to bottom: the verdict, the cautions, then for each recipe
the label-safety table with its evidence sheets, the coverage of nuisance
factors and the shortcut audit, then the leaderboard and the data notes.

The page loads nothing: every figure is a PNG embedded as a base64 data URI,
the style sheet is inline, there are no scripts, and the only links are
in-page anchors. Every piece of text that comes from the user (class names,
recipe names, paths) goes through `html.escape`.
"""

from __future__ import annotations

from augplan.render.coverage import coverage_section
from augplan.render.figures import figure_html
from augplan.render.formatting import DASH, escape, anchor_id
from augplan.render.leaderboard import leaderboard_section, per_class_section, confusion_section
from augplan.render.notes import data_notes_section, appendix_section
from augplan.render.safety import safety_section
from augplan.render.summary import summary_section

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


def _head(evidence):
    data = evidence.get("data") or {}
    fp = str(data.get("fingerprint") or "")
    fp_short = fp.split(":")[-1][:12] if fp else DASH
    verdict = evidence.get("verdict") or "No verdict was recorded for this run."
    meta = [
        f"<span>data fingerprint <code title=\"{escape(fp)}\">{escape(fp_short)}</code></span>",
        f"<span>created {escape(evidence.get('created') or DASH)}</span>",
        f"<span>augplan {escape(evidence.get('augplan_version') or DASH)}</span>",
    ]
    if evidence.get("seed") is not None:
        meta.append(f"<span>seed {escape(evidence.get('seed'))}</span>")
    if data.get("root"):
        meta.append(f"<span>data <code>{escape(data.get('root'))}</code></span>")
    if evidence.get("best"):
        meta.append(f"<span>recommended: <strong>{escape(evidence.get('best'))}</strong> (vetted)</span>")
    del verdict  # the verdict opens the summary
    return ("<header><h1>augplan vet: augmentation recipe report</h1>"
            f'<p class="meta">{" ".join(meta)}</p></header>')


def recipe_details(entry, number, base_dir):
    name = entry.get("name", f"recipe {number + 1}")
    transforms = [t for t in ((entry.get("check") or {}).get("transforms") or []) if isinstance(t, dict)]
    tally = {}
    for t in transforms:
        tally[t.get("verdict") or "unknown"] = tally.get(t.get("verdict") or "unknown", 0) + 1
    status = ", ".join(f"{n} {v}" for v, n in sorted(tally.items()))
    vetted = entry.get("vetted") or {}
    after = ("kept as written" if vetted.get("unchanged")
             else f"vetted as {vetted['name']}" if vetted.get("name") else "")
    summary = (f"<summary>Recipe <strong>{escape(name)}</strong>: {len(transforms)} transforms"
               + (f" ({escape(status)})" if status else "") + (f"; {escape(after)}" if after else "") + "</summary>")
    body = [safety_section(entry, number, base_dir), draws_block(entry, base_dir),
            coverage_section(entry, number, base_dir)]
    return (f'<details class="recipe" id="{anchor_id("recipe", name, number)}">{summary}'
            + "".join(body) + "</details>")


def draws_block(entry, base_dir):
    sheet = entry.get("draws_sheet")
    if not sheet:
        return ""
    name = (entry.get("vetted") or {}).get("name") or entry.get("name", "?")
    return ("<h3>Augmented draws</h3>"
            + figure_html(sheet, f"recipe {name} (as vetted): an original of each class, then independent draws",
                      f"contact sheet of augmented draws of {name}", base_dir))


def render_report(evidence, *, base_dir=None):
    """Render the evidence document of ``augplan vet`` as one self-contained HTML page.

    Parameters
    ----------
    evidence : dict
        The evidence document built by `augplan.vet.vet_recipes` (the same
        content as ``evidence.json``). Optional keys may be missing.
    base_dir : str or Path, optional
        Folder that relative figure paths (such as ``figures/x.png`` in a
        written ``evidence.json``) are resolved against.

    Returns
    -------
    str
        The HTML page. Figures are embedded as PNG data URIs; a figure whose
        file is missing is named in a note instead.
    """
    if not isinstance(evidence, dict):
        raise TypeError(f"render_report expects the evidence document as a dict; got {type(evidence).__name__}.")
    recipes = [r for r in (evidence.get("recipes") or []) if isinstance(r, dict)]
    title = "augplan report"
    if recipes:
        title += ": " + ", ".join(str(r.get("name", "?")) for r in recipes)
    body = [_head(evidence), summary_section(evidence, recipes), leaderboard_section(evidence), per_class_section(evidence),
            confusion_section(evidence)]
    if recipes:
        body.append('<h2 id="recipes">Recipes</h2><p class="note">Open a recipe for its label-safety table, '
                    "evidence sheets, augmented draws, coverage and shortcut audit.</p>")
    body.extend(recipe_details(entry, number, base_dir) for number, entry in enumerate(recipes))
    body.append(appendix_section(evidence, recipes))
    body.append(data_notes_section(evidence))
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(title)}</title><style>{_STYLE}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")
