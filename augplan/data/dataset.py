"""Opening a data set: the `Dataset` and `open_dataset`.

A data set is a folder ``DATA/train/<class>/*``, ``DATA/val/<class>/*``,
optionally ``DATA/test/<class>/*`` and ``DATA/field/<class>/*`` (labelled) or
``DATA/field/*`` (unlabelled) (`augplan.data.folders`), or a CSV manifest with
columns ``path,label,split`` (`augplan.data.manifest`). The data folder is
only ever read, never written. How files are decoded is in
`augplan.data.decoding`.
"""

import hashlib
from dataclasses import dataclass, field as dataclass_field, replace
from pathlib import Path

import numpy as np

from augplan.data._scanner import Scanner
from augplan.data.folders import scan_folders
from augplan.data.manifest import read_manifest
from augplan.data.records import SPLITS, ImageRecord, stratified_choice
from augplan.errors import BadInputError

__all__ = ["Dataset", "open_dataset"]



@dataclass
class Dataset:
    """An opened data set.

    Attributes
    ----------
    root : Path
        The data folder (absolute).
    records : list of ImageRecord
        Every usable image, in a deterministic order.
    skipped : list of (str, str)
        ``(relpath, reason)`` for files and folders that were left out.
    classes : tuple of str
        Sorted training classes.
    val_from_train : bool
        True when no validation split was given and a stratified split of
        the training images stands in.
    split_seed : int or None
        Seed of that split; None when ``val_from_train`` is False.
    field_root : Path or None
        The field folder when it was given apart from the data folder
        (``--field``); None otherwise.
    """

    root: Path
    records: list = dataclass_field(default_factory=list)
    skipped: list = dataclass_field(default_factory=list)
    classes: tuple = ()
    val_from_train: bool = False
    split_seed: int | None = None
    field_root: Path | None = None

    def input_folders(self):
        """``[(folder, what), ...]``: the folders augplan reads and never writes into.

        The data folder and, when it was given apart from it, the field folder
        (for `augplan.atomic.check_output`'s ``protected``).
        """
        folders = [(self.root, "data folder")]
        if self.field_root is not None:
            folders.append((self.field_root, "field folder"))
        return folders

    def split(self, name):
        """Records of one split (``"train"``, ``"val"``, ``"test"``, ``"field"``)."""
        if name not in SPLITS:
            raise ValueError(f"split must be one of {SPLITS}; got {name!r}")
        return [record for record in self.records if record.split == name]

    def missing_classes(self, split="val"):
        """Training classes without a single image in ``split`` (sorted)."""
        present = {record.label for record in self.split(split)}
        return [name for name in self.classes if name not in present]

    def missing_val_message(self):
        """The warning every command gives when validation lacks a class; None when it has them all.

        Such a class is never scored: no validation image can show a recipe
        helping or harming it, so the accuracies and gains are over the
        other classes only.
        """
        missing = self.missing_classes("val")
        if not missing:
            return None
        names = ", ".join(repr(name) for name in missing)
        return (f"validation has no image of class {names} ({len(missing)} of {len(self.classes)} "
                f"training classes): {'it is' if len(missing) == 1 else 'they are'} never scored, so "
                "accuracies and gains cover the other classes only; add images to val/<class>/")

    def with_image_bytes(self):
        """A copy whose records carry their encoded files (``record.data``).

        Work units then ship image bytes to worker processes or cluster
        machines, which need no access to the data folder. The bytes of every
        file are held in memory (the size of the files on disk; decoded
        arrays are never held for the whole set).

        Returns
        -------
        Dataset

        Raises
        ------
        BadInputError
            A file cannot be read, or its bytes no longer match the hash taken
            when the data set was opened (it changed in between).
        """
        records = []
        for record in self.records:
            try:
                data = record.path.read_bytes()
            except OSError as error:
                raise BadInputError(f"{record.path}: cannot read the image ({error.strerror or error})") from None
            if hashlib.sha256(data).hexdigest() != record.sha256:
                raise BadInputError(f"{record.path}: the file changed after the data set was opened; "
                                    "run the command again")
            records.append(replace(record, data=data))
        return replace(self, records=records)


def _stratified_val(records, val_fraction, rng):
    """Move a ``val_fraction`` share of each class's training images to val (see `stratified_choice`)."""
    to_val = stratified_choice([r for r in records if r.split == "train"], val_fraction, rng)
    return [ImageRecord(r.path, r.relpath, r.label, "val", r.sha256) if r.split == "train" and r.relpath in to_val
            else r for r in records]


def _training_classes(records, source):
    """The sorted training classes; at least two, and every other split's class among them."""
    classes = tuple(sorted({r.label for r in records if r.split == "train"}))
    if not classes:
        raise BadInputError(f"{source}: no training images found; expected "
                            "train/<class>/<images> with at least two classes")
    if len(classes) < 2:
        raise BadInputError(f"{source}: only one training class ({classes[0]!r}); "
                            "a classifier needs at least two")
    for split in ("val", "test", "field"):
        unknown = sorted({r.label for r in records if r.split == split and r.label is not None}
                         - set(classes))
        if unknown:
            raise BadInputError(f"{source}: {split} has class(es) {', '.join(map(repr, unknown))} "
                                f"that train lacks; train classes: {', '.join(classes)}")
    return classes


def _checked_folders(root, manifest, field):
    """``(root, manifest, field)`` made absolute, after checking that the folders exist."""
    root = Path(root)
    if manifest is None and root.suffix.lower() == ".csv" and root.is_file():
        manifest, root = root, root.parent
    if not root.exists():
        raise BadInputError(f"{root}: data folder not found")
    if not root.is_dir():
        raise BadInputError(f"{root}: expected a data folder, got a file")
    root = root.absolute()
    if manifest is not None:
        manifest = Path(manifest)
        if not manifest.is_absolute() and not manifest.exists() and (root / manifest).exists():
            manifest = root / manifest
        return root, manifest.absolute(), None  # a manifest names its field images itself
    if field is not None:
        field = Path(field)
        if not field.is_dir():
            raise BadInputError(f"{field}: field folder not found (expected a folder "
                                "of <class>/<images> or of images)")
        field = field.absolute()
    return root, None, field


def _with_val(records, has_val, source, val_fraction, rng):
    """The records with a validation split: the given one, else a stratified share of train drawn with ``rng``."""
    if has_val:
        if not any(r.split == "val" for r in records):
            raise BadInputError(f"{source}: val/ holds no readable images; add images or "
                                "remove the val/ folder to split one off train")
        return records
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"{source} has no val split, so one is drawn from train: pass "
                        "rng=numpy.random.default_rng(split_seed) (and split_seed) to open_dataset; "
                        f"got rng={type(rng).__name__}")
    records = _stratified_val(records, float(val_fraction), rng)
    if not any(r.split == "val" for r in records):
        raise BadInputError(f"{source}: no val split and no class has two images to "
                            "split one off; add val/<class>/<images>")
    return records


def open_dataset(root, *, strict=False, manifest=None, val_fraction=0.2, rng=None, split_seed=None, field=None):
    """Open a data set folder (or CSV manifest) and list its images.

    Parameters
    ----------
    root : str or Path
        The data folder. A path to a ``.csv`` file is read as a manifest
        whose folder is the data folder.
    strict : bool, default False
        Raise on the first file that is not a readable image instead of
        listing it in ``Dataset.skipped``.
    manifest : str or Path, optional
        CSV with columns ``path,label,split``; paths are relative to the
        manifest's folder and must stay inside ``root``. A relative manifest
        path that does not exist from the working folder is looked up in
        ``root``.
    val_fraction : float, default 0.2
        Share of each class moved to validation when no val split exists.
    rng : numpy.random.Generator, optional
        Draws that stratified split; required when the data have no val
        split (`TypeError` otherwise), unused when they have one.
    split_seed : int, optional
        The seed ``rng`` was made from (``--split-seed``), kept in the
        Dataset's provenance and named in every warning about the split.
    field : str or Path, optional
        A field folder apart from the data folder (``field/<class>/*`` or
        ``field/*`` form); it replaces ``DATA/field``.

    Returns
    -------
    Dataset

    Raises
    ------
    BadInputError
        The folder or manifest is missing or malformed, fewer than two
        training classes, a val/test/field class unknown to train, or (with
        ``strict``) a file that is not a readable image.

    Examples
    --------
    >>> dataset = open_dataset("DATA", rng=np.random.default_rng(0), split_seed=0)  # doctest: +SKIP
    """
    if not isinstance(val_fraction, (int, float)) or not 0.0 < float(val_fraction) < 1.0:
        raise BadInputError(f"val_fraction must be a number between 0 and 1 (exclusive); "
                            f"got {val_fraction!r}")
    root, manifest, field = _checked_folders(root, manifest, field)
    scanner = Scanner(root, strict, allowed=(root,) if field is None else (root, field))
    if manifest is not None:
        records = read_manifest(manifest, root, scanner)
        has_val, source = any(record.split == "val" for record in records), str(manifest)
    else:
        records, has_val = scan_folders(root, scanner, field)
        source = str(root)
    classes = _training_classes(records, source)
    records = _with_val(records, has_val, source, val_fraction, rng)
    return Dataset(root=root, records=records, skipped=scanner.skipped, classes=classes,
                   val_from_train=not has_val, split_seed=None if has_val or split_seed is None else int(split_seed),
                   field_root=field)
