"""Plain-text tables of the command outputs, sized for an 80-column terminal (history: the terminal's width)."""

import textwrap

from augplan.measure.models import is_linear, model_phrase
from augplan.measure.factors import FACTORS
from augplan.results import range_text

__all__ = ["format_table", "wrap", "check_table", "coverage_table", "leaderboard_table", "history_table",
           "run_table", "format_range", "format_interval"]


def _cut(text, limit):
    return text if len(text) <= limit else text[:limit - 1] + "\u2026"


def wrap(text, width=80):
    """Free text folded to ``width`` columns, continuation lines indented."""
    return textwrap.fill(text, width=width, subsequent_indent="  ", break_long_words=False,
                         break_on_hyphens=False)


def format_table(header, rows, *, width=80, max_cell=22):
    """Lay out ``rows`` under ``header`` in left-aligned columns.

    Cells longer than ``max_cell`` (long class or recipe names) are cut with an
    ellipsis, and so is any line still longer than ``width``. A row shorter
    than the header ends in a note that spans the remaining columns
    ("not defined for grey images"); it does not widen them.
    """
    rows = [[_cut(str(cell), max_cell if len(row) == len(header) else width) for cell in row] for row in rows]
    full = [row for row in rows if len(row) == len(header)]
    widths = [max(len(str(h)), *(len(row[i]) for row in full)) if full else len(str(h))
              for i, h in enumerate(header)]
    lines = []
    for row in [list(map(str, header)), ["-" * w for w in widths], *rows]:
        line = "  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip()
        if len(line) > width:
            line = line[:width - 1] + "\u2026"
        lines.append(line)
    return "\n".join(lines)


def format_interval(low, high, digits=2):
    """``[0.12, 0.30]`` for an interval."""
    return f"[{low:.{digits}f}, {high:.{digits}f}]"


def format_points(value, interval=None):
    """A gain in percentage points, signed, one decimal, with its interval: ``+2.9 [+1.9, +3.9]``.

    Accuracies are shares; their differences read in points on every page
    (a gain of 0.029 is +2.9 points), as the report writes them.
    """
    if value is None:
        return "-"
    text = f"{100 * value:+.1f}"
    if interval is not None:
        low, high = interval
        text += f" [{100 * low:+.1f}, {100 * high:+.1f}]"
    return text


def format_range(value, digits=3):
    """A magnitude range as text: ``-15 to 15`` (`augplan.results.range_text`) or a single value."""
    if value is None:
        return "-"
    if isinstance(value, (list, tuple)):
        return range_text(value, digits)
    return str(value)


def factor_range(name, low, high):
    """A factor's 5-95% span; angles on their own circle (0-360 hue, 0-180 orientation), as the plots show."""
    if low is None or high is None:
        return "-"
    factor = FACTORS.get(name)
    if factor is None or not factor.circular:
        return f"{low:.3g} to {high:.3g}"
    low, high = low % factor.period, high % factor.period
    return f"{low:.3g} to {high:.3g}" + (" (through 0)" if low > high else "")


def _params_text(params):
    return " ".join(format_range(value) for value in params.values())


def _swaps_text(swaps, limit=3):
    # "moved of n": the count behind each rate and the images it is a share of.
    return "; ".join(f"{s['from']} -> {s['to']} {s['rate']:+.0%} ({s['moved']} moved of {s['n']} images)"
                     for s in swaps[:limit])


_STAGE = {"screen": "screen", "confirmation": "training"}


def check_table(result):
    """The label-safety table of a ``check`` result, then its swaps and suggestions."""
    rows = []
    for t in result.transforms:
        rows.append([t["index"], f"{t['op']} {_params_text(t['params'])}", t["verdict"],
                     _STAGE.get(t["decided_by"], "-"),
                     f"{t['change_rate']:.2f} {format_interval(*t['change_rate_ci'])}",
                     format_range(t["safe_limit"])])
    model = result.model
    head = (f"recipe {result.recipe}: proxy model cross-validated accuracy "
            f"{model['cv_accuracy']:.2f} (chance {model['chance']:.2f})")
    head += (f"; swaps confirmed by {model_phrase(model['confirmation'])} trained on replaced images, "
             f"at {model['side']} px")
    table = format_table(["#", "transform", "verdict", "decided by", "moved [95% CI]", "safe limit"], rows)
    notes = []
    for t in result.transforms:
        if t["swaps"] and t["verdict"] != "safe":
            notes.append(f"#{t['index']} {t['op']} confirmed swaps: {_swaps_text(t['swaps'])}")
        if t["suggestion"]:
            suggestion = t["suggestion"]
            if "relabel" in suggestion:
                pairs = ", ".join(f"{a} -> {b}" for a, b in suggestion["relabel"].items())
                notes.append(f"#{t['index']} {t['op']}: usable with relabel: {{{pairs}}}")
            if suggestion.get("only"):
                notes.append(f"#{t['index']} {t['op']}: safe only for: {', '.join(suggestion['only'])}")
        if t.get("note"):  # only where a lighting move may follow a shortcut of the data
            notes.append(f"#{t['index']} {t['op']}: {t['note']}")
    legend = ("decided by: screen (where transformed images land, out-of-fold) or training\n"
              "(the proxy trained with the transform against it trained without, compared on\n"
              "held-out originals); moved: the screen's share of transformed images landing in\n"
              "another class, at the worst magnitude; swap A -> B +x%: the rise in B's\n"
              "originals predicted as A once A's transformed images are learnt (n: B's images)")
    return "\n".join([wrap(head), table, *(wrap(note) for note in notes), legend])


def _std_text(std):
    return "-" if std is None else f"{std:.3g}"


def _score_text(score):
    return "-" if score is None else f"{score:.2f}"


def coverage_table(result):
    """Factor widening and the shortcut audit of a ``coverage`` result."""
    rows = []
    for name, factor in result.factors.items():
        original, augmented = factor["original"], factor["augmented"]
        field = factor.get("field")
        if factor.get("note"):
            # No training image has a value (hue of grey images): say so in place of numbers.
            rows.append([name, factor["note"]])
            continue
        rows.append([name, _std_text(original['std']), _std_text(augmented['std']),
                     factor_range(name, original['p05'], original['p95']),
                     factor_range(name, augmented['p05'], augmented['p95']),
                     f"{field['coverage']:.0%}" if field else "-"])
    widening = format_table(["factor", "std orig", "std aug", "5-95% orig", "5-95% aug", "field in"], rows)
    rows = []
    for s in result.shortcuts:
        link = s["link"]
        flag = ("" if not s["flagged"] else "cleared" if link == "broken"
                else "weakened" if link == "weakened" else "FLAGGED")
        # A score is None where the audit could not be run (a class with one image).
        if s.get("note"):
            rows.append([s["factor"], s["note"]])
            continue
        rows.append([s["factor"], *(_score_text(s[key]) for key in ("original", "augmented", "val", "field")),
                     f"{s['chance']:.2f}", flag])
    audit = format_table(["shortcut factor", "train", "augmented", "val", "field", "chance", "status"], rows)
    parts = [f"recipe {result.recipe}: nuisance factors", widening, "", "shortcut audit "
             "(cross-validated balanced accuracy of the class from the factor alone)", audit]
    coverage = result.field_coverage
    if coverage:
        parts.append(f"field coverage (Naeem et al. 2020, k={coverage['k']}): "
                     f"{coverage['coverage_before']:.2f} before, {coverage['coverage_after']:.2f} after augmentation")
    parts.extend(result.messages)
    for s in result.suggestions:
        parts.append(f"suggestion: {s['op']} {format_range(s['range'])} ({s['reason']})")
    return "\n".join(part if "\n" in part else wrap(part) for part in parts)


def _source_table(result, source):
    """Baseline and recipes scored on a second source (confirmation split or field)."""
    block = getattr(result, source)
    if not block:
        return []
    base = block["baseline"]
    rows = [["baseline", f"{base['accuracy']:.2f} {format_interval(*base['accuracy_ci'])}", "-"]]
    for r in result.recipes:
        entry = getattr(r, source)
        if entry:
            rows.append([r.name, f"{entry['accuracy']:.2f} {format_interval(*entry['accuracy_ci'])}",
                         format_points(entry["gain"], entry["gain_ci"])])
    title = {"field": "labelled field sample", "confirm": "confirmation split, scored once"}[source]
    return ["", f"{title} ({block['n_images']} images, a separate source):",
            format_table(["recipe", "accuracy [95% CI]", "gain, points [95% CI]"], rows)]


def leaderboard_table(result):
    """The leaderboard of an ``evaluate`` result, baseline first, then other sources."""
    base = result.baseline
    model = result.model
    # Recipe accuracies without their intervals (the gain carries the
    # interval that matters), so the verdict fits 80 columns; rows in the
    # evaluator's ranking, never re-sorted here.
    rows = [[r.name, f"{r.accuracy:.2f}", format_points(r.gain, r.gain_ci),
             f"{r.p_holm:.2g}", _verdict_text(r.verdict, r.flagged, model["name"])]
            for r in result.ranked()]
    head = wrap(f"scored with {model_phrase(model['name'])} on {result.scored_on} "
                f"({base['n_images']} original images), {result.repeats} repeats per recipe; "
                f"no augmentation: accuracy {base['accuracy']:.2f} {format_interval(*base['accuracy_ci'])}")
    parts = [head, format_table(["recipe", "accuracy", "gain, points [95% CI]", "Holm p", "verdict"], rows)]
    parts += _source_table(result, "confirm")
    parts += _source_table(result, "field")
    parts.append(f"best: {result.best}" if result.best else
                 f"best: none (no recipe clearly beat no augmentation, by {model_phrase(model['name'])})")
    if result.decision_note:
        parts.append(wrap(result.decision_note))
    return "\n".join(parts)


def _verdict_text(verdict, flagged, model_name):
    """The verdict column (`VERDICT_RULE`'s word); the linear proxy's loss is not called harm."""
    if verdict == "loses":
        return "LOSES" if flagged else "lower (proxy)" if is_linear(model_name) else "loses"
    return verdict


def _cell_limit(width):
    """The longest cell of a table ``width`` columns wide: 22 up to 80 columns, a third of a wider terminal."""
    return 22 if width <= 80 else width // 3


def history_table(rows, *, width=80):
    """Past comparisons from the results ledger, newest last, laid out for ``width`` columns."""
    if not rows:
        return "no evaluations in the ledger yet"
    table = [[row.get("run", "-"), row["date"][:16], row["fingerprint"], len(row["recipes"]), row["repeats"],
              # Runs recorded before the best rule may hold a best whose gain is not above zero.
              row["best_recipe"] if row["best_gain"] is not None and row["best_gain"] > 0 else "none gained",
              "-" if row["best_gain"] is None or row["best_gain"] <= 0 else format_points(row["best_gain"]),
              "ledger" if row["from_ledger"] else ""]
             for row in rows]
    return format_table(["run", "date", "data", "recipes", "reps", "best recipe", "points", "reused"], table,
                        width=width, max_cell=_cell_limit(width))


def _gain_text(row):
    return format_points(row.get("gain"), row.get("gain_ci") or None)


def run_table(entry, *, width=80):
    """One past comparison (``augplan history RUN``): its settings, then a score per recipe, for ``width`` columns."""
    lines = [f"run {entry['run']}, {entry['date']} UTC: data {entry['data'] or '-'}",
             f"  fingerprint {entry['fingerprint']}", f"  seed {entry['seed']}, {entry['repeats']} repeats, "
             f"settings {entry['settings_key']}" + (", served from the ledger" if entry["from_ledger"] else "")]
    details = entry.get("details")
    if not details:
        lines.append("  this run was recorded without its scores; recipes: " + ", ".join(entry["recipes"]))
        return "\n".join(lines)
    baseline = details["baseline"]
    model = details.get("model", "linear")  # runs recorded before --model were all the linear proxy's
    lines.append(f"  scored with {model_phrase(model)} on {details['scored_on']} ({baseline['n_images']} images); "
                 "no augmentation: "
                 f"accuracy {baseline['accuracy']:.3f} " + format_interval(*baseline["accuracy_ci"], digits=3))
    rows = []
    for row in details["recipes"]:
        field = row.get("field") or {}
        rows.append([row["name"], f"{row['accuracy']:.3f}", _gain_text(row),
                     "-" if row.get("p_holm") is None else f"{row['p_holm']:.3g}",
                     _gain_text(field) if field else "-",
                     # A ledger row of an older version may lack the verdict.
                     _verdict_text(row.get("verdict", ""), row.get("flagged", False), model)])
    lines.append(format_table(["recipe", "accuracy", "gain, points [95% CI]", "p (Holm)", "field gain, points", "verdict"], rows,
                              width=width, max_cell=max(26, _cell_limit(width))))
    lines.extend(wrap(f"warning: {text}", width=width) for text in details.get("warnings") or [])
    return "\n".join(lines)
