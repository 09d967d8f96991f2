"""The screen: where do a transform's images land, magnitude by magnitude?

Each transform runs with probability 1 on every image in its scope at each
value of its grid (`augplan.check.plan`). A transformed image *moves* to
``B`` when its out-of-fold prediction is ``B`` and ``B``'s region holds it;
it is *outside* when no region vouches for its expected class
(`augplan.check.regions.locate`). The image is the unit and each magnitude
is judged on its own. The screen clears a transform when, at every
magnitude, every class in its scope passes `augplan.check.rules.screen_clears`;
it witnesses a swap ``A -> B`` when `augplan.check.rules.witness_holds`.

Every (transform, magnitude) is a work unit with its own keyed stream
(`augplan.seeding.keyed_generator` with the key ``(transform, position)``),
so a result depends neither on the worker count nor on the steps that follow.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from augplan.check import decoded
from augplan.check.folds import out_of_fold_proba
from augplan.check.plan import kept_rows
from augplan.check.regions import OUTSIDE, locate
from augplan.check.rules import screen_clears, typical_share, witness_holds
from augplan.measure.stats import wilson_interval
from augplan.parallel import parallel_map
from augplan.seeding import keyed_generator, stream_root

__all__ = ["Outcome", "ScreenVerdict", "run_screen", "screen_transform", "screen_flows", "witnessed"]

# Most images an evidence sheet shows, and so most moved images one
# (transform, magnitude) keeps as examples.
EVIDENCE_IMAGES = 8


class Outcome(NamedTuple):
    """What the screen saw at one (transform, grid value)."""

    destinations: np.ndarray   # destination class (or OUTSIDE) of each image in scope
    moves: list                # (source row, destination, magnitude) of moved images, clearest first
    kept: np.ndarray           # features of the copies the confirmation trains on at this value
    ratios: np.ndarray         # region ratios of each transformed image
    votes: np.ndarray          # out-of-fold proxy's class of each transformed image


@dataclass
class ScreenVerdict:
    """The screen's reading of one transform."""

    cleared: bool
    checked: list       # class indices in scope
    counts: dict        # images in scope per class
    summary: dict       # the JSON's change_rate, change_rate_ci, leave_rate, leave_rate_ci, n
    magnitudes: list    # the JSON's per-grid-value rates
    flows: dict         # `screen_flows` over the whole grid


def _screen_unit(context, unit):
    """Transform, featurise and locate the in-scope images of one (transform, magnitude)."""
    from augplan.augment.transforms import apply_op_batch, params_at

    transform_index, magnitude, rng, keep_rows = unit
    transform = context.transforms[transform_index]
    sources = context.scope[transform_index]
    images = decoded.decoded_sample(context.records, context.size, context.sample_key)
    params = params_at(transform, 0.0 if magnitude is None else magnitude, context.fill)
    moved_images = apply_op_batch(images[sources], transform.op, params, rng)
    features = context.template.featurize(moved_images)
    proba = out_of_fold_proba(context.models, features, context.folds[sources], context.n_classes)
    ratios = context.geometry.ratios(features, sources)
    expected = context.expected[transform_index][context.labels[sources]]
    destinations = locate(ratios, proba, expected)
    moves = _moves(destinations, expected, sources, magnitude, context.labels)
    # Rows the confirmation trains on at this magnitude (one per image).
    kept = np.asarray(features[keep_rows], dtype=np.float32)
    return Outcome(destinations, moves, kept, ratios, np.argmax(proba, axis=1))


def _moves(destinations, expected, sources, magnitude, labels):
    """Moved images first (the clearest evidence), the classes taken in turn, with the magnitude that moved them."""
    off = [row for row in range(len(sources)) if destinations[row] != expected[row]]
    seen, rank = {}, {}
    for row in off:
        key = (destinations[row] == OUTSIDE, labels[sources[row]])
        rank[row] = seen.get(key, 0)
        seen[key] = rank[row] + 1
    off.sort(key=lambda row: (destinations[row] == OUTSIDE, rank[row], row))
    return [(int(sources[row]), int(destinations[row]), magnitude) for row in off[:EVIDENCE_IMAGES]]


def run_screen(context, images, plans, baseline, rng, workers, quiet):
    """Screen every transform at every grid value: ``{(transform, value position): Outcome}``.

    At the identity magnitude the images are the originals, whose out-of-fold
    destinations and features are already known (unless a relabel changes
    what they should be), so no unit runs there.
    """
    from augplan.augment.transforms import OPS

    work, known = [], {}
    for t_index, plan in enumerate(plans):
        if not len(plan.scope):
            continue
        transform = context.transforms[t_index]
        identity = OPS[transform.op].identity
        for position, value in enumerate(plan.values):
            keep = kept_rows(plan, position)
            if value is not None and math.isclose(value, identity, abs_tol=1e-12) and not transform.relabel:
                known[(t_index, position)] = Outcome(baseline.dest[plan.scope], [],
                                                     baseline.features[plan.scope][keep].astype(np.float32),
                                                     baseline.geometry.held_out_ratios[plan.scope],
                                                     baseline.predictions[plan.scope])
            else:
                work.append((t_index, position, keep))
    root = stream_root(rng)
    units = [(t, plans[t].values[p], keyed_generator(root, t, p), keep) for t, p, keep in work]
    with decoded.holding(context.sample_key, images):
        results = parallel_map(functools.partial(_screen_unit, context), units, workers=workers,
                               desc="screening transforms", quiet=quiet)
    known.update({(t, p): result for (t, p, _), result in zip(work, results)})
    return known


def _rate(count, n):
    return round(count / n, 4) if n else 0.0


def _interval(count, n):
    low, high = wilson_interval(count, n)
    return [round(low, 4), round(high, 4)]


def screen_transform(plan, results, t_index, labels, baseline):
    """The screen's reading of one transform: per-magnitude rates, the worst one, and whether it clears."""
    source_labels = labels[plan.scope]
    checked = sorted(set(source_labels.tolist()))
    rows, cleared, worst = [], bool(checked) and not baseline.weak, None
    for position, value in enumerate(plan.values):
        destinations = results[(t_index, position)].destinations
        moved_total = left_total = 0
        for a in checked:
            dest = destinations[source_labels == a]
            moved = int(np.sum((dest != plan.expected[a]) & (dest != OUTSIDE)))
            left = int(np.sum(dest == OUTSIDE))
            cleared = cleared and screen_clears(moved, left, len(dest), baseline.change[a], baseline.leave[a])
            moved_total, left_total = moved_total + moved, left_total + left
        row = {"value": None if value is None else round(value, 4), "moved": moved_total,
               "outside": left_total, "n": len(destinations)}
        rows.append(row)
        if worst is None or moved_total > worst["moved"]:
            worst = row
    n = worst["n"] if worst else 0
    summary = {"change_rate": _rate(worst["moved"], n) if worst else 0.0,
               "change_rate_ci": _interval(worst["moved"], n) if worst else [0.0, 1.0],
               "leave_rate": _rate(worst["outside"], n) if worst else 0.0,
               "leave_rate_ci": _interval(worst["outside"], n) if worst else [0.0, 1.0], "n": n}
    magnitudes = [{"value": r["value"], "change_rate": _rate(r["moved"], r["n"]),
                   "leave_rate": _rate(r["outside"], r["n"])} for r in rows if r["value"] is not None]
    counts = {a: int(np.sum(source_labels == a)) for a in checked}
    flows = screen_flows(plan, results, t_index, labels, baseline, range(len(plan.values)))
    return ScreenVerdict(cleared, checked, counts, summary, magnitudes, flows)


def screen_flows(plan, results, t_index, labels, baseline, positions):
    """Swaps the screen witnessed: ``{(a, b): (share, count, n, typical, typical_low)}``.

    At the grid value (among ``positions``) where the out-of-fold proxy
    calls the largest share of a's transformed images b; only flows that
    pass `witness_holds` against the share of a's held-out originals it
    calls b count. ``typical`` is the `typical_share` of a's transformed
    images for b at that grid value and ``typical_low`` its lower Wilson 95%
    bound.
    """
    source_labels = labels[plan.scope]
    n_classes = len(baseline.change)
    own = [baseline.geometry.held_out_ratios[labels == b, b] for b in range(n_classes)]
    flows = {}
    for a in sorted(set(source_labels.tolist())):
        base = np.bincount(baseline.predictions[labels == a], minlength=n_classes) / np.sum(labels == a)
        rows = source_labels == a
        for position in positions:
            votes = results[(t_index, position)].votes[rows]
            counts = np.bincount(votes, minlength=n_classes)
            for b in np.flatnonzero(counts):
                share = counts[b] / len(votes)
                if (b != plan.expected[a] and share > flows.get((a, int(b)), (0.0,))[0]
                        and witness_holds(counts[b], len(votes), base[b])):
                    typical = typical_share(results[(t_index, position)].ratios[rows, b], own[b])
                    low = wilson_interval(int(round(typical * len(votes))), len(votes))[0]
                    flows[(a, int(b))] = (float(share), int(counts[b]), len(votes), typical, low)
    return flows


def witnessed(plan, results, t_index, range_index, labels, baseline, n_classes):
    """``W[a, b]``: within the range, the screen witnessed a's images taking b's look (`screen_flows`)."""
    positions = sorted({plan.values.index(v) for v in plan.ranges[range_index]})
    seen = np.zeros((n_classes, n_classes), dtype=bool)
    for a, b in screen_flows(plan, results, t_index, labels, baseline, positions):
        seen[a, b] = True
    return seen
