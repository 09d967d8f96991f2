"""Small formatters of the HTML report: numbers, intervals, badges, tables and ids.

Every one accepts None and odd types without raising (an absent value prints
as a dash), and every piece of text that comes from the user goes through
`escape`.
"""

from __future__ import annotations

import html
import math
import re

__all__ = [
    "DASH", "escape", "is_number", "number_pair", "percent", "rate_ci", "points_text", "points_ci",
    "p_text", "number_text", "value_text", "verdict_badge", "table_html", "bullet_list",
    "anchor_id", "evidence_anchor", "ci_text", "accuracy_text",
]

DASH = "\u2013"


# The word is printed beside the colour so the badge reads in greyscale print.
_BADGE = {
    "safe": ("safe", "\u2713"),
    "breaks": ("breaks", "\u2717"),
    "unverified": ("unverified", "?"),
}


def escape(value):
    """Escape any value for HTML text or attribute use."""
    return html.escape("" if value is None else str(value), quote=True)


def is_number(value):
    """True for a finite int or float (not a bool); None, NaN and infinity are not numbers to print."""
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def number_pair(value):
    """``(low, high)`` from a two-item sequence of numbers, else None."""
    if isinstance(value, (list, tuple)) and len(value) == 2 and all(is_number(v) for v in value):
        return float(value[0]), float(value[1])
    return None


def percent(value, digits=0):
    """``81%``: a share as a percentage with ``digits`` decimals, a dash when not a number."""
    return f"{100 * value:.{digits}f}%" if is_number(value) else DASH


def rate_ci(value, interval, digits=0):
    """``81% (74-86%)``: a share with its 95% interval."""
    text = percent(value, digits)
    pair = number_pair(interval)
    if pair is not None:
        text += f" ({100 * pair[0]:.{digits}f}{DASH}{100 * pair[1]:.{digits}f}%)"
    return text


def points_text(value, signed=True):
    """``+2.0``: a share as percentage points (signed by default), a dash when not a number."""
    if not is_number(value):
        return DASH
    return f"{100 * value:+.1f}" if signed else f"{100 * value:.1f}"


def points_ci(value, interval, signed=True):
    """``+2.0 [+0.5, +3.5]``: percentage points with their interval."""
    text = points_text(value, signed)
    pair = number_pair(interval)
    if pair is not None:
        text += f" [{points_text(pair[0], signed)}, {points_text(pair[1], signed)}]"
    return text


def p_text(value):
    """``0.020`` or ``<0.001``: a p-value, a dash when not a number."""
    if not is_number(value):
        return DASH
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def number_text(value, digits=3):
    """A number to three significant digits (an int as it is); a dash for None."""
    if is_number(value):
        return f"{value:.{digits}g}" if isinstance(value, float) else str(value)
    return DASH if value is None else escape(value)


def value_text(value):
    """Plain text for a recipe parameter value (scalar, range, list or mapping)."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {value_text(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(value_text(v) for v in value) + "]"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def verdict_badge(verdict):
    """The coloured badge of a label-safety verdict, its word printed beside the mark."""
    word, mark = _BADGE.get(verdict, (str(verdict) if verdict else "unknown", "\u2022"))
    css = verdict if verdict in _BADGE else "other"
    return f'<span class="badge {css}">{escape(mark)} {escape(word)}</span>'


def table_html(header, rows, *, numeric=(), row_classes=None, caption=None, wide=False):
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


def bullet_list(items):
    """An escaped ``<ul>`` of the non-empty items, or ""."""
    items = [item for item in (items or []) if item]
    if not items:
        return ""
    return "<ul>" + "".join(f"<li>{escape(item)}</li>" for item in items) + "</ul>"


def anchor_id(prefix, name, number):
    """An id that is safe in HTML and unique per position."""
    slug = re.sub(r"[^a-z0-9]+", "-", str(name).lower()).strip("-")[:40] or "item"
    return f"{prefix}-{number}-{slug}"


def evidence_anchor(number, index):
    """The id of the evidence sheet of transform ``index`` of recipe ``number``."""
    return f"evidence-{number}-{index}"


def ci_text(value, interval, signed=True):
    """Percentage points with their interval, a dash when the value is not a number."""
    if not is_number(value):
        return DASH
    return points_ci(value, interval, signed)


def accuracy_text(block):
    """``93.0% [90.0%, 95.0%]``: a score block's accuracy with its interval (a dash when not finite)."""
    text = percent(block["accuracy"], 1)
    pair = number_pair(block["accuracy_ci"])
    if pair and is_number(block["accuracy"]):
        text += f" [{percent(pair[0], 1)}, {percent(pair[1], 1)}]"
    return text
