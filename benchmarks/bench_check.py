"""Benchmark of the label-safety checker (augplan.check.check_recipe).

A 5-transform recipe on 1,000 synthetic 64x64 images in 10 classes, written
to a temporary folder in the DATA layout. Prints wall time (in all and per
stage of the check: baseline fits, screen, confirmation by training, safe
limits), CPU time and peak resident memory of this process and its worker
processes, then the
stage times of the same work done in one process: decoding, fitting the
proxy model (with its cross-validation), and per sweep the transform
(`apply_op_batch`), the featurisation and the model's predictions.

The first witness of confirmation is the default model, the network
(``--model linear`` for the proxy). Targets: with the network, at most 60 s
on 2 cores, including the confirmation stage, and under 1 GB.

    .venv/bin/python benchmarks/bench_check.py [--workers 2] [--images 1000] [--model linear]
"""

import argparse
import colorsys
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw

from augplan.data import open_dataset
from augplan.check import check_recipe
from augplan.recipe.parse import parse_recipe

RECIPE = """
name: bench
transforms:
  - op: flip
    axis: horizontal
  - op: rotate
    degrees: [-15, 15]
  - op: zoom
    factor: [0.9, 1.2]
  - op: brightness
    factor: [0.7, 1.4]
  - op: hue
    degrees: [-10, 10]
"""


def write_images(root, n_images, n_classes, rng):
    """Classes differ by shape (ellipse, box, triangle, ...) and hue."""
    per_class = n_images // n_classes
    for c in range(n_classes):
        for i in range(per_class):
            canvas = Image.new("RGB", (64, 64), tuple(int(v) for v in rng.integers(150, 230, 3)))
            draw = ImageDraw.Draw(canvas)
            hue = (c / n_classes + rng.uniform(-0.02, 0.02)) % 1.0
            ink = tuple(int(255 * v) for v in colorsys.hsv_to_rgb(hue, 0.8, rng.uniform(0.5, 0.9)))
            cx, cy, r = 32 + rng.uniform(-6, 6), 32 + rng.uniform(-6, 6), rng.uniform(12, 18)
            if c % 3 == 0:
                draw.ellipse([cx - r, cy - r, cx + r, cy + r * 0.6], fill=ink)
            elif c % 3 == 1:
                draw.rectangle([cx - r, cy - r * 0.5, cx + r, cy + r * 0.5], fill=ink)
            else:
                draw.polygon([(cx, cy - r), (cx - r, cy + r), (cx + r, cy + r)], fill=ink)
            split = "val" if i == 0 else "train"
            path = root / split / f"class-{c}" / f"{i:04d}.png"
            path.parent.mkdir(parents=True, exist_ok=True)
            canvas.save(path)
    # val/ keeps one image per class apart; train/ holds the rest.
    return n_classes * (per_class - 1)


def peak_rss_mb(who):
    # ru_maxrss is in kilobytes on Linux.
    return resource.getrusage(who).ru_maxrss / 1024


def stage_times(dataset, recipe, size=64, magnitudes=7):
    """Seconds of each stage of a check, done directly in this process."""
    from augplan.augment.transforms import apply_op_batch, magnitude_grid, params_at
    from augplan.data import load_images
    from augplan.measure.model import FeatureModel

    records = dataset.split("train")
    labels = np.array([r.label for r in records])
    times = {}
    started = time.perf_counter()
    images = load_images(records, size=size)
    times["decode"] = time.perf_counter() - started
    started = time.perf_counter()
    model = FeatureModel(random_state=0).fit(images, labels)
    times["fit proxy model (with cross-validation)"] = time.perf_counter() - started
    rng = np.random.default_rng(0)
    sweeps = {"transform": 0.0, "featurise": 0.0, "predict": 0.0}
    count = 0
    for transform in recipe.transforms:
        grid = magnitude_grid(transform, magnitudes)
        for magnitude in (grid if grid.size else [None]):
            started = time.perf_counter()
            moved = apply_op_batch(images, transform.op, params_at(transform, magnitude or 0.0, recipe.fill), rng)
            sweeps["transform"] += time.perf_counter() - started
            started = time.perf_counter()
            features = model.featurize(moved)
            sweeps["featurise"] += time.perf_counter() - started
            started = time.perf_counter()
            model.predict_proba_features(features)
            sweeps["predict"] += time.perf_counter() - started
            count += len(moved)
    for stage, seconds in sweeps.items():
        times[f"sweeps: {stage} ({count} images)"] = seconds
    return times


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--images", type=int, default=1010)
    parser.add_argument("--classes", type=int, default=10)
    parser.add_argument("--model", default=None, help="the first witness (default: the default model)")
    args = parser.parse_args(argv)
    rng = np.random.default_rng(0)
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder) / "data"
        n_train = write_images(root, args.images, args.classes, rng)
        dataset = open_dataset(root)
        recipe = parse_recipe(RECIPE)
        wall, cpu = time.perf_counter(), time.process_time()
        check_stages = {}
        report = check_recipe(dataset, recipe, rng=np.random.default_rng(0), workers=args.workers, size=64,
                              timings=check_stages, model=args.model)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        stages = stage_times(dataset, recipe)
    # Worker processes are kept alive for reuse; stop them so their CPU time
    # and peak memory show up in the children's resource usage.
    from joblib.externals.loky import get_reusable_executor

    get_reusable_executor().shutdown(wait=True)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    print(f"images checked: {report['n_images']} (train {n_train}) in {args.classes} classes, "
          f"{len(recipe.transforms)} transforms, workers={args.workers}, first witness "
          f"{report['model']['confirmation']} at {report['model']['side']} px")
    print(f"wall time: {wall:.1f} s; CPU time: this process {cpu:.1f} s, "
          f"workers {children.ru_utime + children.ru_stime:.1f} s")
    print("check stages: " + "; ".join(f"{name} {seconds:.1f} s" for name, seconds in check_stages.items()))
    print(f"peak memory: this process {peak_rss_mb(resource.RUSAGE_SELF):.0f} MB, "
          f"largest worker {peak_rss_mb(resource.RUSAGE_CHILDREN):.0f} MB")
    print("stages of the same work in one process (the checker's own sample and bookkeeping aside):")
    for stage, seconds in stages.items():
        print(f"  {stage:<34s} {seconds:6.2f} s")
    for entry in report["transforms"]:
        print(f"  {entry['index']} {entry['op']:<10} {entry['verdict']:<10} by {entry['decided_by']:<12} "
              f"change {entry['change_rate']:.3f} leave {entry['leave_rate']:.3f} "
              f"limit {entry['safe_limit']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
