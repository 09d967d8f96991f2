"""Tests of contact sheets (augplan/render/sheets.py).

Nearest-neighbour enlargement is checked against numpy's ``repeat`` (an
independent implementation of block replication) on a sample image that
ships with scikit-image; PNG structure against the chunk layout of the PNG
specification (ISO/IEC 15948:2004, section 5.3).
"""

import hashlib
import struct

import numpy as np
import pytest
from PIL import Image
from skimage import data as skdata

from augplan import demo
from augplan.data import open_dataset
from augplan.recipe.parse import Transform, parse_recipe
from augplan.render.sheets import PAD, contact_sheet, png_bytes, preview_sheet, save_png

WHITE = 255


def _grid(n_rows, n_columns, side=16, seed=0):
    rng = np.random.default_rng(seed)
    return [[rng.integers(0, 256, size=(side, side, 3), dtype=np.uint8) for _ in range(n_columns)]
            for _ in range(n_rows)]


def _cell_origin(left, top, i, j, cell, caption_band=0):
    return left + PAD + j * (cell + PAD), top + PAD + i * (cell + caption_band + PAD)


@pytest.mark.parametrize("shape", [(1, 1), (2, 3), (4, 2)], ids=["1x1", "2x3", "4x2"])
def test_sheet_size_grows_by_rows_and_columns_times_cell(shape):
    n_rows, n_columns = shape
    rows = _grid(n_rows, n_columns)
    labels = [f"class {i}" for i in range(n_rows)]
    columns = [f"col {j}" for j in range(n_columns)]
    small = contact_sheet(rows, row_labels=labels, column_labels=columns, cell=32)
    large = contact_sheet(rows, row_labels=labels, column_labels=columns, cell=64)
    assert large.width - small.width == n_columns * 32
    assert large.height - small.height == n_rows * 32
    # The margins around the grid are positive: room for labels and gaps.
    assert small.width > n_columns * 32 + PAD * (n_columns + 1)
    assert small.height > n_rows * 32 + PAD * (n_rows + 1)


def test_sheet_without_labels_is_the_bare_grid():
    rows = _grid(2, 3)
    sheet = contact_sheet(rows, row_labels=["", ""], cell=20)
    assert sheet.size == (PAD + 3 * (20 + PAD), PAD + 2 * (20 + PAD))


def test_labels_are_drawn_in_their_margins():
    rows = _grid(2, 2)
    bare = contact_sheet(rows, row_labels=["", ""], cell=40)
    sheet = contact_sheet(rows, row_labels=["chevron-left", "glaze-teal"],
                          column_labels=["original", "draw 1"], cell=40, title="recipe cautious")
    pixels = np.asarray(sheet)
    left = sheet.width - bare.width
    top = sheet.height - bare.height
    assert left > 0 and top > 0
    for i in range(2):
        _, y = _cell_origin(left, top, i, 0, 40)
        assert (pixels[y:y + 40, :left] < WHITE).any(), f"row label {i} missing"
    assert (pixels[:top, left:] < WHITE).any()  # column labels and title
    # The gap between the title band and the first row stays white.
    assert (pixels[top:top + PAD, :] == WHITE).all()


def test_cells_are_nearest_neighbour_enlargements():
    # skimage's astronaut sample (ships with scikit-image) cut to 16 x 16.
    image = np.ascontiguousarray(skdata.astronaut()[100:116, 200:216])
    sheet = np.asarray(contact_sheet([[image]], row_labels=["x"], cell=64))
    bare_left = sheet.shape[1] - (PAD + 64 + PAD)
    x, y = _cell_origin(bare_left, 0, 0, 0, 64)
    reference = np.repeat(np.repeat(image, 4, axis=0), 4, axis=1)  # block replication
    np.testing.assert_array_equal(sheet[y:y + 64, x:x + 64], reference)


def test_non_square_and_grey_cells_keep_aspect_and_centre():
    wide = np.zeros((8, 16, 3), dtype=np.uint8)
    grey = np.full((16, 16), 100, dtype=np.uint8)
    sheet = np.asarray(contact_sheet([[wide, grey]], row_labels=[""], cell=32))
    x, y = _cell_origin(0, 0, 0, 0, 32)
    block = sheet[y:y + 32, x:x + 32]
    assert (block[8:24] == 0).all() and (block[:8] == WHITE).all() and (block[24:] == WHITE).all()
    x, y = _cell_origin(0, 0, 0, 1, 32)
    assert (sheet[y:y + 32, x:x + 32] == 100).all()


def test_captions_get_a_band_and_are_drawn_under_their_cell():
    # Cells wider than the caption, so the columns keep the cell's width.
    rows = _grid(2, 2)
    plain = contact_sheet(rows, row_labels=["", ""], cell=128)
    captioned = contact_sheet(rows, row_labels=["", ""], cell=128,
                              captions=[["", "now chevron-right"], ["", ""]])
    band = (captioned.height - plain.height) // 2
    assert band > 0 and captioned.width == plain.width
    pixels = np.asarray(captioned)
    x0, y0 = _cell_origin(0, 0, 0, 0, 128, band)
    x1, _ = _cell_origin(0, 0, 0, 1, 128, band)
    assert (pixels[y0 + 128:y0 + 128 + band, x1:x1 + 128] < WHITE).any()
    assert (pixels[y0 + 128:y0 + 128 + band, x0:x0 + 128] == WHITE).all()


def _dark_runs(band):
    """Runs of pixel columns holding dark pixels, gaps under PAD (between letters) bridged: words."""
    columns = np.flatnonzero((np.asarray(band) < 128).any(axis=(0, 2)))
    runs = []
    for x in columns:
        if runs and x - runs[-1][1] <= PAD:
            runs[-1][1] = x
        else:
            runs.append([x, x])
    return runs


def test_labels_wider_than_small_cells_are_neither_clipped_nor_run_together():
    # Fashion-MNIST's 28-pixel images make 28-pixel cells, narrower than "transformed".
    sheet = contact_sheet(_grid(2, 2, side=28), row_labels=["", ""], cell=28,
                          column_labels=["original", "transformed"])
    top = sheet.height - PAD - 2 * (28 + PAD)  # the column-label band above the first row
    runs = _dark_runs(np.asarray(sheet)[:top])
    # Two labels apart, white between them, the last ending inside the sheet.
    assert len(runs) == 2 and runs[1][1] < sheet.width - 1


def test_captions_wider_than_small_cells_stay_under_their_own_cell():
    sheet = contact_sheet(_grid(1, 2, side=28), row_labels=[""], cell=28, captions=[["flipped", "flipped"]])
    pixels = np.asarray(sheet)
    band = pixels[PAD + 28:sheet.height - PAD]  # under the row of cells
    runs = _dark_runs(band)
    assert len(runs) == 2 and runs[1][1] < sheet.width - 1


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"rows": [], "row_labels": []}, "at least one row"),
        ({"rows": [[np.zeros((4, 4, 3), np.uint8)]], "row_labels": ["a", "b"]}, "one label per row"),
        ({"rows": [[np.zeros((4, 4, 3), np.float32)]], "row_labels": ["a"]}, "uint8"),
        ({"rows": [[np.zeros((4, 4, 3), np.uint8)]], "row_labels": ["a"], "cell": 4}, "at least 8"),
        ({"rows": [[np.zeros((4, 4, 3), np.uint8)]], "row_labels": ["a"],
          "column_labels": ["x", "y"]}, "one label per column"),
    ],
    ids=["no-rows", "label-count", "float-image", "tiny-cell", "column-count"],
)
def test_bad_arguments_are_refused(kwargs, message):
    with pytest.raises(ValueError, match=message):
        contact_sheet(**kwargs)


def _png_chunk_types(blob):
    # PNG layout (ISO/IEC 15948 section 5.3): 8-byte signature, then chunks
    # of length (4 bytes, big endian), type (4), data, CRC (4).
    assert blob[:8] == b"\x89PNG\r\n\x1a\n"
    types, offset = [], 8
    while offset < len(blob):
        (length,) = struct.unpack(">I", blob[offset:offset + 4])
        types.append(blob[offset + 4:offset + 8].decode("ascii"))
        offset += 12 + length
    return types


def test_save_png_is_deterministic_and_carries_no_metadata(tmp_path):
    sheet = contact_sheet(_grid(1, 2), row_labels=["a"], cell=16)
    first, second = save_png(sheet, tmp_path / "a.png"), save_png(sheet, tmp_path / "b.png")
    assert first.read_bytes() == second.read_bytes()
    assert set(_png_chunk_types(first.read_bytes())) == {"IHDR", "IDAT", "IEND"}
    np.testing.assert_array_equal(np.asarray(Image.open(first)), np.asarray(sheet))
    # No temporary file is left behind by the atomic write.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.png", "b.png"]


RELABEL_FLIP = """
name: mirror
transforms:
  - op: flip
    axis: horizontal
    relabel: {chevron-left: chevron-right, chevron-right: chevron-left}
  - op: rotate
    degrees: [-10, 10]
"""


@pytest.fixture(scope="module")
def small_dataset(tmp_path_factory):
    root = tmp_path_factory.mktemp("preview")
    demo.make_demo_dataset(root, n_train=3, n_val=1, n_field=1)
    return open_dataset(root)


def test_preview_is_deterministic_for_a_seeded_rng(small_dataset):
    recipe = parse_recipe(RELABEL_FLIP)
    sheets = [preview_sheet(small_dataset, recipe, per_class=2, draws=3, rng=np.random.default_rng(seed))
              for seed in (5, 5, 6)]
    digests = [hashlib.sha256(png_bytes(s)).hexdigest() for s in sheets]
    assert digests[0] == digests[1]
    assert digests[0] != digests[2]
    n_classes = len(small_dataset.classes)
    assert sheets[0].height > n_classes * 2 * 96 and sheets[0].width > 4 * 96


def test_preview_shows_originals_and_marks_relabelled_draws(small_dataset):
    recipe = parse_recipe(RELABEL_FLIP)
    sheet = preview_sheet(small_dataset, recipe, per_class=1, draws=2, rng=np.random.default_rng(0))
    plain = preview_sheet(small_dataset, parse_recipe("name: still\ntransforms:\n  - op: rotate\n"
                                                      "    degrees: [-10, 10]\n"),
                          per_class=1, draws=2, rng=np.random.default_rng(0))
    band = (sheet.height - plain.height) // len(small_dataset.classes)
    assert band > 0  # only the relabelling recipe needs captions
    pixels = np.asarray(sheet)
    # "now chevron-right" is wider than a 96-pixel cell: the columns widen to
    # fit it (the uncaptioned sheet keeps 96) and the cells sit centred in them.
    column = 96 + (sheet.width - plain.width) // 3
    inset = (column - 96) // 2
    left = sheet.width - (PAD + 3 * (column + PAD))
    top = sheet.height - (PAD + len(small_dataset.classes) * (96 + band + PAD))
    for i, label in enumerate(small_dataset.classes):
        first = sorted(r.relpath for r in small_dataset.split("train") if r.label == label)[0]
        original = np.asarray(Image.open(small_dataset.root / first).convert("RGB"))
        x, y = _cell_origin(left, top, i, 0, column, band)
        y = top + PAD + i * (96 + band + PAD)
        shown = pixels[y:y + 96, x + inset:x + inset + 96]
        # 64 -> 96 is a 1.5x nearest enlargement: every source pixel appears.
        assert {tuple(p) for p in shown.reshape(-1, 3)} == {tuple(p) for p in original.reshape(-1, 3)}
        xd, _ = _cell_origin(left, top, i, 1, column, band)
        caption = pixels[y + 96:y + 96 + band, xd:xd + column]
        if label.startswith("chevron"):
            assert (caption < WHITE).any(), f"{label}: relabel caption missing"
        else:
            assert (caption == WHITE).all(), f"{label}: unexpected caption"


@pytest.mark.parametrize("kwargs", [{"per_class": 0}, {"draws": -1}], ids=["per-class", "draws"])
def test_preview_refuses_bad_counts(small_dataset, kwargs):
    with pytest.raises(ValueError, match="positive integer"):
        preview_sheet(small_dataset, parse_recipe(RELABEL_FLIP), rng=np.random.default_rng(0), **kwargs)
def _evidence_item(record, position, magnitude, after="b"):
    from augplan.augment.transforms import params_at
    from augplan.results import EvidenceItem

    params = params_at(Transform("rotate", {"degrees": (-15.0, 15.0)}), magnitude, "reflect")
    return EvidenceItem(index=0, op="rotate", magnitude=magnitude, params=params,
                        source=record.relpath, before="a", after=after, title="transform 0 (rotate): breaks",
                        stream=7, position=position, record=record)


def test_evidence_sheet_keeps_the_files_aspect_ratio(tmp_path):
    from augplan.data import ImageRecord
    from augplan.render.sheets import evidence_sheets

    records = []
    for index, colour in enumerate(((220, 0, 0), (0, 0, 220))):
        path = tmp_path / f"{index}.png"
        Image.new("RGB", (40, 20), colour).save(path)  # 40 wide, 20 high
        records.append(ImageRecord(path, path.name, "a", "train", ""))
    items = [_evidence_item(records[0], 0, 15.0), _evidence_item(records[1], 1, -15.0, after="outside")]
    ((name, sheet),) = evidence_sheets(items).values()
    assert name == "transform-00-rotate.png"
    pixels = np.asarray(sheet.convert("RGB")).astype(int)
    red = (pixels[..., 0] > 200) & (pixels[..., 1] < 40) & (pixels[..., 2] < 40)
    rows, columns = np.nonzero(red)
    original = columns < columns.min() + 41  # the first column's cell: the original, never enlarged here
    assert columns[original].max() - columns[original].min() + 1 == 40
    assert rows[original].max() - rows[original].min() + 1 == 20
    # The same items draw the same pixels (each image's keyed stream).
    assert png_bytes(evidence_sheets(items)[0][1]) == png_bytes(sheet)


def test_evidence_sheets_are_written_whole_and_named_by_transform(tmp_path):
    from augplan.data import ImageRecord
    from augplan.render.sheets import write_evidence_sheets

    path = tmp_path / "image.png"
    Image.new("RGB", (16, 16), (0, 120, 0)).save(path)
    record = ImageRecord(path, path.name, "a", "train", "")
    written = write_evidence_sheets([_evidence_item(record, 0, 5.0)], tmp_path / "evidence")
    assert written == {0: tmp_path / "evidence" / "transform-00-rotate.png"}
    assert sorted(p.name for p in (tmp_path / "evidence").iterdir()) == ["transform-00-rotate.png"]
    with Image.open(written[0]) as sheet:
        assert sheet.format == "PNG"
    assert write_evidence_sheets([], tmp_path / "none") == {}


@pytest.mark.parametrize("op,params,magnitude,caption", [
    ("rotate", {"degrees": (-15.0, 15.0)}, 12.5, "+12.5\u00b0"),
    ("zoom", {"factor": (0.8, 1.2)}, 1.07, "\u00d71.07"),
    ("noise", {"sigma": (0.0, 0.05)}, 0.0133, "\u03c3 0.0133"),
    ("shift", {"fraction": (-0.1, 0.1)}, -0.125, "shift -0.12"),
    ("flip", {"axis": "horizontal"}, None, "flipped"),
], ids=["degrees", "factor", "sigma", "fraction", "flip"])
def test_evidence_captions_name_the_magnitude(op, params, magnitude, caption):
    from augplan.render.sheets import magnitude_caption

    assert magnitude_caption(op, magnitude) == caption
