"""Evidence examples as data: which images show why a transform is not safe.

For every transform that breaks or is unverified the checker keeps up to
`augplan.check.screen.EVIDENCE_IMAGES` images the screen saw move. Where
training confirmed a swap A -> B, the examples are images of A that the
screen saw land in B, and the title names the swap; otherwise the screen's
moved and outside images, spread over the magnitudes. The examples are
`augplan.results.EvidenceItem` rows; `augplan.render.sheets.evidence_sheets`
draws them. Nothing here reads pixels.
"""

from __future__ import annotations

from augplan.check.regions import OUTSIDE
from augplan.check.screen import EVIDENCE_IMAGES
from augplan.results import EvidenceItem
from augplan.seeding import stream_root

__all__ = ["evidence_items", "sheet_title"]


def _swap_examples(groups, swaps, labels, classes):
    """The screen's moves that show a confirmed swap (an image of A that landed in B); all moves without one."""
    pairs = {(swap["from"], swap["to"]) for swap in swaps}
    shown = [[move for move in group if move[1] != OUTSIDE and (classes[labels[move[0]]], classes[move[1]]) in pairs]
             for group in groups]
    return shown if pairs and any(shown) else groups


def _round_robin(groups, limit):
    """Take items from each group in turn so a sheet spans the magnitudes."""
    picked, position = [], 0
    while len(picked) < limit and any(position < len(g) for g in groups):
        for group in groups:
            if position < len(group) and len(picked) < limit:
                picked.append(group[position])
        position += 1
    return picked


def sheet_title(index, transform, verdict, swaps, limit=2):
    """``transform 2 (flip): breaks; confirmed swap pullover -> tshirt``."""
    title = f"transform {index} ({transform.op}): {verdict}"
    if swaps:
        named = ", ".join(f"{swap['from']} -> {swap['to']}" for swap in swaps[:limit])
        more = f" and {len(swaps) - limit} more" if len(swaps) > limit else ""
        title += f"; confirmed swap{'s' if len(swaps) > 1 else ''} {named}{more}"
    return title


def evidence_items(rows, screen, plans, transforms, sample, fill, rng):
    """Evidence examples of every transform that is not safe, in transform order.

    Parameters
    ----------
    rows : list of augplan.results.TransformVerdict
        The final rows (so each title carries the final verdict).
    screen : dict
        ``{(transform, value position): augplan.check.screen.Outcome}``.
    plans : list of augplan.check.plan.Plan
    transforms : list of augplan.recipe.Transform
    sample : (records, labels, classes)
        The checked sample.
    fill : str
        The recipe's fill (the op parameters at each magnitude need it).
    rng : numpy.random.Generator
        The check's evidence stream; each drawn image gets its keyed stream
        from it (`EvidenceItem.stream`).

    Returns
    -------
    list of augplan.results.EvidenceItem
    """
    from augplan.augment.transforms import params_at

    records, labels, classes = sample
    stream = stream_root(rng)
    items = []
    for row, plan in zip(rows, plans):
        if row.verdict == "safe":
            continue
        groups = [screen[(row.index, p)].moves for p in range(len(plan.values)) if (row.index, p) in screen]
        transform = transforms[row.index]
        title = sheet_title(row.index, transform, row.verdict, row.swaps)
        picked = _round_robin(_swap_examples(groups, row.swaps, labels, classes), EVIDENCE_IMAGES)
        for position, (source, destination, magnitude) in enumerate(picked):
            items.append(EvidenceItem(
                index=row.index, op=transform.op, magnitude=magnitude,
                params=params_at(transform, 0.0 if magnitude is None else magnitude, fill),
                source=records[source].relpath, before=classes[labels[source]],
                after="outside" if destination == OUTSIDE else classes[destination], title=title,
                stream=stream, position=position, record=records[source]))
    return items
