"""Benchmark: nuisance factors and the coverage analysis at the issue's scale.

2,000 training images of 128 x 128 (random crops of scikit-image's bundled
sample photographs, two classes), 4 augmented draws each, measured with
every factor. Prints images per second for each factor alone and the total
wall time of `augplan.coverage.analyse_coverage` end to end (reading,
augmenting, measuring, field coverage, shortcut audit). Target: under 30 s
on 2 cores.

Run: ``.venv/bin/python benchmarks/bench_coverage.py [--n 2000] [--workers 2]``
"""

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import skimage.data
from PIL import Image

from augplan.coverage.coverage import analyse_coverage
from augplan.data.dataset import open_dataset
from augplan.measure.factors import FACTORS, measure_factors
from augplan.recipe.parse import parse_recipe
from augplan.augment.transforms import apply_recipe

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

    print(f"per factor, {args.n} images of {args.size} x {args.size}, one process:")
    for name, factor in FACTORS.items():
        start = time.perf_counter()
        factor.function(images)
        elapsed = time.perf_counter() - start
        print(f"  {name:14s} {args.n / elapsed:9.0f} images/s")
    start = time.perf_counter()
    measure_factors(images)
    elapsed = time.perf_counter() - start
    print(f"  {'all (shared)':14s} {args.n / elapsed:9.0f} images/s")
    # The other stage of the work: drawing the augmentations themselves.
    subset = images[:200]
    generators = rng.spawn(len(subset))
    start = time.perf_counter()
    for image, generator in zip(subset, generators):
        for _ in range(args.draws):
            apply_recipe(image, RECIPE, generator, "left")
    elapsed = time.perf_counter() - start
    print(f"apply_recipe ({RECIPE.name}): {len(subset) * args.draws / elapsed:.0f} draws/s, one process")

    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        splits = ["train"] * len(images) + ["val", "field"] * (len(extra) // 2)
        for i, (image, split) in enumerate(zip(np.concatenate([images, extra]), splits)):
            label = "left" if (i // 2) % 2 else "right"
            target = root / split / label
            target.mkdir(parents=True, exist_ok=True)
            Image.fromarray(image).save(target / f"{i:05d}.png", compress_level=1)
        dataset = open_dataset(root)
        start = time.perf_counter()
        result = analyse_coverage(dataset, RECIPE, draws=args.draws, size=args.size,
                                  workers=args.workers)
        elapsed = time.perf_counter() - start
    n = result["n_images"]
    print(f"analyse_coverage: {n['train']} train images x (1 + {args.draws} draws) = "
          f"{n['augmented']} measured, {n['val']} val, {n['field']} field, "
          f"workers={args.workers}: {elapsed:.1f} s")


if __name__ == "__main__":
    main()
