"""Tests for augplan.data.folders and the file rules they share with manifests."""

import io
import os
import signal
import unicodedata
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from augplan.data import (
    ImageRecord,
    load_images,
    open_dataset,
)
from augplan.errors import BadInputError
from image_files import make_layout as _make_layout, save_image as _save, solid as _solid


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
