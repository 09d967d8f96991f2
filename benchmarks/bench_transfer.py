"""Do the default model's gains carry over to a bigger network? (a measurement, not a test)

On two real data sets, six recipes are scored three ways with
`augplan.evaluate.evaluate_recipes`:

- ``default``: the default model (the small network, ``cnn``, with its
  documented defaults; 3 repeats);
- ``linear``: the linear proxy (3 repeats);
- ``reference``: a deeper network (three convolution blocks of 16, 32 and
  64 channels against the default's two of 16 and 32) trained twice as
  many optimiser steps (about 2.6 times the default's compute a fit),
  2 repeats: the long-trained run the others are
  held against. It lives here only, never in the product.

Data:

- scikit-learn's digits (UCI optdigits), written as 32x32 PNGs: 50 training
  images per class, the other 1,297 for validation;
- the committed Fashion-MNIST subset (tests/reference/, see its README): 100
  training images per class from the training file, the 50 per class from
  the t10k file for validation, at 32x32. With ``--fashion-t10k N`` (and
  Debian's ``dataset-fashion-mnist`` installed) validation takes the first N
  per class of the whole t10k file instead: 500 validation images leave
  intervals of about +-0.02, wider than most gains compared here.

Printed per data set: the three gain tables, the Spearman rank correlation
of the gains between each pair (`scipy.stats.spearmanr`), and two
agreements with the reference: of the point gain's sign, and of the Holm
verdict (``gains`` / ``no difference`` / ``loses``, by the evaluator's
VERDICT_RULE on Holm-adjusted p-values). Targets: default vs reference
Spearman >= 0.9, signs and verdicts agree on at least 5 of the 6 recipes.

Run: ``.venv/bin/python benchmarks/bench_transfer.py [--workers 2] [--data digits fashion]
[--reference-repeats 2] [--fashion-t10k 500]``.
"""

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image
from scipy.stats import spearmanr

from augplan.data import open_dataset
from augplan.evaluate import evaluate_recipes
from augplan.measure.models import ConvNet
from augplan.measure.convnet import ConvNetClassifier
from augplan.recipe.parse import Recipe, Transform

SIZE = 32
FASHION = Path(__file__).resolve().parents[1] / "tests" / "reference" / "fashion-mnist-subset.npz"
# Where Debian's dataset-fashion-mnist package puts the original IDX files.
DEBIAN_FASHION = Path("/usr/share/datasets/fashion-mnist")

RECIPES = [
    Recipe(name="flip-h", transforms=(Transform("flip", {"axis": "horizontal"}, probability=0.5),)),
    Recipe(name="small-affine", transforms=(Transform("rotate", {"degrees": (-10.0, 10.0)}),
                                            Transform("shift", {"fraction": (-0.08, 0.08)}))),
    Recipe(name="zoom", transforms=(Transform("zoom", {"factor": (0.9, 1.1)}),)),
    Recipe(name="lighting", transforms=(Transform("brightness", {"factor": (0.8, 1.25)}),
                                        Transform("contrast", {"factor": (0.8, 1.25)}))),
    Recipe(name="blur-noise", transforms=(Transform("blur", {"sigma": (0.0, 0.8)}),
                                          Transform("noise", {"sigma": (0.0, 0.03)}))),
    Recipe(name="rotate-45", transforms=(Transform("rotate", {"degrees": (-45.0, 45.0)}),)),
]


def _save(image, folder, name):
    folder.mkdir(parents=True, exist_ok=True)
    Image.fromarray(image).resize((SIZE, SIZE), Image.Resampling.BILINEAR).convert("RGB").save(folder / name)


def write_digits(root, per_class=50):
    from sklearn.datasets import load_digits

    digits = load_digits()
    order = np.random.default_rng(0).permutation(len(digits.target))
    taken = dict.fromkeys(range(10), 0)
    for index in order:
        label = int(digits.target[index])
        split = "train" if taken[label] < per_class else "val"
        taken[label] += 1
        # 0..16 ink levels -> white paper, dark ink.
        _save((255 - digits.images[index] * (255 / 16)).astype(np.uint8), root / split / f"d{label}",
              f"{index}.png")
    return open_dataset(root)


def _t10k(per_class):
    """The first ``per_class`` images of each class of Fashion-MNIST's t10k file, from Debian's package."""
    sys.path.insert(0, str(FASHION.parent))
    from cut_fashion_mnist import first_per_class, read_idx

    if not DEBIAN_FASHION.is_dir():
        raise SystemExit(f"--fashion-t10k needs Debian's dataset-fashion-mnist package ({DEBIAN_FASHION} is missing): "
                         f"apt-get install dataset-fashion-mnist")
    images = read_idx(DEBIAN_FASHION / "t10k-images-idx3-ubyte.gz")
    labels = read_idx(DEBIAN_FASHION / "t10k-labels-idx1-ubyte.gz")
    keep = first_per_class(labels, per_class)
    return images[keep], labels[keep]


def write_fashion(root, t10k_per_class=None):
    with np.load(FASHION) as arrays:
        names = [str(n).replace("/", "-").replace(" ", "-").lower() for n in arrays["class_names"]]
        splits = {"train": (arrays["train_images"], arrays["train_labels"]),
                  "val": (arrays["test_images"], arrays["test_labels"]) if t10k_per_class is None
                  else _t10k(t10k_per_class)}
        for split, (images, labels) in splits.items():
            for index, (image, label) in enumerate(zip(images, labels)):
                _save(image, root / split / names[label], f"{index:05d}.png")
    return open_dataset(root)


REFERENCE_WIDTHS = (16, 32, 64)
REFERENCE_STEP_FACTOR = 2


def _models(reference_repeats=2):
    defaults = ConvNetClassifier().get_params()
    reference = (("widths", REFERENCE_WIDTHS), ("steps", REFERENCE_STEP_FACTOR * defaults["steps"]))
    return {"default": (None, 3), "linear": ("linear", 3),
            "reference": (ConvNet(params=reference), reference_repeats)}


def _table(name, document):
    base = document["baseline"]
    lines = [f"  {name}: baseline accuracy {base['accuracy']:.3f} [{base['accuracy_ci'][0]:.3f}, "
             f"{base['accuracy_ci'][1]:.3f}]"]
    for row in document["recipes"]:
        lines.append(f"    {row['name']:<14} gain {row['gain']:+.4f} [{row['gain_ci'][0]:+.4f}, "
                     f"{row['gain_ci'][1]:+.4f}]  p_holm {row['p_holm']:.3g}  {row['verdict']}")
    return "\n".join(lines)


def compare(documents):
    """Spearman correlations and agreements with the reference, as printable lines."""
    gains = {name: np.array([row["gain"] for row in doc["recipes"]]) for name, doc in documents.items()}
    verdicts = {name: [row["verdict"] for row in doc["recipes"]] for name, doc in documents.items()}
    lines = []
    for a, b in (("default", "reference"), ("linear", "reference"), ("default", "linear")):
        rho = spearmanr(gains[a], gains[b]).statistic
        signs = int(np.sum(np.sign(gains[a]) == np.sign(gains[b])))
        agree = sum(x == y for x, y in zip(verdicts[a], verdicts[b]))
        lines.append(f"  {a} vs {b}: Spearman {rho:+.2f}; point-gain signs agree on {signs} of {len(gains[a])}; "
                     f"verdicts agree on {agree} of {len(gains[a])}")
    rho = spearmanr(gains["default"], gains["reference"]).statistic
    signs = int(np.sum(np.sign(gains["default"]) == np.sign(gains["reference"])))
    agree = sum(x == y for x, y in zip(verdicts["default"], verdicts["reference"]))
    met = rho >= 0.9 and signs >= 5 and agree >= 5
    lines.append(f"  targets (default vs reference: Spearman >= 0.9, signs and Holm verdicts >= 5 of 6): "
                 f"{'met' if met else 'NOT met'} (Spearman {rho:+.2f}, signs {signs}, verdicts {agree})")
    lines.append("  recipe | default | linear | reference")
    for i, row in enumerate(documents["default"]["recipes"]):
        lines.append("  " + " | ".join([row["name"]] + [
            f"{documents[m]['recipes'][i]['gain']:+.3f} ({documents[m]['recipes'][i]['verdict']})"
            for m in ("default", "linear", "reference")]))
    return lines


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--data", nargs="+", choices=("digits", "fashion"), default=["digits", "fashion"])
    parser.add_argument("--models", nargs="+", choices=("default", "linear", "reference"),
                        default=["default", "linear", "reference"])
    parser.add_argument("--reference-repeats", type=int, default=2)
    parser.add_argument("--fashion-t10k", type=int, default=None, metavar="PER_CLASS",
                        help="validate the clothing set on the first PER_CLASS images of each class of the full "
                             "t10k file (Debian's dataset-fashion-mnist) instead of the committed 50, for "
                             "narrower intervals; at most 1000")
    parser.add_argument("--store", type=Path, default=None,
                        help="folder keeping each run's JSON (DATA-MODEL.json); the comparison uses the stored "
                             "runs of models not run now, so the three can run as separate processes")
    args = parser.parse_args(argv)
    writers = {"digits": write_digits,
               "fashion": lambda root: write_fashion(root, args.fashion_t10k)}
    for data_name in args.data:
        with tempfile.TemporaryDirectory() as scratch:
            dataset = writers[data_name](Path(scratch) / "DATA")
            counts = {s: len(dataset.split(s)) for s in ("train", "val")}
            print(f"{data_name}: {counts['train']} training and {counts['val']} validation images at "
                  f"{SIZE}x{SIZE}, {len(RECIPES)} recipes", flush=True)
            documents = {}
            for name, (model, repeats) in _models(args.reference_repeats).items():
                stored = None if args.store is None else args.store / f"{data_name}-{name}.json"
                if name not in args.models:
                    if stored is not None and stored.is_file():
                        documents[name] = json.loads(stored.read_text())
                    continue
                start = time.perf_counter()
                documents[name] = evaluate_recipes(dataset, RECIPES, np.random.default_rng(0), repeats=repeats, size=SIZE,
                                                   workers=args.workers, cache_dir=False, model=model).to_json()
                print(_table(f"{name} ({repeats} repeats, {time.perf_counter() - start:.0f} s)", documents[name]),
                      flush=True)
                if stored is not None:
                    stored.parent.mkdir(parents=True, exist_ok=True)
                    stored.write_text(json.dumps(documents[name]))
            if len(documents) == 3:
                print("\n".join(compare(documents)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
