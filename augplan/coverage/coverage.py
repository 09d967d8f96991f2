"""Does a recipe widen the nuisance factors, cover the field, and break shortcuts?

`analyse_coverage` returns the ``coverage --json`` document (docs/architecture.md, "Results"):

- widening: each factor of `augplan.measure.factors.FACTORS` on the original
  training images and on the augmented training set (the originals plus the
  recipe's ``copies`` augmented copies of each, the set a model trains on);
- field coverage: per factor, the share of field images inside the augmented
  1-99% range and the 1-D Wasserstein distance train -> field before and
  after augmentation; over all factors together, Naeem et al.'s density and
  coverage;
- shortcut audit (`augplan.measure.shortcuts`): cross-validated balanced
  accuracy of predicting the class from each factor alone (and from all
  factors, for information) on the original training set, the validation
  split, the augmented training set and a labelled field sample;
- suggestions: a transform and range for each flagged shortcut or poorly
  covered factor.

Only factor values are kept in memory, never the augmented images: each work
unit loads a chunk of training images, draws its augmentations, measures and
returns the numbers.

References
----------
.. [1] M. F. Naeem, S. J. Oh, Y. Uh, Y. Choi and J. Yoo, "Reliable fidelity
   and diversity metrics for generative models", ICML 2020.
.. [2] J. Rabin, J. Delon and Y. Gousseau, "Transportation distances on the
   circle", J. Math. Imaging Vis. 41, pp. 147-167, 2011; M. Werman,
   S. Peleg and A. Rosenfeld, "A distance metric for multidimensional
   histograms", CVGIP 32, 1985 (circular earth mover's distance).
.. [3] K. H. Brodersen, C. S. Ong, K. E. Stephan and J. M. Buhmann, "The
   balanced accuracy and its posterior distribution", ICPR 2010.
.. [4] N. I. Fisher, Statistical Analysis of Circular Data, Cambridge
   University Press, 1993 (circular mean and standard deviation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.spatial
import scipy.stats

from augplan.data import Dataset, load_images
from augplan.errors import BadInputError
from augplan.measure.factors import FACTORS, measure_factors
from augplan.measure.shortcuts import (SHORTCUT_RULE, audit_shortcuts, factor_columns, shortcut_messages,
                                       too_few_to_audit)
from augplan.results import CoverageResult, Suggestion, json_number as _number
from augplan.recipe.ops import OP_TABLE
from augplan.seeding import keyed_generator, require_generator, stream_root
from augplan.thresholds import COVERAGE_FLOOR, COVERAGE_NEIGHBOURS, COVERAGE_RANGE_PERCENTILES, PLAUSIBLE_FACTOR
from augplan.parallel import parallel_map
from augplan.augment.transforms import apply_op_batch, augment_batch

__all__ = [
    "HISTOGRAM_BINS",
    "circular_mean",
    "circular_wasserstein",
    "factor_wasserstein",
    "naeem_density_coverage",
    "summarise_factor",
    "histogram_edges",
    "CoverageSamples",
    "measure_coverage_samples",
    "analyse_coverage",
]

HISTOGRAM_BINS = 24
# Cap on each sample entering the k-nearest-neighbour step.
KNN_LIMIT = 5000
_CHUNK = 32


# ----------------------------------------------------------- circular maths


def circular_mean(values, period):
    """Circular mean of angles with the given period, in [0, period).

    Parameters
    ----------
    values : array_like of float
        Angles; NaN entries are ignored.
    period : float
        360 for directions in degrees, 180 for axial angles.

    Returns
    -------
    float
        NaN when no finite value is given or the resultant vanishes.

    References
    ----------
    .. [1] N. I. Fisher, Statistical Analysis of Circular Data, 1993, section 2.2.
    """
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return math.nan
    theta = values * (2.0 * np.pi / period)
    c, s = np.cos(theta).mean(), np.sin(theta).mean()
    if math.hypot(c, s) < 1e-12:
        return math.nan
    return float(np.arctan2(s, c) * period / (2.0 * np.pi) % period)


def _unwrap(values, centre, period):
    # Place each angle within half a period of `centre`, so linear quantiles
    # of the result describe the arc around the centre.
    return centre + (np.asarray(values, dtype=np.float64) - centre + period / 2.0) % period - period / 2.0


def circular_wasserstein(u, v, period):
    """1-Wasserstein distance between two samples of angles on a circle.

    Parameters
    ----------
    u, v : array_like of float
        Angles (any real values; taken modulo ``period``).
    period : float

    Returns
    -------
    float
        ``min_c integral |F_u(x) - F_v(x) - c| dx`` over one period, with
        ``F`` the empirical distribution functions from 0: the optimal
        transport cost with arc length as ground distance [1]_. The
        minimising ``c`` is a length-weighted median of ``F_u - F_v``. When
        both samples lie in an arc shorter than half a period it equals the
        linear ``scipy.stats.wasserstein_distance`` of the unwrapped values.

    References
    ----------
    .. [1] J. Rabin, J. Delon and Y. Gousseau, "Transportation distances on
       the circle", JMIV 41, 2011, section 3.
    """
    u = np.asarray(u, dtype=np.float64) % period
    v = np.asarray(v, dtype=np.float64) % period
    if u.size == 0 or v.size == 0:
        raise ValueError("circular_wasserstein needs two non-empty samples")
    grid = np.unique(np.concatenate([[0.0, period], u, v]))
    left = grid[:-1]
    lengths = np.diff(grid)
    difference = (np.searchsorted(np.sort(u), left, side="right") / u.size
                  - np.searchsorted(np.sort(v), left, side="right") / v.size)
    order = np.argsort(difference, kind="stable")
    cumulative = np.cumsum(lengths[order])
    shift = difference[order][np.searchsorted(cumulative, 0.5 * cumulative[-1])]
    return float(np.sum(lengths * np.abs(difference - shift)))


def factor_wasserstein(u, v, factor):
    """Wasserstein distance for one factor: circular for angles, else scipy's 1-D."""
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    u, v = u[np.isfinite(u)], v[np.isfinite(v)]
    if u.size == 0 or v.size == 0:
        return None
    if factor.circular:
        return circular_wasserstein(u, v, factor.period)
    return float(scipy.stats.wasserstein_distance(u, v))


# ------------------------------------------------------- density, coverage


def naeem_density_coverage(reference, sample, k=COVERAGE_NEIGHBOURS):
    """Naeem et al.'s density and coverage of ``sample`` against ``reference``.

    Parameters
    ----------
    reference : array_like, shape (N, D)
        The "real" points whose k-nearest-neighbour balls define the
        manifold: here the field sample, the distribution the model will meet.
    sample : array_like, shape (M, D)
        The "fake" points judged against it: here the (augmented) training set.
    k : int, default 5

    Returns
    -------
    (float, float)
        ``density = 1/(k M) sum_j sum_i 1[|Y_j - X_i| < r_i]`` and
        ``coverage = 1/N sum_i 1[exists j: |Y_j - X_i| < r_i]``, with ``r_i``
        the distance from ``X_i`` to its k-th nearest other reference point.

    Notes
    -----
    Which side is "real": the question is how well the training set covers
    the field, so the field plays the target distribution and the training
    set the approximation, as real and generated samples do in [1]_.
    Coverage is then the share of field neighbourhoods that hold at least one
    training image; density (about 1 when training images sit inside the
    field's neighbourhoods as densely as field images do) falls when
    augmentation puts images where the field has none. Coverage grows with
    the number of sample points, so compare samples of equal size.

    References
    ----------
    .. [1] M. F. Naeem et al., "Reliable fidelity and diversity metrics for
       generative models", ICML 2020, equations (3) and (4).
    """
    reference = np.asarray(reference, dtype=np.float64)
    sample = np.asarray(sample, dtype=np.float64)
    if reference.ndim != 2 or sample.ndim != 2 or reference.shape[1] != sample.shape[1]:
        raise ValueError(
            f"reference and sample must be 2-D with the same number of columns; "
            f"got shapes {reference.shape} and {sample.shape}")
    if reference.shape[0] <= k or sample.shape[0] == 0:
        raise ValueError(
            f"need more than k={k} reference points and at least one sample point; "
            f"got {reference.shape[0]} and {sample.shape[0]}")
    tree = scipy.spatial.cKDTree(reference)
    radii = tree.query(reference, k=k + 1)[0][:, k]
    inside = np.zeros(reference.shape[0], dtype=bool)
    count = 0
    for start in range(0, sample.shape[0], 512):
        distances = scipy.spatial.distance.cdist(sample[start:start + 512], reference)
        hits = distances < radii[None, :]
        count += int(hits.sum())
        inside |= hits.any(axis=0)
    return count / (k * sample.shape[0]), float(inside.mean())


# ------------------------------------------------------------- summaries


def _spread(values, factor):
    """Centre, std and the unwrapped values used for quantiles."""
    if factor.circular:
        centre = circular_mean(values, factor.period)
        if math.isnan(centre):
            return centre, math.nan, values
        std = float(scipy.stats.circstd(values, high=factor.period, low=0.0))
        return centre, std, _unwrap(values, centre, factor.period)
    return float(values.mean()), float(values.std()), values


def summarise_factor(values, factor, edges):
    """Mean, std, 1/5/95/99 percentiles and histogram of one factor's values.

    Parameters
    ----------
    values : array_like of float
        NaN entries (an undefined angle) are counted as ``undefined`` and
        otherwise left out.
    factor : augplan.measure.factors.Factor
    edges : array_like
        Histogram bin edges.

    Returns
    -------
    dict
        ``{"n", "undefined", "mean", "std", "p01", "p05", "p95", "p99",
        "histogram": {"edges", "counts"}}``. For angles ``mean`` is the
        circular mean, ``std`` the circular standard deviation
        ``sqrt(-2 ln R)`` scaled to the period (``scipy.stats.circstd``), and
        the percentiles are the ends of the arc around the circular mean,
        unwrapped (so p05 may be negative and p95 may exceed the period).
    """
    values = np.asarray(values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    out = {"n": int(finite.size), "undefined": int(values.size - finite.size)}
    if finite.size == 0:
        out.update(mean=None, std=None, p01=None, p05=None, p95=None, p99=None)
        counts = np.zeros(len(edges) - 1, dtype=int)
    else:
        centre, std, unwrapped = _spread(finite, factor)
        p01, p05, p95, p99 = np.percentile(unwrapped, [1, 5, 95, 99])
        out.update(mean=_number(centre), std=_number(std), p01=_number(p01), p05=_number(p05),
                   p95=_number(p95), p99=_number(p99))
        counts = np.histogram(finite % factor.period if factor.circular else finite, bins=edges)[0]
    out["histogram"] = {"edges": [_number(e) for e in edges], "counts": [int(c) for c in counts]}
    return out


def histogram_edges(factor, *samples):
    """Histogram bin edges shared by every sample of one factor."""
    if factor.circular:
        return np.linspace(0.0, factor.period, HISTOGRAM_BINS + 1)
    pooled = np.concatenate([s[np.isfinite(s)] for s in samples if s is not None])
    low, high = (float(pooled.min()), float(pooled.max())) if pooled.size else (0.0, 1.0)
    if high - low < 1e-12:
        low, high = low - 0.5, high + 0.5
    return np.linspace(low, high, HISTOGRAM_BINS + 1)


def _in_range_share(field_values, augmented_values, factor):
    field_values = field_values[np.isfinite(field_values)]
    augmented_values = augmented_values[np.isfinite(augmented_values)]
    if field_values.size == 0 or augmented_values.size == 0:
        return None
    if factor.circular:
        centre = circular_mean(augmented_values, factor.period)
        if math.isnan(centre):
            return None
        augmented_values = _unwrap(augmented_values, centre, factor.period)
        field_values = _unwrap(field_values, centre, factor.period)
    low, high = np.percentile(augmented_values, list(COVERAGE_RANGE_PERCENTILES))
    return float(np.mean((field_values >= low) & (field_values <= high)))


# ---------------------------------------------------------------- measuring


def _measure_plain(item):
    records, size = item
    return measure_factors(load_images(records, size=size))


def _measure_augmented(item):
    records, size, recipe, generators, draws = item
    images = load_images(records, size=size)
    original = measure_factors(images)
    augmented, labels = augment_batch(images, recipe, generators, [r.label for r in records], draws)
    return original, measure_factors(augmented), labels


def _concat(parts):
    return {name: np.concatenate([p[name] for p in parts]) if parts else np.empty(0)
            for name in FACTORS}


def _chunks(records, size=_CHUNK):
    return [records[i:i + size] for i in range(0, len(records), size)]


def _measure_records(records, size, workers, quiet, desc):
    parts = parallel_map(_measure_plain, [(chunk, size) for chunk in _chunks(records)],
                         workers=workers, desc=desc, quiet=quiet)
    return _concat(parts)


def _field_records(dataset, field):
    if field is None:
        return dataset.split("field")
    if isinstance(field, Dataset):
        records = field.split("field")
        return records if records else list(field.records)
    return list(field)


# -------------------------------------------------------------- suggestions


def _ratio_range(targets, reference):
    ratios = [t / reference for t in targets if reference > 0 and t > 0 and math.isfinite(t)]
    return min(ratios + [1.0]), max(ratios + [1.0])


def _plausible_factor_range(op, low, high):
    """``[low, high]`` rounded outwards to 0.01, inside the reader's bound and `PLAUSIBLE_FACTOR`.

    Returns the range and whether the cap or the bound cut it.
    """
    cap = PLAUSIBLE_FACTOR[op]
    bound = OP_TABLE[op].bound
    floor_, ceiling = 1.0 / cap, cap
    if bound.minimum is not None:
        floor_ = max(floor_, bound.minimum + (0.01 if bound.exclusive_minimum else 0.0))
    if bound.maximum is not None:
        ceiling = min(ceiling, bound.maximum)
    rounded_low, rounded_high = math.floor(low * 100) / 100, math.ceil(high * 100) / 100
    # The cap's own ends rounded inwards, so the suggestion stays inside it.
    floor_, ceiling = math.ceil(floor_ * 100) / 100, math.floor(ceiling * 100) / 100
    capped = rounded_low < floor_ or rounded_high > ceiling
    return [max(rounded_low, floor_), min(rounded_high, ceiling)], capped


def _class_centres(values, labels, factor):
    centres = []
    for name in sorted(set(labels)):
        v = values[(labels == name) & np.isfinite(values)]
        if v.size:
            centres.append(circular_mean(v, factor.period) if factor.circular else float(np.median(v)))
    return [c for c in centres if math.isfinite(c)]


def _blur_sigma_for(ratio, sample_images):
    """Smallest blur sigma whose median sharpness ratio falls to ``ratio``."""
    from augplan.measure.factors import sharpness

    base = sharpness(sample_images)
    for sigma in (0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 4.0):
        blurred = apply_op_batch(sample_images, "blur", {"sigma": sigma}, None)
        if np.median(sharpness(blurred) / np.maximum(base, 1e-12)) <= ratio:
            return sigma
    return 4.0


def _suggestion(name, original, labels, field_values, flagged, poorly_covered, sample_images):
    factor = FACTORS[name]
    values = original[name]
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return None, None
    why = []
    if flagged:
        why.append("it predicts the class in the training data")
    if poorly_covered:
        why.append("the augmented training set misses part of the field")
    reason = f"{name}: " + " and ".join(why)
    field_finite = None if field_values is None else field_values[np.isfinite(field_values)]
    use_field = poorly_covered and field_finite is not None and field_finite.size > 0
    centres = _class_centres(values, labels, factor) if flagged else []

    if factor.circular:
        centre = circular_mean(finite, factor.period)
        ends = [0.0]
        if centres:
            spread = max(abs(_unwrap(a, b, factor.period) - b) for a in centres for b in centres)
            ends += [-spread, spread]
        if use_field:
            ends += list(np.percentile(_unwrap(field_finite, centre, factor.period), [1, 99]) - centre)
        limit = factor.period / 2.0
        low, high = max(min(ends), -limit), min(max(ends), limit)
        op = "hue" if name == "hue" else "rotate"
        suggestion = {"factor": name, "op": op, "parameter": "degrees",
                      "range": [math.floor(low), math.ceil(high)], "reason": reason}
        if name == "hue":
            suggestion["warning"] = ("hue may carry the class itself (ripeness, rust, stain): "
                                     "confirm with `augplan check` before adopting it")
        else:
            suggestion["warning"] = ("if orientation defines a class (arrows, laterality, "
                                     "digits), rotation changes labels: confirm with `augplan check`")
        return suggestion, None

    reference = float(np.median(finite))
    targets = []
    if centres:
        targets += [a / b * reference for a in centres for b in centres if b > 0]
    if use_field:
        targets += list(np.percentile(field_finite, [1, 99]))

    if name in ("brightness", "contrast", "colourfulness", "area"):
        low, high = _ratio_range(targets, reference)
        op = {"brightness": "brightness", "contrast": "contrast", "colourfulness": "saturation",
              "area": "zoom"}[name]
        if name == "area":
            # Zoom scales lengths; the foreground area goes with its square.
            low, high = math.sqrt(low), math.sqrt(high)
        (low, high), capped = _plausible_factor_range(op, low, high)
        if capped:
            reason += (f"; capped at the plausible {low:g} to {high:g} (PLAUSIBLE_FACTOR): a wider gap "
                       "is not one a single range should span")
        suggestion = {"factor": name, "op": op, "parameter": "factor", "range": [low, high], "reason": reason}
        if name == "colourfulness":
            suggestion["warning"] = ("saturation changes can erase a colour cue that defines a "
                                     "class: confirm with `augplan check`")
        return suggestion, None
    if name in ("centroid_x", "centroid_y"):
        offsets = [t - reference for t in targets] + [0.0]
        low, high = max(min(offsets), -0.5), min(max(offsets), 0.5)
        return {"factor": name, "op": "shift", "parameter": "fraction",
                "range": [math.floor(low * 100) / 100, math.ceil(high * 100) / 100],
                "reason": reason}, None
    if name == "sharpness":
        lowest = min(targets) if targets else reference
        if lowest >= reference:
            return None, (f"The field holds sharper images than training ({name}); no transform "
                          "sharpens, so the gap stays open.")
        sigma = _blur_sigma_for(lowest / reference, sample_images)
        return {"factor": name, "op": "blur", "parameter": "sigma", "range": [0.0, sigma],
                "reason": reason}, None
    return None, f"No transform targets {name} directly; it is reported for information."


# ----------------------------------------------------------------- analysis


@dataclass(frozen=True)
class CoverageSamples:
    """Factor values of every set the coverage analysis compares (numbers only, no images).

    Attributes
    ----------
    train : list of ImageRecord
    original, augmented : dict of str -> numpy.ndarray
        Per factor, the values on the original training images and on the
        augmented training set (the originals followed by their copies).
    train_labels, augmented_labels : numpy.ndarray of str
    groups : numpy.ndarray of int
        Source training image of each augmented-set row.
    val_records, field_records : list of ImageRecord
    val, field : dict of str -> numpy.ndarray or None
        Factor values of the validation split and the field sample (None when absent).
    field_labelled : bool
    copies : int
        Augmented copies per training image (the recipe's ``copies``).
    """

    train: list
    original: dict
    augmented: dict
    train_labels: np.ndarray
    augmented_labels: np.ndarray
    groups: np.ndarray
    val_records: list
    val: dict | None
    field_records: list
    field: dict | None
    field_labelled: bool
    copies: int

    def audit_sets(self):
        """The sets of the shortcut audit: ``{name: (values, labels, groups)}``."""
        sets = {"original": (self.original, self.train_labels, None),
                "augmented": (self.augmented, self.augmented_labels, self.groups)}
        if self.val is not None:
            sets["val"] = (self.val, np.array([r.label for r in self.val_records]), None)
        if self.field_labelled:
            sets["field"] = (self.field, np.array([r.label for r in self.field_records]), None)
        return sets


def measure_coverage_samples(dataset, recipe, *, rng, field=None, size=64, workers=1, quiet=True):
    """Measure every factor on the original, augmented, validation and field images.

    Parameters are those of `analyse_coverage`; ``rng`` draws the
    augmentations alone. The augmented set holds each training image and
    ``recipe.copies`` augmented copies of it; each image's draws come from a
    stream keyed by its position in the training split, so they do not depend
    on how the images are chunked or which worker draws them.

    Returns
    -------
    CoverageSamples
    """
    copies = recipe.copies
    train = dataset.split("train")
    if not train:
        raise BadInputError(f"{dataset.root}: no training images found (expected train/<class>/*)")
    root = stream_root(rng)
    generators = [keyed_generator(root, index) for index in range(len(train))]
    items = [(train[i:i + _CHUNK], size, recipe, generators[i:i + _CHUNK], int(copies))
             for i in range(0, len(train), _CHUNK)]
    parts = parallel_map(_measure_augmented, items, workers=workers,
                         desc="augmenting and measuring", quiet=quiet)
    original = _concat([p[0] for p in parts])
    copies_only = _concat([p[1] for p in parts])
    train_labels = np.array([r.label for r in train])
    copy_labels = np.array([label for p in parts for label in p[2]])
    val_records = dataset.split("val")
    field_records = _field_records(dataset, field)
    return CoverageSamples(
        train=train, original=original,
        augmented={name: np.concatenate([original[name], copies_only[name]]) for name in FACTORS},
        train_labels=train_labels, augmented_labels=np.concatenate([train_labels, copy_labels]),
        groups=np.concatenate([np.arange(len(train)), np.repeat(np.arange(len(train)), copies)]),
        val_records=val_records,
        val=_measure_records(val_records, size, workers, quiet, "measuring val") if val_records else None,
        field_records=field_records,
        field=(_measure_records(field_records, size, workers, quiet, "measuring field")
               if field_records else None),
        field_labelled=bool(field_records) and all(r.label is not None for r in field_records),
        copies=int(copies))


def _percentile_span():
    """`COVERAGE_RANGE_PERCENTILES` as the messages write it ("1-99%")."""
    low, high = COVERAGE_RANGE_PERCENTILES
    return f"{low:g}-{high:g}%"


def _widening(samples, messages):
    """Per-factor summaries (original, augmented, field) and the poorly covered factors."""
    factors_out, poorly_covered = {}, []
    for name, factor in FACTORS.items():
        f_values = None if samples.field is None else samples.field[name]
        edges = histogram_edges(factor, samples.original[name], samples.augmented[name], f_values)
        entry = {"kind": factor.kind, "unit": factor.unit,
                 "original": summarise_factor(samples.original[name], factor, edges),
                 "augmented": summarise_factor(samples.augmented[name], factor, edges)}
        if factor.circular:
            entry["period"] = factor.period
        if entry["original"]["n"] == 0:
            entry["note"] = factor.undefined_note
            messages.append(f"{name}: {factor.undefined_note}; none of the training images has a value, "
                            "so it is neither compared nor audited.")
        if f_values is not None:
            share = _in_range_share(f_values, samples.augmented[name], factor)
            entry["field"] = {
                "coverage": _number(share),
                "wasserstein_before": _number(factor_wasserstein(samples.original[name], f_values, factor)),
                "wasserstein_after": _number(factor_wasserstein(samples.augmented[name], f_values, factor)),
                "summary": summarise_factor(f_values, factor, edges),
            }
            if share is not None and share < COVERAGE_FLOOR:
                poorly_covered.append(name)
                messages.append(f"Only {share:.0%} of field images have a {name} inside the "
                                f"augmented training set's {_percentile_span()} range.")
        factors_out[name] = entry
    return factors_out, poorly_covered


def _joint_field_coverage(samples, knn_rng, messages):
    """Naeem et al.'s density and coverage over all factors, before and after augmentation."""
    if samples.field is None:
        messages.append("No field sample: field coverage was not measured.")
        return None
    names = list(FACTORS)
    train_matrix = factor_columns(samples.original, names)
    centre = train_matrix.mean(axis=0)
    scale = train_matrix.std(axis=0)
    scale[scale < 1e-12] = 1.0
    field_matrix = (factor_columns(samples.field, names) - centre) / scale
    if field_matrix.shape[0] <= COVERAGE_NEIGHBOURS:
        messages.append(f"The field sample has {field_matrix.shape[0]} images; density and "
                        f"coverage need more than k={COVERAGE_NEIGHBOURS}.")
        return None
    limit = min(len(samples.train), KNN_LIMIT)
    before = (train_matrix - centre) / scale
    if before.shape[0] > limit:
        before = before[np.sort(knn_rng.choice(before.shape[0], limit, replace=False))]
    field_matrix = field_matrix[:KNN_LIMIT]
    after = (factor_columns(samples.augmented, names) - centre) / scale
    after = after[np.sort(knn_rng.choice(after.shape[0], limit, replace=False))]
    density_before, coverage_before = naeem_density_coverage(field_matrix, before)
    density_after, coverage_after = naeem_density_coverage(field_matrix, after)
    messages.append(
        f"Over all factors together, the training set reaches {coverage_before:.0%} of the "
        f"field's neighbourhoods before augmentation and {coverage_after:.0%} after "
        f"(Naeem coverage, k={COVERAGE_NEIGHBOURS}).")
    return {"density_before": _number(density_before), "coverage_before": _number(coverage_before),
            "density_after": _number(density_after), "coverage_after": _number(coverage_after),
            "k": COVERAGE_NEIGHBOURS, "reference": "field", "sample_size": int(limit)}


def _suggestions(samples, shortcuts, poorly_covered, size, messages):
    """The `Suggestion` rows: a transform and range for each persisting shortcut or poorly covered factor."""
    suggestions, sample_images = [], None
    for name in FACTORS:
        # A shortcut the recipe already breaks needs no further suggestion.
        is_flagged = any(r["factor"] == name and r["flagged"] and r["link"] != "broken" for r in shortcuts)
        if not (is_flagged or name in poorly_covered):
            continue
        if name == "sharpness" and sample_images is None:
            sample_images = load_images(samples.train[:16], size=size)
        suggestion, note = _suggestion(
            name, samples.original, samples.train_labels, None if samples.field is None else samples.field[name],
            is_flagged, name in poorly_covered, sample_images)
        if suggestion is not None:
            suggestions.append(Suggestion.from_json(suggestion))
        if note is not None:
            messages.append(note)
    return suggestions


def analyse_coverage(dataset, recipe, *, rng, field=None, size=64, workers=1, quiet=True):
    """Widening, field coverage, shortcut audit and suggestions for one recipe.

    Parameters
    ----------
    dataset : augplan.data.Dataset
    recipe : augplan.recipe.parse.Recipe
        Its ``copies`` augmented copies of each training image make the
        augmented set, as in training and in ``augplan evaluate``.
    field : list of ImageRecord or Dataset, optional
        The field sample; by default ``dataset.split("field")``. Labelled when
        every record has a label.
    size : int, default 64
        Images are measured at ``size`` x ``size``.
    rng : numpy.random.Generator
        Split once into three children: the augmentation draws (a keyed
        stream per training image, `augplan.seeding`), the kNN subsample and
        the fold shuffles of the shortcut audit.
    workers : int, default 1
    quiet : bool, default True

    Returns
    -------
    augplan.results.CoverageResult
        The ``coverage --json`` document, with the factor values behind it
        in ``samples`` (for `augplan.render.plots`). Each factor carries
        histograms of the original, augmented and field values on shared
        edges, which `augplan.render.plots.factor_grid` draws.

    Raises
    ------
    BadInputError
        No training images.

    Notes
    -----
    Naeem density and coverage are computed on all factors standardised by
    the original training set's mean and standard deviation (angles as
    cosine and sine), with the field as the reference manifold (see
    `naeem_density_coverage`). The augmented set is subsampled to the size
    of the original training set (at most `KNN_LIMIT`) so that before and
    after compare samples of equal size. For angles the Wasserstein distance
    is the circular one (`circular_wasserstein`).
    """
    draws_rng, knn_rng, folds_rng = require_generator(rng).spawn(3)
    samples = measure_coverage_samples(dataset, recipe, rng=draws_rng, field=field, size=size, workers=workers,
                                       quiet=quiet)
    messages = []
    if getattr(dataset, "val_from_train", False):
        messages.append(f"No validation split was given: a stratified split of train "
                        f"(seed {dataset.split_seed}) stands in for it.")
    factors_out, poorly_covered = _widening(samples, messages)
    field_coverage = _joint_field_coverage(samples, knn_rng, messages)
    n_classes = len(dataset.classes) if dataset.classes else len(set(samples.train_labels))
    audit_sets = samples.audit_sets()
    too_few = too_few_to_audit(audit_sets)
    if too_few is not None:
        messages.append(too_few)
    shortcuts = audit_shortcuts(audit_sets, n_classes, rng=folds_rng)
    messages.extend(shortcut_messages(shortcuts, n_classes))
    suggestions = _suggestions(samples, shortcuts, poorly_covered, size, messages)
    return CoverageResult(
        recipe=recipe.name, copies=samples.copies, size=int(size),
        n_images={"train": len(samples.train), "augmented": int(samples.augmented_labels.size),
                  "val": len(samples.val_records), "field": len(samples.field_records)},
        field_labelled=samples.field_labelled, factors=factors_out, field_coverage=field_coverage,
        shortcuts=shortcuts, shortcut_rule=SHORTCUT_RULE,
        val_shares_shortcut=[r["factor"] for r in shortcuts if r["flagged"] and r["val_shares"]],
        messages=messages, suggestions=suggestions,
        samples={"original": samples.original, "augmented": samples.augmented, "field": samples.field})
