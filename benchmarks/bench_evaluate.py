"""Benchmark of `augplan.evaluate.evaluate_recipes` (a measurement, not a test).

5 recipes x 5 repeats, copies=4, 10 classes of synthetic 64x64 images
(2,000 training + 500 validation) written to a temporary folder, workers=2.
Reports: cold time (target < 90 s), rerun time with a warm feature cache and
no ledger, rerun time served by the ledger (target for a rerun: >= 3x
faster), peak memory of this process and its worker processes (target
< 1 GB), how the time scales from 500 to 2,000 training images (linear work:
4x), and the stage times of one repeat in one process (augmentation,
featurisation, fit) at 500 and 2,000 images.

Run: ``.venv/bin/python benchmarks/bench_evaluate.py [--workers 2]``; with
``--breakdown`` it prints instead, per recipe, the time of augmentation,
featurisation and the fit (with its solver iterations) at 500 and 2,000
training images, in one process.
"""

import argparse
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image

from augplan.data import open_dataset
from augplan.evaluate import evaluate_recipes
from augplan.recipe.parse import Recipe, Transform

SIZE = 64
CLASSES = 10


def _synthetic_image(label, rng, size=SIZE):
    """A class-coded bar (angle by class) on a noisy, randomly lit background."""
    y, x = np.mgrid[0:size, 0:size] / (size - 1) - 0.5
    angle = np.pi * label / CLASSES + rng.normal(0, 0.08)
    offset = rng.normal(0, 0.05)
    distance = np.abs(x * np.sin(angle) - y * np.cos(angle) - offset)
    bar = (distance < 0.06 + 0.01 * rng.random()).astype(np.float32)
    background = rng.uniform(0.2, 0.6) + rng.normal(0, 0.05, (size, size))
    tint = rng.uniform(0.8, 1.2, 3)
    image = (background[..., None] * tint + bar[..., None] * 0.4) * 255
    return np.clip(image, 0, 255).astype(np.uint8)


def write_dataset(root, n_train, n_val, rng=None, size=SIZE):
    rng = np.random.default_rng(0) if rng is None else rng
    for split, total in (("train", n_train), ("val", n_val)):
        for index in range(total):
            label = index % CLASSES
            folder = root / split / f"c{label}"
            folder.mkdir(parents=True, exist_ok=True)
            Image.fromarray(_synthetic_image(label, rng, size)).save(folder / f"{index:05d}.png")
    return open_dataset(root)


RECIPES = [
    Recipe(name="flips", transforms=(Transform("flip", {"axis": "horizontal"}, probability=0.5),)),
    Recipe(name="small-affine", transforms=(Transform("rotate", {"degrees": (-8.0, 8.0)}),
                                            Transform("shift", {"fraction": (-0.06, 0.06)}))),
    Recipe(name="lighting", transforms=(Transform("brightness", {"factor": (0.7, 1.4)}),
                                        Transform("contrast", {"factor": (0.8, 1.2)}))),
    Recipe(name="blur-noise", transforms=(Transform("blur", {"sigma": (0.0, 1.0)}),
                                          Transform("noise", {"sigma": (0.0, 0.03)}))),
    Recipe(name="mixed", transforms=(Transform("zoom", {"factor": (0.9, 1.15)}),
                                     Transform("hue", {"degrees": (-10.0, 10.0)}),
                                     Transform("rotate", {"degrees": (-10.0, 10.0)}))),
]


def _peak_mb():
    # ru_maxrss is in kilobytes on Linux; children = worker processes reaped so far
    # (the largest single child, not their sum).
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    return own, children


def _worker_peak_mb():
    """Largest peak RSS (VmHWM) among live child processes (the worker pool).

    The pool's workers outlive each call, so RUSAGE_CHILDREN (reaped children
    only) does not see them; /proc does (Linux only).
    """
    import os

    peak = 0.0
    for status in Path("/proc").glob("[0-9]*/status"):
        try:
            fields = dict(line.split(":", 1) for line in status.read_text().splitlines() if ":" in line)
        except OSError:
            continue
        if fields.get("PPid", "").strip() == str(os.getpid()) and "VmHWM" in fields:
            peak = max(peak, float(fields["VmHWM"].split()[0]) / 1024)
    return peak


def breakdown(dataset, sizes=(500, 2000), copies=4):
    """Where one repeat's time goes, per recipe, as the training set grows.

    Augmentation and featurisation are timed per image (linear work shows a
    flat figure); the fit prints its seconds and the solver's iterations,
    which grow with the training set when the augmented classes overlap.
    """
    from augplan.data import load_images
    from augplan.measure.features import image_features
    from augplan.measure.model import FeatureModel
    from augplan.augment.transforms import apply_recipe

    # File names are the drawing order, which cycles through the classes, so
    # every prefix of this order is balanced.
    train = sorted(dataset.split("train"), key=lambda record: Path(record.relpath).name)
    originals = load_images(train[:max(sizes)], SIZE)
    labels = np.array([r.label for r in train[:max(sizes)]])
    print(f"{'train':>5s}  {'recipe':<13s} {'augment ms/draw':>15s} {'features ms/image':>17s} "
          f"{'fit s':>6s} {'iterations':>10s}")
    totals = {}
    for n in sizes:
        started = time.perf_counter()
        base = image_features(originals[:n])
        stages = totals.setdefault(n, {"originals' features": time.perf_counter() - started,
                                       "augment": 0.0, "features": 0.0, "fit": 0.0})
        for recipe in RECIPES:
            rng = np.random.default_rng(0)
            draws = np.empty((copies * n, SIZE, SIZE, 3), np.uint8)
            started = time.perf_counter()
            for i in range(copies * n):
                draws[i], _ = apply_recipe(originals[i % n], recipe, rng, labels[i % n])
            augment = time.perf_counter() - started
            started = time.perf_counter()
            features = np.concatenate([base, image_features(draws)])
            featurise = time.perf_counter() - started
            targets = np.concatenate([labels[:n]] * (copies + 1))
            started = time.perf_counter()
            model = FeatureModel(random_state=0, cross_validate=False,
                                 solver_dtype=np.float32).fit_features(features, targets)
            fit = time.perf_counter() - started
            print(f"{n:5d}  {recipe.name:<13s} {1e3 * augment / (copies * n):15.3f} "
                  f"{1e3 * featurise / (copies * n):17.3f} {fit:6.2f} {int(model.estimator_.n_iter_[0]):10d}",
                  flush=True)
            stages["augment"] += augment
            stages["features"] += featurise
            stages["fit"] += fit
    small, large = min(sizes), max(sizes)
    print(f"stage totals for one repeat of the {len(RECIPES)} recipes, one process "
          f"({small} -> {large} train images, {large / small:.0f}x):")
    for stage in totals[small]:
        print(f"  {stage:<20s} {totals[small][stage]:7.2f} s -> {totals[large][stage]:7.2f} s  "
              f"({totals[large][stage] / max(totals[small][stage], 1e-9):.2f}x)")


def timed(label, **kwargs):
    started = time.perf_counter()
    # Seed 0 every run, so a rerun finds its results in the ledger.
    document = evaluate_recipes(rng=np.random.default_rng(0), seed=0, **kwargs)
    elapsed = time.perf_counter() - started
    print(f"{label:<52s} {elapsed:8.1f} s   from_ledger={document['from_ledger']}", flush=True)
    return elapsed, document


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--full-warm", action="store_true",
                        help="also time a warm-cache rerun at 2,000 training images")
    parser.add_argument("--breakdown", action="store_true",
                        help="only print where one repeat's time goes at 500 and 2,000 images")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="augplan-bench-") as tmp:
        tmp = Path(tmp)
        if args.breakdown:
            breakdown(write_dataset(tmp / "DATA", 2000, 10))
            return 0
        common = dict(recipes=RECIPES, repeats=args.repeats, size=SIZE, workers=args.workers)

        full = write_dataset(tmp / "full" / "DATA", 2000, 500)
        t_cold, document = timed("2000 train + 500 val, cold cache", dataset=full,
                                 cache_dir=tmp / "cache", ledger_path=tmp / "ledger.sqlite", **common)
        t_ledger, _ = timed("rerun, served by the ledger", dataset=full,
                            cache_dir=tmp / "cache", ledger_path=tmp / "ledger.sqlite", **common)
        own, children = _peak_mb()
        workers_peak = _worker_peak_mb()
        print(f"peak RSS so far: self {own:.0f} MB, largest live worker {workers_peak:.0f} MB", flush=True)
        if args.full_warm:
            t_full_warm, _ = timed("rerun, warm feature cache, no ledger", dataset=full,
                                   cache_dir=tmp / "cache", **common)

        small = write_dataset(tmp / "small" / "DATA", 500, 500)
        t_small, _ = timed("500 train + 500 val, cold cache", dataset=small,
                           cache_dir=tmp / "cache-small", **common)
        t_small_warm, _ = timed("500 train rerun, warm feature cache, no ledger", dataset=small,
                                cache_dir=tmp / "cache-small", **common)
        own, children = _peak_mb()
        workers_peak = max(workers_peak, _worker_peak_mb())

    print()
    print(f"cold run, 2000 train (target < 90 s):      {t_cold:.1f} s")
    print(f"rerun speed-up, ledger:                    {t_cold / max(t_ledger, 1e-9):.0f}x")
    print(f"rerun speed-up, warm cache, no ledger:     {t_small / t_small_warm:.2f}x (500 train)")
    if args.full_warm:
        print(f"                                           {t_cold / t_full_warm:.2f}x (2000 train)")
    print(f"peak RSS (target < 1024 MB):               self {own:.0f} MB, largest live worker "
          f"{workers_peak:.0f} MB, largest reaped child {children:.0f} MB")
    print(f"scaling 500 -> 2000 train images:          {t_cold / t_small:.2f}x time for 4x images")
    print("baseline accuracy", document["baseline"]["accuracy"],
          {e["name"]: (e["gain"], e["gain_ci"]) for e in document["recipes"]})
    return 0


if __name__ == "__main__":
    sys.exit(main())
