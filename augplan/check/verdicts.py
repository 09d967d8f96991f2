"""From the screen's and the confirmation's readings to each transform's verdict row.

A transform the screen clears is *safe*, decided by the screen. Otherwise
the confirmation's verdict over the whole range decides; its confirmed
swaps are listed largest first, the other rises apart. The safe limit is
the widest range nested around the identity that the confirmation calls
safe. A transform that breaks gets a suggestion: a relabel for typical
swaps that close a cycle, else ``only`` the classes it keeps safe.

`draft` gathers these as plain fields; `transform_verdict` builds the
`augplan.results.TransformVerdict` row once, after the lighting-shortcut
pass (`augplan.check.shortcut`) has said whether a move may follow a
shortcut of the data.
"""

from __future__ import annotations

from augplan.check.rules import can_swap_classes
from augplan.results import ScreenSwap, Swap, TransformVerdict
from augplan.thresholds import RELABEL_TYPICAL_SHARE

__all__ = ["draft", "transform_verdict", "swap_rows", "suggestion", "safe_limit"]

_NO_SCREEN = {"change_rate": 0.0, "change_rate_ci": [0.0, 1.0], "leave_rate": 0.0, "leave_rate_ci": [0.0, 1.0],
              "n": 0}


def swap_rows(pairs, classes):
    """`Swap` rows in the transform's direction, largest first.

    A rise of the confusion ``B -> A`` on originals means ``A``'s
    transformed images took ``B``'s look (``from`` A ``to`` B). ``pairs``
    holds PairChange items, or ``(PairChange, witnessed)`` for the pairs
    that do not pass, with whether the screen saw the move.
    """
    rows = []
    for item in pairs:
        p, seen = item if isinstance(item, tuple) else (item, True)
        rows.append(Swap(from_=classes[p.target], to=classes[p.source],
                         confusion=f"{classes[p.source]} -> {classes[p.target]}", rate=round(p.rise, 4),
                         rate_ci=[round(p.low, 4), round(p.high, 4)], base_rate=round(p.base, 4),
                         augmented_rate=round(p.augmented, 4), moved=p.moved, n=p.n, witnessed=seen))
    rows.sort(key=lambda s: (-s.rate, s.from_, s.to))
    return rows


def _screen_swap_rows(flows, classes):
    rows = [ScreenSwap(from_=classes[a], to=classes[b], rate=round(share, 4), moved=moved, n=n,
                       typical=round(typical, 4), typical_low=round(typical_low, 4))
            for (a, b), (share, moved, n, typical, typical_low) in flows.items()]
    return sorted(rows, key=lambda s: (-s.rate, s.from_, s.to))


def suggestion(transform, checked, entries, passing, classes, typical):
    """Relabel for typical swaps that close a cycle; `only` for the safe classes and the relabelled ones.

    A confirmed confusion ``B -> A`` means the transformed images of ``A``
    taught the model ``B``'s look: ``A``'s images take ``B``'s class. A
    relabel writes labels for every draw, so it is held to a higher bar than
    "breaks": it is offered only for ops that can swap classes
    (`augplan.check.rules.can_swap_classes`), only where these moves close a
    cycle (``A -> B`` and ``B -> A``, or a hue turn's ``A -> B -> C -> A``),
    never for a one-way move, and only when at every step of the cycle most
    of ``A``'s transformed images are typical of ``B``: ``typical[(A, B)]``,
    the lower Wilson 95% bound of their `typical_share`, is at least
    ``RELABEL_TYPICAL_SHARE``; for a pair, in both directions. A class whose
    swap falls short is scoped out instead.

    Returns
    -------
    dict or None
        ``{"relabel": {A: B}}`` and/or ``{"only": [classes]}``.
    """
    main = {}
    for pair in sorted(passing, key=lambda p: -p.rise):
        main.setdefault(pair.target, pair.source)
    in_cycle = set()
    if can_swap_classes(transform) and transform.relabel is None:
        for a in main:
            path, node = [], a
            while node in main and node not in path:
                path.append(node)
                node = main[node]
            cycle = path[path.index(node):] if node in path else []
            if cycle and all(typical.get((c, main[c]), 0.0) >= RELABEL_TYPICAL_SHARE for c in cycle):
                in_cycle.update(cycle)
    in_cycle &= set(checked)
    advice = {}
    if in_cycle:
        advice["relabel"] = dict(sorted((classes[a], classes[main[a]]) for a in in_cycle))
    at_fault = set(main) - in_cycle
    keep = [a for a in checked if a in in_cycle or entries.get(a, {}).get("verdict") == "safe"]
    if at_fault and keep and len(keep) < len(checked):
        advice["only"] = sorted(classes[a] for a in keep)
    return advice or None


def safe_limit(plan, verdicts):
    """Widest confirmed-safe range of the grid, ``[low, high]``, or None."""
    for values, verdict in zip(plan.ranges, verdicts):
        if verdict == "safe" and values and values[0] is not None and values[0] < values[-1]:
            return [round(values[0], 4), round(values[-1], 4)]
    return None


def _json_params(transform):
    return {key: [float(v) for v in value] if isinstance(value, (tuple, list)) else value
            for key, value in transform.params.items()}


def draft(t_index, transform, plan, screened, judged, classes, warnings):
    """The fields of one transform's row before the lighting-shortcut pass, as a dict in JSON order.

    Parameters
    ----------
    t_index : int
    transform : augplan.recipe.Transform
    plan : augplan.check.plan.Plan
    screened : augplan.check.screen.ScreenVerdict or None
        None for a transform whose scope holds no checked image.
    judged : dict
        ``{(transform, range): RangeVerdict}`` of the confirmation.
    classes : tuple of str
    warnings : list of str
        Appended to when the transform applies to no class.
    """
    if screened is None or not screened.checked:
        warnings.append(f"transform {t_index} ({transform.op}) applies to no class of the data; "
                        f"nothing to check")
    summary = _NO_SCREEN if screened is None else screened.summary
    fields = {"index": t_index, "op": transform.op, "params": _json_params(transform), **summary,
              "magnitudes": [] if screened is None else screened.magnitudes,
              "screen_swaps": [] if screened is None else _screen_swap_rows(screened.flows, classes),
              "evidence_sheet": None}
    if screened is None or not screened.checked:
        return {**fields, "verdict": "safe", "decided_by": "screen", "swaps": [], "other_swaps": [], "classes": {},
                "safe_limit": None, "suggestion": None}
    if screened.cleared:
        return {**fields, "verdict": "safe", "decided_by": "screen", "swaps": [], "other_swaps": [],
                "classes": {classes[a]: {"verdict": "safe", "n": screened.counts[a]} for a in screened.checked},
                "safe_limit": safe_limit(plan, ["safe"]), "suggestion": None}
    whole = judged[(t_index, 0)]
    limits = [judged[(t_index, r)].overall if (t_index, r) in judged else "unverified"
              for r in range(len(plan.ranges))]
    typical = {pair: flow[4] for pair, flow in screened.flows.items()}
    return {**fields, "verdict": whole.overall, "decided_by": "confirmation",
            "swaps": swap_rows(whole.passing, classes), "other_swaps": swap_rows(whole.others, classes),
            "classes": {classes[a]: value for a, value in whole.entries.items()},
            "safe_limit": safe_limit(plan, limits),
            "suggestion": None if whole.overall != "breaks" else
            suggestion(transform, screened.checked, whole.entries, whole.passing, classes, typical)}


def transform_verdict(fields, finding=None):
    """The row of one transform, built once from its draft and the shortcut pass's finding.

    A move that may follow a lighting shortcut (``finding``, an
    `augplan.check.shortcut.ShortcutFinding`) makes the verdict
    ``unverified`` and drops a class scope (``only``) drawn from it, which
    would keep the shortcut.
    """
    if finding is None:
        return TransformVerdict(**fields)
    advice = fields["suggestion"]
    return TransformVerdict(**{**fields, "verdict": "unverified",
                               "suggestion": None if advice and "only" in advice else advice},
                            shortcut=finding.shortcut, note=finding.note)
