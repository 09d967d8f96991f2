"""Tests of the invented demo scenario (augplan.demo).

Luminance is BT.709 relative luminance of linear light (ITU-R BT.709-6 item
3.2, IEC 61966-2-1 decoding), computed with augplan.colour; the colour test
of the glaze classes uses Python's colorsys as the independent HSV reference.
"""

import colorsys
import hashlib
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from augplan import demo
from augplan.imaging.colour import mean_relative_luminance

SMALL = {"n_train": 8, "n_val": 4, "n_field": 10}


def _hashes(root):
    return {
        path.relative_to(root).as_posix(): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(root.rglob("*")) if path.is_file()
    }


def _load(root, split, label):
    paths = sorted((root / split / label).glob("*.png"))
    return np.stack([np.asarray(Image.open(p).convert("RGB")) for p in paths])


@pytest.fixture(scope="module")
def small_demo(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo")
    demo.make_demo_dataset(root, **SMALL)
    return root


def test_same_seed_gives_byte_identical_files(small_demo, tmp_path):
    demo.make_demo_dataset(tmp_path, **SMALL)
    first, second = _hashes(small_demo), _hashes(tmp_path)
    assert len(first) == 5 * sum(SMALL.values())
    assert first == second


def test_other_seed_gives_other_images(small_demo, tmp_path):
    demo.make_demo_dataset(tmp_path, rng=np.random.default_rng(demo.DEMO_SEED + 1), **SMALL)
    first, second = _hashes(small_demo), _hashes(tmp_path)
    assert first.keys() == second.keys()
    assert all(first[k] != second[k] for k in first)


def test_smaller_rerun_removes_stale_images(tmp_path):
    demo.make_demo_dataset(tmp_path, n_train=3, n_val=2, n_field=2)
    demo.make_demo_dataset(tmp_path, n_train=2, n_val=1, n_field=1)
    assert len(list((tmp_path / "train" / "glaze-teal").glob("*.png"))) == 2
    assert len(list((tmp_path / "val" / "glaze-teal").glob("*.png"))) == 1


@pytest.mark.parametrize("split", ["train", "val", "field"])
def test_splits_and_class_folders_exist(small_demo, split):
    folders = sorted(p.name for p in (small_demo / split).iterdir() if p.is_dir())
    assert folders == sorted(demo.CLASSES)
    for label in demo.CLASSES:
        images = _load(small_demo, split, label)
        assert images.shape == (SMALL[f"n_{split}"], 64, 64, 3)
        assert images.dtype == np.uint8


def _class_luminance(root, split):
    return {label: np.mean([mean_relative_luminance(im) for im in _load(root, split, label)])
            for label in demo.CLASSES}


@pytest.mark.parametrize("split", ["train", "val"])
def test_lighting_shortcut_holds_in_train_and_val(small_demo, split):
    lum = _class_luminance(small_demo, split)
    others = [lum[c] for c in demo.CLASSES if c != "hairline-crack"]
    # Exposure 0.35-0.5 against 0.9-1.1 in linear light: the cracked class
    # must come out at well under two thirds of the darkest other class.
    assert lum["hairline-crack"] < 0.6 * min(others)


def test_lighting_shortcut_absent_in_field(small_demo):
    lum = _class_luminance(small_demo, "field")
    others = [lum[c] for c in demo.CLASSES if c != "hairline-crack"]
    ratio = lum["hairline-crack"] / np.mean(others)
    assert 0.8 < ratio < 1.25


def test_field_lighting_spans_dim_and_bright_for_every_class(small_demo):
    # Dim intact tiles and bright cracked tiles must both appear in the field.
    train_lum = {c: [mean_relative_luminance(im) for im in _load(small_demo, "train", c)]
                 for c in demo.CLASSES}
    crack_train_max = max(train_lum["hairline-crack"])
    intact_train_min = min(min(v) for c, v in train_lum.items() if c != "hairline-crack")
    for label in demo.CLASSES:
        field = [mean_relative_luminance(im) for im in _load(small_demo, "field", label)]
        assert min(field) < crack_train_max
        assert max(field) > intact_train_min


def test_chevrons_are_mirror_images(small_demo):
    left = _load(small_demo, "train", "chevron-left").astype(np.float64).mean(axis=0)
    right = _load(small_demo, "train", "chevron-right").astype(np.float64).mean(axis=0)
    flipped_left = left[:, ::-1]
    assert np.abs(flipped_left - right).mean() < 0.8 * np.abs(flipped_left - left).mean()
    # A vertical flip keeps a chevron's direction: the flipped mean stays
    # closer to its own class than to the mirrored class.
    vflipped_left = left[::-1]
    assert np.abs(vflipped_left - left).mean() < np.abs(vflipped_left - right).mean()


def test_glaze_classes_differ_in_hue_only(small_demo):
    def spot_hsv(label):
        images = _load(small_demo, "train", label)
        centre = images[:, 28:36, 28:36].reshape(-1, 3).mean(axis=0) / 255.0
        return colorsys.rgb_to_hsv(*centre)  # independent HSV reference

    amber, teal = spot_hsv("glaze-amber"), spot_hsv("glaze-teal")
    assert 20 / 360 < amber[0] < 50 / 360  # amber: orange-yellow hue
    assert 160 / 360 < teal[0] < 200 / 360  # teal: blue-green hue
    assert abs(amber[1] - teal[1]) < 0.12
    assert abs(amber[2] - teal[2]) < 0.12


def test_render_tile_exposure_scales_linear_light():
    bright = demo.render_tile("glaze-teal", np.random.default_rng(3), exposure=1.0, rotation=0.0)
    dim = demo.render_tile("glaze-teal", np.random.default_rng(3), exposure=0.5, rotation=0.0)
    # Same draws, half the linear light: mean luminance halves up to noise
    # and 8-bit rounding (luminance is linear in linear-light RGB, BT.709).
    ratio = mean_relative_luminance(dim) / mean_relative_luminance(bright)
    assert ratio == pytest.approx(0.5, abs=0.03)


@pytest.mark.parametrize("bad", [0, -1, 2.5, True], ids=["zero", "negative", "float", "bool"])
def test_bad_counts_are_refused(tmp_path, bad):
    with pytest.raises(ValueError, match="n_train"):
        demo.make_demo_dataset(tmp_path, n_train=bad)


def test_unknown_label_is_refused():
    with pytest.raises(ValueError, match="label must be one of"):
        demo.render_tile("glaze-purple", np.random.default_rng(0), exposure=1.0, rotation=0.0)


def test_main_writes_to_given_folder(tmp_path, monkeypatch):
    calls = []
    monkeypatch.setattr(demo, "make_demo_dataset", lambda root: calls.append(root) or [])
    assert demo.main([str(tmp_path)]) == 0
    assert calls == [tmp_path]
    assert demo.main(["--bogus"]) == 2


def test_committed_demo_images_match_the_generator(tmp_path):
    # Image i of a class does not depend on the counts (the generator is
    # spawned per split, class and image), so the first train and val images
    # regenerated here must equal the committed ones byte for byte.
    shipped = demo.DEFAULT_DEMO_DIR
    if not (shipped / "train").is_dir():
        pytest.skip("demo_images/ is not part of this installation")
    demo.make_demo_dataset(tmp_path, n_train=2, n_val=2, n_field=1)
    for split in ("train", "val"):
        for label in demo.CLASSES:
            for path in sorted((tmp_path / split / label).glob("*.png")):
                assert path.read_bytes() == (shipped / split / label / path.name).read_bytes()


@pytest.mark.parametrize("name", ["naive-draft", "cautious", "light-and-pose"])
def test_demo_recipes_parse(name):
    from augplan.recipe.parse import read_recipe

    recipe = read_recipe(demo.DEMO_RECIPE_DIR / f"{name}.yaml")
    assert recipe.name == name
    ops = [t.op for t in recipe.transforms]
    if name == "naive-draft":
        # The label-breaking pair the demo is meant to catch.
        assert any(t.op == "flip" and t.params["axis"] == "horizontal" and t.relabel is None
                   and t.only is None for t in recipe.transforms)
        assert any(t.op == "hue" and t.params["degrees"][1] >= 120 for t in recipe.transforms)
    if name == "light-and-pose":
        flips = [t for t in recipe.transforms if t.op == "flip" and t.params["axis"] == "horizontal"]
        assert flips and dict(flips[0].relabel) == {"chevron-left": "chevron-right",
                                                    "chevron-right": "chevron-left"}
        assert "brightness" in ops and "rotate" in ops


def test_demo_runs_without_the_checkout_images_and_exits_like_vet(tmp_path, monkeypatch, capsys):
    # An installed package has no demo_images/: the scenario is drawn into a temporary folder.
    import json as json_module

    from augplan import demo
    from augplan.cli import main

    drawn, real_make = [], demo.make_demo_dataset

    def small_demo(root, **kwargs):
        drawn.append(Path(root))
        return real_make(root, n_train=14, n_val=6, n_field=8)

    monkeypatch.setattr(demo, "DEFAULT_DEMO_DIR", tmp_path / "no-checkout" / "demo_images")
    monkeypatch.setattr(demo, "DEMO_RECIPES", ("naive-draft.yaml",))
    monkeypatch.setattr(demo, "make_demo_dataset", small_demo)
    capsys.readouterr()
    code = main(["demo", "-o", str(tmp_path / "out"), "--json", "--quiet"])
    document = json_module.loads(capsys.readouterr().out)
    assert code == (0 if document["unchanged"] else 1)  # the naive draft is changed: exit 1, as vet
    assert code == 1
    assert (tmp_path / "out" / "report.html").is_file()
    assert drawn and not drawn[0].exists()  # the temporary scenario is gone


def test_installed_wheel_runs_the_demo_outside_the_checkout(tmp_path):
    # A wheel built from a copy of the checkout's sources, installed into a
    # folder of its own and run from a third: no demo_images/, no checkout on
    # the path, and the recipes must come from the package data.
    import json as json_module
    import os
    import shutil
    import subprocess
    import sys
    import zipfile

    pytest.importorskip("setuptools")  # the wheel is built without build isolation, offline
    checkout = Path(__file__).resolve().parent.parent
    source = tmp_path / "source"
    source.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(checkout / name, source / name)
    for folder in ("augplan", "recipes"):
        shutil.copytree(checkout / folder, source / folder, ignore=shutil.ignore_patterns("__pycache__"))
    pip = [sys.executable, "-m", "pip", "--disable-pip-version-check", "--no-input"]
    built = subprocess.run(pip + ["wheel", "--no-deps", "--no-build-isolation", "--no-index", "-w",
                                  str(tmp_path / "wheels"), str(source)], capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    assert "project.license" not in built.stderr  # the license is an SPDX string, not a deprecated table
    (wheel,) = (tmp_path / "wheels").glob("augplan-*.whl")
    listed = zipfile.ZipFile(wheel).namelist()
    assert all(f"augplan/demo_recipes/{name}" in listed for name in demo.DEMO_RECIPES), listed
    # The starting recipes install from the one recipes/ folder as augplan.recipes.
    starting = sorted(path.name for path in (checkout / "recipes").glob("*.yaml"))
    assert sorted(name.rsplit("/", 1)[1] for name in listed if name.startswith("augplan/recipes/")
                  and name.endswith(".yaml")) == starting

    target = tmp_path / "installed"
    installed = subprocess.run(pip + ["install", "--no-deps", "--no-index", "--target", str(target), str(wheel)],
                               capture_output=True, text=True)
    assert installed.returncode == 0, installed.stderr
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    # The installed copy comes first on the path; the dependencies come from this environment.
    environment = {**os.environ, "PYTHONPATH": str(target)}
    run = subprocess.run([str(target / "bin" / "augplan"), "demo", "-o", str(tmp_path / "out"), "--quiet",
                          "--model", "linear"],
                         cwd=elsewhere, env=environment, capture_output=True, text=True, timeout=900)
    assert run.returncode in (0, 1), run.stderr  # vet's exit codes: 1 when vetting changed a recipe
    assert (tmp_path / "out" / "report.html").is_file()
    evidence = json_module.loads((tmp_path / "out" / "evidence.json").read_text(encoding="utf-8"))
    recipe_folder = target / "augplan" / "demo_recipes"
    assert [Path(entry["source"]) for entry in evidence["recipes"]] == [recipe_folder / name
                                                                        for name in demo.DEMO_RECIPES]
    # The scenario was drawn for the run, not read from the checkout.
    assert not Path(evidence["data"]["root"]).is_relative_to(checkout)
    assert not Path(evidence["data"]["root"]).exists()

    # The starting recipes come from the installed package too: listed, and
    # a draft begins from one by name (on conftest's tiny data set, so that
    # the label-safety check stays short).
    augplan = str(target / "bin" / "augplan")
    listing = subprocess.run([augplan, "draft", "--list"], cwd=elsewhere, env=environment, capture_output=True,
                             text=True, timeout=120)
    assert listing.returncode == 0, listing.stderr
    assert [line.split()[0] for line in listing.stdout.splitlines()] == [Path(name).stem for name in starting]
    from conftest import write_tiny_dataset

    tiny = write_tiny_dataset(tmp_path / "tiny")
    drafted = subprocess.run([augplan, "draft", str(tiny), "--start", "recipes/handwritten-characters.yaml",
                              "-o", str(tmp_path / "draft.yaml"), "--quiet"],
                             cwd=elsewhere, env=environment, capture_output=True, text=True, timeout=600)
    assert drafted.returncode == 0, drafted.stderr
    text = (tmp_path / "draft.yaml").read_text(encoding="utf-8")
    assert f"({target / 'augplan' / 'recipes' / 'handwritten-characters.yaml'})" in text


def test_the_project_metadata_reads_without_setuptools_warnings():
    # setuptools itself reads pyproject.toml, as `make demo`'s install does;
    # a `license = {text = ...}` table draws its deprecation warning (PEP 639).
    import warnings

    pytest.importorskip("setuptools")
    from setuptools.config.pyprojecttoml import apply_configuration
    from setuptools.dist import Distribution

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        distribution = apply_configuration(Distribution(), Path(__file__).resolve().parent.parent / "pyproject.toml")
    assert [str(w.message) for w in caught if "license" in str(w.message).lower()] == []
    assert distribution.metadata.license_expression == "MIT"
