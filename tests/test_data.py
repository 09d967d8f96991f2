"""Tests for augplan.data: layout, image modes, fingerprint, duplicates."""

import io
import os
import signal
import unicodedata
from pathlib import Path

import numpy as np
import pytest
from PIL import Image, ImageEnhance, ImageOps
from skimage import data as skdata
from skimage.util import img_as_ubyte
from sklearn.model_selection import StratifiedShuffleSplit

import augplan.data.dataset as dataset_module
from augplan.data.dataset import (
    ImageRecord,
    NEAR_DUPLICATE_BITS,
    find_duplicates,
    fingerprint,
    hamming_matrix,
    load_images,
    local_difference,
    open_dataset,
    perceptual_hash,
    read_image,
)
from augplan.errors import BadInputError
from augplan.thresholds import NEAR_DUPLICATE_LOCAL_DIFFERENCE
from conftest import write_digits_dataset


def _save(path, image, fmt="PNG", **options):
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(image, np.ndarray):
        image = Image.fromarray(image)
    image.save(path, fmt, **options)
    return path


def _solid(colour, size=(6, 6)):
    return np.full(size + (3,), colour, dtype=np.uint8)


def _make_layout(root, classes=("ok", "bad"), per_class=3, splits=("train", "val")):
    """Tiny PNGs of distinct solid colours, one folder per split and class."""
    value = 0
    for split in splits:
        for label in classes:
            for i in range(per_class):
                value += 7
                _save(root / split / label / f"img{i}.png", _solid((value % 256, i * 30, 50)))
    return root


# --------------------------------------------------------------------------
# Image modes


def _black_background_reference(rgba_image):
    # Outside reference: Pillow's own alpha compositing over an opaque black canvas.
    black = Image.new("RGBA", rgba_image.size, (0, 0, 0, 255))
    return np.asarray(Image.alpha_composite(black, rgba_image.convert("RGBA")).convert("RGB"))


def _mode_cases():
    palette_image = Image.new("P", (4, 2))
    palette_image.putpalette([0, 0, 0, 10, 20, 30, 250, 5, 100] + [0] * (256 * 3 - 9))
    palette_image.putdata([1, 1, 2, 2, 0, 0, 1, 2])
    transparent_palette = palette_image.copy()
    transparent_palette.info["transparency"] = 2

    bilevel = Image.new("1", (3, 2))
    bilevel.putdata([0, 1, 1, 0, 1, 0])

    return [
        pytest.param("1", bilevel, "PNG",
                     np.repeat(np.array([[0, 255, 255], [0, 255, 0]], np.uint8)[..., None], 3, 2),
                     id="bilevel"),
        pytest.param("L", Image.new("L", (3, 2), 77), "PNG", _solid((77, 77, 77), (2, 3)), id="grey"),
        pytest.param("LA", Image.new("LA", (3, 2), (200, 128)), "PNG", "composite", id="grey-alpha"),
        pytest.param("P", palette_image, "PNG",
                     np.array([[[10, 20, 30], [10, 20, 30], [250, 5, 100], [250, 5, 100]],
                               [[0, 0, 0], [0, 0, 0], [10, 20, 30], [250, 5, 100]]], np.uint8),
                     id="palette"),
        pytest.param("P", transparent_palette, "PNG",
                     np.array([[[10, 20, 30], [10, 20, 30], [0, 0, 0], [0, 0, 0]],
                               [[0, 0, 0], [0, 0, 0], [10, 20, 30], [0, 0, 0]]], np.uint8),
                     id="palette-transparent"),
        pytest.param("RGB", Image.new("RGB", (3, 2), (12, 34, 56)), "PNG",
                     _solid((12, 34, 56), (2, 3)), id="rgb"),
        pytest.param("RGBA", Image.new("RGBA", (3, 2), (200, 100, 50, 128)), "PNG", "composite",
                     id="rgba"),
        pytest.param("CMYK", Image.new("CMYK", (3, 2), (255, 0, 0, 0)), "TIFF", "pillow-rgb",
                     id="cmyk-cyan"),
    ]


@pytest.mark.parametrize("mode, image, fmt, expected", _mode_cases())
def test_every_mode_becomes_rgb_uint8(tmp_path, mode, image, fmt, expected):
    path = _save(tmp_path / f"x.{fmt.lower()}", image, fmt)
    with Image.open(path) as reopened:
        assert reopened.mode == mode
        if isinstance(expected, str) and expected == "composite":
            expected = _black_background_reference(reopened)
        elif isinstance(expected, str) and expected == "pillow-rgb":
            # Outside reference: Pillow's own CMYK -> RGB conversion.
            expected = np.asarray(reopened.convert("RGB"))
    result = read_image(path)
    assert result.dtype == np.uint8 and result.ndim == 3 and result.shape[2] == 3
    if mode in ("LA", "RGBA"):
        np.testing.assert_allclose(result.astype(int), expected.astype(int), atol=1)
    else:
        np.testing.assert_array_equal(result, expected)


def test_cmyk_pure_cyan_is_cyan(tmp_path):
    path = _save(tmp_path / "c.tiff", Image.new("CMYK", (2, 2), (255, 0, 0, 0)), "TIFF")
    # Pillow's naive CMYK conversion (R = 255 - C - K ...) makes pure cyan (0, 255, 255).
    np.testing.assert_array_equal(read_image(path)[0, 0], [0, 255, 255])


def test_rgba_fully_transparent_pixel_is_black(tmp_path):
    pixels = np.array([[[255, 255, 255, 0], [255, 0, 0, 255]]], np.uint8)
    path = _save(tmp_path / "a.png", Image.fromarray(pixels, "RGBA"))
    np.testing.assert_array_equal(read_image(path), [[[0, 0, 0], [255, 0, 0]]])


@pytest.mark.parametrize("mode", ["I;16", "I"], ids=["I16-png", "I32-tiff"])
def test_16bit_scaled_by_bit_depth(tmp_path, mode):
    values = np.array([[0, 257, 32768, 65535]], dtype=np.uint16)
    if mode == "I;16":
        path = _save(tmp_path / "deep.png", Image.fromarray(values))
    else:
        path = _save(tmp_path / "deep.tiff", Image.fromarray(values.astype(np.int32), "I"), "TIFF")
    with Image.open(path) as reopened:
        assert reopened.mode.startswith("I")
    result = read_image(path)
    # Bit-depth scaling, not clipping: full scale maps to full scale.
    np.testing.assert_array_equal(result[0, :, 0], [0, 1, 128, 255])
    assert (result[..., 0] == result[..., 1]).all() and (result[..., 0] == result[..., 2]).all()


def test_16bit_matches_scikit_image_within_one_code(tmp_path):
    values = np.arange(0, 65536, 37, dtype=np.uint16)[None, :]
    path = _save(tmp_path / "ramp.png", Image.fromarray(values))
    # Outside reference: scikit-image's img_as_ubyte (it floors, we round: <= 1 code apart).
    reference = img_as_ubyte(values)
    difference = np.abs(read_image(path)[..., 0].astype(int) - reference.astype(int))
    assert difference.max() <= 1


@pytest.mark.parametrize("values, expected", [
    pytest.param([0.0, 0.5, 1.0], "skimage", id="within-unit-range"),
    pytest.param([-2.0, 0.0, 6.0], [0, 64, 255], id="min-max"),
])
def test_float_images(tmp_path, values, expected):
    array = np.array([values], dtype=np.float32)
    path = _save(tmp_path / "f.tiff", Image.fromarray(array, "F"), "TIFF")
    result = read_image(path)[0, :, 0]
    if expected == "skimage":
        # Outside reference: scikit-image's float -> uint8 conversion.
        np.testing.assert_allclose(result.astype(int), img_as_ubyte(array)[0].astype(int), atol=1)
        assert result[0] == 0 and result[-1] == 255
    else:
        np.testing.assert_array_equal(result, expected)


@pytest.mark.parametrize("orientation", [6, 8], ids=["exif-6", "exif-8"])
def test_exif_orientation_applied_like_pillow(tmp_path, orientation):
    pixels = np.zeros((16, 32, 3), np.uint8)
    pixels[:8, :16] = (255, 0, 0)
    pixels[8:, 16:] = (0, 0, 255)
    exif = Image.Exif()
    exif[0x0112] = orientation
    path = _save(tmp_path / "o.jpg", pixels, "JPEG", exif=exif.tobytes(), quality=95)
    result = read_image(path)
    assert result.shape == (32, 16, 3)  # the non-square shape swaps
    with Image.open(path) as reopened:
        # Outside reference: Pillow's ImageOps.exif_transpose.
        reference = np.asarray(ImageOps.exif_transpose(reopened).convert("RGB"))
    np.testing.assert_array_equal(result, reference)
    # Orientation 6 is turned 90 degrees clockwise for display (EXIF 2.3 tag 0x0112).
    k = -1 if orientation == 6 else 1
    red_corner = np.rot90(pixels, k=k)[..., 0] > 128
    assert np.mean((result[..., 0] > 128) == red_corner) > 0.95


def test_decompression_bomb_is_bad_input(tmp_path, monkeypatch):
    path = _save(tmp_path / "big.png", _solid((1, 2, 3), (40, 40)))
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 1000)  # 1600 pixels exceed it
    with pytest.raises(BadInputError, match="big.png.*decompression bomb"):
        read_image(path)


def test_max_side_downsizes_jpeg_while_reading(tmp_path):
    rng = np.random.default_rng(3)
    pixels = np.repeat(np.repeat(rng.integers(0, 256, (25, 50, 3), dtype=np.uint8), 16, 0), 16, 1)
    path = _save(tmp_path / "wide.jpg", pixels, "JPEG", quality=95)
    small = read_image(path, max_side=50)
    assert small.shape == (25, 50, 3)
    full = read_image(path)
    assert full.shape == (400, 800, 3)
    reference = np.asarray(Image.fromarray(full).resize((50, 25), Image.Resampling.BOX))
    assert np.abs(small.astype(int) - reference.astype(int)).mean() < 6


def test_read_image_errors_name_the_file(tmp_path):
    text = tmp_path / "notes.png"
    text.write_text("not an image")
    with pytest.raises(BadInputError, match="notes.png"):
        read_image(text)
    with pytest.raises(BadInputError, match="missing.png.*not found"):
        read_image(tmp_path / "missing.png")


# --------------------------------------------------------------------------
# load_images


def test_load_images_squares_and_values(tmp_path):
    first = _save(tmp_path / "a.png", _solid((10, 200, 30), (20, 40)))
    second = _save(tmp_path / "b.jpg", _solid((90, 90, 90), (300, 100)), "JPEG", quality=95)
    batch = load_images([first, second], size=8)
    assert batch.shape == (2, 8, 8, 3) and batch.dtype == np.uint8
    assert (batch[0] == (10, 200, 30)).all()
    assert np.abs(batch[1].astype(int) - 90).max() <= 2  # JPEG rounding


def test_load_images_decode_failure_names_file(tmp_path):
    _make_layout(tmp_path)
    dataset = open_dataset(tmp_path)
    victim = dataset.split("train")[0]
    victim.path.write_bytes(victim.path.read_bytes()[:30])  # damaged after the scan
    with pytest.raises(BadInputError, match=victim.path.name):
        load_images(dataset.split("train"), size=4)


def test_records_carrying_bytes_read_without_the_files(tmp_path):
    # --ship-images: workers decode the bytes the record carries, so the
    # data folder may be out of their reach. Reference: the same records read
    # from their files before the folder went away.
    root = _make_layout(tmp_path / "DATA")
    dataset = open_dataset(root)
    from_files = load_images(dataset.records, size=4)
    shipped = dataset.with_image_bytes()
    assert [r.data for r in shipped.records] == [r.path.read_bytes() for r in dataset.records]
    assert shipped.records == dataset.records  # the bytes are not part of a record's identity
    assert all(r.data is None for r in dataset.records)  # the opened data set is left as it was
    root.rename(tmp_path / "moved")
    np.testing.assert_array_equal(load_images(shipped.records, size=4), from_files)
    with pytest.raises(BadInputError, match="not found"):
        load_images(dataset.records[:1], size=4)


def test_file_changed_before_shipping_is_named(tmp_path):
    dataset = open_dataset(_make_layout(tmp_path))
    victim = dataset.split("val")[1]
    _save(victim.path, _solid((1, 2, 3)))
    with pytest.raises(BadInputError, match=f"{victim.path}: the file changed"):
        dataset.with_image_bytes()


# --------------------------------------------------------------------------
# Layout


def test_folder_layout_is_read_in_sorted_order(tmp_path):
    _make_layout(tmp_path, splits=("train", "val", "test"))
    _save(tmp_path / "field" / "loose.png", _solid((1, 1, 1)))
    _save(tmp_path / "field" / "ok" / "f.png", _solid((2, 2, 2)))
    (tmp_path / "train" / "ok" / ".hidden.png").write_text("ignored")
    dataset = open_dataset(tmp_path)
    assert dataset.classes == ("bad", "ok")
    assert not dataset.val_from_train and dataset.split_seed is None
    assert [len(dataset.split(s)) for s in ("train", "val", "test", "field")] == [6, 6, 6, 2]
    assert [r.relpath for r in dataset.split("train")] == sorted(r.relpath for r in dataset.split("train"))
    field = {r.relpath: r.label for r in dataset.split("field")}
    assert field == {"field/loose.png": None, "field/ok/f.png": "ok"}
    assert dataset.skipped == []  # hidden files are not even listed
    record = dataset.records[0]
    assert record.path.is_absolute() and record.path.exists()
    assert isinstance(record, ImageRecord)


def test_separate_field_folder(tmp_path):
    _make_layout(tmp_path / "data")
    _save(tmp_path / "site" / "a.png", _solid((3, 3, 3)))
    _save(tmp_path / "site" / "b.png", _solid((4, 4, 4)))
    dataset = open_dataset(tmp_path / "data", field=tmp_path / "site")
    assert [(r.relpath, r.label) for r in dataset.split("field")] == [
        ("field/a.png", None), ("field/b.png", None)]


@pytest.mark.parametrize("name, writer, reason", [
    pytest.param("notes.png", lambda p: p.write_text("hello"), "not an image", id="text-named-png"),
    pytest.param("empty.png", lambda p: p.write_bytes(b""), "empty file", id="zero-byte"),
    pytest.param("cut.png", lambda p: p.write_bytes(_encoded("PNG")[:-40]), "truncated", id="truncated-png"),
    pytest.param("cut.jpg", lambda p: p.write_bytes(_encoded("JPEG")[:-200]), "truncated", id="truncated-jpeg"),
    pytest.param("x.png", lambda p: p.mkdir(), "a folder", id="folder-named-png"),
])
def test_non_images_are_listed_and_skipped(tmp_path, name, writer, reason):
    _make_layout(tmp_path)
    writer(tmp_path / "train" / "ok" / name)
    dataset = open_dataset(tmp_path)
    assert len(dataset.split("train")) == 6
    assert [relpath for relpath, _ in dataset.skipped] == [f"train/ok/{name}"]
    assert reason in dataset.skipped[0][1]
    with pytest.raises(BadInputError, match=f"{name}.*{reason}"):
        open_dataset(tmp_path, strict=True)


def _encoded(fmt):
    rng = np.random.default_rng(0)
    buffer = io.BytesIO()
    Image.fromarray(rng.integers(0, 256, (48, 48, 3), dtype=np.uint8)).save(buffer, fmt)
    return buffer.getvalue()


def test_permission_denied_is_listed(tmp_path, monkeypatch):
    _make_layout(tmp_path)
    locked = tmp_path / "train" / "ok" / "img0.png"
    original = os.open

    def os_open(path, *args, **kwargs):
        # Running as root ignores chmod, so the denial is simulated at the open.
        if Path(path) == locked:
            raise PermissionError(13, "Permission denied", str(path))
        return original(path, *args, **kwargs)

    monkeypatch.setattr(os, "open", os_open)
    dataset = open_dataset(tmp_path)
    assert dataset.skipped == [("train/ok/img0.png", "cannot read the file (permission denied)")]


def test_symlink_loops_do_not_hang(tmp_path):
    _make_layout(tmp_path)
    klass = tmp_path / "train" / "ok"
    os.symlink(klass / "loop_a.png", klass / "loop_b.png")
    os.symlink(klass / "loop_b.png", klass / "loop_a.png")
    os.symlink(tmp_path / "train", klass / "up")          # folder symlink back up the tree
    os.symlink(tmp_path / "train", tmp_path / "train" / "again")
    previous = signal.signal(signal.SIGALRM, lambda *_: pytest.fail("open_dataset hung"))
    signal.alarm(20)
    try:
        dataset = open_dataset(tmp_path)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    assert len(dataset.split("train")) == 6
    skipped = dict(dataset.skipped)
    assert set(skipped) == {"train/ok/loop_a.png", "train/ok/loop_b.png", "train/ok/up", "train/again"}
    assert "not followed" in skipped["train/ok/up"]


def test_unicode_and_spaced_class_names(tmp_path):
    names = ("café au lait", "東京 tiles")
    _make_layout(tmp_path, classes=names)
    # A val folder written in decomposed form (as some file systems store it) still matches.
    decomposed = unicodedata.normalize("NFD", "café au lait")
    os.rename(tmp_path / "val" / "café au lait", tmp_path / "val" / decomposed)
    dataset = open_dataset(tmp_path)
    assert dataset.classes == tuple(sorted(names))
    assert {r.label for r in dataset.split("val")} == set(names)
    assert load_images(dataset.split("val"), size=4).shape == (6, 4, 4, 3)


@pytest.mark.parametrize("setup, message", [
    pytest.param(lambda root: None, "data folder not found", id="missing-root"),
    pytest.param(lambda root: (root / "val").mkdir(parents=True), "no train/ folder", id="missing-train"),
    pytest.param(lambda root: (root / "train").mkdir(parents=True), "no training images", id="no-classes"),
    pytest.param(lambda root: _make_layout(root, classes=("only",)), "only one training class",
                 id="single-class"),
    pytest.param(lambda root: (_make_layout(root), _save(root / "val" / "ghost" / "g.png", _solid(9)))[0],
                 "'ghost' that train lacks", id="unknown-val-class"),
    pytest.param(lambda root: (_make_layout(root), (root / "val").rename(root / "v"),
                               (root / "val").mkdir())[0], "val/ holds no readable images",
                 id="empty-val"),
])
def test_layout_errors(tmp_path, setup, message):
    root = tmp_path / "data"
    setup(root)
    with pytest.raises(BadInputError, match=message):
        open_dataset(root)


def test_empty_class_folder_is_noted_not_fatal(tmp_path):
    _make_layout(tmp_path)
    (tmp_path / "train" / "nothing").mkdir()
    dataset = open_dataset(tmp_path, strict=True)
    assert dataset.classes == ("bad", "ok")
    assert dataset.skipped == [("train/nothing", "empty class folder (no readable images), left out")]


def test_missing_val_gives_recorded_stratified_split(tmp_path):
    counts = {"many": 10, "some": 5, "lonely": 1}
    for label, n in counts.items():
        for i in range(n):
            _save(tmp_path / "train" / label / f"{i:02d}.png", _solid((i * 9, len(label), 0)))
    first = open_dataset(tmp_path, seed=5)
    assert first.val_from_train and first.split_seed == 5
    val_counts = {label: sum(r.label == label for r in first.split("val")) for label in counts}
    assert val_counts == {"many": 2, "some": 1, "lonely": 0}
    # Outside reference: scikit-learn's stratified splitter allots the same per-class counts.
    labels = np.repeat(["many", "some"], [10, 5])
    splitter = StratifiedShuffleSplit(n_splits=1, test_size=0.2, random_state=0)
    _, test_index = next(splitter.split(np.zeros(len(labels)), labels))
    assert {label: int(np.sum(labels[test_index] == label)) for label in ("many", "some")} == \
        {"many": val_counts["many"], "some": val_counts["some"]}
    again = open_dataset(tmp_path, seed=5)
    assert again.records == first.records
    assert fingerprint(again) == fingerprint(first)
    other = open_dataset(tmp_path, seed=6)
    assert {r.relpath for r in other.split("val")} != {r.relpath for r in first.split("val")}


# --------------------------------------------------------------------------
# Manifest


def _manifest_tree(root):
    _save(root / "imgs" / "a.png", _solid((1, 2, 3)))
    _save(root / "imgs" / "b.png", _solid((4, 5, 6)))
    _save(root / "imgs" / "c.png", _solid((7, 8, 9)))
    _save(root / "imgs" / "d.png", _solid((10, 11, 12)))
    return root


def test_manifest_reads_rows(tmp_path):
    _manifest_tree(tmp_path)
    (tmp_path / "list.csv").write_text(
        "path,label,split\nimgs/a.png,cat,train\nimgs/b.png,dog,train\n"
        "imgs/c.png,cat,val\nimgs/d.png,,field\n")
    dataset = open_dataset(tmp_path, manifest=tmp_path / "list.csv")
    assert [(r.relpath, r.label, r.split) for r in dataset.records] == [
        ("imgs/a.png", "cat", "train"), ("imgs/b.png", "dog", "train"),
        ("imgs/c.png", "cat", "val"), ("imgs/d.png", None, "field")]
    assert open_dataset(tmp_path / "list.csv").records == dataset.records


@pytest.mark.parametrize("rows, message", [
    pytest.param("path,label\nimgs/a.png,cat\n", "lacks column.*split", id="missing-column"),
    pytest.param("path,label,split\nimgs/a.png,cat,train\nimgs/zz.png,dog,train\n",
                 "line 3.*zz.png.*not found", id="missing-file"),
    pytest.param("path,label,split\n../outside.png,cat,train\n", r"line 2.*uses '\.\.'", id="dotdot-escape"),
    pytest.param("path,label,split\n/etc/hostname,cat,train\n", "line 2.*absolute path", id="absolute"),
    pytest.param("path,label,split\nimgs/a.png,cat,holdout\n", "line 2.*unknown split 'holdout'",
                 id="unknown-split"),
    pytest.param("path,label,split\nlink.png,cat,train\n", "line 2.*outside the data folder",
                 id="symlink-escape"),
])
def test_manifest_errors_name_row_and_fault(tmp_path, rows, message):
    root = _manifest_tree(tmp_path / "data")
    _save(tmp_path / "outside.png", _solid((0, 0, 0)))
    os.symlink(tmp_path / "outside.png", root / "link.png")
    (root / "list.csv").write_text(rows)
    with pytest.raises(BadInputError, match="list.csv.*" + message):
        open_dataset(root, manifest=root / "list.csv")


# --------------------------------------------------------------------------
# Fingerprint and duplicates


def test_fingerprint_tracks_bytes_not_order(tmp_path):
    _make_layout(tmp_path)
    bmp = _save(tmp_path / "train" / "ok" / "z.bmp", _solid((40, 40, 40)), "BMP")
    dataset = open_dataset(tmp_path)
    before = fingerprint(dataset)
    assert len(before) == 64 and int(before, 16) >= 0
    shuffled = type(dataset)(**{**dataset.__dict__, "records": dataset.records[::-1]})
    assert fingerprint(shuffled) == before
    data = bytearray(bmp.read_bytes())
    data[-1] ^= 1  # one pixel byte of an uncompressed BMP
    bmp.write_bytes(bytes(data))
    changed = open_dataset(tmp_path)
    assert fingerprint(changed) != before
    # Outside reference: hashlib's sha256 of the file bytes is what each record carries.
    import hashlib
    record = next(r for r in changed.records if r.relpath == "train/ok/z.bmp")
    assert record.sha256 == hashlib.sha256(bmp.read_bytes()).hexdigest()


def test_exact_duplicate_between_train_and_val(tmp_path):
    _make_layout(tmp_path)
    source = tmp_path / "train" / "ok" / "img1.png"
    (tmp_path / "val" / "ok" / "copy.png").write_bytes(source.read_bytes())
    duplicates = find_duplicates(open_dataset(tmp_path))
    assert duplicates == [{"kind": "exact", "a": "train/ok/img1.png", "b": "val/ok/copy.png",
                           "splits": ["train", "val"], "distance": 0}]


def _rgb(grey):
    return np.repeat(grey[..., None], 3, axis=2)


def test_near_duplicate_of_camera_found_not_coins(tmp_path):
    # Outside data: scikit-image's sample images camera() and coins().
    camera = np.asarray(Image.fromarray(skdata.camera()).resize((128, 128), Image.Resampling.BOX))
    coins = np.asarray(Image.fromarray(skdata.coins()).resize((128, 128), Image.Resampling.BOX))
    rng = np.random.default_rng(11)
    noised = np.clip(camera + rng.normal(0, 6, camera.shape), 0, 255).astype(np.uint8)
    _save(tmp_path / "train" / "a" / "camera.png", _rgb(camera))
    _save(tmp_path / "train" / "b" / "coins.png", _rgb(coins))
    _save(tmp_path / "val" / "a" / "camera_copy.jpg", _rgb(noised), "JPEG", quality=70)
    _save(tmp_path / "val" / "b" / "other.png", _rgb(skdata.moon()[::4, ::4]))
    duplicates = find_duplicates(open_dataset(tmp_path))
    assert [(d["kind"], d["a"], d["b"]) for d in duplicates] == [
        ("near", "train/a/camera.png", "val/a/camera_copy.jpg")]
    assert 0 <= duplicates[0]["distance"] <= NEAR_DUPLICATE_BITS
    distance_to_coins = hamming_matrix([perceptual_hash(_rgb(camera))], [perceptual_hash(_rgb(coins))])
    assert distance_to_coins[0, 0] > 3 * NEAR_DUPLICATE_BITS


@pytest.mark.parametrize("size, resample, ink", [
    (8, Image.Resampling.NEAREST, "dark"),
    (16, Image.Resampling.BILINEAR, "light"),
    (32, Image.Resampling.BICUBIC, "dark"),
    (64, Image.Resampling.NEAREST, "dark"),
], ids=["8px-dark", "16px-bilinear-light", "32px-bicubic-dark", "64px-nearest-dark"])
def test_distinct_handwritten_digits_are_not_near_duplicates(tmp_path, monkeypatch, size, resample, ink):
    # Outside data: scikit-learn's digits (UCI optdigits), every image, about
    # three quarters of each class in train/ and the rest in val/.
    from sklearn.datasets import load_digits

    root = write_digits_dataset(tmp_path / "DATA", {"train": 135, "val": None}, size=size,
                                resample=resample, ink=ink)
    dataset = open_dataset(root)
    # Perceptual hash and SSIM alone (the local test switched off) call some
    # of these pairs near copies; no two of the 8 x 8 sources are equal, so
    # every such pair is two distinct handwritten digits.
    with monkeypatch.context() as patch:
        patch.setattr(dataset_module, "NEAR_DUPLICATE_LOCAL_DIFFERENCE", np.inf)
        ssim_only = [d for d in find_duplicates(dataset) if d["kind"] == "near"]
    assert ssim_only, "the data no longer show the look-alikes this test guards against"
    sources = load_digits().images
    for pair in ssim_only:
        first, second = (int(Path(pair[key]).stem) for key in ("a", "b"))
        assert not np.array_equal(sources[first], sources[second])
    assert [d for d in find_duplicates(dataset) if d["kind"] == "near"] == []


def _grey_view(path):
    # The 64 x 64 grey codes a candidate is confirmed on, made here with Pillow alone.
    return np.asarray(Image.open(path).convert("RGB").resize((64, 64), Image.Resampling.BILINEAR).convert("L"))


def test_near_copies_of_outside_images_are_still_reported(tmp_path):
    # Outside data: scikit-image's camera() and coins(), and one handwritten
    # digit per class of scikit-learn's digits (UCI optdigits, 64 px bicubic).
    # The copies are made by Pillow: JPEG quality 90, resized by -3 % and
    # +3 % (bicubic), and brightened by 5 % (ImageEnhance.Brightness 1.05).
    root = write_digits_dataset(tmp_path / "DATA", {"train": 1}, size=64, resample=Image.Resampling.BICUBIC)
    for name in ("camera", "coins"):
        picture = Image.fromarray(getattr(skdata, name)()).convert("RGB")
        picture = picture.resize((128, round(128 * picture.height / picture.width)), Image.Resampling.BOX)
        _save(root / "train" / name / f"{name}.png", picture)
    copies = {}
    for original in sorted((root / "train").rglob("*.png")):
        image = Image.open(original).convert("RGB")
        width, height = image.size
        folder = root / "val" / original.parent.name
        made = {
            "q90.jpg": (image, "JPEG", {"quality": 90}),
            "smaller.png": (image.resize((round(width * 0.97), round(height * 0.97)), Image.Resampling.BICUBIC),
                            "PNG", {}),
            "larger.png": (image.resize((round(width * 1.03), round(height * 1.03)), Image.Resampling.BICUBIC),
                           "PNG", {}),
            "brighter.png": (ImageEnhance.Brightness(image).enhance(1.05), "PNG", {}),
        }
        for suffix, (picture, fmt, options) in made.items():
            copy = _save(folder / f"{original.stem}-{suffix}", picture, fmt, **options)
            copies[(original.relative_to(root).as_posix(), copy.relative_to(root).as_posix())] = (original, copy)

    found = {(d["a"], d["b"]) for d in find_duplicates(open_dataset(root)) if d["kind"] == "near"}
    assert found <= set(copies)  # nothing but true copies
    pictures = {pair for pair in copies if pair[0].split("/")[1] in ("camera", "coins")}
    assert pictures <= found and len(pictures) == 8
    # Every copy that the perceptual hash proposes is confirmed, so the
    # stricter confirmation loses none; copies the hash misses are a limit of
    # the hash, not of the confirmation, which passes them all as well.
    proposed = {pair for pair, (original, copy) in copies.items()
                if hamming_matrix([perceptual_hash(read_image(original))],
                                  [perceptual_hash(read_image(copy))])[0, 0] <= NEAR_DUPLICATE_BITS}
    assert len(proposed) >= 30 and found == proposed
    for original, copy in copies.values():
        assert local_difference(_grey_view(original), _grey_view(copy)) <= NEAR_DUPLICATE_LOCAL_DIFFERENCE


def test_local_difference_ignores_brightness_and_sees_a_redrawn_patch():
    # A thin dark stroke on white paper, drawn here.
    page = np.full((64, 64), 240, dtype=np.uint8)
    page[8:56, 30:33] = 20
    assert local_difference(page, page) == 0
    # Gain and offset with saturation: white clips at 255, the stroke stays
    # measurable. Rounding to whole codes leaves at most half a code per pixel.
    brighter = np.clip(np.round(page.astype(float) * 1.1 + 3), 0, 255).astype(np.uint8)
    assert local_difference(page, brighter) <= 0.5 / (240 - 20)
    # A second stroke as wide as the window, drawn in one copy only.
    redrawn = page.copy()
    redrawn[20:29, 10:19] = 20
    difference = local_difference(page, redrawn)
    assert difference > 3 * NEAR_DUPLICATE_LOCAL_DIFFERENCE and difference <= 1
    assert local_difference(redrawn, page) == difference


def test_hamming_matrix_matches_bit_counting():
    rng = np.random.default_rng(2)
    a = rng.integers(0, 2**63, 7, dtype=np.uint64) * np.uint64(2) + rng.integers(0, 2, 7, dtype=np.uint64)
    b = rng.integers(0, 2**63, 5, dtype=np.uint64)
    # Independent count: Python's integer bit strings.
    expected = [[bin(int(x) ^ int(y)).count("1") for y in b] for x in a]
    np.testing.assert_array_equal(hamming_matrix(a, b), expected)


def test_perceptual_hash_ignores_scale_and_mild_brightness():
    astronaut = skdata.astronaut()  # outside data: scikit-image sample image
    base = perceptual_hash(astronaut)
    half = perceptual_hash(np.asarray(Image.fromarray(astronaut).resize((256, 256))))
    brighter = perceptual_hash(np.clip(astronaut.astype(int) + 10, 0, 255).astype(np.uint8))
    flipped = perceptual_hash(astronaut[:, ::-1].copy())
    distances = hamming_matrix([base], [half, brighter, flipped])[0]
    assert distances[0] <= NEAR_DUPLICATE_BITS and distances[1] <= NEAR_DUPLICATE_BITS
    assert distances[2] > NEAR_DUPLICATE_BITS  # a mirror image is a different picture


def test_data_folder_is_never_written(tmp_path):
    _make_layout(tmp_path, splits=("train",))
    def snapshot():
        return sorted((str(p), p.stat().st_mtime_ns, p.read_bytes() if p.is_file() else b"")
                      for p in tmp_path.rglob("*"))
    before = snapshot()
    dataset = open_dataset(tmp_path)
    load_images(dataset.records, size=4)
    find_duplicates(dataset)
    fingerprint(dataset)
    assert snapshot() == before


def test_flat_images_are_not_near_duplicates(tmp_path):
    # Different blank frames share a meaningless hash; only exact copies count.
    _save(tmp_path / "train" / "a" / "grey.png", _solid((120, 120, 120), (32, 32)))
    _save(tmp_path / "train" / "b" / "dark.png", _solid((20, 20, 20), (32, 32)))
    _save(tmp_path / "val" / "a" / "light.png", _solid((200, 200, 200), (32, 32)))
    _save(tmp_path / "val" / "b" / "black.png", _solid((0, 0, 0), (32, 32)))
    assert find_duplicates(open_dataset(tmp_path)) == []
