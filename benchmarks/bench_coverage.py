"""Benchmark: nuisance factors and the coverage analysis at the issue's scale.

2,000 training images of 128 x 128 (random crops of scikit-image's bundled
sample photographs, two classes), 4 augmented draws each, measured with
every factor. Prints the stage times in one process (reading, drawing the
augmentations, measuring the factors), images per second for each factor
alone, and the wall time of `augplan.coverage.coverage.analyse_coverage` end
to end (reading, augmenting, measuring, field coverage, shortcut audit) at
500 and at n training images, with the ratio (linear work: n / 500). Target:
under 15 s at 2,000 on 2 cores, peak memory under 1 GB.

Run: ``.venv/bin/python benchmarks/bench_coverage.py [--n 2000] [--workers 2]``
"""

import argparse
import dataclasses
import resource
import tempfile
import time
from pathlib import Path

import numpy as np
import skimage.data
from PIL import Image

from augplan.coverage.coverage import analyse_coverage
from augplan.data import open_dataset
from augplan.measure.factors import FACTORS, measure_factors
from augplan.recipe.parse import parse_recipe
from augplan.augment.transforms import augment_batch
from augplan.data import load_images
from augplan.parallel import parallel_map
from bench_evaluate import _worker_peak_mb  # live worker processes' peak RSS

RECIPE = parse_recipe(
    "name: bench\n"
    "transforms:\n"
    "  - op: flip\n    axis: horizontal\n    probability: 0.5\n"
    "  - op: rotate\n    degrees: [-15, 15]\n"
    "  - op: brightness\n    factor: [0.6, 1.4]\n"
    "  - op: contrast\n    factor: [0.8, 1.2]\n"
    "  - op: blur\n    sigma: [0, 1]\n    probability: 0.3\n"
)


def sample_images(n, size, rng):
    sources = [skimage.data.chelsea(), skimage.data.coffee(), skimage.data.rocket(),
               skimage.data.astronaut()]
    out = np.empty((n, size, size, 3), dtype=np.uint8)
    for i in range(n):
        source = sources[i % len(sources)]
        top = rng.integers(0, source.shape[0] - size)
        left = rng.integers(0, source.shape[1] - size)
        out[i] = source[top:top + size, left:left + size]
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=2000)
    parser.add_argument("--size", type=int, default=128)
    parser.add_argument("--draws", type=int, default=4)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    images = sample_images(args.n, args.size, rng)
    # Val and field (a tenth each) come on top of the n training images.
    extra = sample_images(2 * max(args.n // 10, 10), args.size, rng)

    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        splits = ["train"] * len(images) + ["val", "field"] * (len(extra) // 2)
        for i, (image, split) in enumerate(zip(np.concatenate([images, extra]), splits)):
            label = "left" if (i // 2) % 2 else "right"
            target = root / split / label
            target.mkdir(parents=True, exist_ok=True)
            Image.fromarray(image).save(target / f"{i:05d}.png", compress_level=1)
        dataset = open_dataset(root)
        train = dataset.split("train")

        print(f"stages in one process, {len(train)} training images of {args.size} x {args.size}, "
              f"{args.draws} draws each:")
        start = time.perf_counter()
        decoded = load_images(train, size=args.size)
        read = time.perf_counter() - start
        draw = measure = 0.0
        generators = rng.spawn(len(decoded))
        for first in range(0, len(decoded), 250):  # in chunks, as the workers do, to bound memory
            part = slice(first, first + 250)
            start = time.perf_counter()
            drawn, _ = augment_batch(decoded[part], RECIPE, generators[part], [r.label for r in train[part]],
                                     args.draws)
            draw += time.perf_counter() - start
            start = time.perf_counter()
            measure_factors(decoded[part])
            measure_factors(drawn)
            measure += time.perf_counter() - start
            del drawn
        print(f"  read and decode     {read:6.2f} s")
        print(f"  augment ({RECIPE.name})   {draw:6.2f} s  ({len(train) * args.draws / draw:,.0f} draws/s)")
        print(f"  measure factors     {measure:6.2f} s  ({len(train) * (1 + args.draws) / measure:,.0f} images/s)")
        print("per factor, one process:")
        for name, factor in FACTORS.items():
            start = time.perf_counter()
            for first in range(0, len(images), 250):  # chunks bound the float temporaries
                factor.function(images[first:first + 250])
            elapsed = time.perf_counter() - start
            print(f"  {name:14s} {args.n / elapsed:9.0f} images/s")

        parallel_map(abs, range(2 * args.workers), workers=args.workers)  # start the worker pool untimed
        times = {}
        for n in sorted({min(500, len(train)), len(train)}):
            subset = dataset
            if n < len(train):
                keep = set(r.relpath for r in train[:n]) | {r.relpath for r in dataset.records if r.split != "train"}
                subset = dataclasses.replace(dataset, records=[r for r in dataset.records if r.relpath in keep])
            start = time.perf_counter()
            result = analyse_coverage(subset, dataclasses.replace(RECIPE, copies=args.draws), size=args.size,
                                      workers=args.workers, rng=np.random.default_rng(0))
            times[n] = time.perf_counter() - start
            counts = result["n_images"]
            print(f"analyse_coverage: {counts['train']} train images x (1 + {args.draws} draws) = "
                  f"{counts['augmented']} measured, {counts['val']} val, {counts['field']} field, "
                  f"workers={args.workers}: {times[n]:.1f} s", flush=True)
    if len(times) == 2:
        small, large = sorted(times)
        print(f"scaling {small} -> {large} train images: {times[large] / times[small]:.2f}x time for "
              f"{large / small:.0f}x images")
    print(f"target: under 15 s at 2,000 train images; peak RSS: this process "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB, largest reaped worker "
          f"{resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024:.0f} MB, largest live worker "
          f"{_worker_peak_mb():.0f} MB")


if __name__ == "__main__":
    main()
