"""What vetting did to a transform, in words: formatted once, from the typed change.

`augplan.vet` records each decision as a `augplan.results.VettingChange`
(``action``, ``detail``, ``clipped_to``); the report's summary and its
label-safety table both say it through this module, so a clipped transform
reads with its range wherever it appears.
"""

from __future__ import annotations

from augplan.render.formatting import DASH, escape, number_pair, value_text
from augplan.results import range_text

__all__ = ["change_phrase", "vetting_text"]


def change_phrase(change):
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
        pair = number_pair(change.get("clipped_to"))
        return f"{op} clipped to {range_text(pair)}" if pair else f"{op} clipped"
    if action == "remove":
        reason = detail.rpartition("; ")[2] if "; " in detail else detail
        return f"{op} removed" + (f" ({reason.replace('removed: ', '')})" if reason else "")
    return f"{op} kept"


def vetting_text(change, suggestion):
    parts = []
    if change:
        action = change.get("action") or DASH
        detail = change.get("detail")
        parts.append(f"<strong>{escape(action)}</strong>" + (f": {escape(detail)}" if detail else ""))
    applied = change and change.get("action") in ("relabel", "scope")
    if isinstance(suggestion, dict) and suggestion and not applied:
        said = "; ".join(f"{k} {value_text(v)}" for k, v in suggestion.items())
        parts.append(f"<span class=\"note\">checker suggests {escape(said)}</span>")
    return "<br>".join(parts) or DASH
