"""The checked sample: which training images the checker reads, and their class indices.

Classes with fewer than `augplan.thresholds.MIN_IMAGES_PER_CLASS` images
have no region and are left out (with a warning); classes with fewer than
`augplan.thresholds.MIN_EVIDENCE` are kept but are too few images to judge.
"""

from __future__ import annotations

import numpy as np

from augplan.errors import BadInputError
from augplan.thresholds import MIN_EVIDENCE, MIN_IMAGES_PER_CLASS

__all__ = ["checked_sample"]


def _sample_training(dataset, sample, rng):
    """Training records in path order, at most ``sample`` a class (drawn with ``rng``)."""
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


def checked_sample(dataset, sample, rng, warnings):
    """Records, class indices and names of the sampled training images with usable classes.

    Parameters
    ----------
    dataset : augplan.data.Dataset
    sample : int or None
        At most this many images a class.
    rng : numpy.random.Generator
        The check's sample stream.
    warnings : list of str
        Appended to: classes left out, classes too small to judge.

    Returns
    -------
    records : list of ImageRecord
    labels : numpy.ndarray of int
    classes : tuple of str

    Raises
    ------
    BadInputError
        Fewer than two classes with `MIN_IMAGES_PER_CLASS` images.
    """
    records, labels, classes = _sample_training(dataset, sample, rng)
    counts = np.bincount(labels, minlength=len(classes))
    small = [classes[c] for c in range(len(classes)) if counts[c] < MIN_IMAGES_PER_CLASS]
    if small:
        warnings.append(f"classes with fewer than {MIN_IMAGES_PER_CLASS} training images have no region "
                        f"and are left out of the check: {', '.join(small)}")
        keep_classes = [c for c in range(len(classes)) if counts[c] >= MIN_IMAGES_PER_CLASS]
        keep = np.isin(labels, keep_classes)
        records = [r for r, k in zip(records, keep) if k]
        remap = {old: new for new, old in enumerate(keep_classes)}
        labels = np.array([remap[c] for c in labels[keep]], dtype=np.int64)
        classes = tuple(classes[c] for c in keep_classes)
        counts = np.bincount(labels, minlength=len(classes))
    if len(classes) < 2:
        raise BadInputError(f"{dataset.root}: the label check needs at least two classes with "
                            f"{MIN_IMAGES_PER_CLASS} or more training images each; found {len(classes)}.")
    few = [classes[c] for c in range(len(classes)) if counts[c] < MIN_EVIDENCE]
    if few:
        warnings.append(f"classes with fewer than {MIN_EVIDENCE} training images are too few images "
                        f"to judge: {', '.join(few)}")
    return records, labels, classes
