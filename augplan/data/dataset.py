"""Reading a data set: layout, image normalisation, fingerprint, duplicates.

A data set is a folder ``DATA/train/<class>/*``, ``DATA/val/<class>/*``,
optionally ``DATA/test/<class>/*`` and ``DATA/field/<class>/*`` (labelled) or
``DATA/field/*`` (unlabelled), or a CSV manifest with columns
``path,label,split``. The data folder is only ever read, never written.

Image policy
------------
Every image becomes an ``(H, W, 3)`` RGB ``uint8`` array:

- ``1``, ``L``, ``CMYK``, ``YCbCr`` and the like: Pillow's own conversion to RGB.
- Alpha (``LA``, ``PA``, ``RGBA``, palette or grey/RGB transparency) is
  **composited over black**: each colour is multiplied by its opacity, so a
  fully transparent pixel is black whatever colour it stored. Hidden colours
  under transparent pixels therefore cannot leak into features.
- 16-bit data (``I;16`` variants, and ``I`` whose values lie in
  ``[0, 65535]``, which is how Pillow opens 16-bit PNG and TIFF files) are
  scaled by the bit depth, ``round(v * 255 / 65535)``: 65535 -> 255,
  32768 -> 128. ``I`` data outside that range are min-max scaled.
- ``F`` (float) data within ``[0, 1]`` are scaled by 255; anything else is
  min-max scaled to ``[0, 255]``; non-finite values count as 0; a constant
  image outside ``[0, 1]`` becomes black.
- EXIF orientation is applied (``PIL.ImageOps.exif_transpose``).
- Multi-frame files (GIF, TIFF) give their first frame.
"""

import csv
import hashlib
import io
import os
import unicodedata
import warnings
from dataclasses import dataclass, field as dataclass_field, replace
from pathlib import Path, PurePosixPath

import numpy as np
from PIL import Image, ImageOps

from augplan.errors import BadInputError
from augplan.files import UnreadableFileError, read_regular_file
from augplan.imaging.colour import unit_to_uint8
from augplan.thresholds import (
    NEAR_DUPLICATE_BITS,
    NEAR_DUPLICATE_LOCAL_DIFFERENCE,
    NEAR_DUPLICATE_SSIM,
    NEAR_DUPLICATE_WINDOW,
)

__all__ = [
    "ImageRecord",
    "Dataset",
    "SPLITS",
    "NEAR_DUPLICATE_BITS",
    "open_dataset",
    "stratified_choice",
    "read_image",
    "read_record",
    "load_images",
    "fingerprint",
    "perceptual_hash",
    "hamming_matrix",
    "local_difference",
    "FLAT_SPREAD",
    "find_duplicates",
]

SPLITS = ("train", "val", "test", "field")


#: Largest image file read (bytes): past any real photograph, and a bound on
#: memory before a byte is read (common practice, no source).
MAX_IMAGE_BYTES = 512 * 2**20
#: Most pixels in an image augplan decodes: 2**26 (8192 x 8192). Decoded at
#: up to 4 bytes a pixel (RGBA, 32-bit grey) that is 256 MiB, the largest
#: buffer a read holds; larger images are listed and skipped (common
#: practice, no source).
MAX_IMAGE_PIXELS = 2**26
#: Images of more pixels than this are reduced by a whole factor (block
#: averages, Pillow's ``Image.reduce``) right after decoding, before any
#: conversion copies them: at most the analysis side is ever converted. Smaller
#: images take the plain path, so their results do not change (chosen here).
REDUCE_ABOVE_PIXELS = 2**22
#: Largest manifest file read (bytes): millions of rows.
MAX_MANIFEST_BYTES = 256 * 2**20


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


# --------------------------------------------------------------------------
# Identifying and reading images


def _pixel_limit_message(path, error):
    return (f"{path}: image is too large to decode safely ({error}); "
            "Pillow refuses images this big as a possible decompression bomb")


def _too_many_pixels(width, height):
    """The reason an image of ``width`` x ``height`` is not decoded, or None."""
    if width * height > MAX_IMAGE_PIXELS:
        return (f"{width}x{height} is {width * height} pixels; augplan decodes images of at most "
                f"{MAX_IMAGE_PIXELS} pixels")
    return None


def _identify(data):
    """Return None if ``data`` decodes as an image, else the reason.

    ``Image.verify`` checks PNG chunk checksums and completeness; it does
    nothing for JPEG, so JPEGs are also decoded at 1/8 scale, which still
    walks all of the entropy-coded data and so catches truncation cheaply.
    Every other format is decoded in full, so a damaged compressed stream
    behind intact chunks is caught here, where it is listed and skipped,
    not later in the middle of an analysis.
    """
    if not data:
        return "empty file (0 bytes)"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data)) as image:
                image_format = image.format
                width, height = image.size
                too_many = _too_many_pixels(width, height)
                if too_many is not None:
                    return too_many
                image.verify()
            with Image.open(io.BytesIO(data)) as image:
                if image_format == "JPEG":
                    image.draft(image.mode, (max(1, width // 8), max(1, height // 8)))
                image.load()
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as error:
        return f"too large to decode safely, a possible decompression bomb ({error})"
    except Image.UnidentifiedImageError:
        return "not an image Pillow can read"
    except Exception as error:  # noqa: BLE001 - Pillow plugins raise many kinds on bad bytes
        return f"damaged or truncated image ({type(error).__name__}: {error})"
    if width < 1 or height < 1:
        return f"image has no pixels ({width}x{height})"
    return None


def _composite_over_black(rgba):
    """RGBA uint8 array -> RGB uint8, colours multiplied by opacity."""
    rgb = rgba[..., :3].astype(np.uint16)
    alpha = rgba[..., 3:4].astype(np.uint16)
    return ((rgb * alpha + 127) // 255).astype(np.uint8)


def _grey_to_rgb(grey):
    return np.repeat(grey[..., None], 3, axis=2)


def _scale_16bit(values):
    values = values.astype(np.uint32)
    return ((values * 255 + 32767) // 65535).astype(np.uint8)


def _min_max(values):
    low, high = float(values.min()), float(values.max())
    if high <= low:
        return np.zeros(values.shape, np.uint8)
    scaled = (values.astype(np.float64) - low) * (255.0 / (high - low))
    return np.clip(np.rint(scaled), 0, 255).astype(np.uint8)


def _to_rgb_array(image):
    """A loaded Pillow image of any mode -> (H, W, 3) RGB uint8 (see module notes)."""
    mode = image.mode
    has_transparency = "transparency" in image.info
    if mode in ("LA", "La", "PA", "RGBA", "RGBa") or (
            has_transparency and mode in ("1", "L", "P", "RGB")):
        return _composite_over_black(np.asarray(image.convert("RGBA")))
    if mode == "RGB":
        return np.array(image, dtype=np.uint8)
    if mode.startswith("I;16") or mode == "I":
        values = np.asarray(image)
        if values.dtype.kind in "ui" and values.size and values.min() >= 0 and values.max() <= 65535:
            return _grey_to_rgb(_scale_16bit(values))
        return _grey_to_rgb(_min_max(values))
    if mode == "F":
        values = np.nan_to_num(np.asarray(image, dtype=np.float64), nan=0.0, posinf=0.0, neginf=0.0)
        if values.min() >= 0.0 and values.max() <= 1.0:
            return _grey_to_rgb(unit_to_uint8(values))
        return _grey_to_rgb(_min_max(values))
    return np.array(image.convert("RGB"), dtype=np.uint8)


def _decode(path, *, max_side=None, draft_size=None, data=None):
    """Open ``path`` (or decode ``data``, its bytes) and return its RGB uint8 array.

    ``max_side`` bounds the longer side of the result; ``draft_size`` asks
    the JPEG decoder for at least that (width, height). Both keep huge
    JPEGs from ever being decoded at full size. Messages name ``path``.
    """
    path = Path(path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path if data is None else io.BytesIO(data)) as image:
                width, height = image.size
                too_many = _too_many_pixels(width, height)
                if too_many is not None:
                    raise BadInputError(f"{path}: {too_many}")
                request = draft_size
                if max_side is not None and max(width, height) > max_side:
                    ratio = max_side / max(width, height)
                    request = (max(1, int(np.ceil(width * ratio))), max(1, int(np.ceil(height * ratio))))
                if image.format == "JPEG" and request is not None:
                    image.draft(image.mode, request)
                reduced = _reduced(image, request)
                if reduced is None:
                    image.load()
                    image = ImageOps.exif_transpose(image)
                else:
                    image = reduced
                array = _to_rgb_array(image)
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as error:
        raise BadInputError(_pixel_limit_message(path, error)) from None
    except BadInputError:
        raise
    except FileNotFoundError:
        raise BadInputError(f"{path}: image file not found") from None
    except IsADirectoryError:
        raise BadInputError(f"{path}: is a folder, expected an image file") from None
    except PermissionError:
        raise BadInputError(f"{path}: cannot read the image (permission denied)") from None
    except Image.UnidentifiedImageError:
        raise BadInputError(f"{path}: not an image Pillow can read") from None
    except Exception as error:  # noqa: BLE001 - Pillow plugins raise many kinds on bad bytes
        raise BadInputError(
            f"{path}: damaged or truncated image ({type(error).__name__}: {error})") from None
    if max_side is not None and max(array.shape[:2]) > max_side:
        height, width = array.shape[:2]
        ratio = max_side / max(width, height)
        size = (max(1, round(width * ratio)), max(1, round(height * ratio)))
        array = _resize(array, size)
    return array


# EXIF orientation -> the transpose that undoes it (as ImageOps.exif_transpose).
_ORIENTATION = {2: Image.Transpose.FLIP_LEFT_RIGHT, 3: Image.Transpose.ROTATE_180,
                4: Image.Transpose.FLIP_TOP_BOTTOM, 5: Image.Transpose.TRANSPOSE, 6: Image.Transpose.ROTATE_270,
                7: Image.Transpose.TRANSVERSE, 8: Image.Transpose.ROTATE_90}


def _reduced(image, request):
    """A large image reduced by a whole factor toward ``request`` (width, height), oriented; else None.

    Only images of more than `REDUCE_ABOVE_PIXELS` (after any JPEG draft)
    are reduced, and never below ``request``: the box resize that follows
    still makes the final size. Palette, bilevel and 16-bit images are first
    converted to a mode whose pixels can be averaged; transparency becomes
    an alpha channel.
    """
    width, height = image.size
    if request is None or width * height <= REDUCE_ABOVE_PIXELS:
        return None
    factor = min(width // max(1, request[0]), height // max(1, request[1]))
    orientation = image.getexif().get(0x0112, 1)
    if orientation in (5, 6, 7, 8):  # the request is for the turned image
        factor = min(width // max(1, request[1]), height // max(1, request[0]))
    if factor < 2:
        return None
    if image.mode in ("P", "PA") or "transparency" in image.info:
        image = image.convert("RGBA")
    elif image.mode == "1":
        image = image.convert("L")
    elif image.mode.startswith("I;16"):
        image = image.convert("I")
    reduced = image.reduce(factor)
    method = _ORIENTATION.get(orientation)
    return reduced if method is None else reduced.transpose(method)


def _resize(array, size):
    """Resize an RGB uint8 array to ``size`` (width, height).

    Shrinking averages over the area each output pixel covers (Pillow's box
    filter), so fine detail is averaged rather than aliased; enlarging is
    bilinear.
    """
    height, width = array.shape[:2]
    shrinking = size[0] <= width and size[1] <= height
    method = Image.Resampling.BOX if shrinking else Image.Resampling.BILINEAR
    return np.asarray(Image.fromarray(array).resize(size, method))


def read_image(path, max_side=None):
    """Read one image file as an RGB uint8 array.

    Parameters
    ----------
    path : str or Path
        The image file.
    max_side : int, optional
        If given, the image is downsized while reading (the JPEG decoder's
        draft mode, then an area-averaging resize) so that its longer side is
        at most ``max_side``; aspect ratio is kept.

    Returns
    -------
    numpy.ndarray
        ``(H, W, 3)`` uint8, RGB, EXIF orientation applied. Mode handling
        (alpha over black, 16-bit and float scaling) is in the module notes.

    Raises
    ------
    BadInputError
        The file is missing, unreadable, not an image, damaged, or larger
        than Pillow's decompression-bomb limit.
    """
    if max_side is not None:
        if isinstance(max_side, bool) or not isinstance(max_side, (int, np.integer)) or max_side < 1:
            raise ValueError(f"max_side must be a positive integer or None; got {max_side!r}")
        max_side = int(max_side)
    return _decode(path, max_side=max_side)


def read_record(record, max_side=None):
    """`read_image` of an `ImageRecord`: from the bytes it carries (``record.data``), else its file."""
    if max_side is not None and (isinstance(max_side, bool) or not isinstance(max_side, (int, np.integer))
                                 or max_side < 1):
        raise ValueError(f"max_side must be a positive integer or None; got {max_side!r}")
    return _decode(record.path, max_side=None if max_side is None else int(max_side), data=record.data)


def load_images(records, size=64):
    """Read images one at a time and resize each to a ``size`` x ``size`` square.

    Aspect ratio is **not** kept: the proxy model works on fixed squares and
    a stretch keeps all of the content, where a crop would drop some.
    Shrinking averages over areas (Pillow's box filter, after JPEG draft
    decoding); enlarging a small image is bilinear.

    Parameters
    ----------
    records : sequence of ImageRecord or path
        Images to read, in order. A record that carries its bytes
        (``record.data``) is decoded from them; its file is not opened.
    size : int, default 64
        Side of the output squares.

    Returns
    -------
    numpy.ndarray
        ``(N, size, size, 3)`` uint8.

    Raises
    ------
    BadInputError
        An image cannot be decoded (the message names the file).
    """
    if isinstance(size, bool) or not isinstance(size, (int, np.integer)) or size < 1:
        raise ValueError(f"size must be a positive integer; got {size!r}")
    size = int(size)
    records = list(records)
    batch = np.empty((len(records), size, size, 3), dtype=np.uint8)
    for index, record in enumerate(records):
        if isinstance(record, ImageRecord):
            array = _decode(record.path, draft_size=(size, size), data=record.data)
        else:
            array = _decode(Path(record), draft_size=(size, size))
        if array.shape[:2] != (size, size):
            array = _resize(array, (size, size))
        batch[index] = array
    return batch


# --------------------------------------------------------------------------
# Walking the data folder


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


def _label_of(name):
    # NFC so that a class typed on one system matches the folder made on another.
    return unicodedata.normalize("NFC", name)


def _link_leads_outside(path, allowed):
    """Where a file symlink leads when that is outside every folder of ``allowed``, else None.

    One rule for folders and manifests alike: a link is followed only when
    it resolves inside the data folder (or the separate field folder).
    """
    if not path.is_symlink():
        return None
    try:
        real = path.resolve(strict=True)
    except (OSError, RuntimeError):
        return None  # a dangling link or loop: reading it reports the fault
    if any(real.is_relative_to(folder) for folder in allowed):
        return None
    return real


class _Scanner:
    """Reads file bytes, hashes and identifies them, and keeps the skip list."""

    def __init__(self, root, strict, allowed=None):
        self.root = root
        self.strict = strict
        self.allowed = tuple(Path(folder).resolve() for folder in (allowed or (root,)))
        self.skipped = []

    def skip(self, relpath, reason, path=None):
        if self.strict:
            shown = path if path is not None else self.root / relpath
            raise BadInputError(f"{shown}: {reason} (strict mode stops on any "
                                "file that is not a readable image; remove it or drop --strict)")
        self.skipped.append((relpath, reason))

    def note(self, relpath, reason):
        """A skip that is not a bad file (an empty folder): never fatal."""
        self.skipped.append((relpath, reason))

    def examine(self, path, relpath):
        """sha256 of a usable image file, or None after recording why not."""
        if path.is_symlink() and path.is_dir():
            self.skip(relpath, "folder symlink, not followed", path)
            return None
        if path.is_dir():
            self.skip(relpath, "a folder, not an image file (subfolders of a class are not read)", path)
            return None
        outside = _link_leads_outside(path, self.allowed)
        if outside is not None:
            self.skip(relpath, f"a symlink to {outside}, outside the data folder; links are followed "
                               "only within it", path)
            return None
        try:
            data = read_regular_file(path, limit=MAX_IMAGE_BYTES, what="image")
        except UnreadableFileError as error:
            self.skip(relpath, error.reason, path)
            return None
        except PermissionError:
            self.skip(relpath, "cannot read the file (permission denied)", path)
            return None
        except OSError as error:
            self.skip(relpath, f"cannot read the file ({error.strerror or error})", path)
            return None
        reason = _identify(data)
        if reason is not None:
            self.skip(relpath, reason, path)
            return None
        return hashlib.sha256(data).hexdigest()


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
            found = _scan_class_folder(scanner, Path(entry.path), relpath, _label_of(entry.name), split)
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


def _scan_folders(root, scanner, field):
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


def _read_manifest(manifest, root, scanner):
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
            records.append(ImageRecord(path, relpath, _label_of(label) if label else None,
                                       split, digest))
    return records


# --------------------------------------------------------------------------
# Validation split


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


def _stratified_val(records, val_fraction, seed):
    """Move a ``val_fraction`` share of each class's training images to val (see `stratified_choice`)."""
    to_val = stratified_choice([r for r in records if r.split == "train"], val_fraction, np.random.default_rng(seed))
    return [ImageRecord(r.path, r.relpath, r.label, "val", r.sha256) if r.split == "train" and r.relpath in to_val
            else r for r in records]


# --------------------------------------------------------------------------
# Opening a data set


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


def open_dataset(root, *, strict=False, manifest=None, val_fraction=0.2, seed=0, field=None):
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
    seed : int, default 0
        Seed of that stratified split.
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
    """
    if not isinstance(val_fraction, (int, float)) or not 0.0 < float(val_fraction) < 1.0:
        raise BadInputError(f"val_fraction must be a number between 0 and 1 (exclusive); "
                            f"got {val_fraction!r}")
    root = Path(root)
    if manifest is None and root.suffix.lower() == ".csv" and root.is_file():
        manifest, root = root, root.parent
    if not root.exists():
        raise BadInputError(f"{root}: data folder not found")
    if not root.is_dir():
        raise BadInputError(f"{root}: expected a data folder, got a file")
    root = root.absolute()
    if manifest is None and field is not None:
        field = Path(field)
        if not field.is_dir():
            raise BadInputError(f"{field}: field folder not found (expected a folder "
                                "of <class>/<images> or of images)")
        field = field.absolute()
    scanner = _Scanner(root, strict, allowed=(root,) if field is None or manifest is not None else (root, field))

    if manifest is not None:
        manifest = Path(manifest)
        if not manifest.is_absolute() and not manifest.exists() and (root / manifest).exists():
            manifest = root / manifest
        records = _read_manifest(manifest.absolute(), root, scanner)
        has_val = any(record.split == "val" for record in records)
        source = str(manifest)
    else:
        records, has_val = _scan_folders(root, scanner, field)
        source = str(root)

    classes = _training_classes(records, source)
    val_from_train, split_seed = False, None
    if has_val:
        if not any(r.split == "val" for r in records):
            raise BadInputError(f"{source}: val/ holds no readable images; add images or "
                                "remove the val/ folder to split one off train")
    else:
        records = _stratified_val(records, float(val_fraction), seed)
        if not any(r.split == "val" for r in records):
            raise BadInputError(f"{source}: no val split and no class has two images to "
                                "split one off; add val/<class>/<images>")
        val_from_train, split_seed = True, int(seed)

    return Dataset(root=root, records=records, skipped=scanner.skipped, classes=classes,
                   val_from_train=val_from_train, split_seed=split_seed,
                   field_root=field if manifest is None else None)


# --------------------------------------------------------------------------
# Fingerprint and duplicates


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


def perceptual_hash(image):
    """64-bit DCT perceptual hash (pHash) of an RGB uint8 image.

    The image is turned to grey (Pillow's ``L``, ITU-R BT.601 luma), area
    averaged down to 32 x 32, transformed with an orthonormal 2-D DCT-II, and
    the 8 x 8 block of coefficients at rows and columns 1..8 (low
    frequencies, the DC term left out) is thresholded at its median [1]_.

    Parameters
    ----------
    image : numpy.ndarray
        ``(H, W, 3)`` uint8.

    Returns
    -------
    numpy.uint64
        The 64 bits, row-major, first coefficient in the highest bit.

    References
    ----------
    .. [1] C. Zauner, "Implementation and Benchmarking of Perceptual Image
       Hash Functions", Master's thesis, Upper Austria University of Applied
       Sciences, Hagenberg, 2010. (Block placement recalled from memory of
       the DCT hash described there, not checked against the text.)
    """
    return _perceptual_hash_and_spread(image)[0]


def _perceptual_hash_and_spread(image):
    """`perceptual_hash` plus the standard deviation of the 64 coefficients.

    A flat image has all those coefficients near zero, so its bits come from
    rounding noise; the spread lets callers leave such images out.
    """
    from scipy.fft import dctn

    image = np.asarray(image)
    if image.ndim != 3 or image.shape[2] != 3 or image.dtype != np.uint8:
        raise ValueError(f"expected an (H, W, 3) uint8 image; got shape {image.shape}, "
                         f"dtype {image.dtype}")
    grey = Image.fromarray(image).convert("L").resize((32, 32), Image.Resampling.BOX)
    coefficients = dctn(np.asarray(grey, dtype=np.float64), type=2, norm="ortho")
    block = coefficients[1:9, 1:9].ravel()
    bits = block > np.median(block)
    weights = np.left_shift(np.uint64(1), np.arange(63, -1, -1, dtype=np.uint64))
    return np.bitwise_or.reduce(np.where(bits, weights, np.uint64(0))), float(block.std())


_POPCOUNT_BYTE = np.array([bin(i).count("1") for i in range(256)], dtype=np.uint8)


def _popcount64(values):
    if hasattr(np, "bitwise_count"):
        return np.bitwise_count(values).astype(np.int64)
    as_bytes = values[..., None].view(np.uint8)
    return _POPCOUNT_BYTE[as_bytes].sum(axis=-1, dtype=np.int64)


def hamming_matrix(hashes_a, hashes_b):
    """Pairwise Hamming distances between two arrays of 64-bit hashes."""
    a = np.asarray(hashes_a, dtype=np.uint64)
    b = np.asarray(hashes_b, dtype=np.uint64)
    return _popcount64(np.bitwise_xor(a[:, None], b[None, :]))


# Coefficient spread (grey levels, orthonormal DCT) below which an image is
# taken as flat and left out of the near-duplicate search: blank frames would
# otherwise all share one meaningless hash. Chosen here, no source.
FLAT_SPREAD = 1.0


def _confirm_views(path):
    """The two 64 x 64 views a candidate pair is confirmed on.

    Relative luminance (linear light, float32) for SSIM, and the grey codes
    (Pillow's ``L``, BT.601 luma of the sRGB codes, uint8) for the local
    difference: a brightness change in code values (a gain, an offset, or
    both, clipped at 0 and 255) is a straight line there.
    """
    from augplan.imaging.colour import relative_luminance

    image = Image.fromarray(_decode(path, max_side=256)).resize((64, 64), Image.BILINEAR)
    return relative_luminance(np.asarray(image)), np.asarray(image.convert("L"))


def _tone_matched(source, target):
    """``source`` through the gain and offset that best predict ``target``.

    Least squares on the pixels clipped (0 or 255) in neither image, so a
    brightened copy whose highlights saturate is fitted on what the change
    left measurable; the result is clipped to [0, 1] as the copy was. Both
    are uint8 grey codes; returns float32 in [0, 1].
    """
    x = source.astype(np.float32) / 255
    y = target.astype(np.float32) / 255
    inside = (source > 0) & (source < 255) & (target > 0) & (target < 255)
    if np.count_nonzero(inside) < 2 or np.ptp(x[inside]) == 0:
        inside = np.ones(x.shape, dtype=bool)
    xs, ys = x[inside], y[inside]
    spread = float(xs.var())
    gain = float(((xs - xs.mean()) * (ys - ys.mean())).mean()) / spread if spread > 0 else 0.0
    return np.clip(gain * x + (float(ys.mean()) - gain * float(xs.mean())), 0.0, 1.0)


def local_difference(first, second):
    """Largest local difference between two grey images, as a share of contrast.

    Each image is predicted from the other by `_tone_matched`, so a change
    of brightness or contrast alone leaves no residual; the residual is
    averaged over ``NEAR_DUPLICATE_WINDOW`` x ``NEAR_DUPLICATE_WINDOW``
    windows and its largest magnitude divided by the predicted image's own
    range (max - min). The larger of the two directions is returned.

    Re-encoding and resampling leave residuals that are noise or thin lines
    along edges, which the window averages away; a stroke that is drawn
    differently leaves a patch of one sign, which it keeps. So two distinct
    handwritten 1s, whose global SSIM is inflated by the plain background
    they share, still differ here.

    Parameters
    ----------
    first, second : numpy.ndarray
        ``(H, W)`` uint8 grey codes of the same shape.

    Returns
    -------
    float
        0 for images equal up to a brightness change; about 1 when a whole
        window changes from one end of the range to the other.

    Raises
    ------
    ValueError
        The images are not uint8 grey images of one shape.
    """
    from scipy.ndimage import uniform_filter

    first, second = np.asarray(first), np.asarray(second)
    if first.ndim != 2 or first.shape != second.shape or first.dtype != np.uint8 or second.dtype != np.uint8:
        raise ValueError(f"expected two (H, W) uint8 grey images of one shape; got shapes {first.shape} and "
                         f"{second.shape}, dtypes {first.dtype} and {second.dtype}")
    worst = 0.0
    for source, target in ((first, second), (second, first)):
        residual = target.astype(np.float32) / 255 - _tone_matched(source, target)
        local = uniform_filter(residual, NEAR_DUPLICATE_WINDOW, mode="nearest")
        contrast = max(int(target.max()) - int(target.min()), 1) / 255
        worst = max(worst, float(np.abs(local).max()) / contrast)
    return worst


def _near_copies(first, second, views):
    """Whether two images are confirmed near copies of each other.

    Both tests must pass: SSIM (Wang et al. 2004) of the 64 x 64 relative
    luminance at least ``NEAR_DUPLICATE_SSIM``, and `local_difference` of
    the grey codes at most ``NEAR_DUPLICATE_LOCAL_DIFFERENCE``. ``views``
    caches each image's decoded views by path, so an image that takes part
    in many candidate pairs is read once.
    """
    from skimage.metrics import structural_similarity

    for path in (first, second):
        if path not in views:
            views[path] = _confirm_views(path)
    (luminance_a, grey_a), (luminance_b, grey_b) = views[first], views[second]
    if structural_similarity(luminance_a, luminance_b, data_range=1.0) < NEAR_DUPLICATE_SSIM:
        return False
    return local_difference(grey_a, grey_b) <= NEAR_DUPLICATE_LOCAL_DIFFERENCE


# Candidates whose 16 x 16 luminance thumbnails correlate less than this are
# no near duplicates and skip the SSIM confirmation (a cheap, vectorised
# prefilter; a noised JPEG copy of skimage's camera correlates above 0.99).
# Chosen here, no source.
_PREFILTER_CORRELATION = 0.8


def _hash_file(path):
    # 128 px is ample for a 32 x 32 hash and lets JPEGs decode at reduced scale.
    image = _decode(path, max_side=128)
    digest, spread = _perceptual_hash_and_spread(image)
    grey = np.asarray(Image.fromarray(image).convert("L").resize((16, 16), Image.Resampling.BOX),
                      dtype=np.float32).ravel()
    grey -= grey.mean()
    grey /= max(float(np.linalg.norm(grey)), 1e-6)
    return digest, spread, grey


_SPLIT_ORDER = {name: i for i, name in enumerate(SPLITS)}


def _exact_duplicates(records):
    """Pairs of records in different splits with the same file bytes (sha256)."""
    exact, by_digest = [], {}
    for record in records:
        by_digest.setdefault(record.sha256, []).append(record)
    for group in by_digest.values():
        for i, first in enumerate(group):
            for second in group[i + 1:]:
                if first.split != second.split:
                    exact.append({"kind": "exact", "a": first.relpath, "b": second.relpath,
                                  "splits": [first.split, second.split], "distance": 0})
    return exact


def find_duplicates(dataset, *, near_threshold=NEAR_DUPLICATE_BITS, workers=1):
    """Images shared between splits: exact copies and near copies.

    Only pairs in different splits are reported (a train image that is also
    in val, test or field; likewise val against test and field, test against
    field), since those leak between what a model learns and what scores it.
    ``a`` is the pair member of the earlier split (train, val, test, field).

    Parameters
    ----------
    dataset : Dataset
    near_threshold : int, default NEAR_DUPLICATE_BITS (6)
        Largest Hamming distance (of 64 bits) between perceptual hashes that
        counts as a near duplicate (common practice, no source). Negative
        turns the near search off.
    workers : int, default 1
        Processes for hashing (see `augplan.parallel.parallel_map`).

    Returns
    -------
    list of dict
        ``{"kind": "exact" | "near", "a": relpath, "b": relpath,
        "splits": [split_a, split_b], "distance": int}``; exact pairs first
        (distance 0), then near pairs, each sorted by ``(a, b)``. A near
        pair is never also an exact pair. Flat images (DCT coefficient
        spread below ``FLAT_SPREAD``) take part in the exact search only. A
        hash match is confirmed before it is reported: structural similarity
        (SSIM of the 64 x 64 luminance at least ``NEAR_DUPLICATE_SSIM``) and
        no local patch drawn differently (`local_difference` at most
        ``NEAR_DUPLICATE_LOCAL_DIFFERENCE``), which keeps distinct thin
        strokes on a plain background apart.

    References
    ----------
    .. [1] C. Zauner, "Implementation and Benchmarking of Perceptual Image
       Hash Functions", master's thesis, Upper Austria University of Applied
       Sciences, 2010.
    .. [2] Z. Wang, A. C. Bovik, H. R. Sheikh and E. P. Simoncelli, "Image
       quality assessment: from error visibility to structural similarity",
       IEEE Trans. Image Processing 13(4), 600-612, 2004.

    Raises
    ------
    BadInputError
        An image cannot be decoded (names the file).
    """
    from augplan.parallel import parallel_map

    records = sorted(dataset.records, key=lambda r: (_SPLIT_ORDER[r.split], r.relpath))
    exact, near = _exact_duplicates(records), []
    if near_threshold >= 0 and len(records) > 1:
        results = parallel_map(_hash_file, [r.path for r in records], workers=workers,
                               desc="hashing images")
        hashes = np.array([h for h, _, _ in results], dtype=np.uint64)
        textured = np.array([spread >= FLAT_SPREAD for _, spread, _ in results])
        thumbnails = np.stack([grey for _, _, grey in results])
        splits = np.array([_SPLIT_ORDER[r.split] for r in records])
        chunk = 256  # bounds the distance matrix to chunk x N at a time
        views = {}  # 20 kB per image that takes part in a candidate pair
        for start in range(0, len(records), chunk):
            stop = min(start + chunk, len(records))
            # Only textured images of a later split can pair with this chunk:
            # comparing with those alone keeps train x train pairs out.
            later = np.flatnonzero(textured & (splits > splits[start:stop].min()))
            distances = hamming_matrix(hashes[start:stop], hashes[later])
            rows, cols = np.nonzero((distances <= near_threshold)
                                    & (splits[start:stop, None] < splits[later][None, :])
                                    & textured[start:stop, None])
            distances = distances[rows, cols]
            cols = later[cols]
            correlation = np.einsum("ij,ij->i", thumbnails[start + rows], thumbnails[cols])
            keep = correlation >= _PREFILTER_CORRELATION
            rows, cols, distances = rows[keep], cols[keep], distances[keep]
            for row, col, distance in zip(rows.tolist(), cols.tolist(), distances.tolist()):
                first, second = records[start + row], records[col]
                if first.sha256 == second.sha256 or not _near_copies(first.path, second.path, views):
                    continue
                near.append({"kind": "near", "a": first.relpath, "b": second.relpath,
                             "splits": [first.split, second.split],
                             "distance": int(distance)})
    exact.sort(key=lambda d: (d["a"], d["b"]))
    near.sort(key=lambda d: (d["a"], d["b"]))
    return exact + near
