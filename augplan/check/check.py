"""Label safety: does a transform keep each image in its class?

Counting how often a classifier's prediction changes on transformed images
does not measure label safety: a small model that never saw rotated images
changes its mind on many of them even where the class is untouched. This
checker uses the geometry of the original images instead. Every class owns a
*region* of feature space, learned from how far its own held-out originals
lie from their class, and a transformed image is judged by where it lands:
in its own region (kept), inside another class's region (moved), or outside
every region (left: nothing in the data can judge it, a person must look).

Method
------
1. The feature model is fitted on original training images only; its
   cross-validated accuracy is reported and a warning is raised when it is
   too weak to judge.
2. Features are standardised and reduced by PCA to keep 95% of the variance.
   For an image ``x`` and a class ``c``, ``d_c(x)`` is the mean Euclidean
   distance from ``x`` to its ``k = 5`` nearest originals of ``c`` (fewer
   when the class is small), never counting ``x``'s own source original.
3. Typicality thresholds are learned on held-out originals, leave-one-out
   (k-fold with one image per fold): ``t_c`` is the 95th percentile of
   ``d_c`` over the originals of ``c``. The ratio ``r_c = d_c / t_c`` is at
   most 1 inside class ``c``'s region.
4. A class change needs two witnesses: an image of expected class ``A``
   *moves* to ``B != A`` only when the classifier's most probable class is
   ``B`` and ``B``'s region holds it (``r_B <= 1``). Otherwise it is *kept*
   when some region holds it and either the classifier still picks ``A`` or
   ``A``'s region holds it; else it is *outside*. A broad class whose region
   overlaps others therefore cannot swallow images the classifier places
   elsewhere, and a classifier that changes its mind on an image no region
   confirms cannot call it moved. The held-out originals themselves (the
   identity transform) give each class's baseline rates of moving and of
   landing outside.
5. Each transform runs with probability 1 on every sampled original of each
   class in its scope, at each value of `augplan.transforms.magnitude_grid`
   (a flip once). The expected class is ``relabel.get(A, A)``.

Decision rule
-------------
A class *breaks* when the Wilson 95% lower bound of the share of its
transformed images that move to another class (step 4) exceeds that class's
held-out baseline by more than 0.10; otherwise it is *unverified* when the
Wilson 95% lower bound of the share that lands outside exceeds its baseline
by more than 0.10; otherwise it is *safe*. When the feature model is weak
(not clearly better than chance) nothing is called safe: safe becomes
unverified. A transform takes the worst verdict of its classes (breaks >
unverified > safe), the rule applied both to the rates pooled over the
magnitude grid and at each grid value (a range that breaks labels at one end
breaks them in that share of draws). The safe
limit applies the same rule at each grid value separately (worst class at
that value) and reports the widest run of consecutive safe grid values
around the identity magnitude (or the grid value nearest to it).

References
----------
.. [1] E. B. Wilson, "Probable inference, the law of succession, and
   statistical inference", JASA 22(158), 209-212, 1927.
.. [2] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
   classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
"""

from __future__ import annotations

import functools
import hashlib
import math
from pathlib import Path

import numpy as np
from scipy.spatial.distance import cdist
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler

from augplan.errors import BadInputError
from augplan.thresholds import (BREAK_MARGIN, CONFIDENCE, MIN_IMAGES_PER_CLASS, PCA_VARIANCE_KEPT, REGION_NEIGHBOURS,
                                REGION_PERCENTILE, beyond_chance)
from augplan.parallel import parallel_map
from augplan.results import CheckResult

__all__ = [
    "DECISION_RULE",
    "check_recipe",
    "class_distances",
    "locate",
    "class_verdict",
    "safe_limit",
]

# The numbers of the rule live in augplan.thresholds, with their sources.
NEIGHBOURS = REGION_NEIGHBOURS
TYPICAL_PERCENTILE = REGION_PERCENTILE
MARGIN = BREAK_MARGIN
VARIANCE_KEPT = PCA_VARIANCE_KEPT
MIN_PER_CLASS = MIN_IMAGES_PER_CLASS
EVIDENCE_IMAGES = 8
OUTSIDE = -1
_RANK = {"safe": 0, "unverified": 1, "breaks": 2}

DECISION_RULE = (
    f"A class breaks when the Wilson {CONFIDENCE:.0%} lower bound of the share of its transformed "
    "images that land in another class's region (and are classified as that class) exceeds "
    f"its held-out baseline by more than {BREAK_MARGIN:.2f}, is unverified when the same holds for the "
    "share that lands outside every "
    "class's region, and is safe otherwise (unverified when the feature model is weak); the "
    "rule is applied to the rates pooled over the magnitude range and at each magnitude of it, "
    "and a transform takes its worst class verdict. A lighting move into a class that lighting "
    "alone singles out in the training data, while structure also separates the classes, is "
    "unverified (a possible shortcut) unless a labelled field sample confirms lighting as the cue."
)


# --------------------------------------------------------------------------
# geometry


def class_distances(query, reference, reference_labels, n_classes, *, k=NEIGHBOURS,
                    exclude=None):
    """Mean distance from each query point to its ``k`` nearest points of each class.

    Parameters
    ----------
    query : numpy.ndarray, shape (M, D)
    reference : numpy.ndarray, shape (N, D)
    reference_labels : numpy.ndarray of int, shape (N,)
        Class index ``0 .. n_classes - 1`` of each reference point.
    n_classes : int
    k : int, default 5
        Neighbours averaged. Class ``c`` uses ``min(k, n_c - 1)`` so that a
        query with its source excluded and one without see the same count.
    exclude : numpy.ndarray of int, shape (M,), optional
        Reference index to leave out for each query (its source image), or
        -1 for none.

    Returns
    -------
    numpy.ndarray of float64, shape (M, n_classes)

    References
    ----------
    .. [1] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
       classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
    """
    query = np.asarray(query, dtype=np.float64)
    reference = np.asarray(reference, dtype=np.float64)
    reference_labels = np.asarray(reference_labels)
    if query.ndim != 2 or reference.ndim != 2 or query.shape[1] != reference.shape[1]:
        raise ValueError(f"query and reference must be 2-D with equal widths; "
                         f"got {query.shape} and {reference.shape}")
    # cdist rather than a BLAS product: its sums run in a fixed order, so the
    # distances do not depend on how many threads a worker process has.
    dist = cdist(query, reference)
    if exclude is not None:
        exclude = np.asarray(exclude)
        rows = np.flatnonzero(exclude >= 0)
        dist[rows, exclude[rows]] = np.inf
    out = np.empty((len(query), n_classes))
    for c in range(n_classes):
        members = dist[:, reference_labels == c]
        if members.shape[1] < 2:
            raise ValueError(f"class {c} has {members.shape[1]} reference points; at least 2 needed")
        kc = min(k, members.shape[1] - 1)
        nearest = np.partition(members, kc - 1, axis=1)[:, :kc]
        out[:, c] = np.sort(nearest, axis=1).mean(axis=1)
    return out


def locate(ratios, probabilities, expected):
    """Destination class of each image, or -1 when nothing in the data vouches for one.

    A class change needs the classifier and the geometry to agree; where
    they disagree, an image keeps its expected class if either of them
    still vouches for it, and is outside otherwise.

    Parameters
    ----------
    ratios : numpy.ndarray, shape (M, C)
        ``r_c = d_c / t_c``; at most 1 inside class ``c``'s region.
    probabilities : numpy.ndarray, shape (M, C)
        Classifier probabilities in the same class order.
    expected : numpy.ndarray of int, shape (M,)
        Class each image should still belong to.

    Returns
    -------
    numpy.ndarray of int, shape (M,)
        With ``b`` the classifier's most probable class:

        - ``b`` when ``b``'s region holds the image (both agree);
        - else ``expected`` when some region holds the image and either the
          classifier picks ``expected`` or ``expected``'s region holds it;
        - else -1 (outside): no region holds it, or the classifier points to
          a class whose region does not hold it while the expected class's
          region does not either.
    """
    ratios = np.asarray(ratios)
    expected = np.asarray(expected)
    rows = np.arange(len(ratios))
    best = np.argmax(probabilities, axis=1)
    inside = ratios <= 1.0
    in_any = inside.any(axis=1)
    agree = inside[rows, best]
    keeps = in_any & ((best == expected) | inside[rows, expected])
    return np.where(agree, best, np.where(keeps, expected, OUTSIDE))


def class_verdict(moved, left, n, baseline_change, baseline_leave, margin=MARGIN, *, weak=False):
    """Verdict of one class from its counts (the module's decision rule).

    Parameters
    ----------
    moved, left, n : int
        Transformed images that landed in another class's region, outside
        every region, and in total.
    baseline_change, baseline_leave : float
        The same shares for the class's held-out originals.
    margin : float, default 0.10
    weak : bool, default False
        The feature model is too weak to vouch for anything: a class that
        would be safe is unverified.

    Returns
    -------
    str
        ``"breaks"``, ``"unverified"`` or ``"safe"``.
    """
    from augplan.measure.stats import wilson_interval

    if n == 0:
        return "safe"
    if wilson_interval(moved, n)[0] > baseline_change + margin:
        return "breaks"
    if wilson_interval(left, n)[0] > baseline_leave + margin or weak:
        return "unverified"
    return "safe"


def safe_limit(values, verdicts, identity):
    """Widest run of consecutive safe grid values around the identity magnitude.

    Parameters
    ----------
    values : sequence of float
        Ascending grid values.
    verdicts : sequence of str
        Verdict at each value.
    identity : float
        Magnitude that leaves images unchanged (0 or 1).

    Returns
    -------
    list of float or None
        ``[low, high]``, starting from the grid value nearest ``identity``;
        None when that value is not safe or the grid is empty.
    """
    values = list(values)
    if not values:
        return None
    start = int(np.argmin([abs(v - identity) for v in values]))
    if verdicts[start] != "safe":
        return None
    low = high = start
    while low > 0 and verdicts[low - 1] == "safe":
        low -= 1
    while high < len(values) - 1 and verdicts[high + 1] == "safe":
        high += 1
    return [float(values[low]), float(values[high])]


class _Geometry:
    """Standardise + PCA projection with the reference points and thresholds."""

    def __init__(self, features, labels, n_classes, random_state):
        self.scaler = StandardScaler().fit(features)
        scaled = self.scaler.transform(features)
        n_components = VARIANCE_KEPT if min(scaled.shape) > 1 else None
        self.pca = PCA(n_components=n_components, svd_solver="full", random_state=random_state)
        self.reference = self.pca.fit_transform(scaled).astype(np.float64)
        self.labels = labels
        self.n_classes = n_classes
        held_out = class_distances(self.reference, self.reference, labels, n_classes,
                                   exclude=np.arange(len(labels)))
        self.thresholds = np.array([
            np.percentile(held_out[labels == c, c], TYPICAL_PERCENTILE) for c in range(n_classes)])
        # A class whose originals coincide has threshold 0; keep the ratio finite.
        self.thresholds = np.maximum(self.thresholds, 1e-12)
        self.held_out_ratios = held_out / self.thresholds

    def ratios(self, features, sources):
        points = self.pca.transform(self.scaler.transform(features))
        distances = class_distances(points, self.reference, self.labels, self.n_classes,
                                    exclude=sources)
        return distances / self.thresholds


# --------------------------------------------------------------------------
# work units


def _probabilities(model, features, classes):
    proba = np.asarray(model.predict_proba_features(features), dtype=np.float64)
    order = [list(model.classes_).index(name) for name in classes]
    return proba[:, order]


# The checked sample, decoded, in the process that last needed it: every
# work unit of one check reads the same images, so a worker decodes them once
# rather than once per unit. Keyed by the images' hashes and side, so another
# check (or another data set) never sees a stale sample.
_DECODED_SAMPLE = {}


def _sample_key(records, size):
    digest = hashlib.sha256(str(int(size)).encode())
    for record in records:
        digest.update(record.sha256.encode())
    return digest.hexdigest()


def _decoded_sample(context):
    """The checked images, decoded from the records' paths or carried bytes."""
    from augplan.data.dataset import load_images

    key = context["sample_key"]
    images = _DECODED_SAMPLE.get(key)
    if images is None:
        images = load_images(context["records"], size=context["size"])
        _DECODED_SAMPLE.clear()
        _DECODED_SAMPLE[key] = images
    return images


def _run_unit(context, unit):
    """Transform, featurise and locate the in-scope images of one (transform, magnitude)."""
    from augplan.augment.transforms import apply_op_batch, params_at

    transform_index, magnitude, rng = unit
    transform = context["transforms"][transform_index]
    sources = context["scope"][transform_index]
    images = _decoded_sample(context)
    params = params_at(transform, 0.0 if magnitude is None else magnitude, context["fill"])
    moved_images = apply_op_batch(images[sources], transform.op, params, rng)
    model = context["model"]
    features = model.featurize(moved_images)
    proba = _probabilities(model, features, context["classes"])
    ratios = context["geometry"].ratios(features, sources)
    expected = context["expected"][transform_index][context["labels"][sources]]
    destinations = locate(ratios, proba, expected)
    examples = []
    if context["evidence"]:
        expected = context["expected"][transform_index]
        labels = context["labels"]
        off = [row for row, src in enumerate(sources) if destinations[row] != expected[labels[src]]]
        # Moved images first (the clearest evidence of a broken label), then
        # the classes taken in turn so one class does not fill the sheet.
        seen = {}
        rank = {}
        for row in off:
            key = (destinations[row] == OUTSIDE, labels[sources[row]])
            rank[row] = seen.get(key, 0)
            seen[key] = rank[row] + 1
        off.sort(key=lambda row: (destinations[row] == OUTSIDE, rank[row], row))
        examples = [(int(sources[row]), int(destinations[row]), magnitude)
                    for row in off[:EVIDENCE_IMAGES]]
    return destinations, examples


# --------------------------------------------------------------------------
# the checker


def _sample_training(dataset, sample, rng):
    records = sorted(dataset.split("train"), key=lambda record: record.relpath)
    classes = tuple(dataset.classes)
    by_class = {name: [] for name in classes}
    for record in records:
        if record.label in by_class:
            by_class[record.label].append(record)
    chosen, labels = [], []
    for index, name in enumerate(classes):
        group = by_class[name]
        if sample is not None and len(group) > sample:
            picks = np.sort(rng.choice(len(group), size=sample, replace=False))
            group = [group[i] for i in picks]
        chosen.extend(group)
        labels.extend([index] * len(group))
    return chosen, np.array(labels, dtype=np.int64), classes


def _rate(count, n):
    return round(count / n, 4) if n else 0.0


def _interval(count, n):
    from augplan.measure.stats import wilson_interval

    low, high = wilson_interval(count, n)
    return [round(low, 4), round(high, 4)]


def _json_params(transform):
    params = {}
    for key, value in transform.params.items():
        params[key] = [float(v) for v in value] if isinstance(value, (tuple, list)) else value
    return params


def _suggestion(transform, checked, verdicts, flows, classes):
    """Relabel for swap cycles among breaking classes; `only` for the safe ones."""
    breaking = [a for a in checked if verdicts[a] == "breaks"]
    main = {}
    for a in breaking:
        row = flows[a]
        if row.sum() > 0:
            main[a] = int(np.argmax(row))
    in_cycle = set()
    for a in main:
        path, node = [], a
        while node in main and node not in path:
            path.append(node)
            node = main[node]
        if node in path:
            in_cycle.update(path[path.index(node):])
    suggestion = {}
    if in_cycle:
        relabel = dict(transform.relabel or {})
        relabel.update({classes[a]: classes[main[a]] for a in sorted(in_cycle)})
        suggestion["relabel"] = dict(sorted(relabel.items()))
    safe = [a for a in checked if verdicts[a] == "safe"]
    unresolved = [a for a in checked if verdicts[a] != "safe" and a not in in_cycle]
    if unresolved and (safe or in_cycle):
        suggestion["only"] = sorted(classes[a] for a in set(safe) | in_cycle)
    return suggestion or None


_EVIDENCE_CELL = 96


# Short enough to fit under the smallest evidence cell (64 pixels at 12 points).
_MAGNITUDE_FORMATS = {"degrees": "{:+.3g}\u00b0", "factor": "\u00d7{:.3g}", "sigma": "\u03c3 {:.3g}",
                      "fraction": "shift {:+.2g}"}


def _magnitude_caption(transform, magnitude):
    """``+15°``, ``×1.2``, ``σ 0.02``: the magnitude a pair of an evidence sheet shows."""
    from augplan.augment.transforms import OPS

    field = OPS[transform.op].magnitude
    if field is None or magnitude is None:
        return "flipped" if transform.op == "flip" else transform.op
    return _MAGNITUDE_FORMATS.get(field, field + " {:.3g}").format(magnitude)


def _write_evidence(evidence_dir, index, transform, verdict, examples, records, labels, classes, fill, seed):
    """Contact sheet of moved and outside images: one row per image, original then transformed.

    The pair is drawn from the image file at its own aspect ratio (the check
    itself ran on the squares the proxy model reads), with the transform at
    the magnitude that moved it, captioned with that magnitude.
    """
    from augplan.augment.transforms import OPS, params_at
    from augplan.data.dataset import read_record
    from augplan.render.sheets import contact_sheet, save_png

    function = OPS[transform.op].function
    originals = [read_record(records[source], max_side=_EVIDENCE_CELL) for source, _, _ in examples]
    # Never enlarged past the largest image shown: a small image keeps its own pixels.
    cell = max(8, min(_EVIDENCE_CELL, max(max(image.shape[:2]) for image in originals)))
    rows, row_labels, captions = [], [], []
    draw_rngs = np.random.default_rng([seed, index]).spawn(len(examples))
    for (source, destination, magnitude), original, rng in zip(examples, originals, draw_rngs):
        params = params_at(transform, 0.0 if magnitude is None else magnitude, fill)
        target = "outside" if destination == OUTSIDE else classes[destination]
        rows.append([original, function(original, params, rng)])
        row_labels.append(f"{classes[labels[source]]} -> {target}")
        captions.append(["", _magnitude_caption(transform, magnitude)])
    sheet = contact_sheet(rows, row_labels, column_labels=["original", "transformed"], cell=cell,
                          title=f"transform {index} ({transform.op}): {verdict}", captions=captions)
    path = Path(evidence_dir) / f"transform-{index:02d}-{transform.op}.png"
    save_png(sheet, path)
    return str(path)


# The lighting factor each lighting op changes (augplan.factors names). When
# such a transform moves images into a class that this factor alone singles
# out, while the two classes also differ in structure that lighting does not
# touch, the proxy model may be following a lighting shortcut of the data
# rather than the label. Hue, saturation and geometric moves are not excused
# this way: colour, laterality and scale often define a class (see the
# cautions), so they keep their verdict.
LIGHTING_OP_FACTORS = {"brightness": ("brightness",), "contrast": ("contrast",)}


def _separable_by_structure(images, labels, first, second, seed):
    """Whether two classes differ in lighting-blind gradient structure alone.

    Uses only the block-normalised oriented-gradient histograms of
    `augplan.features.image_features` (Dalal & Triggs 2005), which a change
    of exposure or contrast barely moves; separable means a cross-validated
    balanced accuracy of at least 0.9 between the two classes.
    """
    from augplan.measure.shortcuts import shortcut_scores
    from augplan.measure.features import FEATURE_BLOCKS, image_features

    pair = np.isin(labels, [first, second])
    gradients = image_features(images[pair])[:, FEATURE_BLOCKS["orientation"]]
    overall, _ = shortcut_scores(gradients, labels[pair], seed=seed)
    return overall is not None and overall >= 0.9


def _singled_out(images, labels, classes, factor, seed):
    """One-vs-rest cross-validated balanced accuracy of each class from one factor."""
    from augplan.measure.shortcuts import factor_columns, shortcut_scores
    from augplan.measure.factors import FACTORS

    values = {factor: FACTORS[factor].function(images)}
    names = np.array([classes[c] for c in labels])
    return shortcut_scores(factor_columns(values, [factor]), names, seed=seed)[1]


def _mark_shortcut_moves(report, images, labels, classes, dataset, size, seed):
    """Turn ``breaks`` into ``unverified`` where the move follows a shortcut of the data.

    A lighting transform breaks when its images land in another class B. If
    the lighting factor it changes (`LIGHTING_OP_FACTORS`) singles out B by
    itself in the training data (one-vs-rest balanced accuracy at least
    ``ONE_VS_REST_THRESHOLD``) while the source classes and B also differ in
    lighting-blind gradient structure, lighting is not what defines B: the
    proxy model learned it as B's mark and its verdict cannot tell a changed
    label from a broken shortcut.
    A labelled field sample in which the factor still singles out B settles
    it as a cue, and the verdict stays ``breaks``; otherwise a person must
    look.
    """
    from augplan.thresholds import ONE_VS_REST_THRESHOLD
    from augplan.data.dataset import load_images

    field_records = [r for r in dataset.split("field") if r.label in classes]
    field_images = field_labels = None
    for entry in report:
        if entry["verdict"] != "breaks":
            continue
        destinations = {swap["to"] for swap in entry["swaps"] if swap["rate"] >= 0.1}
        for factor in LIGHTING_OP_FACTORS.get(entry["op"], ()):
            train_scores = _singled_out(images, labels, classes, factor, seed)
            hits = sorted(b for b in destinations if (train_scores.get(b) or 0.0) >= ONE_VS_REST_THRESHOLD
                          and all(_separable_by_structure(images, labels, classes.index(swap["from"]),
                                                          classes.index(b), seed)
                                  for swap in entry["swaps"] if swap["to"] == b and swap["rate"] >= 0.1))
            if not hits:
                continue
            field_scores = {}
            if field_records and len({r.label for r in field_records}) >= 2:
                if field_images is None:
                    field_images = load_images(field_records, size=size)
                    field_labels = np.array([classes.index(r.label) for r in field_records])
                field_scores = _singled_out(field_images, field_labels, classes, factor, seed)
            unconfirmed = [b for b in hits if (field_scores.get(b) or 0.0) < ONE_VS_REST_THRESHOLD]
            if not unconfirmed:
                continue
            target = unconfirmed[0]
            entry["verdict"] = "unverified"
            # A class scope drawn from shortcut-driven verdicts would keep the shortcut.
            if entry["suggestion"] and "only" in entry["suggestion"]:
                entry["suggestion"] = None
            entry["shortcut"] = {"factor": factor, "class": target,
                                 "train_score": round(float(train_scores[target]), 4),
                                 "field_score": (round(float(field_scores[target]), 4)
                                                 if field_scores.get(target) is not None else None)}
            entry["note"] = (f"images move to {target}, which {factor} alone singles out in the training "
                             f"data (one-vs-rest {train_scores[target]:.2f}): the proxy model may follow "
                             f"that shortcut rather than the label; a person must look"
                             + ("" if field_scores else ", or a labelled field sample can settle it"))
            break


def check_recipe(dataset, recipe, *, model=None, sample=None, size=64, magnitudes=7, seed=0,
                 workers=1, quiet=True, evidence_dir=None):
    """Check every transform of a recipe for label safety.

    Parameters
    ----------
    dataset : augplan.data.Dataset
        Only its ``train`` split is used.
    recipe : augplan.recipe.Recipe
    model : augplan.measure.model.FeatureModel, optional
        An unfitted model to use instead of the default one.
    sample : int, optional
        At most this many training images per class (drawn with ``seed``).
    size : int, default 64
        Side of the squares images are read at.
    magnitudes : int, default 7
        Grid values per magnitude range (both ends included).
    seed : int, default 0
    workers : int, default 1
        Processes for the (transform, magnitude) work units; results do not
        depend on it.
    quiet : bool, default True
        Hide the progress bar.
    evidence_dir : str or Path, optional
        Folder for a contact sheet of moved and outside images of each
        transform that breaks or is unverified.

    Returns
    -------
    dict
        The ``check --json`` document (docs/architecture.md, "Results"); ``decision_rule``
        states the rule in the module docstring. Beyond the contract fields,
        ``baseline`` holds each class's held-out rates, and each transform
        carries ``n`` (images judged, pooled) and ``magnitudes`` (value,
        verdict, change and leave rate at each grid value).

    Raises
    ------
    BadInputError
        Fewer than two classes with at least 3 training images, an unusable
        ``sample``, ``magnitudes`` or ``evidence_dir``.
    """
    from augplan.data.dataset import load_images
    from augplan.augment.transforms import OPS, magnitude_grid

    if sample is not None and (isinstance(sample, bool) or int(sample) != sample or sample < MIN_PER_CLASS):
        raise BadInputError(f"--sample must be an integer of at least {MIN_PER_CLASS}; got {sample!r}.")
    if isinstance(magnitudes, bool) or int(magnitudes) != magnitudes or magnitudes < 2:
        raise BadInputError(f"magnitudes must be an integer of at least 2; got {magnitudes!r}.")
    if evidence_dir is not None:
        evidence_dir = Path(evidence_dir)
        try:
            evidence_dir.mkdir(parents=True, exist_ok=True)
        except OSError as error:
            raise BadInputError(f"--evidence {evidence_dir}: cannot create the folder ({error}).") from None
    rng = np.random.default_rng(seed)
    sample_rng, unit_root = rng.spawn(2)
    warnings = []

    records, labels, classes = _sample_training(dataset, sample, sample_rng)
    counts = np.bincount(labels, minlength=len(classes))
    small = [classes[c] for c in range(len(classes)) if counts[c] < MIN_PER_CLASS]
    if small:
        warnings.append(f"classes with fewer than {MIN_PER_CLASS} training images have no region "
                        f"and are left out of the check: {', '.join(small)}")
        keep_classes = [c for c in range(len(classes)) if counts[c] >= MIN_PER_CLASS]
        keep = np.isin(labels, keep_classes)
        records = [r for r, k in zip(records, keep) if k]
        remap = {old: new for new, old in enumerate(keep_classes)}
        labels = np.array([remap[c] for c in labels[keep]], dtype=np.int64)
        classes = tuple(classes[c] for c in keep_classes)
        counts = np.bincount(labels, minlength=len(classes))
    if len(classes) < 2:
        raise BadInputError(f"{dataset.root}: the label check needs at least two classes with "
                            f"{MIN_PER_CLASS} or more training images each; found {len(classes)}.")
    few = [classes[c] for c in range(len(classes)) if counts[c] < 20]
    if few:
        warnings.append(f"classes with fewer than 20 training images give wide intervals: {', '.join(few)}")

    images = load_images(records, size=size)
    label_names = [classes[c] for c in labels]
    if model is None:
        from augplan.measure.model import FeatureModel

        model = FeatureModel(random_state=seed)
    features = model.featurize(images)
    model.fit_features(features, np.array(label_names))
    cv_accuracy = float(model.cv_accuracy_)
    chance = float(getattr(model, "chance_", counts.max() / counts.sum()))
    # Fallback when the model does not judge itself: a quarter of the way
    # from chance to perfect (common practice, no source).
    weak = bool(getattr(model, "weak_", cv_accuracy < beyond_chance(chance)))
    if weak:
        warnings.append(f"the feature model is weak (cross-validated accuracy {cv_accuracy:.2f}, "
                        f"chance {chance:.2f}); verdicts are unreliable")

    geometry = _Geometry(features, labels, len(classes), seed)
    base_proba = _probabilities(model, features, classes)
    base_dest = locate(geometry.held_out_ratios, base_proba, labels)
    baseline_change = np.array([np.mean((base_dest[labels == c] != c) & (base_dest[labels == c] != OUTSIDE))
                                for c in range(len(classes))])
    baseline_leave = np.array([np.mean(base_dest[labels == c] == OUTSIDE) for c in range(len(classes))])

    transforms = list(recipe.transforms)
    scope, expected, units, unit_info, shortcuts = [], [], [], [], {}
    for t_index, transform in enumerate(transforms):
        spec = OPS[transform.op]
        checked = [c for c in range(len(classes)) if transform.applies_to(classes[c])]
        scope.append(np.flatnonzero(np.isin(labels, checked)))
        relabel = dict(transform.relabel or {})
        exp = np.array([classes.index(relabel[name]) if relabel.get(name) in classes else c
                        for c, name in enumerate(classes)])
        expected.append(exp)
        if spec.magnitude is None:
            grid, extra = [None], []
        else:
            grid = [float(v) for v in magnitude_grid(transform, int(magnitudes))]
            identity = spec.identity
            extra = ([identity] if grid[0] <= identity <= grid[-1] and
                     not any(math.isclose(v, identity, abs_tol=1e-12) for v in grid) else [])
        for value in grid + extra:
            unit_info.append((t_index, value, value not in extra or value is None))
            # At the identity magnitude the images are the originals, whose
            # held-out destinations are already known (unless a relabel
            # changes what they should be).
            if value is None or not (math.isclose(value, spec.identity, abs_tol=1e-12)
                                     and not transform.relabel):
                units.append((t_index, value))
            else:
                shortcuts[(t_index, value)] = (base_dest[scope[t_index]], [])
    unit_rngs = unit_root.spawn(len(units))
    work = [(t, v, r) for (t, v), r in zip(units, unit_rngs)]
    # Units carry the records (paths, or bytes with --ship-images), never the
    # decoded images; this process's copy serves units run in it.
    context = {"transforms": transforms, "scope": scope, "records": records, "size": size,
               "sample_key": _sample_key(records, size), "fill": recipe.fill,
               "model": model, "classes": classes, "geometry": geometry,
               "evidence": evidence_dir is not None, "expected": expected, "labels": labels}
    work = [item for item in work if len(scope[item[0]])]
    _DECODED_SAMPLE.clear()
    _DECODED_SAMPLE[context["sample_key"]] = images
    try:
        results = parallel_map(functools.partial(_run_unit, context), work, workers=workers,
                               desc="checking transforms", quiet=quiet)
    finally:
        _DECODED_SAMPLE.clear()
    by_unit = {(t, v): result for (t, v, _), result in zip(work, results)}
    by_unit.update(shortcuts)

    report = []
    for t_index, transform in enumerate(transforms):
        spec = OPS[transform.op]
        sources = scope[t_index]
        exp = expected[t_index]
        checked = sorted(set(labels[sources].tolist()))
        source_labels = labels[sources]
        entry_units = [(v, pooled) for (t, v, pooled) in unit_info if t == t_index]
        flows = {a: np.zeros(len(classes), dtype=np.int64) for a in checked}
        moved_n = dict.fromkeys(checked, 0)
        left_n = dict.fromkeys(checked, 0)
        n_by_class = dict.fromkeys(checked, 0)
        per_magnitude, examples = [], []
        worst_by_class = dict.fromkeys(checked, "safe")
        for value, pooled in entry_units:
            if (t_index, value) not in by_unit:
                continue
            destinations, unit_examples = by_unit[(t_index, value)]
            examples.append(unit_examples)
            worst, m_moved, m_left = "safe", 0, 0
            for a in checked:
                dest = destinations[source_labels == a]
                moved = int(np.sum((dest != exp[a]) & (dest != OUTSIDE)))
                left = int(np.sum(dest == OUTSIDE))
                verdict = class_verdict(moved, left, len(dest), baseline_change[a], baseline_leave[a],
                                        weak=weak)
                worst = max(worst, verdict, key=_RANK.get)
                worst_by_class[a] = max(worst_by_class[a], verdict, key=_RANK.get)
                m_moved, m_left = m_moved + moved, m_left + left
                if pooled:
                    n_by_class[a] += len(dest)
                    moved_n[a] += moved
                    left_n[a] += left
                    for b in dest[(dest != exp[a]) & (dest != OUTSIDE)]:
                        flows[a][b] += 1
            if value is not None:
                per_magnitude.append({"value": value, "verdict": worst,
                                      "change_rate": _rate(m_moved, len(destinations)),
                                      "leave_rate": _rate(m_left, len(destinations))})
        class_entries, verdicts = {}, {}
        for a in checked:
            # Pooled over the range, or at any single magnitude of it: a range
            # that breaks labels at one end breaks them in that share of draws.
            verdicts[a] = max(class_verdict(moved_n[a], left_n[a], n_by_class[a],
                                            baseline_change[a], baseline_leave[a], weak=weak),
                              worst_by_class[a], key=_RANK.get)
            class_entries[classes[a]] = {
                "verdict": verdicts[a],
                "change_rate": _rate(moved_n[a], n_by_class[a]),
                "leave_rate": _rate(left_n[a], n_by_class[a]),
                "n": n_by_class[a],
            }
        overall = max(verdicts.values(), key=_RANK.get, default="safe")
        n_total = sum(n_by_class.values())
        moved_total, left_total = sum(moved_n.values()), sum(left_n.values())
        swaps = [{"from": classes[a], "to": classes[b], "rate": _rate(int(flows[a][b]), n_by_class[a]),
                  "n": int(flows[a][b])}
                 for a in checked for b in range(len(classes)) if flows[a][b] > 0]
        swaps.sort(key=lambda s: (-s["rate"], -s["n"], s["from"], s["to"]))
        limit = None
        if spec.magnitude is not None and per_magnitude:
            per_magnitude.sort(key=lambda m: m["value"])
            limit = safe_limit([m["value"] for m in per_magnitude],
                               [m["verdict"] for m in per_magnitude], spec.identity)
            limit = None if limit is None else [round(v, 4) for v in limit]
            for m in per_magnitude:
                m["value"] = round(m["value"], 4)
        if not checked:
            warnings.append(f"transform {t_index} ({transform.op}) applies to no class of the data; "
                            f"nothing to check")
        sheet = None
        if evidence_dir is not None and overall != "safe":
            picked = _round_robin(examples, EVIDENCE_IMAGES)
            if picked:
                sheet = _write_evidence(evidence_dir, t_index, transform, overall, picked, records,
                                        labels, classes, recipe.fill, seed)
        report.append({
            "index": t_index,
            "op": transform.op,
            "params": _json_params(transform),
            "verdict": overall,
            "change_rate": _rate(moved_total, n_total),
            "change_rate_ci": _interval(moved_total, n_total),
            "leave_rate": _rate(left_total, n_total),
            "leave_rate_ci": _interval(left_total, n_total),
            "n": n_total,
            "swaps": swaps,
            "classes": class_entries,
            "magnitudes": per_magnitude,
            "safe_limit": limit,
            "suggestion": _suggestion(transform, checked, verdicts, flows, classes),
            "evidence_sheet": sheet,
        })

    _mark_shortcut_moves(report, images, labels, classes, dataset, size, seed)

    return CheckResult.from_json({
        "recipe": recipe.name,
        "model": {"cv_accuracy": round(cv_accuracy, 4) if math.isfinite(cv_accuracy) else None,
                  "chance": round(chance, 4), "weak": weak},
        "baseline": {classes[c]: {"change_rate": round(float(baseline_change[c]), 4),
                                  "leave_rate": round(float(baseline_leave[c]), 4)}
                     for c in range(len(classes))},
        "transforms": report,
        "warnings": warnings,
        "decision_rule": DECISION_RULE,
        "n_images": int(len(labels)),
    })


def _round_robin(groups, limit):
    """Take items from each group in turn so a sheet spans the magnitudes."""
    picked, position = [], 0
    while len(picked) < limit and any(position < len(g) for g in groups):
        for group in groups:
            if position < len(group) and len(picked) < limit:
                picked.append(group[position])
        position += 1
    return picked
