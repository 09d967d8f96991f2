"""The self-contained HTML report of ``augplan vet``.

One page, read top to bottom: the verdict, the cautions, then for each recipe
the label-safety table with its evidence sheets, the coverage of nuisance
factors and the shortcut audit, then the leaderboard and the data notes.

The page loads nothing: every figure is a PNG embedded as a base64 data URI,
the style sheet is inline, there are no scripts, and the only links are
in-page anchors. Every piece of text that comes from the user (class names,
recipe names, paths) goes through `html.escape`.

The evidence document may lack optional keys (an older run, a recipe that
was not rechecked, a data set without a field sample); every lookup of an
optional key uses ``.get`` and an absent value prints as a dash.
"""

from __future__ import annotations

import base64
import html
import io
import math
import re
from pathlib import Path

from augplan.measure.models import model_phrase
from augplan.measure.factors import FACTORS
from augplan.render.text import factor_range
from augplan.results import range_text

from augplan.render.plots import factor_grid, palette_png

__all__ = ["render_report", "embed_png", "embed_image"]

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_JPEG_SIGNATURE = b"\xff\xd8\xff"
# Evidence sheets are embedded with this many colours (median cut), which
# keeps a report of many sheets small; the sheet files keep every colour.
_EVIDENCE_COLOURS = 32
# Pairs listed in full; a long list is summarised (evidence.json keeps all).
_LEAKS_SHOWN = 25
_DASH = "\u2013"
# The word is printed beside the colour so the badge reads in greyscale print.
_BADGE = {
    "safe": ("safe", "\u2713"),
    "breaks": ("breaks", "\u2717"),
    "unverified": ("unverified", "?"),
}

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


# --------------------------------------------------------------------------
# small formatters: every one accepts None and odd types without raising


def _e(value):
    """Escape any value for HTML text or attribute use."""
    return html.escape("" if value is None else str(value), quote=True)


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _pair(value):
    """``(low, high)`` from a two-item sequence of numbers, else None."""
    if isinstance(value, (list, tuple)) and len(value) == 2 and all(_is_number(v) for v in value):
        return float(value[0]), float(value[1])
    return None


def _percent(value, digits=0):
    return f"{100 * value:.{digits}f}%" if _is_number(value) else _DASH


def _rate_ci(value, interval, digits=0):
    """``81% (74-86%)``: a share with its 95% interval."""
    text = _percent(value, digits)
    pair = _pair(interval)
    if pair is not None:
        text += f" ({100 * pair[0]:.{digits}f}{_DASH}{100 * pair[1]:.{digits}f}%)"
    return text


def _points(value, signed=True):
    if not _is_number(value):
        return _DASH
    return f"{100 * value:+.1f}" if signed else f"{100 * value:.1f}"


def _points_ci(value, interval, signed=True):
    text = _points(value, signed)
    pair = _pair(interval)
    if pair is not None:
        text += f" [{_points(pair[0], signed)}, {_points(pair[1], signed)}]"
    return text


def _p(value):
    if not _is_number(value):
        return _DASH
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def _number(value, digits=3):
    if _is_number(value):
        return f"{value:.{digits}g}" if isinstance(value, float) else str(value)
    return _DASH if value is None else _e(value)


def _value_text(value):
    """Plain text for a recipe parameter value (scalar, range, list or mapping)."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {_value_text(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_value_text(v) for v in value) + "]"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def _badge(verdict):
    word, mark = _BADGE.get(verdict, (str(verdict) if verdict else "unknown", "\u2022"))
    css = verdict if verdict in _BADGE else "other"
    return f'<span class="badge {css}">{_e(mark)} {_e(word)}</span>'


def _table(header, rows, *, numeric=(), row_classes=None, caption=None, wide=False):
    """A table inside a horizontally scrolling wrapper; cells are already HTML."""
    parts = ['<div class="scroll"><table class="wide">' if wide else '<div class="scroll"><table>']
    if caption:
        parts.append(f"<caption class=\"note\">{caption}</caption>")
    parts.append("<thead><tr>")
    for column, name in enumerate(header):
        css = ' class="num"' if column in numeric else ""
        parts.append(f"<th scope=\"col\"{css}>{name}</th>")
    parts.append("</tr></thead><tbody>")
    for number, row in enumerate(rows):
        css = row_classes[number] if row_classes and row_classes[number] else ""
        parts.append(f'<tr class="{css}">' if css else "<tr>")
        for column, cell in enumerate(row):
            cell_css = ' class="num"' if column in numeric else ""
            parts.append(f"<td{cell_css}>{cell}</td>")
        parts.append("</tr>")
    parts.append("</tbody></table></div>")
    return "".join(parts)


def _list(items):
    items = [item for item in (items or []) if item]
    if not items:
        return ""
    return "<ul>" + "".join(f"<li>{_e(item)}</li>" for item in items) + "</ul>"


def _anchor(prefix, name, number):
    """An id that is safe in HTML and unique per position."""
    slug = re.sub(r"[^a-z0-9]+", "-", str(name).lower()).strip("-")[:40] or "item"
    return f"{prefix}-{number}-{slug}"


# --------------------------------------------------------------------------
# figures


def embed_png(path, *, base_dir=None):
    """A ``data:image/png;base64,...`` URI for a PNG file, or None.

    Parameters
    ----------
    path : str or Path or None
        The PNG. A relative path is taken relative to ``base_dir`` when given.
    base_dir : str or Path, optional

    Returns
    -------
    str or None
        None when there is no path, the file cannot be read, or it is not a
        PNG (checked by its signature, PNG specification section 5.2), so the
        report never embeds something a browser would have to guess at.

    References
    ----------
    .. [1] W3C, "Portable Network Graphics (PNG) Specification (Second
       Edition)", 2003, section 5.2 (PNG signature).
    .. [2] L. Masinter, "The 'data' URL scheme", RFC 2397, 1998.
    """
    data = _read_figure(path, base_dir)
    if data is None or not data.startswith(_PNG_SIGNATURE):
        return None
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def _read_figure(path, base_dir):
    """The bytes of a figure file (relative paths against ``base_dir``), or None."""
    if not path:
        return None
    path = Path(path)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    try:
        return path.read_bytes()
    except OSError:
        return None


def embed_image(path, *, base_dir=None):
    """A data URI for a PNG or JPEG file that decodes (told by its signature), or None; see `embed_png`."""
    data = _read_figure(path, base_dir)
    return None if data is None else _data_uri(data)


def _data_uri(data):
    """``data:`` URI of PNG or JPEG bytes that decode, else None.

    The type is told by the signature (PNG section 5.2; JPEG's start-of-image
    marker, ITU-T T.81 annex B) and the bytes are decoded once, so the page
    never holds an image a browser would show as broken.
    """
    if data.startswith(_PNG_SIGNATURE):
        mime = "image/png"
    elif data.startswith(_JPEG_SIGNATURE):
        mime = "image/jpeg"
    else:
        return None
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(io.BytesIO(data)) as image:
            image.load()
    except (OSError, UnidentifiedImageError, ValueError, SyntaxError):
        return None
    return f"data:{mime};base64," + base64.b64encode(data).decode("ascii")


def _as_palette(uri, colours):
    """A PNG data URI re-encoded as a palette PNG of ``colours`` colours (smaller for a page)."""
    from PIL import Image

    with Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1]))) as image:
        return palette_png(image, colours)


def _inline_figure(data, caption, alt, *, css=""):
    uri = _data_uri(data) if data else None
    if uri is None:
        return ""
    return (f'<figure class="{css}"><img src="{uri}" alt="{_e(alt)}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _figure(path, caption, alt, base_dir, *, anchor=None, colours=None):
    uri = embed_image(path, base_dir=base_dir)
    if uri is not None and colours:
        uri = _data_uri(_as_palette(uri, colours)) or uri
    if uri is None:
        if not path:
            return ""
        return f'<p class="note">Figure not available: <code>{_e(path)}</code></p>'
    id_attr = f' id="{anchor}"' if anchor else ""
    return (f'<figure{id_attr}><img src="{uri}" alt="{_e(alt)}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


# --------------------------------------------------------------------------
# sections


def _head(evidence):
    data = evidence.get("data") or {}
    fp = str(data.get("fingerprint") or "")
    fp_short = fp.split(":")[-1][:12] if fp else _DASH
    verdict = evidence.get("verdict") or "No verdict was recorded for this run."
    meta = [
        f"<span>data fingerprint <code title=\"{_e(fp)}\">{_e(fp_short)}</code></span>",
        f"<span>created {_e(evidence.get('created') or _DASH)}</span>",
        f"<span>augplan {_e(evidence.get('augplan_version') or _DASH)}</span>",
    ]
    if evidence.get("seed") is not None:
        meta.append(f"<span>seed {_e(evidence.get('seed'))}</span>")
    if data.get("root"):
        meta.append(f"<span>data <code>{_e(data.get('root'))}</code></span>")
    if evidence.get("best"):
        meta.append(f"<span>recommended: <strong>{_e(evidence.get('best'))}</strong> (vetted)</span>")
    del verdict  # the verdict opens the summary
    return ("<header><h1>augplan vet: augmentation recipe report</h1>"
            f'<p class="meta">{" ".join(meta)}</p></header>')


def _transform_text(step, fallback):
    """``rotate degrees=[-8, 8], probability=0.5``, from the recipe step or the check params."""
    source = step if isinstance(step, dict) else {}
    op = source.get("op") or fallback.get("op") or "?"
    params = {k: v for k, v in source.items() if k != "op"} or dict(fallback.get("params") or {})
    text = ", ".join(f"{k}={_value_text(v)}" for k, v in params.items())
    return f"<strong>{_e(op)}</strong>" + (f" <span class=\"note\">{_e(text)}</span>" if text else "")


def _stage_text(stage):
    names = {"screen": "by the screen", "confirmation": "by training"}
    return f'<br><span class="note">{names[stage]}</span>' if stage in names else ""


def _swaps_text(swaps, limit=2):
    swaps = [s for s in (swaps or []) if isinstance(s, dict)]
    if not swaps:
        return _DASH
    parts = []
    for swap in swaps[:limit]:
        # The count that moved, of the class's images checked (not the class size alone).
        n = (f", {swap['moved']} of {swap['n']} images moved" if _is_number(swap.get("moved"))
             and _is_number(swap.get("n")) else "")
        parts.append(f"<span class=\"swap\">{_e(swap.get('from', '?'))} \u2192 {_e(swap.get('to', '?'))} "
                     f"{_percent(swap.get('rate'))}{n}</span>")
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
    return _DASH


def _vetting_text(change, suggestion):
    parts = []
    if change:
        action = change.get("action") or _DASH
        detail = change.get("detail")
        parts.append(f"<strong>{_e(action)}</strong>" + (f": {_e(detail)}" if detail else ""))
    applied = change and change.get("action") in ("relabel", "scope")
    if isinstance(suggestion, dict) and suggestion and not applied:
        said = "; ".join(f"{k} {_value_text(v)}" for k, v in suggestion.items())
        parts.append(f"<span class=\"note\">checker suggests {_e(said)}</span>")
    return "<br>".join(parts) or _DASH


def _check_section(entry, number, base_dir):
    check = entry.get("check") or {}
    vetted = entry.get("vetted") or {}
    steps = (entry.get("recipe") or {}).get("transforms") or []
    changes = {c.get("index"): c for c in (vetted.get("changes") or []) if isinstance(c, dict)}
    out = ["<section><h3>Label safety</h3>"]
    facts = []
    if entry.get("source"):
        facts.append(f"file <code>{_e(entry['source'])}</code>")
    if entry.get("recipe_hash"):
        facts.append(f"recipe hash <code>{_e(str(entry['recipe_hash'])[:12])}</code>")
    model = check.get("model") or {}
    if _is_number(model.get("cv_accuracy")):
        facts.append(f"checking model: cross-validated accuracy {_percent(model['cv_accuracy'], 1)}"
                     + (f" against chance {_percent(model.get('chance'), 1)}" if _is_number(model.get("chance"))
                        else ""))
    if _is_number(check.get("n_images")):
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
            _e(index),
            _transform_text(step, transform),
            _badge(transform.get("verdict")) + _stage_text(transform.get("decided_by")),
            _rate_ci(transform.get("change_rate"), transform.get("change_rate_ci")),
            _rate_ci(transform.get("leave_rate"), transform.get("leave_rate_ci")),
            _swaps_text(transform.get("swaps")),
            _limit_text(transform),
            _vetting_text(changes.get(index), transform.get("suggestion")),
        ])
        row_classes.append("")
    if rows:
        out.append(_table(
            ["#", "transform", "verdict", "moved to another class<br>(screen, 95% CI)",
             "outside every class<br>(screen, 95% CI)", "confirmed swaps", "safe limit", "what vetting did"],
            rows, numeric=(0, 3, 4), row_classes=row_classes, wide=True))
    else:
        out.append('<p class="note">The check recorded no transforms.</p>')
    if check.get("decision_rule"):
        out.append('<p class="note">Verdicts follow the label-safety rule in the '
                   '<a href="#appendix">appendix</a>.</p>')
    for warning in check.get("warnings") or []:
        out.append(f'<p class="warn">{_e(warning)}</p>')

    sheets = [t for t in transforms if t.get("evidence_sheet")]
    if sheets:
        out.append("<h3>Images that moved</h3>"
                   '<p class="note">Each pair shows an original at its own aspect ratio and the transformed '
                   "image, captioned with the magnitude; the row label says its class and where the "
                   "transformed image landed (another class, or outside every class).</p>")
        out.append('<div class="plots">')
        for transform in sheets:
            caption = (f"transform {transform.get('index', '?')} ({transform.get('op', '?')}): "
                       f"{transform.get('verdict', 'unknown')}; shown in {_EVIDENCE_COLOURS} colours, "
                       f"the full-colour sheet is {transform['evidence_sheet']}")
            out.append(_figure(transform["evidence_sheet"], caption, f"evidence sheet, {caption}", base_dir,
                               anchor=_evidence_anchor(number, transform.get("index", "x")),
                               colours=_EVIDENCE_COLOURS))
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
        out.append(f"<p>Every transform is kept as written; the vetted recipe is <strong>{_e(name)}</strong>.</p>")
    else:
        out.append(f"<p>Vetting changed the recipe; the result is <strong>{_e(name)}</strong>.</p>")
    score = vetted.get("score") or {}
    if score:
        out.append(f"<p>Validation accuracy {_percent(score.get('accuracy'), 1)}, gain over no augmentation "
                   f"{_points_ci(score.get('gain'), score.get('gain_ci'))} percentage points "
                   "(95% CI).</p>")
    recheck = vetted.get("recheck") or {}
    transforms = [t for t in (recheck.get("transforms") or []) if isinstance(t, dict)]
    if transforms:
        rows = [[_e(t.get("index", i)), f"<strong>{_e(t.get('op', '?'))}</strong>", _badge(t.get("verdict")),
                 _rate_ci(t.get("change_rate"), t.get("change_rate_ci")), _swaps_text(t.get("swaps"))]
                for i, t in enumerate(transforms)]
        out.append("<p>The rewritten transforms were checked again:</p>")
        out.append(_table(["#", "transform", "verdict", "moved to another class (95% CI)", "main swaps"],
                          rows, numeric=(0, 3)))
    return "".join(out)


def _plot_factor(path, factors):
    """The factor a plot file shows: its stem, or the known factor its stem ends with.

    ``vet`` names the files ``<number>-<recipe>-<factor>.png`` inside ``figures/``.
    """
    stem = Path(str(path)).stem
    for factor in sorted(factors, key=len, reverse=True):
        if stem == factor or stem.endswith(f"-{factor}"):
            return factor
    return stem


def _plot_items(plots, factors=()):
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
            text += f" with {suggestion['parameter']} {_value_text(suggestion.get('range', '?'))}"
        if suggestion.get("reason"):
            text += f" ({suggestion['reason']})"
        return text
    return _value_text(suggestion)


def _range_text(stats, factor=None):
    if not isinstance(stats, dict):
        return _DASH
    low, high = stats.get("p05"), stats.get("p95")
    circular = factor is not None and getattr(FACTORS.get(factor), "circular", False)
    if _is_number(low) and _is_number(high):
        # Angles on their own circle, as in the text table and the plots.
        text = factor_range(factor, low, high) if circular else f"{_number(low)} to {_number(high)}"
    else:
        text = _DASH
    if _is_number(stats.get("std")):
        text += f" <span class=\"note\">(sd {_number(stats['std'])})</span>"
    return text


def _widening(original, augmented):
    if not (isinstance(original, dict) and isinstance(augmented, dict)):
        return _DASH
    a, b = original.get("std"), augmented.get("std")
    if _is_number(a) and _is_number(b) and a > 0:
        return f"\u00d7{b / a:.2f}"
    return _DASH


def _field_text(field):
    if not isinstance(field, dict) or not field:
        return _DASH
    parts = []
    if _is_number(field.get("coverage")):
        parts.append(f"covers {_percent(field['coverage'])}")
    before, after = field.get("wasserstein_before"), field.get("wasserstein_after")
    if _is_number(before) or _is_number(after):
        parts.append(f"distance {_number(before)} \u2192 {_number(after)}")
    return "<br>".join(parts) or _DASH


def _score_cell(value):
    return _percent(value, 0) if _is_number(value) else _DASH


def _coverage_section(entry, number, base_dir):
    name = entry.get("name", f"recipe {number + 1}")
    coverage = entry.get("coverage") or {}
    out = [f'<section id="{_anchor("coverage", name, number)}"><h3>Coverage and shortcuts</h3>']
    grid = factor_grid(coverage.get("factors")) if isinstance(coverage.get("factors"), dict) else None
    if grid:
        out.append(_inline_figure(grid, "original (solid), augmented (dashed) and field (dotted) distribution "
                                  "of every nuisance factor, each panel on its own scale",
                                  f"histograms of the nuisance factors of {name}", css="wide"))
    plots = _plot_items(coverage.get("plots"), coverage.get("factors") or ())
    if plots:
        out.append("<h4>Nuisance factors: original, augmented and field</h4>")
        out.append('<div class="plots">')
        for factor, path in plots:
            out.append(_figure(path, f"{factor}: original, augmented and field distributions",
                               f"histogram of {factor}", base_dir))
        out.append("</div>")

    factors = coverage.get("factors") or {}
    if isinstance(factors, dict) and factors:
        rows = []
        for factor, info in factors.items():
            info = info if isinstance(info, dict) else {}
            unit = f' <span class="note">({_e(info["unit"])})</span>' if info.get("unit") else ""
            if info.get("note"):
                # No training image has a value (hue of grey images).
                rows.append([_e(factor) + unit, _e(info["note"]), _DASH, _DASH, _DASH])
                continue
            rows.append([_e(factor) + unit, _range_text(info.get("original"), factor), _range_text(info.get("augmented"), factor),
                         _widening(info.get("original"), info.get("augmented")), _field_text(info.get("field"))])
        out.append("<h4>How far the recipe widens each factor</h4>")
        out.append(_table(["factor", "original 5th to 95th percentile", "augmented 5th to 95th percentile",
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
            rows.append([_e(s.get("factor", "?")), _score_cell(s.get("original")), _score_cell(s.get("augmented")),
                         _score_cell(s.get("val")), _score_cell(s.get("field")), _score_cell(s.get("chance")),
                         f"<span class=\"flag\">{_e(', '.join(flags))}</span>" if flags else "no"])
            classes.append("flagged" if s.get("flagged") else "")
        out.append("<h4>Shortcut audit</h4>"
                   '<p class="note">How well the class can be told from one factor alone (cross-validated '
                   "balanced accuracy). Far above chance means the factor is a shortcut a model can learn "
                   "instead of the object.</p>")
        out.append(_table(["factor", "original train", "augmented train", "validation", "field", "chance",
                           "flag"], rows, numeric=(1, 2, 3, 4, 5), row_classes=classes))
    if coverage.get("shortcut_rule"):
        out.append('<p class="note">Flags follow the shortcut rule in the <a href="#appendix">appendix</a>.</p>')
    for message in coverage.get("messages") or []:
        out.append(f'<p class="warn">{_e(message)}</p>')
    suggestions = [_suggestion_text(s) for s in (coverage.get("suggestions") or [])]
    if any(suggestions):
        out.append("<p><strong>Suggested transforms</strong></p>" + _list(suggestions))

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
                    if k not in metrics and (_is_number(before.get(k)) or _is_number(after.get(k)))]
        metrics = list(dict.fromkeys(metrics))
        rows = [[_e(k), _number(before.get(k)), _number(after.get(k))] for k in metrics]
        out.append('<p class="note">Density and coverage of the field sample by the training images '
                   "(Naeem et al., 2020): coverage is the share of field images that have a training image "
                   "close by; 1 means every field image is covered.</p>")
        out.append(_table(["measure", "original train", "augmented train"], rows, numeric=(1, 2)))
        rest = {k: v for k, v in field.items() if k not in ("before", "after")}
    else:
        rest = field
    words = {"k": "neighbours (k)", "sample_size": "training images sampled", "reference": "measured from"}
    scalars = [(k, v) for k, v in rest.items() if not isinstance(v, (dict, list)) and v is not None]
    if scalars:
        out.append("<p class=\"note\">" + "; ".join(
            f"{_e(words.get(k, k))}: {_number(v) if _is_number(v) else _e(v)}" for k, v in scalars) + "</p>")
    return "".join(out)


def _ci_text(value, interval, signed=True):
    if not _is_number(value):
        return _DASH
    return _points_ci(value, interval, signed)


def _accuracy_text(block):
    if not isinstance(block, dict):
        return _DASH
    text = _percent(block.get("accuracy"), 1)
    pair = _pair(block.get("accuracy_ci"))
    if pair and _is_number(block.get("accuracy")):
        text += f" [{_percent(pair[0], 1)}, {_percent(pair[1], 1)}]"
    return text


def _leaderboard(evidence):
    evaluation = evidence.get("evaluation") or {}
    recipes = evidence.get("recipes") or []
    out = ['<section id="leaderboard"><h2>Leaderboard</h2>']
    if not evaluation:
        out.append('<p class="note">No evaluation was recorded.</p></section>')
        return "".join(out)
    vetted_names = {(e.get("vetted") or {}).get("name") for e in recipes
                    if isinstance(e, dict) and not (e.get("vetted") or {}).get("unchanged")}
    best_name = (_recommended_row(evidence) or {}).get("name")
    baseline = evaluation.get("baseline") or {}
    field = evaluation.get("field") or {}
    rows = [["", "no augmentation (baseline)", _accuracy_text(baseline), _DASH, _DASH,
             _accuracy_text(field.get("baseline")), _DASH, "reference"]]
    row_classes = ["baseline"]
    ranked = _ranked_rows(evidence)
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
        pair = _pair(row.get("gain_ci"))
        if pair and pair[0] > 0 and not row.get("flagged"):
            flags.append("gain above zero")
        row_field = row.get("field") if isinstance(row.get("field"), dict) else {}
        rows.append([str(rank), _e(row.get("name", "?")), _accuracy_text(row),
                     _ci_text(row.get("gain"), row.get("gain_ci")), _p(row.get("p_holm")),
                     _accuracy_text(row_field) if row_field else _DASH,
                     _ci_text(row_field.get("gain"), row_field.get("gain_ci")),
                     _e(", ".join(flags)) or _DASH])
        row_classes.append("best" if row.get("name") == best_name else "")
    model = evaluation.get("model") or {}
    if model:
        note = f" {model['note'][0].upper()}{model['note'][1:]}." if model.get("note") else ""
        out.append(f'<p class="note">Scored with <strong>{_e(model_phrase(model.get("name")))}</strong>: '
                   f'{_e(model.get("description"))}.{_e(note)}</p>')
    rule = evidence.get("ranking_rule")
    if rule:
        out.append(f'<p class="note">Ordered by the rule that makes the recommendation: {_e(rule)}</p>')
    out.append(_table(["rank", "recipe", "validation accuracy [95% CI]", "validation gain, points [95% CI]",
                       "p (Holm)", "field accuracy [95% CI]", "field gain, points [95% CI]", "flags"],
                      rows, numeric=(0, 2, 3, 4, 5, 6), row_classes=row_classes))

    facts = []
    if evaluation.get("scored_on"):
        facts.append(f"Scored on {_e(evaluation['scored_on'])}")
    if "augmented_validation_images" in evaluation:
        facts.append(f"augmented validation images: {_e(evaluation['augmented_validation_images'])}")
    if evaluation.get("repeats") is not None:
        facts.append(f"repeats per recipe: {_e(evaluation['repeats'])}")
    if field.get("n_images") is not None:
        facts.append(f"field sample: {_e(field['n_images'])} labelled images")
    if facts:
        out.append(f"<p class=\"note\">{'; '.join(facts)}.</p>")
    out.append(_per_class_table(ranked))
    out.append(_confirm_block(evaluation.get("confirm")))
    for warning in evaluation.get("warnings") or []:
        out.append(f'<p class="warn">{_e(warning)}</p>')
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
        rows.append([_e(row.get("name", "?"))] + [_points(gains.get(c)) for c in classes])
    return ("<h3>Change in recall per class</h3>"
            '<p class="note">Percentage points against the baseline; a negative value means the recipe '
            "hurts that class.</p>"
            + _table(["recipe"] + [_e(c) for c in classes], rows, numeric=tuple(range(1, len(classes) + 1))))


def _short_score(score):
    if not isinstance(score, dict):
        return _DASH
    text = _percent(score.get("accuracy"), 1)
    pair = _pair(score.get("accuracy_ci"))
    if pair:
        text += f" [{_percent(pair[0], 1)}, {_percent(pair[1], 1)}]"
    if _is_number(score.get("gain")):
        text += f", gain {_points_ci(score.get('gain'), score.get('gain_ci'))} points"
    if _is_number(score.get("p_value")):
        text += f", p {_p(score.get('p_value'))}"
    return text


def _confirm_block(confirm):
    if not isinstance(confirm, dict) or not confirm:
        return ""
    n = f" ({confirm['n_images']} images)" if _is_number(confirm.get("n_images")) else ""
    rows = [["no augmentation (baseline)", _short_score(confirm.get("baseline"))],
            [_e(confirm.get("recipe", "?")), _short_score(confirm.get("recipe_scores"))]]
    note = f'<p class="note">{_e(confirm["note"])}.</p>' if confirm.get("note") else ""
    return (f"<h3>Confirmation on {_e(confirm.get('source', 'a held-out split'))}{n}</h3>" + note
            + _table(["model", "accuracy [95% CI]"], rows))


def _data_notes(evidence):
    data = evidence.get("data") or {}
    out = ['<section id="data-notes"><h2>Data notes</h2>']
    counts = data.get("counts") or {}
    if isinstance(counts, dict) and counts:
        out.append("<p>Images per split: " + ", ".join(f"{_e(k)} {_e(v)}" for k, v in counts.items()) + ".</p>")
    classes = data.get("classes") or []
    if classes:
        out.append(f"<p>Classes ({len(classes)}): " + ", ".join(_e(c) for c in classes) + ".</p>")
    if data.get("fingerprint"):
        out.append(f"<p class=\"note\">Full data fingerprint: <code>{_e(data['fingerprint'])}</code></p>")
    if data.get("val_from_train"):
        seed = data.get("split_seed")
        out.append('<p class="warn">There is no <code>val/</code> folder: validation is a stratified split of '
                   f"<code>train/</code> (seed {_e(seed if seed is not None else _DASH)}). Scores on it are "
                   "less independent than on a separately collected validation set.</p>")
    skipped = [s for s in (data.get("skipped") or []) if s]
    out.append("<h3>Skipped files</h3>")
    if skipped:
        rows = [[f"<code>{_e(s[0] if isinstance(s, (list, tuple)) else s)}</code>",
                 _e(s[1] if isinstance(s, (list, tuple)) and len(s) > 1 else "")] for s in skipped]
        out.append(_table(["file", "reason"], rows))
    else:
        out.append("<p>None: every file was read as an image.</p>")
    leaks = [leak for leak in (data.get("leaks") or []) if isinstance(leak, dict)]
    out.append("<h3>Images shared between splits</h3>")
    if leaks:
        out.append('<p class="warn">These images appear in two splits: a model is scored on images it was '
                   "trained on, which inflates every score. Remove one copy of each pair.</p>")
        tally = {}
        for leak in leaks:
            key = (str(leak.get("kind", "?")), " / ".join(str(s) for s in leak.get("splits") or []))
            tally[key] = tally.get(key, 0) + 1
        out.append("<p>" + "; ".join(f"{n} {_e(kind)} {'pair' if n == 1 else 'pairs'} across {_e(splits)}"
                                     for (kind, splits), n in sorted(tally.items())) + ".</p>")
        rows = [[_e(leak.get("kind", "?")), f"<code>{_e(leak.get('a', '?'))}</code>",
                 f"<code>{_e(leak.get('b', '?'))}</code>", _e(" / ".join(str(s) for s in leak.get("splits") or [])),
                 _number(leak.get("distance"))] for leak in leaks[:_LEAKS_SHOWN]]
        out.append(_table(["kind", "image", "copy", "splits", "hash distance (of 64 bits)"], rows, numeric=(4,)))
        if len(leaks) > _LEAKS_SHOWN:
            out.append(f'<p class="note">The first {_LEAKS_SHOWN} of {len(leaks)} pairs; evidence.json lists '
                       "them all.</p>")
    else:
        out.append("<p>None found (exact copies and near copies by perceptual hash).</p>")
    out.append("</section>")
    return "".join(out)


def _evidence_anchor(number, index):
    return f"evidence-{number}-{index}"


def _change_phrase(change):
    """``flip relabelled``: what vetting did to one transform, in a few words."""
    op = change.get("op") or "?"
    action = change.get("action")
    detail = str(change.get("detail") or "")
    if action == "relabel":
        return f"{op} relabelled"
    if action == "scope":
        return f"{op} scoped" + (f" ({detail.replace('applied only to ', 'only ')})" if detail else "")
    if action == "clip":
        # The range vet recorded (typed, not parsed back from the detail text).
        pair = _pair(change.get("clipped_to"))
        return f"{op} clipped to {range_text(pair)}" if pair else f"{op} clipped"
    if action == "remove":
        reason = detail.rpartition("; ")[2] if "; " in detail else detail
        return f"{op} removed" + (f" ({reason.replace('removed: ', '')})" if reason else "")
    return f"{op} kept"


def _changes_list(recipes):
    items = []
    for number, entry in enumerate(recipes):
        name = entry.get("name", f"recipe {number + 1}")
        vetted = entry.get("vetted") or {}
        changes = [c for c in (vetted.get("changes") or []) if isinstance(c, dict)]
        link = f'<a href="#{_anchor("recipe", name, number)}"><strong>{_e(name)}</strong></a>'
        if vetted.get("unchanged") or not changes:
            kept = f"{len(changes)} transform{'s' if len(changes) != 1 else ''}" if changes else "as written"
            items.append(f"<li>{link}: kept ({_e(kept)} unchanged)</li>")
            continue
        changed = [c for c in changes if c.get("action") != "keep"]
        phrases = [_change_phrase(c) for c in changed]
        kept = len(changes) - len(changed)
        if kept:
            phrases.append(f"{kept} kept")
        target = f" \u2192 {_e(vetted['name'])}" if vetted.get("name") else ""
        items.append(f"<li>{link}{target}: {_e('; '.join(phrases))}</li>")
    if not items:
        return ""
    return f'<div class="box"><h2>What vetting changed</h2><ul>{"".join(items)}</ul></div>'


def _signoff_list(recipes):
    items = []
    for number, entry in enumerate(recipes):
        name = entry.get("name", f"recipe {number + 1}")
        sheets = {t.get("index"): t.get("evidence_sheet") for t in ((entry.get("check") or {}).get("transforms")
                                                                   or []) if isinstance(t, dict)}
        for item in (entry.get("vetted") or {}).get("signoff") or []:
            if not isinstance(item, dict):
                continue
            index = item.get("index")
            where = (_evidence_anchor(number, index) if sheets.get(index)
                     else _anchor("recipe", name, number))
            items.append(f'<li><a href="#{where}">{_e(name)}, transform {_e(index)} ({_e(item.get("op", "?"))})'
                         f"</a>: {_e(item.get('detail') or 'unverified, kept')}</li>")
    if not items:
        body = "<p>None: every transform kept is verified safe, rewritten, clipped or removed.</p>"
    else:
        body = f"<ul>{''.join(items)}</ul>"
    return f'<div class="box signoff" id="signoff"><h2>Sign-off needed</h2>{body}</div>'


def _evidence_source(evidence):
    """Which model and which images the recommendation rests on, in one line."""
    evaluation = evidence.get("evaluation") or {}
    model = evaluation.get("model")
    model_text = model_phrase((model.get("name") if isinstance(model, dict) else model) or "linear")
    # The recommended row, else the top-ranked one: the field sample is named whether or not one is recommended.
    recommended = _recommended_row(evidence) or next(iter(_ranked_rows(evidence)), None) or {}
    parts = []
    field = recommended.get("field") or {}
    if _is_number(field.get("gain")):
        n = field.get("n_images")
        parts.append("the labelled field sample" + (f" ({n} images)" if _is_number(n) else ""))
    baseline = evaluation.get("baseline") or {}
    n_val = baseline.get("n_images")
    scored_on = str(evaluation.get("scored_on") or "val")
    scored_on = "validation" + scored_on[3:] if scored_on.startswith("val") else scored_on
    parts.append(scored_on + (f" ({n_val} images)" if _is_number(n_val) else ""))
    repeats = evaluation.get("repeats")
    tail = f", {repeats} training repeat{'s' if repeats != 1 else ''}" if _is_number(repeats) else ""
    return (f"Evidence: the accuracy gain of {_e(model_text)}, trained with each recipe, over the "
            f"same model trained without augmentation, scored on {_e(' and '.join(parts))}{_e(tail)}; "
            "validation images are never augmented.")


def _summary(evidence, recipes):
    verdict = evidence.get("verdict") or "No verdict was recorded for this run."
    cautions = [c for c in (evidence.get("cautions") or []) if c]
    out = ['<section id="summary" class="summary">',
           f'<p class="verdict" id="verdict">{_e(verdict)}</p>']
    note = (evidence.get("evaluation") or {}).get("decision_note")
    if note:
        # Which evidence decides and what validation can show: beside the recommendation, never collapsed.
        shared = (evidence.get("evaluation") or {}).get("val_shares_shortcut")
        out.append(f'<p class="decision{" shortcut" if shared else ""}" id="decision">{_e(note)}</p>')
    if evidence.get("evaluation"):
        out.append(f'<p class="source">{_evidence_source(evidence)}</p>')
    out.append('<div class="cols">' + _changes_list(recipes) + _signoff_list(recipes) + "</div>")
    if cautions:
        out.append('<div class="cautions" id="cautions"><h2>Cautions</h2>' + _list(cautions) + "</div>")
    out.append("</section>")
    return "".join(out)


def _recommended_row(evidence):
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


def _ranked_rows(evidence):
    """Scored rows in the order of the recommendation rule (the evaluator's ``ranking``); never re-sorted here."""
    evaluation = evidence.get("evaluation") or {}
    scored = [r for r in (evaluation.get("recipes") or []) if isinstance(r, dict)]
    order = evaluation.get("ranking") or evidence.get("ranking") or []
    position = {name: i for i, name in enumerate(order)}
    return sorted(scored, key=lambda r: position.get(r.get("name"), len(position)))


def _per_class_section(evidence):
    evaluation = evidence.get("evaluation") or {}
    # The recommended recipe, or (when none is recommended) the top-ranked one, named: never "recommended".
    recommended = _recommended_row(evidence) or next(iter(_ranked_rows(evidence)), None)
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
        change = _points(new - base) if _is_number(base) and _is_number(new) else _DASH
        rows.append([_e(label), _number(n.get("train")), _number(n.get("val")), _number(n.get("field")),
                     _percent(base, 1), _percent(new, 1), change])
    head = ["class", "train images", "validation images", "field images", "recall, no augmentation",
            f"recall, {_e(name) if name else 'recipe'}", "change, points"]
    return ('<section id="per-class"><h2>Per class, on validation</h2>'
            '<p class="note">Recall is the share of a class\'s validation images predicted as that class, '
            "averaged over the training repeats.</p>"
            + _table(head, rows, numeric=(1, 2, 3, 4, 5, 6)) + "</section>")


def _confusion_section(evidence):
    row = _recommended_row(evidence)
    confusion = (row or {}).get("confusion")
    if not isinstance(confusion, dict):
        return ""
    classes, counts = confusion.get("classes") or [], confusion.get("counts") or []
    if not classes or len(counts) != len(classes):
        return ""
    cells = []
    for label, line in zip(classes, counts):
        total = sum(v for v in line if _is_number(v)) or 1
        row_cells = [f"<th scope=\"row\">{_e(label)}</th>"]
        for value in line:
            share = value / total if _is_number(value) else 0.0
            # Shade by the share of the true class's images; the number is printed too.
            row_cells.append(f'<td class="num" style="background: rgba(0, 90, 170, {0.75 * share:.2f});'
                             f'{" color: #fff;" if share > 0.55 else ""}">{_number(value)}</td>')
        cells.append(row_cells)
    header = "".join(f'<th scope="col" class="num">{_e(c)}</th>' for c in classes)
    body = "".join("<tr>" + "".join(r) + "</tr>" for r in cells)
    repeats = confusion.get("repeats")
    note = (f"Counts of validation predictions of {_e(row.get('name'))}, summed over "
            f"{_e(repeats)} training repeats; rows are the true class, columns the predicted class."
            if repeats else "Rows are the true class, columns the predicted class.")
    return ('<section id="confusion"><h2>Confusion matrix of the recommended recipe</h2>'
            f'<p class="note">{note}</p><div class="scroll"><table class="confusion"><thead><tr>'
            f"<th scope=\"col\">true \\ predicted</th>{header}</tr></thead><tbody>{body}</tbody></table></div>"
            "</section>")


def _recipe_details(entry, number, base_dir):
    name = entry.get("name", f"recipe {number + 1}")
    transforms = [t for t in ((entry.get("check") or {}).get("transforms") or []) if isinstance(t, dict)]
    tally = {}
    for t in transforms:
        tally[t.get("verdict") or "unknown"] = tally.get(t.get("verdict") or "unknown", 0) + 1
    status = ", ".join(f"{n} {v}" for v, n in sorted(tally.items()))
    vetted = entry.get("vetted") or {}
    after = ("kept as written" if vetted.get("unchanged")
             else f"vetted as {vetted['name']}" if vetted.get("name") else "")
    summary = (f"<summary>Recipe <strong>{_e(name)}</strong>: {len(transforms)} transforms"
               + (f" ({_e(status)})" if status else "") + (f"; {_e(after)}" if after else "") + "</summary>")
    body = [_check_section(entry, number, base_dir), _draws_block(entry, base_dir),
            _coverage_section(entry, number, base_dir)]
    return (f'<details class="recipe" id="{_anchor("recipe", name, number)}">{summary}'
            + "".join(body) + "</details>")


def _draws_block(entry, base_dir):
    sheet = entry.get("draws_sheet")
    if not sheet:
        return ""
    name = (entry.get("vetted") or {}).get("name") or entry.get("name", "?")
    return ("<h3>Augmented draws</h3>"
            + _figure(sheet, f"recipe {name} (as vetted): an original of each class, then independent draws",
                      f"contact sheet of augmented draws of {name}", base_dir))


_HOW_TO_READ_CHECK = ("<p><strong>How to read this.</strong> Each transform was judged in two stages. "
                   "The <em>screen</em> applies it to every training image and asks, with a model that "
                   "never saw that image, whether the transformed image still lands in its own class; "
                   "a transform it clears is safe. Every other transform is <em>confirmed by "
                   "training</em>: the same small model is trained with the transform and without it, "
                   "and both are scored on original images they did not see. A transform breaks when "
                   "one named class is then mistaken for another far more often, and the screen saw "
                   "the transformed images land in that class; it is safe when no class loses more "
                   "than the stated margin; otherwise it is unverified and a person must look.</p>")


def _appendix(evidence, recipes):
    out = ['<section id="appendix"><h2>Appendix: decision rules</h2>']
    if any((entry.get("check") or {}).get("decision_rule") for entry in recipes):
        out.append(_HOW_TO_READ_CHECK)
    rules = []
    for entry in recipes:
        check_rule = (entry.get("check") or {}).get("decision_rule")
        if check_rule and ("Label safety", check_rule) not in rules:
            rules.append(("Label safety", check_rule))
        shortcut_rule = (entry.get("coverage") or {}).get("shortcut_rule")
        if shortcut_rule and ("Shortcuts", shortcut_rule) not in rules:
            rules.append(("Shortcuts", shortcut_rule))
    if evidence.get("ranking_rule"):
        rules.append(("Recommendation and leaderboard order", evidence["ranking_rule"]))
    interval = (evidence.get("evaluation") or {}).get("accuracy_interval")
    if interval:
        rules.append(("Intervals", interval))
    if not rules:
        out.append('<p class="note">No decision rules were recorded.</p>')
    for title, text in rules:
        out.append(f"<p><strong>{_e(title)}.</strong> {_e(text)}</p>")
    out.append("</section>")
    return "".join(out)


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
    body = [_head(evidence), _summary(evidence, recipes), _leaderboard(evidence), _per_class_section(evidence),
            _confusion_section(evidence)]
    if recipes:
        body.append('<h2 id="recipes">Recipes</h2><p class="note">Open a recipe for its label-safety table, '
                    "evidence sheets, augmented draws, coverage and shortcut audit.</p>")
    body.extend(_recipe_details(entry, number, base_dir) for number, entry in enumerate(recipes))
    body.append(_appendix(evidence, recipes))
    body.append(_data_notes(evidence))
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{_e(title)}</title><style>{_STYLE}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")
