"""Scale-out benchmark of `evaluate_recipes` (a measurement, not a test).

5 recipes x 5 repeats on synthetic 64x64 images of 10 classes (default 2,000
training + 500 validation), run three ways with the same seed:

1. in this process (``workers=1``);
2. 2 local processes through joblib (``workers=2``);
3. a 2-worker ``dask.distributed.LocalCluster`` on loopback (one thread per
   worker process), reached as a remote cluster would be
   (``workers=Cluster(address)``).

Every run starts cold: no ledger and a fresh, empty feature cache. The
cluster's start-up is timed apart, since a user's cluster is already running.
Prints each time, the speed-up over the in-process run, the overhead against
a perfect split over 2 workers (``time - in_process / 2``), and whether the
three JSON documents are identical (they must be).

Run: ``.venv/bin/python benchmarks/bench_scale_out.py [--train 2000] [--val 500]``
"""

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from augplan.evaluate import evaluate_recipes
from augplan.parallel import Cluster
from augplan.recipe.parse import Recipe, Transform
from bench_evaluate import write_dataset  # the same invented bar-angle images

SIZE = 64
CLASSES = 10
REPEATS = 5
SEED = 0

RECIPES = [
    Recipe(name="mirror", transforms=(Transform("flip", {"axis": "horizontal"}, probability=0.5),)),
    Recipe(name="tilt-shift", transforms=(Transform("rotate", {"degrees": (-8.0, 8.0)}),
                                          Transform("shift", {"fraction": (-0.06, 0.06)}))),
    Recipe(name="light", transforms=(Transform("brightness", {"factor": (0.7, 1.4)}),
                                     Transform("contrast", {"factor": (0.8, 1.2)}))),
    Recipe(name="soft", transforms=(Transform("blur", {"sigma": (0.0, 1.0)}),)),
    Recipe(name="scale", transforms=(Transform("zoom", {"factor": (0.9, 1.15)}),)),
]


def _timed(dataset, workers, cache_dir):
    start = time.perf_counter()
    result = evaluate_recipes(dataset, RECIPES, np.random.default_rng(SEED), repeats=REPEATS, workers=workers, quiet=True,
                              ledger_path=None, cache_dir=cache_dir)
    return time.perf_counter() - start, json.dumps(result, sort_keys=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--train", type=int, default=2000, help="training images (default 2000)")
    parser.add_argument("--val", type=int, default=500, help="validation images (default 500)")
    args = parser.parse_args(argv)
    from distributed import LocalCluster

    with tempfile.TemporaryDirectory(prefix="augplan-scale-out-") as tmp:
        tmp = Path(tmp)
        dataset = write_dataset(tmp / "DATA", args.train, args.val)
        print(f"evaluate: {len(RECIPES)} recipes x {REPEATS} repeats, {args.train} train + {args.val} val "
              f"images of {SIZE}x{SIZE}, {CLASSES} classes")
        times, documents = {}, {}
        times["in-process"], documents["in-process"] = _timed(dataset, 1, tmp / "cache-1")
        print(f"  in-process            {times['in-process']:8.1f} s", flush=True)
        times["2 processes"], documents["2 processes"] = _timed(dataset, 2, tmp / "cache-2")
        print(f"  2 local processes     {times['2 processes']:8.1f} s", flush=True)
        start = time.perf_counter()
        with LocalCluster(n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1",
                          dashboard_address=None) as cluster:
            startup = time.perf_counter() - start
            times["2-worker cluster"], documents["2-worker cluster"] = _timed(
                dataset, Cluster(cluster.scheduler_address), tmp / "cache-3")
        print(f"  2-worker LocalCluster {times['2-worker cluster']:8.1f} s (cluster start-up {startup:.1f} s, "
              "not counted)")
        base = times["in-process"]
        for name in ("2 processes", "2-worker cluster"):
            overhead = times[name] - base / 2
            print(f"{name:>18}: speed-up {base / times[name]:.2f}x, overhead {overhead:+.1f} s "
                  f"({100 * overhead / times[name]:.0f}% of its time) over a perfect 2-way split")
        same = len(set(documents.values())) == 1
        print(f"JSON identical across the three runs: {same}")
        return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
