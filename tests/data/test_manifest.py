"""Tests for augplan.data.manifest: rows read, faulty rows named."""

import os

import pytest

from augplan.data import (
    open_dataset,
)
from augplan.errors import BadInputError
from image_files import save_image as _save, solid as _solid


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
