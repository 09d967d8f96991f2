"""The lighting-shortcut pass: may a lighting move follow a shortcut of the data rather than the label?

A lighting transform that is not safe may move its images into another
class B (a confirmed swap, or a move the screen saw). If the lighting
factor it changes (`LIGHTING_OP_FACTORS`) singles out B by itself in the
training data (one-vs-rest balanced accuracy at least
`augplan.thresholds.ONE_VS_REST_THRESHOLD`) while the source classes and B
also differ in lighting-blind gradient structure, lighting is not what
defines B: the proxy model learned it as B's mark and its verdict cannot
tell a changed label from a broken shortcut. A labelled field sample in
which the factor still singles out B settles it as a cue, and the verdict
stays as confirmed; otherwise a person must look.

The pass reads the draft verdicts (`augplan.check.verdicts.draft`) and
returns its findings; it changes nothing. The rows are built afterwards,
once (`augplan.check.verdicts.transform_verdict`).

References
----------
.. [1] N. Dalal and B. Triggs, "Histograms of oriented gradients for human
   detection", CVPR 2005 (the lighting-blind structure features).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from augplan.seeding import keyed_generator, stream_root
from augplan.thresholds import ONE_VS_REST_THRESHOLD, SHORTCUT_MOVE_SHARE, STRUCTURE_SEPARABLE

__all__ = ["LIGHTING_OP_FACTORS", "ShortcutFinding", "shortcut_findings"]

# The lighting factor each lighting op changes (augplan.measure.factors names).
# Hue, saturation and geometric moves are not excused this way: colour,
# laterality and scale often define a class (see the cautions), so they keep
# their verdict.
LIGHTING_OP_FACTORS = {"brightness": ("brightness",), "contrast": ("contrast",)}


class ShortcutFinding(NamedTuple):
    """A lighting move into a class the factor alone singles out: the row's ``shortcut`` and ``note``."""

    shortcut: dict
    note: str


def _separable_by_structure(images, labels, first, second, root):
    """Whether two classes differ in lighting-blind gradient structure alone.

    Uses only the block-normalised oriented-gradient histograms of
    `augplan.measure.features.image_features` (Dalal & Triggs 2005), which a change
    of exposure or contrast barely moves; separable means a cross-validated
    balanced accuracy of at least `augplan.thresholds.STRUCTURE_SEPARABLE`.
    """
    from augplan.measure.features import FEATURE_BLOCKS, image_features
    from augplan.measure.shortcuts import shortcut_scores

    pair = np.isin(labels, [first, second])
    gradients = image_features(images[pair])[:, FEATURE_BLOCKS["orientation"]]
    overall, _ = shortcut_scores(gradients, labels[pair], rng=keyed_generator(root))
    return overall is not None and overall >= STRUCTURE_SEPARABLE


def _singled_out(images, labels, classes, factor, root):
    """One-vs-rest cross-validated balanced accuracy of each class from one factor."""
    from augplan.measure.factors import FACTORS
    from augplan.measure.shortcuts import factor_columns, shortcut_scores

    values = {factor: FACTORS[factor].function(images)}
    names = np.array([classes[c] for c in labels])
    return shortcut_scores(factor_columns(values, [factor]), names, rng=keyed_generator(root))[1]


class _Field:
    """The labelled field sample, decoded only when a finding needs it."""

    def __init__(self, dataset, classes, size):
        self.records = [r for r in dataset.split("field") if r.label in classes]
        self.classes, self.size, self._loaded = classes, size, None

    def scores(self, factor, root):
        if not self.records or len({r.label for r in self.records}) < 2:
            return {}
        if self._loaded is None:
            from augplan.data import load_images

            self._loaded = (load_images(self.records, size=self.size),
                            np.array([self.classes.index(r.label) for r in self.records]))
        return _singled_out(*self._loaded, self.classes, factor, root)


def _finding(fields, images, labels, classes, field, root):
    """The finding of one draft row that is not safe, or None."""
    moves = [swap for swap in list(fields["swaps"]) + list(fields["screen_swaps"])
             if swap["rate"] >= SHORTCUT_MOVE_SHARE]
    destinations = {swap["to"] for swap in moves}
    for factor in LIGHTING_OP_FACTORS.get(fields["op"], ()):
        train_scores = _singled_out(images, labels, classes, factor, root)
        hits = sorted(b for b in destinations if (train_scores.get(b) or 0.0) >= ONE_VS_REST_THRESHOLD
                      and all(_separable_by_structure(images, labels, classes.index(swap["from"]),
                                                      classes.index(b), root)
                              for swap in moves if swap["to"] == b))
        if not hits:
            continue
        field_scores = field.scores(factor, root)
        unconfirmed = [b for b in hits if (field_scores.get(b) or 0.0) < ONE_VS_REST_THRESHOLD]
        if not unconfirmed:
            continue
        target = unconfirmed[0]
        shortcut = {"factor": factor, "class": target, "train_score": round(float(train_scores[target]), 4),
                    "field_score": (round(float(field_scores[target]), 4)
                                    if field_scores.get(target) is not None else None)}
        note = (f"images move to {target}, which {factor} alone singles out in the training "
                f"data (one-vs-rest {train_scores[target]:.2f}): the proxy model may follow "
                f"that shortcut rather than the label; a person must look"
                + ("" if field_scores else ", or a labelled field sample can settle it"))
        return ShortcutFinding(shortcut, note)
    return None


def shortcut_findings(drafts, images, labels, classes, dataset, size, rng):
    """Findings of the lighting-shortcut pass: ``{transform index: ShortcutFinding}``.

    Parameters
    ----------
    drafts : list of dict
        The draft rows (`augplan.check.verdicts.draft`).
    images, labels, classes
        The checked sample, decoded.
    dataset : augplan.data.Dataset
        Its labelled ``field`` split, if any, can settle a finding.
    size : int
        Side the field images are read at.
    rng : numpy.random.Generator
        The check's shortcut stream: every score's cross-validation folds
        come from the stream keyed under its root (`augplan.seeding`).

    Returns
    -------
    dict
    """
    field, root, findings = _Field(dataset, classes, size), stream_root(rng), {}
    for fields in drafts:
        if fields["verdict"] != "safe":
            found = _finding(fields, images, labels, classes, field, root)
            if found is not None:
                findings[fields["index"]] = found
    return findings
