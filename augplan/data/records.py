"""The records of a data set: one image file each, and what is computed over a list of them.

An `ImageRecord` names one file, its class and its split; `stratified_choice`
draws a share of each class (the stand-in validation split, the evaluator's
confirmation split) and `fingerprint` identifies a data set's content.
"""

import hashlib
from dataclasses import dataclass, field as dataclass_field
from pathlib import Path

__all__ = ["SPLITS", "ImageRecord", "stratified_choice", "fingerprint"]

SPLITS = ("train", "val", "test", "field")



@dataclass(frozen=True)
class ImageRecord:
    """One image file of a data set.

    Attributes
    ----------
    path : Path
        Absolute path of the file.
    relpath : str
        Path relative to the data root, POSIX separators. Images of a field
        folder given apart from the data root read ``field/<path in that folder>``.
    label : str or None
        Class name (NFC-normalised); None for unlabelled field images.
    split : str
        One of ``"train"``, ``"val"``, ``"test"``, ``"field"``.
    sha256 : str
        Hex digest of the file bytes.
    data : bytes or None
        The encoded file itself, when the record was made to carry it
        (`Dataset.with_image_bytes`); readers then decode these bytes instead
        of opening ``path``. Not part of equality or hashing.
    """

    path: Path
    relpath: str
    label: str | None
    split: str
    sha256: str
    data: bytes | None = dataclass_field(default=None, repr=False, compare=False)


def stratified_choice(records, fraction, rng):
    """The relative paths of a ``fraction`` share of each class's records, drawn with ``rng``.

    The one stratified split of augplan (the stand-in validation split, the
    evaluator's confirmation split). Each class with at least two records
    gives ``round(fraction * n)`` of them, at least one and never all; a
    single-record class gives none. Classes are visited in sorted order and
    each class's records in ``relpath`` order, so the draw depends only on
    the records and ``rng``.

    Parameters
    ----------
    records : sequence of ImageRecord
    fraction : float
    rng : numpy.random.Generator

    Returns
    -------
    set of str
    """
    by_class = {}
    for record in records:
        by_class.setdefault(record.label, []).append(record)
    chosen = set()
    for label in sorted(by_class):
        group = sorted(by_class[label], key=lambda r: r.relpath)
        n = len(group)
        if n < 2:
            continue
        n_take = min(n - 1, max(1, int(round(fraction * n))))
        chosen.update(group[i].relpath for i in rng.permutation(n)[:n_take])
    return chosen


def fingerprint(dataset):
    """sha256 hex digest identifying a data set's content and splits.

    Hashes the sorted lines ``relpath, split, label, file sha256`` (tab
    separated), so it is independent of walk order and changes when any
    file's bytes, label or split change.
    """
    lines = sorted(f"{r.relpath}\t{r.split}\t{r.label if r.label is not None else ''}\t{r.sha256}\n"
                   for r in dataset.records)
    digest = hashlib.sha256()
    for line in lines:
        digest.update(line.encode("utf-8"))
    return digest.hexdigest()
