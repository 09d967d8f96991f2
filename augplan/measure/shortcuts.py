"""The shortcut audit: does a nuisance factor alone predict the class?

Used by the coverage analysis (on the original, augmented, validation and
field sets) and by the label-safety check (does a lighting move follow a
lighting shortcut?). Scores are cross-validated balanced accuracies [1]_ of a
logistic regression on the factor's columns; `audit_shortcuts` turns them into
the rows of the ``shortcuts`` list of ``coverage --json`` under
`SHORTCUT_RULE`, and `shortcut_messages` into the sentences beside them.

References
----------
.. [1] K. H. Brodersen, C. S. Ong, K. E. Stephan and J. M. Buhmann, "The
   balanced accuracy and its posterior distribution", ICPR 2010.
"""

import warnings

import numpy as np

from augplan.measure.factors import FACTORS
from augplan.measure.stats import wilson_interval
from augplan.parallel import single_threaded
from augplan.results import json_number
from augplan.seeding import require_generator
from augplan.thresholds import (CHANCE_GAP_SHARE, CONFIDENCE, LINK_BROKEN_SHARE, MAX_FOLDS, MIN_AUDIT_IMAGES,
                                ONE_VS_REST_THRESHOLD, beyond_chance)

__all__ = [
    "ALL_FACTORS",
    "SHORTCUT_RULE",
    "shortcut_threshold",
    "fold_splits",
    "shortcut_scores",
    "shortcut_score",
    "factor_columns",
    "audit_shortcuts",
    "val_shared_shortcuts",
    "link_of",
    "shortcut_messages",
    "too_few_to_audit",
]

ALL_FACTORS = "all factors"

SHORTCUT_RULE = (
    "A factor is flagged as a shortcut when its cross-validated balanced accuracy "
    f"on the original training set reaches chance + {CHANCE_GAP_SHARE:g} x (1 - chance), "
    f"{'halfway' if CHANCE_GAP_SHARE == 0.5 else f'{CHANCE_GAP_SHARE:.0%} of the way'} from "
    f"chance to perfect ({beyond_chance(0.5):g} for two classes), or, with more than two classes, when "
    "it tells one class from the rest with a one-vs-rest balanced accuracy of at "
    f"least {ONE_VS_REST_THRESHOLD:g}; it persists when the augmented training set still meets the same "
    "test. The recipe breaks the link only when the upper end of the "
    f"{CONFIDENCE:.0%} Wilson interval of the augmented score (the training images as the unit) lies "
    f"within {LINK_BROKEN_SHARE:g} x (1 - chance) of chance ({beyond_chance(0.5, LINK_BROKEN_SHARE):g} "
    "for two classes; for a factor that singles out one class, its one-vs-rest score against 0.5); "
    "a score between the two only weakens the link. The validation split shares it when val meets it. "
    "When a labelled "
    "field sample also meets the test, the factor is a cue that defines the class "
    "there and is not flagged. The all-factors "
    "row is for information only and never flagged: classes may differ in colour "
    "or shape legitimately."
)


#: Most classes the shortcut model fits by Newton steps; more are fitted by
#: L-BFGS (chosen here, no source).
_NEWTON_CLASSES = 20


def shortcut_threshold(n_classes):
    """Balanced accuracy at which a factor counts as a shortcut (see SHORTCUT_RULE)."""
    return beyond_chance(1.0 / n_classes)


def _fold_seed(rng):
    """The integer scikit-learn's fold shuffle takes as ``random_state``, drawn from ``rng``."""
    # scikit-learn's splitters take an int below 2**32 (or a legacy RandomState), not a Generator.
    return int(require_generator(rng).integers(2**32))


def fold_splits(labels, *, rng, groups=None, folds=MAX_FOLDS):
    """The cross-validation folds `shortcut_scores` uses, as a list of (train, test) index arrays.

    They depend on the labels, groups and ``rng`` alone, never on the
    features, so an audit of many factors on one set computes them once
    (assigning groups to folds is the costly part on large sets). None when
    there are fewer than two classes or the smallest class has fewer than
    two images (or groups).

    Parameters
    ----------
    labels : sequence of str
    rng : numpy.random.Generator
        Draws the seed of the fold shuffle.
    groups : array_like of int, optional
    folds : int, default MAX_FOLDS

    Returns
    -------
    list of (numpy.ndarray, numpy.ndarray) or None
    """
    return _folds(labels, groups, _fold_seed(rng), folds)


def _folds(labels, groups, random_state, folds):
    """`fold_splits` with the shuffle's integer seed given."""
    from sklearn.model_selection import StratifiedGroupKFold, StratifiedKFold

    labels = np.asarray(labels)
    names, counts = np.unique(labels, return_counts=True)
    if names.size < 2:
        return None
    if groups is not None:
        # A class's smallest number of distinct source images bounds the folds.
        smallest = min(np.unique(np.asarray(groups)[labels == name]).size for name in names)
    else:
        smallest = int(counts.min())
    n_splits = min(folds, smallest)
    if n_splits < 2:
        return None
    if groups is None:
        splitter = StratifiedKFold(n_splits=n_splits, shuffle=True, random_state=random_state)
    else:
        splitter = StratifiedGroupKFold(n_splits=n_splits, shuffle=True, random_state=random_state)
    return list(splitter.split(np.zeros((labels.size, 1)), labels, groups))


def shortcut_scores(features, labels, *, rng=None, groups=None, folds=MAX_FOLDS, splits=None):
    """Cross-validated balanced accuracy of predicting ``labels`` from ``features``.

    Parameters
    ----------
    features : array_like, shape (N, D)
    labels : sequence of str, length N
    groups : array_like of int, optional
        Source image of each row; rows of one group stay in one fold, so an
        augmented copy is never scored by a model fitted on its original.
    rng : numpy.random.Generator
        Draws the fold shuffle; required unless ``splits`` is given.
    folds : int
        At most this many folds; fewer when the smallest class is smaller.
    splits : list of (train, test) index arrays, optional
        The folds from `fold_splits` for these labels, groups and folds,
        computed once for several factors of one set; computed here (from
        ``rng``) when not given.

    Returns
    -------
    (float or None, dict of str -> float)
        The balanced accuracy [1]_ of out-of-fold predictions of a logistic
        regression (L2, C=1) on standardised features, and per class the
        balanced accuracy of "this class or not" read from the same
        predictions (one-vs-rest). ``(None, {})`` when there are fewer than
        two classes or fewer than two images in the smallest class.

    References
    ----------
    .. [1] K. H. Brodersen et al., "The balanced accuracy and its posterior
       distribution", ICPR 2010.
    """
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import cross_val_predict
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    features = np.asarray(features, dtype=np.float64)
    labels = np.asarray(labels)
    if splits is None:
        splits = fold_splits(labels, rng=rng, groups=groups, folds=folds)
    if splits is None:
        return None, {}
    # Newton steps converge in a handful of iterations on a few columns,
    # where quasi-Newton solvers spend hundreds of cheap ones; but a Newton
    # step builds a Hessian of ((columns + 1) x classes)^2 entries per image,
    # the square of the classes, so many classes take L-BFGS, whose steps
    # cost (columns + 1) x classes per image.
    solver = "newton-cholesky" if np.unique(labels).size <= _NEWTON_CLASSES else "lbfgs"
    model = make_pipeline(StandardScaler(), LogisticRegression(solver=solver, max_iter=200))
    # One BLAS thread: the solver's Hessian products on a few thousand rows
    # cross OpenBLAS's threading threshold, and on a shared machine the pool's
    # threads then spin against each other. Measured: coverage's audit at
    # 5,000 images of 64 px spent 163 s of 260 in those products, against
    # 2 s at 2,000 images (see augplan.parallel.single_threaded).
    with single_threaded(), warnings.catch_warnings():
        # Perfectly separated classes stop the solver at max_iter; the
        # predictions are still the separating ones.
        warnings.simplefilter("ignore")
        predicted = cross_val_predict(model, features, labels, cv=splits)
    return _balanced_accuracies(labels, predicted)


def _balanced_accuracies(labels, predicted):
    """Balanced accuracy overall and one-vs-rest per class, from one confusion matrix.

    The values of ``sklearn.metrics.balanced_accuracy_score`` (mean recall
    over the true classes; one-vs-rest, the mean of the two recalls of
    "this class or not"), computed from one count of (true, predicted)
    pairs rather than one call per class.
    """
    names, true = np.unique(labels, return_inverse=True)
    guess = np.searchsorted(names, predicted)
    k = names.size
    counts = np.bincount(true * k + guess, minlength=k * k).reshape(k, k)
    hits = np.diag(counts)
    support = counts.sum(axis=1)
    overall = float(np.mean(hits / support))
    named = counts.sum(axis=0)
    rest = labels.size - support
    # "Not this class" is recalled when neither the truth nor the guess is the class.
    rest_recall = (rest - (named - hits)) / rest
    one_vs_rest = (rest_recall + hits / support) / 2
    return overall, {str(name): float(value) for name, value in zip(names, one_vs_rest)}


def shortcut_score(features, labels, *, rng, groups=None, folds=MAX_FOLDS):
    """The overall score of `shortcut_scores` (a float, or None when it cannot be scored)."""
    return shortcut_scores(features, labels, rng=rng, groups=groups, folds=folds)[0]


def factor_columns(values, names):
    """Columns of the named factors for a classifier: linear as they are, angles as (cos, sin)."""
    return _factor_columns(values, names)


def _factor_columns(values, names):
    # Linear factors as they are; angles as (cos, sin) so that 359 and 1
    # degrees are neighbours. An undefined angle (grey image, flat image)
    # sits at the origin: no direction.
    columns = []
    for name in names:
        factor = FACTORS[name]
        v = np.asarray(values[name], dtype=np.float64)
        if factor.circular:
            theta = v * (2.0 * np.pi / factor.period)
            defined = np.isfinite(theta)
            columns.append(np.where(defined, np.cos(np.where(defined, theta, 0.0)), 0.0))
            columns.append(np.where(defined, np.sin(np.where(defined, theta, 0.0)), 0.0))
        else:
            columns.append(np.nan_to_num(v, nan=0.0))
    return np.stack(columns, axis=1)


def _one_vs_rest_driver(by_class, n_classes):
    """The class one factor singles out from all the others, if any (more than two classes)."""
    # With more than two classes a factor can single out one class while the
    # overall score stays low: the one-vs-rest scores catch that.
    if n_classes <= 2 or not by_class.get("original"):
        return None
    best = max(by_class["original"], key=lambda c: (by_class["original"][c], c))
    return best if by_class["original"][best] >= ONE_VS_REST_THRESHOLD else None


def _meets(row, by_class, driver, set_name, threshold):
    if row.get(set_name) is None:
        return False
    if row[set_name] >= threshold:
        return True
    score = by_class.get(set_name, {}).get(driver) if driver else None
    return score is not None and score >= ONE_VS_REST_THRESHOLD


def link_of(row, by_class, driver, chance, n_images):
    """Whether the recipe breaks, weakens or keeps a flagged shortcut (see SHORTCUT_RULE).

    Parameters
    ----------
    row : dict
        An audit row with ``augmented`` and ``persists``.
    by_class : dict
        One-vs-rest scores per set and class.
    driver : str or None
        The class the factor singles out; its one-vs-rest score is then judged
        against 0.5, the score of guessing "this class or not".
    chance : float
        1 / n_classes.
    n_images : int
        Training images: the unit of the interval (an image's augmented
        copies are not independent).

    Returns
    -------
    dict
        ``link`` ("broken", "weakened", "persists" or None when unscored),
        ``augmented_ci`` (the Wilson interval [1]_ of the augmented score taken
        as a share of ``n_images``) and ``link_bound`` (the near-chance bound
        its upper end must reach down to).

    References
    ----------
    .. [1] E. B. Wilson, "Probable inference, the law of succession, and
       statistical inference", JASA 22(158), 209-212, 1927.
    """
    score, level = row.get("augmented"), chance
    if driver is not None and (by_class.get("augmented") or {}).get(driver) is not None:
        score, level = by_class["augmented"][driver], 0.5
    if score is None or n_images < 1:
        return {"link": None, "augmented_ci": None, "link_bound": None}
    low, high = wilson_interval(int(round(score * n_images)), n_images, confidence=CONFIDENCE)
    bound = beyond_chance(level, LINK_BROKEN_SHARE)
    link = "persists" if row["persists"] else ("broken" if high <= bound else "weakened")
    return {"link": link, "augmented_ci": [json_number(low), json_number(high)], "link_bound": json_number(bound)}


def _audit_row(name, chosen, sets, n_classes, splits):
    threshold = shortcut_threshold(max(n_classes, 1))
    row, by_class = {"factor": name}, {}
    for set_name in ("original", "augmented", "val", "field"):
        if set_name not in sets:
            row[set_name] = None
            continue
        values, labels, set_groups = sets[set_name]
        if not any(np.isfinite(values[column]).any() for column in chosen):
            # No image of the set has a value (hue of grey images): nothing to score.
            row[set_name] = None
            continue
        if splits[set_name] is None:
            overall, per_class = None, {}
        else:
            overall, per_class = shortcut_scores(factor_columns(values, chosen), labels, splits=splits[set_name])
        row[set_name] = json_number(overall)
        by_class[set_name] = {c: json_number(v) for c, v in per_class.items()}
    row["chance"] = json_number(1.0 / max(n_classes, 1))
    combined = name == ALL_FACTORS
    driver = _one_vs_rest_driver(by_class, n_classes)

    def meets(set_name):
        return _meets(row, by_class, driver, set_name, threshold)

    flagged = not combined and (meets("original") or driver is not None)
    # A labelled field sample is the one witness that can tell a shortcut
    # from the cue that defines the class: a cue still carries the class
    # where the model will be deployed, a shortcut does not.
    row["field_confirms"] = bool(flagged and meets("field"))
    flagged = flagged and not row["field_confirms"]
    row["flagged"] = bool(flagged)
    row["persists"] = bool(flagged and meets("augmented"))
    n_images = len(sets["original"][1]) if "original" in sets else 0
    row.update(link_of(row, by_class, driver, 1.0 / max(n_classes, 1), n_images) if flagged else
               {"link": None, "augmented_ci": None, "link_bound": None})
    row["val_shares"] = bool(flagged and meets("val"))
    row["class"] = driver if (flagged or row["field_confirms"]) else None
    row["by_class"] = by_class
    row["combined"] = combined
    row["note"] = (FACTORS[name].undefined_note if not combined and "original" in sets
                   and not np.isfinite(sets["original"][0][name]).any() else None)
    return row


def audit_shortcuts(sets, n_classes, *, rng):
    """One audit row per factor (and one for all factors together), as in ``coverage --json``.

    Parameters
    ----------
    sets : dict
        ``{"original" | "augmented" | "val" | "field": (values, labels, groups)}``
        where ``values`` maps each factor name to its per-image values and
        ``groups`` is None or the source image of each row. A set left out
        scores None.
    n_classes : int
        Number of training classes (chance is ``1 / n_classes``).
    rng : numpy.random.Generator
        Draws the fold shuffles (one seed, shared by every set).

    Returns
    -------
    list of dict
        Rows with ``factor``, the four scores, ``chance``, ``field_confirms``,
        ``flagged``, ``persists``, ``link``, ``augmented_ci``, ``link_bound``,
        ``val_shares``, ``class``, ``by_class``, ``combined`` and ``note``
        (`Factor.undefined_note` when no training image has a value of the
        factor, such as hue on grey images; else None), following
        `SHORTCUT_RULE`. A set in which no image has a value scores None.
    """
    names = list(FACTORS)
    random_state = _fold_seed(rng)
    if too_few_to_audit(sets) is not None:
        sets = {}  # every score None, at once: nothing to cross-validate
    # One set of folds per set, shared by every factor's row.
    splits = {set_name: _folds(labels, set_groups, random_state, MAX_FOLDS)
              for set_name, (_, labels, set_groups) in sets.items()}
    return [_audit_row(name, names if name == ALL_FACTORS else [name], sets, n_classes, splits)
            for name in names + [ALL_FACTORS]]


def too_few_to_audit(sets):
    """Why the training set is too small for the shortcut audit, or None.

    The audit cross-validates over the training images; a class needs at
    least `MIN_AUDIT_IMAGES` of them (`audit_shortcuts` then scores nothing).

    Parameters
    ----------
    sets : dict
        As `audit_shortcuts` takes it; its ``"original"`` set is judged.

    Returns
    -------
    str or None
    """
    if "original" not in sets:
        return None
    labels = np.asarray(sets["original"][1])
    if labels.size == 0:
        return None
    names, counts = np.unique(labels, return_counts=True)
    if counts.min() >= MIN_AUDIT_IMAGES:
        return None
    short = names[counts < MIN_AUDIT_IMAGES]
    listed = ", ".join(map(str, short[:5])) + (f" and {short.size - 5} more" if short.size > 5 else "")
    return (f"Too few training images for the shortcut audit: it needs at least {MIN_AUDIT_IMAGES} images in "
            f"every class, and {short.size} of {names.size} classes have fewer ({listed}); no shortcut "
            "was scored.")


def val_shared_shortcuts(sets, n_classes, *, rng):
    """Flagged shortcut factors that the validation set carries too (``val_shares`` of `audit_shortcuts`).

    The same rule and scores as `audit_shortcuts`, without the augmented set
    and the all-factors row, and scoring validation and field only for the
    factors the original training set flags: the cheap form for a caller
    that needs only this list.

    Parameters
    ----------
    sets : dict
        ``{"original", "val", "field"?: (values, labels, None)}`` as in `audit_shortcuts`.
    n_classes : int
    rng : numpy.random.Generator
        Draws the fold shuffles, as in `audit_shortcuts`.

    Returns
    -------
    list of str
        Factor names, in the order of `FACTORS`.
    """
    random_state = _fold_seed(rng)
    if too_few_to_audit(sets) is not None:
        return []  # as audit_shortcuts: nothing is scored
    # One set of folds per set, shared by every factor's row, as in `audit_shortcuts`.
    splits = {set_name: _folds(labels, set_groups, random_state, MAX_FOLDS)
              for set_name, (_, labels, set_groups) in sets.items()}
    shared = []
    for name in FACTORS:
        if not _audit_row(name, [name], {"original": sets["original"]}, n_classes, splits)["flagged"]:
            continue
        if _audit_row(name, [name], sets, n_classes, splits)["val_shares"]:
            shared.append(name)
    return shared


def _score_text(row, set_name):
    if row["class"] is not None and row["by_class"].get(set_name, {}).get(row["class"]) is not None:
        return f"{row['by_class'][set_name][row['class']]:.2f} for {row['class']} vs the rest"
    return f"{row[set_name]:.2f}"


def _flagged_message(row, chance, threshold):
    what = (f"singles out {row['class']}" if row["class"] is not None and row["original"] < threshold
            else "predicts the class")
    text = (f"{row['factor']} {what} in the original training set (balanced accuracy "
            f"{_score_text(row, 'original')}; chance {chance:.2f}): a shortcut unless it is "
            f"the cue that defines the classes.")
    low_high = row.get("augmented_ci")
    interval = f", {CONFIDENCE:.0%} interval {low_high[0]:.2f} to {low_high[1]:.2f}" if low_high else ""
    if row.get("link") == "persists":
        text += (f" After augmentation it still does ({_score_text(row, 'augmented')}): the "
                 f"recipe does not break the link.")
    elif row.get("link") == "weakened":
        text += (f" After augmentation it falls to {_score_text(row, 'augmented')}{interval}, above the "
                 f"near-chance bound {row['link_bound']:.2f}: the recipe weakens the link but does not break it.")
    elif row.get("link") == "broken":
        text += (f" After augmentation it falls to {_score_text(row, 'augmented')}{interval}, within the "
                 f"near-chance bound {row['link_bound']:.2f}: the recipe breaks the link.")
    return text


def shortcut_messages(rows, n_classes):
    """The sentences that explain audit rows (confirmed cues, shortcuts, what val can show).

    Parameters
    ----------
    rows : list of dict
        From `audit_shortcuts`.
    n_classes : int

    Returns
    -------
    list of str
    """
    chance = 1.0 / max(n_classes, 1)
    threshold = shortcut_threshold(max(n_classes, 1))
    messages = []
    for row in rows:
        if row["field_confirms"]:
            messages.append(
                f"{row['factor']} carries the class in the training set and also in the labelled "
                f"field sample ({_score_text(row, 'field')}): it behaves as a cue that defines the "
                f"class, not a shortcut, so it is not flagged.")
    flagged_rows = [r for r in rows if r["flagged"]]
    for row in flagged_rows:
        messages.append(_flagged_message(row, chance, threshold))
        if row["field"] is not None:
            in_field = row["field"] >= threshold or (
                row["class"] is not None
                and (row["by_class"].get("field", {}).get(row["class"]) or 0) >= ONE_VS_REST_THRESHOLD)
            if not in_field:
                messages.append(f"In the labelled field sample {row['factor']} does not carry the "
                                f"class ({_score_text(row, 'field')}): a model leaning on it will "
                                f"fail there.")
    val_shares = [r["factor"] for r in flagged_rows if r["val_shares"]]
    if val_shares:
        messages.append(
            f"The validation split carries the same shortcut ({', '.join(val_shares)}): a "
            f"validation score cannot reveal it; only field data or a recipe that breaks the "
            f"link can.")
    return messages
