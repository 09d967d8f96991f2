"""What the checker's work is done on: each transform's plan, and the context every work unit reads.

A `Plan` says what one transform is checked on (its scope, expected
classes, magnitude grid and training draws); `WorkContext` holds what the
screen's and the confirmation's work units share. Both are small and
picklable: the images travel as records (`augplan.check.decoded`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from augplan.check.rules import nested_ranges

__all__ = ["Plan", "WorkContext", "plan_transform", "kept_rows"]


@dataclass
class Plan:
    """What one transform is checked on.

    Attributes
    ----------
    scope : numpy.ndarray of int
        Rows of the checked sample in the transform's class scope.
    expected : numpy.ndarray of int
        Class each class should still be after the transform (its relabel).
    values : list of float or [None]
        The grid (None for an op without a magnitude, a flip).
    ranges : list of list of float
        The whole grid, then the ranges nested around the identity (the safe limit's).
    draws : list of numpy.ndarray
        Per range, the position in ``values`` each image in scope trains at.
    """

    scope: np.ndarray
    expected: np.ndarray
    values: list
    ranges: list
    draws: list


@dataclass(frozen=True)
class WorkContext:
    """What every work unit of the screen and the confirmation reads.

    Per transform (lists in recipe order): ``transforms``, ``scope``,
    ``expected``, ``draws`` (the whole range's) and ``values`` of its `Plan`.
    The sample: ``records``, ``size``, ``sample_key`` (`augplan.check.decoded`),
    ``labels``, ``n_classes``. The proxy's out-of-fold baseline: ``template``,
    ``models``, ``folds``, ``n_folds``, ``features``, ``geometry`` (the
    `augplan.check.regions.Regions`). ``network`` is the first witness when
    it trains on pixels (else None) and ``network_folds`` its folds.
    """

    transforms: list
    scope: list
    records: list
    size: int
    sample_key: str
    fill: str
    template: Any
    models: list
    n_classes: int
    geometry: Any
    expected: list
    labels: np.ndarray
    folds: np.ndarray
    features: np.ndarray
    n_folds: int
    draws: list
    values: list
    network: Any
    network_folds: np.ndarray


def plan_transform(transform, classes, labels, magnitudes, rng):
    """Scope, expected class per class, grid values and, per range, one grid value per image.

    Parameters
    ----------
    transform : augplan.recipe.Transform
    classes : tuple of str
    labels : numpy.ndarray of int
        Class index of each checked image.
    magnitudes : int
        Grid values across the range (`augplan.augment.transforms.magnitude_grid`).
    rng : numpy.random.Generator
        This transform's own draw stream.

    Returns
    -------
    Plan
    """
    from augplan.augment.transforms import OPS, magnitude_grid

    spec = OPS[transform.op]
    checked = [c for c in range(len(classes)) if transform.applies_to(classes[c])]
    scope = np.flatnonzero(np.isin(labels, checked))
    relabel = dict(transform.relabel or {})
    expected = np.array([classes.index(relabel[name]) if relabel.get(name) in classes else c
                         for c, name in enumerate(classes)])
    if spec.magnitude is None:
        values = [None]
    else:
        values = [float(v) for v in magnitude_grid(transform, int(magnitudes))]
        if values[0] <= spec.identity <= values[-1] and not any(
                math.isclose(v, spec.identity, abs_tol=1e-12) for v in values):
            values = sorted(values + [float(spec.identity)])
    # The whole grid first, then the ranges nested around the identity (safe limit).
    ranges = [list(values)] + (nested_ranges(values, spec.identity)[1:] if spec.magnitude else [])
    # Positions in ``values``: each image trains at one grid value of each range.
    draws = [np.array([values.index(v) for v in r])[rng.integers(0, len(r), size=len(scope))]
             for r in ranges]
    return Plan(scope, expected, values, ranges, draws)


def kept_rows(plan, position):
    """Rows of the scope that some range trains at grid position ``position``."""
    return np.flatnonzero(np.any([d == position for d in plan.draws], axis=0))
