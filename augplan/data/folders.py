"""The folder layout: ``DATA/train/<class>/*``, ``val/``, ``test/`` and ``field/`` (labelled or not)."""

import os
from pathlib import Path

from augplan.data._scanner import label_of
from augplan.data.records import ImageRecord
from augplan.errors import BadInputError

__all__ = ["scan_folders"]



def _is_hidden(name):
    return name.startswith(".")


def _sorted_entries(folder):
    """Non-hidden entries of ``folder`` sorted by name, as os.DirEntry."""
    with os.scandir(folder) as entries:
        return sorted((entry for entry in entries if not _is_hidden(entry.name)),
                      key=lambda entry: entry.name)


def _is_real_dir(entry):
    """A folder, not a symlink to one (folder symlinks are never followed)."""
    try:
        return entry.is_dir(follow_symlinks=False)
    except OSError:
        return False


def _scan_class_folder(scanner, folder, relfolder, label, split):
    records = []
    for entry in _sorted_entries(folder):
        relpath = f"{relfolder}/{entry.name}"
        digest = scanner.examine(Path(entry.path), relpath)
        if digest is not None:
            records.append(ImageRecord(Path(entry.path).absolute(), relpath, label, split, digest))
    return records


def _scan_split(scanner, folder, relfolder, split, *, allow_loose):
    """Images of one split folder; ``allow_loose`` accepts unlabelled top-level files."""
    records = []
    for entry in _sorted_entries(folder):
        relpath = f"{relfolder}/{entry.name}"
        if _is_real_dir(entry):
            found = _scan_class_folder(scanner, Path(entry.path), relpath, label_of(entry.name), split)
            if not found:
                scanner.note(relpath, "empty class folder (no readable images), left out")
            records.extend(found)
        elif allow_loose:
            digest = scanner.examine(Path(entry.path), relpath)
            if digest is not None:
                records.append(ImageRecord(Path(entry.path).absolute(), relpath, None, split, digest))
        else:
            try:
                is_symlinked_dir = entry.is_symlink() and Path(entry.path).is_dir()
            except OSError:
                is_symlinked_dir = False
            if is_symlinked_dir:
                scanner.skip(relpath, "folder symlink, not followed")
            else:
                scanner.skip(relpath, f"file outside a class folder (expected {relfolder}/<class>/<image>)")
    return records


def scan_folders(root, scanner, field):
    train_dir = root / "train"
    if not train_dir.is_dir():
        raise BadInputError(
            f"{root}: no train/ folder; expected {root}/train/<class>/<images> "
            "(and val/<class>/...), or a CSV manifest with columns path,label,split")
    records = _scan_split(scanner, train_dir, "train", "train", allow_loose=False)
    has_val = (root / "val").is_dir()
    for split in ("val", "test"):
        if (root / split).is_dir():
            records += _scan_split(scanner, root / split, split, split, allow_loose=False)
    if field is not None:
        records += _scan_split(scanner, field, "field", "field", allow_loose=True)
    elif (root / "field").is_dir():
        records += _scan_split(scanner, root / "field", "field", "field", allow_loose=True)
    return records, has_val


# --------------------------------------------------------------------------
# Manifest
