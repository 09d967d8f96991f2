"""Contact sheets: grids of small images with row, column and cell captions.

A contact sheet lets a person look at what a recipe does before trusting any
number: each row shows one original next to a few augmented draws. Cells are
enlarged with nearest-neighbour sampling so every source pixel stays a crisp
block and nothing is smoothed away. Text uses Pillow's bundled default font,
so sheets look the same on every machine with the same Pillow version.

Layout (all in pixels, ``PAD`` between and around cells)::

    +-----------------------------------------------+
    | title                                         |
    |              column label  column label  ...  |
    | row label    [ cell ]      [ cell ]           |
    |              caption       caption            |
    | row label    [ cell ]      [ cell ]           |
    +-----------------------------------------------+

so ``width = left_margin + PAD + n_columns * (column + PAD)``, where a
column is as wide as the cell or its widest label or caption (small images),
(or the title's width, if that is wider) and
``height = top_margin + PAD + n_rows * (cell + caption_band + PAD)``.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw, ImageFont

from augplan.atomic import write_bytes_atomic

__all__ = ["PAD", "contact_sheet", "preview_sheet", "evidence_sheets", "write_evidence_sheets", "png_bytes",
           "save_png"]

PAD = 6
_BACKGROUND = (255, 255, 255)
_TEXT = (20, 20, 20)
# Captions mark something a reader must notice (a label that changed), so
# they stand out from the neutral row and column labels.
_CAPTION = (170, 20, 20)
_MAX_LABEL_CHARS = 40
_FONT_SIZE = 12
_PNG_OPTIONS = {"format": "PNG", "compress_level": 6, "optimize": False}


def _font():
    # Pillow's bundled font; at its default 10 px the spaces nearly vanish.
    return ImageFont.load_default(size=_FONT_SIZE)


def _text_size(font, text):
    left, top, right, bottom = font.getbbox(text)
    return right - left, bottom - top


def _shorten(text):
    text = str(text)
    return text if len(text) <= _MAX_LABEL_CHARS else text[: _MAX_LABEL_CHARS - 3] + "..."


def _as_rgb_cell(image, where, cell):
    """Validate one cell image and enlarge it (nearest neighbour) to fit ``cell``."""
    array = np.asarray(image)
    if array.dtype != np.uint8 or array.ndim not in (2, 3) or (array.ndim == 3 and array.shape[2] != 3):
        raise ValueError(
            f"{where} must be a uint8 image of shape (H, W, 3) or (H, W); "
            f"got shape {array.shape} and dtype {array.dtype}"
        )
    if array.shape[0] == 0 or array.shape[1] == 0:
        raise ValueError(f"{where} must have at least one pixel; got shape {array.shape}")
    picture = Image.fromarray(array if array.ndim == 3 else np.stack([array] * 3, axis=-1), mode="RGB")
    height, width = array.shape[:2]
    scale = cell / max(height, width)
    size = (max(1, round(width * scale)), max(1, round(height * scale)))
    return picture.resize(size, resample=Image.Resampling.NEAREST)


def contact_sheet(rows, row_labels, *, column_labels=None, cell=96, title=None, captions=None):
    """Lay images out in a labelled grid.

    Parameters
    ----------
    rows : list of list of numpy.ndarray
        ``rows[i][j]`` is a uint8 image, ``(H, W, 3)`` RGB or ``(H, W)`` grey,
        or None for an empty cell. Rows may differ in length.
    row_labels : list of str
        One label per row, drawn left of the row. May be given by keyword.
    column_labels : list of str, optional
        One label per column, drawn above the first row.
    cell : int, default 96
        Side of the square each image is enlarged into (nearest neighbour,
        aspect ratio kept, centred).
    title : str, optional
        One line across the top.
    captions : list of list of str, optional
        ``captions[i][j]`` is drawn under cell ``(i, j)``; None or "" draws
        nothing. A caption band is reserved under every row only when some
        caption is given.

    Returns
    -------
    PIL.Image.Image
        RGB image on a white background; its size follows the layout in the
        module notes.

    Raises
    ------
    ValueError
        Empty ``rows``, label or caption counts that do not match, a cell
        that is not a uint8 image, or ``cell`` below 8.
    """
    rows, row_labels, column_labels, cell, captions = _checked_grid(rows, row_labels, column_labels, cell,
                                                                    captions)
    n_columns = max(len(row) for row in rows)
    font = _font()
    line = _text_size(font, "Ag")[1] + 4
    label_width = max((_text_size(font, label)[0] for label in row_labels), default=0)
    left = label_width + PAD if label_width else 0
    # A column is as wide as its widest label or caption when that is wider
    # than the cell (small images), so no text runs into the next column.
    texts = list(column_labels or ()) + [_shorten(text) for row in (captions or ()) for text in row if text]
    slot = max([cell] + [_text_size(font, text)[0] for text in texts])
    top = (line + PAD if title else 0) + (line if column_labels is not None else 0)
    caption_band = line if captions and any(text for row in captions for text in row) else 0
    row_height = cell + caption_band + PAD
    width = left + PAD + n_columns * (slot + PAD)
    if title:
        # A narrow grid widens to fit its title rather than cut it off.
        title = _shorten_title(str(title))
        width = max(width, _text_size(font, title)[0] + 2 * PAD)
    height = top + PAD + len(rows) * row_height

    sheet = Image.new("RGB", (width, height), _BACKGROUND)
    draw = ImageDraw.Draw(sheet)
    if title:
        draw.text((PAD, PAD), title, fill=_TEXT, font=font)
    for j, label in enumerate(column_labels or ()):
        x = left + PAD + j * (slot + PAD) + (slot - _text_size(font, label)[0]) // 2
        draw.text((x, top - line + 1), label, fill=_TEXT, font=font)
    for i, row in enumerate(rows):
        y = top + PAD + i * row_height
        text_height = _text_size(font, row_labels[i] or "Ag")[1]
        draw.text((PAD, y + (cell - text_height) // 2), row_labels[i], fill=_TEXT, font=font)
        for j, image in enumerate(row):
            if image is None:
                continue
            picture = _as_rgb_cell(image, f"rows[{i}][{j}]", cell)
            x = left + PAD + j * (slot + PAD)
            sheet.paste(picture, (x + (slot - picture.width) // 2, y + (cell - picture.height) // 2))
            if caption_band and j < len(captions[i]) and captions[i][j]:
                caption = _shorten(captions[i][j])
                draw.text((x + (slot - _text_size(font, caption)[0]) // 2, y + cell + 2), caption,
                          fill=_CAPTION, font=font)
    return sheet


def _checked_grid(rows, row_labels, column_labels, cell, captions):
    """Validate `contact_sheet`'s arguments; the rows, shortened labels, cell side and captions."""
    rows = [list(row) for row in rows]
    if not rows:
        raise ValueError("rows must hold at least one row of images; got none")
    if isinstance(cell, bool) or not isinstance(cell, (int, np.integer)) or cell < 8:
        raise ValueError(f"cell must be an integer of at least 8 pixels; got {cell!r}")
    row_labels = [_shorten(label) for label in row_labels]
    if len(row_labels) != len(rows):
        raise ValueError(f"row_labels must have one label per row ({len(rows)}); got {len(row_labels)}")
    n_columns = max(len(row) for row in rows)
    if n_columns == 0:
        raise ValueError("rows must hold at least one image; every row is empty")
    if column_labels is not None:
        column_labels = [_shorten(label) for label in column_labels]
        if len(column_labels) != n_columns:
            raise ValueError(
                f"column_labels must have one label per column ({n_columns}); got {len(column_labels)}"
            )
    if captions is not None:
        captions = [list(row) for row in captions]
        if len(captions) != len(rows) or any(len(c) > len(r) for c, r in zip(captions, rows)):
            raise ValueError("captions must have the shape of rows: one list per row, "
                             "at most one caption per cell")
    return rows, row_labels, column_labels, int(cell), captions


def _shorten_title(text):
    return text if len(text) <= 120 else text[:117] + "..."


def preview_sheet(dataset, recipe, *, per_class=3, draws=5, rng, cell=96):
    """Contact sheet of a recipe on a data set: originals and augmented draws.

    For every training class, the first ``per_class`` training images in
    sorted path order each get one row: the original, then ``draws``
    independent draws of ``augplan.transforms.apply_recipe`` with the
    image's label. When a ``relabel`` changed the label of a draw, the new
    label is written under it ("now <label>").

    Parameters
    ----------
    dataset : augplan.data.Dataset or str or Path
        The data set (a path is opened with `augplan.data.open_dataset`).
    recipe : augplan.recipe.Recipe
    per_class : int, default 3
        Training images shown per class.
    draws : int, default 5
        Augmented draws per image.
    rng : numpy.random.Generator
        One child generator is spawned per shown image, so a row does not
        depend on how many rows come before it.
    cell : int, default 96
        Side of each cell in pixels.

    Returns
    -------
    PIL.Image.Image
        The sheet, cells ``cell`` pixels wide; images larger than that are
        downsized as they are read, smaller ones are augmented at their own
        size and enlarged only for display.
    """
    from augplan.data import Dataset, open_dataset, read_image
    from augplan.augment.transforms import apply_recipe

    for name, value in (("per_class", per_class), ("draws", draws)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise ValueError(f"{name} must be a positive integer; got {value!r}")
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}")
    if isinstance(cell, bool) or not isinstance(cell, (int, np.integer)) or cell < 8:
        raise ValueError(f"cell must be an integer of at least 8 pixels; got {cell!r}")
    if not isinstance(dataset, Dataset):
        dataset = open_dataset(dataset)

    train = dataset.split("train")
    chosen = []
    for label in dataset.classes:
        records = sorted((r for r in train if r.label == label), key=lambda r: r.relpath)
        chosen.extend(records[:per_class])

    rows, row_labels, captions = [], [], []
    for record, image_rng in zip(chosen, rng.spawn(len(chosen))):
        original = read_image(record.path, max_side=cell)
        row, row_captions = [original], [""]
        for _ in range(draws):
            augmented, new_label = apply_recipe(original, recipe, image_rng, record.label)
            row.append(augmented)
            row_captions.append(f"now {new_label}" if new_label != record.label else "")
        rows.append(row)
        row_labels.append(record.label)
        captions.append(row_captions)
    if not rows:
        raise ValueError(f"{dataset.root}: the data set has no training images to preview")
    column_labels = ["original"] + [f"draw {k}" for k in range(1, draws + 1)]
    title = f"recipe {recipe.name}: {per_class} training image(s) per class, {draws} draws each"
    return contact_sheet(rows, row_labels, column_labels=column_labels, cell=cell,
                         title=title, captions=captions)


# Side of an evidence sheet's cells: images are read no larger than this.
EVIDENCE_CELL = 96

# Short enough to fit under the smallest evidence cell (64 pixels at 12 points).
_MAGNITUDE_FORMATS = {"degrees": "{:+.3g}\u00b0", "factor": "\u00d7{:.3g}", "sigma": "\u03c3 {:.3g}",
                      "fraction": "shift {:+.2g}"}


def magnitude_caption(op, magnitude):
    """``+15°``, ``×1.2``, ``σ 0.02``: the magnitude a pair of an evidence sheet shows."""
    from augplan.augment.transforms import OPS

    field = OPS[op].magnitude
    if field is None or magnitude is None:
        return "flipped" if op == "flip" else op
    return _MAGNITUDE_FORMATS.get(field, field + " {:.3g}").format(magnitude)


def _evidence_sheet(items):
    """One transform's sheet: a row per example, the original then the transformed image.

    The pair is drawn from the image file at its own aspect ratio (the check
    itself ran on the squares the proxy model reads), with the transform at
    the magnitude that moved it, captioned with that magnitude.
    """
    from augplan.augment.transforms import OPS
    from augplan.data import read_record
    from augplan.seeding import keyed_generator

    function = OPS[items[0].op].function
    originals = [read_record(item.record, max_side=EVIDENCE_CELL) for item in items]
    # Never enlarged past the largest image shown: a small image keeps its own pixels.
    cell = max(8, min(EVIDENCE_CELL, max(max(image.shape[:2]) for image in originals)))
    rows = [[original, function(original, item.params, keyed_generator(item.stream, item.index, item.position))]
            for item, original in zip(items, originals)]
    return contact_sheet(rows, [f"{item.before} -> {item.after}" for item in items],
                         column_labels=["original", "transformed"], cell=cell, title=items[0].title,
                         captions=[["", magnitude_caption(item.op, item.magnitude)] for item in items])


def evidence_sheets(items):
    """Contact sheets of the checker's evidence examples, one per transform.

    Parameters
    ----------
    items : sequence of augplan.results.EvidenceItem
        ``CheckResult.evidence``: the examples of every transform that is
        not safe, each with its record, op parameters, classes and title.

    Returns
    -------
    dict of int -> (str, PIL.Image.Image)
        Per transform index, in order: the sheet's file name
        (``transform-02-flip.png``) and the sheet. Each transformed image
        draws from the item's keyed stream, so the same check draws the same
        pixels.
    """
    groups = {}
    for item in items:
        groups.setdefault(item.index, []).append(item)
    return {index: (f"transform-{index:02d}-{group[0].op}.png", _evidence_sheet(group))
            for index, group in groups.items()}


def write_evidence_sheets(items, folder):
    """Draw `evidence_sheets` and write them as PNG files of ``folder``, whole or not at all.

    Parameters
    ----------
    items : sequence of augplan.results.EvidenceItem
    folder : str or Path
        Checked by the caller (`augplan.atomic.check_output`); written with
        `augplan.atomic.publish_folder`.

    Returns
    -------
    dict of int -> Path
        The sheet of each transform index that has one.
    """
    from augplan.atomic import publish_folder

    sheets = evidence_sheets(items)
    publish_folder({name: png_bytes(sheet) for name, sheet in sheets.values()}, folder)
    return {index: Path(folder) / name for index, (name, _) in sheets.items()}


def png_bytes(image):
    """Encode an image as PNG bytes with fixed options and no metadata."""
    if not isinstance(image, Image.Image):
        array = np.asarray(image)
        if array.dtype != np.uint8 or array.ndim not in (2, 3):
            raise ValueError(
                f"image must be a PIL image or a uint8 array of shape (H, W, 3) or (H, W); "
                f"got shape {array.shape} and dtype {array.dtype}"
            )
        image = Image.fromarray(array)
    buffer = io.BytesIO()
    image.convert("RGB").save(buffer, **_PNG_OPTIONS)
    return buffer.getvalue()


def save_png(image, path):
    """Write an image as a PNG file, atomically and with deterministic bytes.

    Parameters
    ----------
    image : PIL.Image.Image or numpy.ndarray
        Saved as RGB.
    path : str or Path
        Destination; its folder must exist.

    Returns
    -------
    Path
        The destination.
    """
    return write_bytes_atomic(Path(path), png_bytes(image))
