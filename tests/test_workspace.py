"""The workspace beside the data (augplan.workspace) and the never-write-inside-the-data guard."""

import shutil

import pytest

from augplan.errors import BadInputError
from augplan.workspace import default_feature_cache, default_ledger, ensure_outside_data, workspace_dir
from conftest import write_tiny_dataset


def test_workspace_lies_beside_the_data_folder(tmp_path):
    data = tmp_path / "DATA"
    assert workspace_dir(data) == tmp_path.resolve() / ".augplan"
    assert default_ledger(data) == tmp_path.resolve() / ".augplan" / "ledger.sqlite"
    assert default_feature_cache(data) == tmp_path.resolve() / ".augplan" / "features"


@pytest.mark.parametrize("inside", [".", "out", "train/alpha/sheet.png", "sub/../report.html"])
def test_paths_inside_the_data_are_refused(tmp_path, inside):
    data = tmp_path / "DATA"
    data.mkdir()
    with pytest.raises(BadInputError, match="inside the data folder"):
        ensure_outside_data(data / inside, data)


@pytest.mark.parametrize("outside", ["out", "DATA-copy", "DATA/../report.html"])
def test_paths_outside_the_data_pass(tmp_path, outside):
    data = tmp_path / "DATA"
    data.mkdir()
    assert ensure_outside_data(tmp_path / outside, data) is None


def _data_without_val(tmp_path):
    data = write_tiny_dataset(tmp_path / "DATA")
    shutil.rmtree(data / "val")
    return data


@pytest.mark.parametrize("flags, seed_said", [([], 0), (["--seed", "3"], 0), (["--split-seed", "4"], 4),
                                               (["--seed", "3", "--split-seed", "4"], 4)])
def test_split_seed_alone_sets_the_stand_in_validation_split(tmp_path, run_cli, tiny_recipe, flags, seed_said):
    data = _data_without_val(tmp_path)
    result = run_cli("preview", data, "--recipe", tiny_recipe, "-o", tmp_path / "sheet.png",
                     "--per-class", "1", "--draws", "1", *flags)
    assert result.code == 0, result.err
    assert f"stratified split of train (seed {seed_said})" in result.err

