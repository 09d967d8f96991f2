"""What vetting did to a transform, in words: said once, from the typed change.

The vetting policy records each decision as an `augplan.results.VettingChange`
(``action``, ``detail``, ``clipped_to``); the report's summary and its
label-safety table both word it here, from those fields, and never parse the
detail text back: a clipped transform reads with its range wherever it
appears.
"""

from __future__ import annotations

from augplan.render.formatting import DASH, escape, value_text
from augplan.results import range_text

__all__ = ["change_phrase", "vetting_text"]

# Rewrites that carry out the checker's suggestion, so the table does not repeat it.
_APPLIED = ("relabel", "scope")


def change_phrase(change):
    """What vetting did to one transform, in a few words.

    Parameters
    ----------
    change : augplan.results.VettingChange

    Returns
    -------
    str
        Plain text (not yet escaped): ``flip relabelled``, ``hue scoped
        (applied only to cat)``, ``rotate clipped to -6.67 to 6.67``
        (`augplan.results.range_text`), ``hue removed (breaks)`` or
        ``rotate kept``.
    """
    if change.action == "relabel":
        return f"{change.op} relabelled"
    if change.action == "scope":
        return f"{change.op} scoped ({change.detail})"
    if change.action == "clip":
        return f"{change.op} clipped to {range_text(change.clipped_to)}"
    if change.action == "remove":
        return f"{change.op} removed ({change.verdict})"
    return f"{change.op} kept"


def vetting_text(change, suggestion):
    """The "what vetting did" cell of the label-safety table (HTML).

    Parameters
    ----------
    change : augplan.results.VettingChange or None
        None when the transform has no recorded change.
    suggestion : dict or None
        The checker's suggestion for the transform; shown when vetting did
        not carry it out.

    Returns
    -------
    str
    """
    parts = []
    if change is not None:
        parts.append(f"<strong>{escape(change.action)}</strong>"
                     + (f": {escape(change.detail)}" if change.detail else ""))
    if suggestion and (change is None or change.action not in _APPLIED):
        said = "; ".join(f"{key} {value_text(value)}" for key, value in suggestion.items())
        parts.append(f"<span class=\"note\">checker suggests {escape(said)}</span>")
    return "<br>".join(parts) or DASH
