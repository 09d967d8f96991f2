"""The manifest layout: a CSV file with the columns ``path,label,split``.

Paths are relative to the manifest's folder and must stay inside the data
folder; every faulty row is bad input naming the manifest's line.
"""

import csv
import io
from pathlib import Path, PurePosixPath

from augplan.data._scanner import label_of
from augplan.data.records import SPLITS, ImageRecord
from augplan.errors import BadInputError
from augplan.files import read_regular_file

__all__ = ["MAX_MANIFEST_BYTES", "read_manifest"]

#: Largest manifest file read (bytes): millions of rows.
MAX_MANIFEST_BYTES = 256 * 2**20


_MANIFEST_COLUMNS = ("path", "label", "split")


def _csv_rows(reader, manifest):
    """The reader's rows; a row the csv module cannot read (a NUL byte, a field
    over its size limit) is bad input naming the manifest's line."""
    while True:
        try:
            row = next(reader)
        except StopIteration:
            return
        except csv.Error as error:
            raise BadInputError(f"{manifest} line {reader.line_num}: not a readable CSV row "
                                f"({error})") from None
        if any("\x00" in (value or "") for value in row.values() if isinstance(value, str)):
            raise BadInputError(f"{manifest} line {reader.line_num}: the row holds a NUL byte; "
                                "a manifest is plain text")
        yield row


def read_manifest(manifest, root, scanner):
    raw = read_regular_file(manifest, limit=MAX_MANIFEST_BYTES, what="manifest")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise BadInputError(f"{manifest}: manifest is not UTF-8 text ({error})") from None
    reader = csv.DictReader(io.StringIO(text, newline=""))
    try:
        header = [name.strip() for name in (reader.fieldnames or [])]
    except csv.Error as error:
        raise BadInputError(f"{manifest} line {reader.line_num}: not a readable CSV row ({error})") from None
    missing = [name for name in _MANIFEST_COLUMNS if name not in header]
    if missing:
        raise BadInputError(
            f"{manifest}: manifest lacks column(s) {', '.join(missing)}; the first line must "
            f"name the columns path,label,split; got {','.join(header) or 'an empty file'}")
    reader.fieldnames = header
    base = manifest.parent.resolve()
    resolved_root = root.resolve()
    records, seen = [], {}
    for row in _csv_rows(reader, manifest):
        where = f"{manifest} line {reader.line_num}"
        raw_path = (row.get("path") or "").strip()
        label = (row.get("label") or "").strip()
        split = (row.get("split") or "").strip()
        if not raw_path:
            raise BadInputError(f"{where}: empty path")
        if split not in SPLITS:
            raise BadInputError(f"{where}: unknown split {split!r}; allowed: {', '.join(SPLITS)}")
        if not label and split != "field":
            raise BadInputError(f"{where}: empty label; only field images may be unlabelled")
        posix = PurePosixPath(raw_path.replace("\\", "/"))
        if posix.is_absolute() or Path(raw_path).is_absolute() or (len(raw_path) > 1 and raw_path[1] == ":"):
            raise BadInputError(f"{where}: absolute path {raw_path!r}; paths must be relative "
                                "to the manifest's folder")
        if ".." in posix.parts:
            raise BadInputError(f"{where}: path {raw_path!r} uses '..'; paths must stay "
                                "inside the data folder")
        path = base.joinpath(*posix.parts)
        try:
            real = path.resolve(strict=True)
        except FileNotFoundError:
            raise BadInputError(f"{where}: file {raw_path!r} not found (looked for {path})") from None
        except (OSError, RuntimeError) as error:  # symlink loops
            raise BadInputError(f"{where}: cannot resolve {raw_path!r} ({error})") from None
        if not real.is_relative_to(resolved_root):
            raise BadInputError(f"{where}: {raw_path!r} resolves to {real}, outside the data "
                                f"folder {resolved_root} (a symlink leading out?)")
        relpath = path.relative_to(resolved_root).as_posix() if path.is_relative_to(resolved_root) \
            else real.relative_to(resolved_root).as_posix()
        if relpath in seen:
            raise BadInputError(f"{where}: {raw_path!r} is already listed on line {seen[relpath]}")
        seen[relpath] = reader.line_num
        digest = scanner.examine(path, relpath)
        if digest is not None:
            records.append(ImageRecord(path, relpath, label_of(label) if label else None,
                                       split, digest))
    return records
