"""Tests for augplan.data.dataset: the stand-in validation split, a data folder never written."""

import numpy as np
import pytest
from sklearn.model_selection import StratifiedShuffleSplit

from augplan.data import (
    find_duplicates,
    fingerprint,
    load_images,
    open_dataset,
)
from image_files import make_layout as _make_layout, save_image as _save, solid as _solid


def test_missing_val_gives_recorded_stratified_split(tmp_path):
    counts = {"many": 10, "some": 5, "lonely": 1}
    for label, n in counts.items():
        for i in range(n):
            _save(tmp_path / "train" / label / f"{i:02d}.png", _solid((i * 9, len(label), 0)))
    first = open_dataset(tmp_path, rng=np.random.default_rng(5), split_seed=5)
    assert first.val_from_train and first.split_seed == 5
    val_counts = {label: sum(r.label == label for r in first.split("val")) for label in counts}
    assert val_counts == {"many": 2, "some": 1, "lonely": 0}
    # Outside reference: scikit-learn's stratified splitter allots the same per-class counts.
    labels = np.repeat(["many", "some"], [10, 5])
    splitter = StratifiedShuffleSplit(n_splits=1, test_size=0.2, random_state=0)
    _, test_index = next(splitter.split(np.zeros(len(labels)), labels))
    assert {label: int(np.sum(labels[test_index] == label)) for label in ("many", "some")} == \
        {"many": val_counts["many"], "some": val_counts["some"]}
    again = open_dataset(tmp_path, rng=np.random.default_rng(5), split_seed=5)
    assert again.records == first.records
    assert fingerprint(again) == fingerprint(first)
    other = open_dataset(tmp_path, rng=np.random.default_rng(6), split_seed=6)
    assert {r.relpath for r in other.split("val")} != {r.relpath for r in first.split("val")}


def test_data_folder_is_never_written(tmp_path):
    _make_layout(tmp_path, splits=("train",))
    def snapshot():
        return sorted((str(p), p.stat().st_mtime_ns, p.read_bytes() if p.is_file() else b"")
                      for p in tmp_path.rglob("*"))
    before = snapshot()
    dataset = open_dataset(tmp_path, rng=np.random.default_rng(0))
    load_images(dataset.records, size=4)
    find_duplicates(dataset)
    fingerprint(dataset)
    assert snapshot() == before


def test_every_command_that_reads_data_without_val_draws_the_split_itself(tmp_path, run_cli):
    # history has no --split-seed: it splits as the default does, and finds what evaluate stored.
    _make_layout(tmp_path / "DATA", splits=("train",))
    result = run_cli("history", tmp_path / "DATA", "--ledger", tmp_path / "ledger.sqlite")
    assert result.code == 0, result.err
    with pytest.raises(TypeError, match="no val split"):
        open_dataset(tmp_path / "DATA")
