"""The user's data and recipe are never modified, and an interrupted run keeps no partial output.

Every command runs in-process (``augplan.cli.main``) on one tiny data set;
each test hashes every file and folder under the data folder and the recipe
before and after, and asserts they are identical and that nothing was
created inside the data folder. Outputs go to a separate folder.
"""

import contextlib
import hashlib
import io
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from augplan.cli import main
from conftest import TINY_RECIPE, write_tiny_dataset


def _snapshot(space):
    """{relative path: sha256 or '<dir>'} for the data folder, plus the recipe's hash."""
    entries = {}
    for path in sorted(space.data.rglob("*")):
        key = path.relative_to(space.data).as_posix()
        entries[key] = "<dir>" if path.is_dir() else hashlib.sha256(path.read_bytes()).hexdigest()
    entries["<recipe>"] = hashlib.sha256(space.recipe.read_bytes()).hexdigest()
    return entries


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return int(code), out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def space(tmp_path_factory):
    root = tmp_path_factory.mktemp("untouched")
    data = write_tiny_dataset(root / "DATA", train=5, val=3)
    recipe = root / "recipe.yaml"
    recipe.write_text(TINY_RECIPE, encoding="utf-8")
    out = root / "out"
    out.mkdir()
    return SimpleNamespace(root=root, data=data, recipe=recipe, out=out, vet=None)


def _vet_once(space):
    """Run `vet` once per module (verify needs its output); returns (code, err, before, after)."""
    if space.vet is None:
        before = _snapshot(space)
        code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", space.out / "vet",
                             "--repeats", "2", "--sample", "3", "--quiet"])
        space.vet = (code, err, before, _snapshot(space))
    return space.vet


COMMANDS = {
    "preview": (lambda s: ["preview", s.data, "--recipe", s.recipe, "-o", s.out / "sheet.png",
                           "--per-class", "1", "--draws", "1"], "sheet.png"),
    "check": (lambda s: ["check", s.data, "--recipe", s.recipe, "--sample", "3", "--quiet", "--json",
                         "--evidence", s.out / "evidence"], None),
    "coverage": (lambda s: ["coverage", s.data, "--recipe", s.recipe, "--quiet", "--json",
                            "--plots", s.out / "plots"], None),
    # No --ledger: the default ledger and feature cache must land beside the data, not in it.
    "evaluate": (lambda s: ["evaluate", s.data, "--recipe", s.recipe, "--repeats", "2", "--quiet",
                            "--json"], None),
    "draft": (lambda s: ["draft", s.data, "-o", s.out / "draft.yaml", "--quiet"], "draft.yaml"),
    "history": (lambda s: ["history", s.data, "--json"], None),
}


@pytest.mark.parametrize("command", list(COMMANDS))
def test_command_leaves_data_untouched(space, command):
    build, output = COMMANDS[command]
    before = _snapshot(space)
    code, out, err = _run(build(space))
    assert "Traceback" not in err
    assert code in (0, 1), err
    if output is not None:
        assert (space.out / output).is_file()
    else:
        assert out.lstrip().startswith("{"), out  # the command ran to its JSON document
    assert _snapshot(space) == before


def test_vet_leaves_data_untouched(space):
    code, err, before, after = _vet_once(space)
    assert "Traceback" not in err
    assert code in (0, 1), err
    assert (space.out / "vet" / "report.html").is_file()
    assert (space.out / "vet" / "vetted-tiny.yaml").is_file()
    assert after == before


def test_verify_leaves_data_untouched(space):
    code, err, _, _ = _vet_once(space)
    assert code in (0, 1), err
    before = _snapshot(space)
    code, out, err = _run(["verify", space.out / "vet" / "vetted-tiny.yaml", "--data", space.data])
    assert "Traceback" not in err
    assert code == 0, out + err  # same data as at vetting, checksum intact
    assert _snapshot(space) == before


def test_vet_refuses_output_inside_data(space):
    before = _snapshot(space)
    code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", space.data / "results",
                         "--repeats", "2", "--sample", "3", "--quiet"])
    assert code == 2
    assert "inside the data folder" in err
    assert _snapshot(space) == before


def test_vet_refuses_non_empty_output_without_force(space, tmp_path):
    out = tmp_path / "busy"
    out.mkdir()
    (out / "keep.txt").write_text("mine\n")
    code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", out, "--repeats", "2",
                         "--sample", "3", "--quiet"])
    assert code == 2
    assert "busy" in err and "--force" in err and "Traceback" not in err
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]


# --------------------------------------------------------------------------
# Ctrl-C


def _interrupt(*args, **kwargs):
    raise KeyboardInterrupt


def _left_over(folder):
    return sorted(p.relative_to(folder).as_posix() for p in Path(folder).rglob("*"))


@pytest.mark.parametrize("step", ["evaluate_recipes", "render_report"])
def test_interrupted_vet_keeps_no_partial_files(space, tmp_path, monkeypatch, step):
    import augplan.render
    import augplan.vet.job

    # vet imports evaluate_recipes at module level and render_report on call.
    monkeypatch.setattr(augplan.vet.job if step == "evaluate_recipes" else augplan.render, step, _interrupt)
    out = tmp_path / "vet"
    before = _snapshot(space)
    code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", out, "--repeats", "2",
                         "--sample", "3", "--quiet"])
    assert code == 130
    assert "interrupted" in err and "Traceback" not in err
    assert not out.exists()  # not even an empty -o folder
    assert _left_over(tmp_path) == []  # nor a temporary folder beside it
    assert _snapshot(space) == before


def test_interrupted_atomic_write_leaves_nothing(tmp_path, monkeypatch):
    # Ctrl-C in the middle of writing a file: neither the file nor its temporary remains.
    import augplan.atomic

    monkeypatch.setattr(augplan.atomic.os, "fsync", _interrupt)
    with pytest.raises(KeyboardInterrupt):
        augplan.atomic.write_text_atomic(tmp_path / "report.html", "<html></html>")
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------
# The CSV manifest form, end to end through every command


@pytest.fixture(scope="module")
def manifest_space(tmp_path_factory):
    root = tmp_path_factory.mktemp("manifest")
    data = write_tiny_dataset(root / "DATA", train=5, val=3)
    rows = ["path,label,split"] + [f"{p.relative_to(data).as_posix()},{p.parent.name},{p.parent.parent.name}"
                                   for p in sorted(data.rglob("*.png"))]
    (data / "manifest.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    recipe = root / "recipe.yaml"
    recipe.write_text(TINY_RECIPE, encoding="utf-8")
    out = root / "out"
    out.mkdir()
    return SimpleNamespace(root=root, data=data, recipe=recipe, out=out, manifest=data / "manifest.csv")


@pytest.mark.parametrize("command", [*COMMANDS, "vet", "verify"])
def test_manifest_form_runs_every_command_outside_the_data(manifest_space, command):
    space = manifest_space
    as_given = SimpleNamespace(**{**vars(space), "data": space.manifest})
    if command in ("vet", "verify"):
        argv = ["vet", space.manifest, "--recipe", space.recipe, "-o", space.out / f"vet-{command}",
                "--repeats", "2", "--sample", "3", "--quiet"]
    else:
        argv = COMMANDS[command][0](as_given)
    before = _snapshot(space)
    code, out, err = _run(argv)
    assert "Traceback" not in err
    assert code in (0, 1), err
    if command == "verify":
        code, out, err = _run(["verify", space.out / "vet-verify" / "vetted-tiny.yaml", "--data", space.manifest])
        assert code == 0, out + err
    assert _snapshot(space) == before
    # The ledger and cache default to .augplan/ beside the manifest's folder.
    if command in ("evaluate", "vet"):
        assert (space.root / ".augplan" / "ledger.sqlite").is_file()


# --------------------------------------------------------------------------
# Full disk and replaced outputs


def test_full_disk_during_vet_names_the_file_and_leaves_nothing(space, tmp_path, monkeypatch):
    import augplan.atomic

    real_write = augplan.atomic.write_bytes_atomic
    calls = []

    def write(path, data, **kwargs):
        calls.append(path)
        if len(calls) == 3:
            raise OSError(28, "No space left on device", f"{path}.tmp")
        return real_write(path, data, **kwargs)

    monkeypatch.setattr(augplan.atomic, "write_bytes_atomic", write)
    out = tmp_path / "vet"
    code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", out, "--repeats", "2",
                         "--sample", "3", "--quiet"])
    assert code == 2 and "Traceback" not in err
    assert "No space left on device" in err and str(out) in err and ".tmp" not in err
    assert not out.exists()
    assert _left_over(tmp_path) == []  # no temporary folder either


def test_replace_swaps_an_earlier_output_whole(space, tmp_path):
    from augplan.data import open_dataset
    from augplan.recipe.parse import read_recipe
    from augplan.vet.job import vet_recipes

    out = tmp_path / "demo-output"
    out.mkdir()
    (out / "report.html").write_text("old\n")
    (out / "vetted-stale.yaml").write_text("old\n")
    vet_recipes(open_dataset(space.data), [read_recipe(space.recipe)], out, replace=True, repeats=2, sample=3, rng=np.random.default_rng(0))
    assert not (out / "vetted-stale.yaml").exists()
    assert (out / "report.html").read_text() != "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo-output"]


def test_replace_refuses_a_folder_that_is_no_earlier_output(space, tmp_path):
    from augplan.data import open_dataset
    from augplan.errors import BadInputError
    from augplan.recipe.parse import read_recipe
    from augplan.vet.job import vet_recipes

    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("mine\n")
    with pytest.raises(BadInputError, match="not an earlier augplan output"):
        vet_recipes(open_dataset(space.data), [read_recipe(space.recipe)], out, replace=True, repeats=2, sample=3, rng=np.random.default_rng(0))
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]


def test_sigterm_during_vet_exits_143_and_keeps_no_output(space, tmp_path, monkeypatch):
    import os
    import signal

    import augplan.vet.job

    def terminate(*args, **kwargs):
        os.kill(os.getpid(), signal.SIGTERM)
        raise AssertionError("SIGTERM was not handled")  # never reached: the handler raises first

    monkeypatch.setattr(augplan.vet.job, "evaluate_recipes", terminate)
    out = tmp_path / "vet"
    before = _snapshot(space)
    code, _, err = _run(["vet", space.data, "--recipe", space.recipe, "-o", out, "--repeats", "2",
                         "--sample", "3", "--quiet"])
    assert code == 143
    assert "terminated" in err and "Traceback" not in err
    assert not out.exists() and _left_over(tmp_path) == []
    assert _snapshot(space) == before
    import augplan.cli

    assert signal.getsignal(signal.SIGTERM) is not augplan.cli._on_sigterm  # the earlier handler is back


def test_recipe_from_standard_input(space, monkeypatch):
    import sys

    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(space.recipe.read_bytes())))
    code, out, err = _run(["preview", space.data, "--recipe", "-", "-o", space.out / "stdin-sheet.png",
                           "--per-class", "1", "--draws", "1"])
    assert code == 0, err
    assert (space.out / "stdin-sheet.png").is_file()
    assert not (Path.cwd() / "-").exists()


def test_draft_to_standard_output(space):
    from augplan.recipe.parse import parse_recipe

    code, out, err = _run(["draft", space.data, "-o", "-", "--quiet"])
    assert code == 0, err
    assert parse_recipe(out).name == "draft"
    assert not (Path.cwd() / "-").exists()
