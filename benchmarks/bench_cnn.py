"""Benchmark of evaluating with ``--model cnn`` (a measurement, not a test).

5 recipes x 3 repeats, 10 classes of synthetic 32x32 images (2,000 training
+ 500 validation, bench_evaluate.py's drawing), workers=2, the network's
documented defaults. Target: under 10 minutes. The linear proxy runs on the
same data and settings for the ratio. Prints wall time, time per fit, and
peak memory of this process and of the largest worker.

Run: ``.venv/bin/python benchmarks/bench_cnn.py [--workers 2]``.
"""

import argparse
import sys
import tempfile
import time
from pathlib import Path

from bench_evaluate import RECIPES, _peak_mb, write_dataset

from augplan.evaluate.evaluate import evaluate_recipes

SIZE = 32
REPEATS = 3


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as scratch:
        dataset = write_dataset(Path(scratch) / "DATA", 2000, 500, size=SIZE)
        times = {}
        for model in ("linear", "cnn"):
            start = time.perf_counter()
            document = evaluate_recipes(dataset, RECIPES, repeats=REPEATS, size=SIZE, seed=0,
                                        workers=args.workers, cache_dir=False, model=model)
            times[model] = time.perf_counter() - start
            fits = (len(RECIPES) + 1) * REPEATS
            own, worker = _peak_mb()
            print(f"{model}: {times[model]:.1f} s for {fits} fits ({times[model] * args.workers / fits:.1f} s "
                  f"a fit per worker), baseline accuracy {document['baseline']['accuracy']:.3f}; "
                  f"peak RSS main {own:.0f} MB, largest worker {worker:.0f} MB", flush=True)
        print(f"cnn: {times['cnn']:.1f} s (target < 600 s: {'met' if times['cnn'] < 600 else 'NOT met'}); "
              f"{times['cnn'] / times['linear']:.1f}x the linear proxy's time")
    return 0


if __name__ == "__main__":
    sys.exit(main())
