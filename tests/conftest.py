"""Shared fixtures: a tiny on-disk data set, a tiny recipe, and an in-process command runner."""

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

TINY_CLASSES = ("alpha", "beta")
TINY_RECIPE = """\
name: tiny
seed: 0
copies: 1
transforms:
  - op: flip
    axis: horizontal
    probability: 0.5
  - op: brightness
    factor: [0.8, 1.25]
"""


def draw_tiny_image(class_index, rng, side=16):
    """A class-coded image: a bar whose angle depends on the class, on a noisy grey ground.

    Invented data for ground-truth tests only.
    """
    y, x = np.mgrid[0:side, 0:side] / (side - 1) - 0.5
    angle = np.pi * class_index / 3 + rng.normal(0, 0.05)
    bar = np.abs(x * np.sin(angle) - y * np.cos(angle)) < 0.12
    image = rng.uniform(0.3, 0.5) + rng.normal(0, 0.04, (side, side)) + 0.4 * bar
    rgb = np.clip(image[..., None] * np.array([1.0, 0.9, 0.8]) * 255, 0, 255)
    return rgb.astype(np.uint8)


def write_tiny_dataset(root, classes=TINY_CLASSES, train=5, val=3, side=16, seed=0):
    """Write ``root/{train,val}/<class>/NN.png`` and return ``root``."""
    rng = np.random.default_rng(seed)
    root = Path(root)
    for split, count in (("train", train), ("val", val)):
        for index, name in enumerate(classes):
            folder = root / split / name
            folder.mkdir(parents=True, exist_ok=True)
            for n in range(count):
                Image.fromarray(draw_tiny_image(index, rng, side)).save(folder / f"{n:02d}.png")
    return root


def write_digits_dataset(root, per_class, *, size=32, resample=Image.Resampling.BILINEAR, ink="dark", seed=0):
    """Write scikit-learn's digits as ``root/<split>/d<digit>/<index>.png`` and return ``root``.

    The data: scikit-learn's bundled copy of the UCI optical recognition of
    handwritten digits test set, 8 x 8 grey images with ink levels 0..16.

    Parameters
    ----------
    per_class : dict
        split -> images per class, taken in turn from one seeded permutation
        of each class; ``None`` takes every image of the class left.
    size : int
        Side of the written RGB PNG; 8 keeps the original grid.
    resample : PIL.Image.Resampling
        Filter of the upscaling.
    ink : {'dark', 'light'}
        ``'dark'``: ``255 - v * 255 / 16``, dark ink on white paper, as on a
        scanned form; ``'light'``: ``v * 255 / 16``, light ink on black.
    """
    from sklearn.datasets import load_digits

    digits = load_digits()
    rng = np.random.default_rng(seed)
    root = Path(root)
    for digit in range(10):
        indices = rng.permutation(np.flatnonzero(digits.target == digit))
        start = 0
        for split, count in per_class.items():
            stop = len(indices) if count is None else start + count
            folder = root / split / f"d{digit}"
            folder.mkdir(parents=True, exist_ok=True)
            for index in indices[start:stop]:
                levels = digits.images[index] * (255 / 16)
                grey = (255 - levels if ink == "dark" else levels).astype(np.uint8)
                image = Image.fromarray(grey).resize((size, size), resample)
                image.convert("RGB").save(folder / f"{index}.png")
            start = stop
    return root


@pytest.fixture
def tiny_dataset(tmp_path):
    """``tmp_path/DATA``: 2 classes x (5 train + 3 val) images of 16x16."""
    return write_tiny_dataset(tmp_path / "DATA")


@pytest.fixture
def tiny_recipe(tmp_path):
    """``tmp_path/recipe.yaml``: a flip and a brightness change, one copy."""
    path = tmp_path / "recipe.yaml"
    path.write_text(TINY_RECIPE, encoding="utf-8")
    return path


@dataclass
class CliResult:
    code: int
    out: str
    err: str


@pytest.fixture
def run_cli(capsys):
    """Call ``augplan.cli.main(argv)`` in-process; returns code, stdout and stderr."""
    from augplan.cli import main

    def run(*argv):
        capsys.readouterr()
        code = main([str(a) for a in argv])
        captured = capsys.readouterr()
        return CliResult(int(code), captured.out, captured.err)

    return run


@pytest.fixture(autouse=True, scope="session")
def quick_default_model():
    """Tests of other things run on the quick linear proxy where no model is named.

    The default model is the network (`augplan.measure.models.DEFAULT_MODEL`);
    a network fit costs seconds, so tests that do not test the model choice
    score with the linear proxy. Session-wide, so fixtures of any scope see
    it; tests marked ``network_default`` get the real default back
    (`network_default`).
    """
    import augplan.measure.models as models

    real = models.DEFAULT_MODEL
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(models, "DEFAULT_MODEL", "linear")
        yield real


@pytest.fixture(autouse=True)
def network_default(request, quick_default_model, monkeypatch):
    if request.node.get_closest_marker("network_default") is not None:
        monkeypatch.setattr("augplan.measure.models.DEFAULT_MODEL", quick_default_model)
