"""Benchmark of the shortcut audit that `evaluate` runs on original images (its decision note).

On the bundled demo scenario (demo_images/: train, val and a labelled field
sample), prints the median wall time over ``--runs`` of:

- measuring the nuisance factors of the original train, val and field images
  (`augplan.measure.factors.measure_factors`, the primitive the audit reads);
- `val_shared_shortcuts`, the cheap form `evaluate` calls (validation and field
  scored only for the factors the training set flags);
- `audit_shortcuts` on the same sets, every row (the coverage audit's form);

and the ratio of each audit to the factor measurement. A rerun of `evaluate`
reads the audit back from the feature cache folder, so this is paid once per
data set, size and seed.

    .venv/bin/python benchmarks/bench_shortcut_audit.py [--runs 3] [--size 64]
"""

import argparse
import statistics
import time
from pathlib import Path

import numpy as np

from augplan.data import load_images, open_dataset
from augplan.measure.factors import measure_factors
from augplan.measure.shortcuts import audit_shortcuts, val_shared_shortcuts

DEMO = Path(__file__).resolve().parent.parent / "demo_images"


def _median_time(function, runs):
    times, value = [], None
    for _ in range(runs):
        started = time.perf_counter()
        value = function()
        times.append(time.perf_counter() - started)
    return statistics.median(times), value


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--size", type=int, default=64)
    args = parser.parse_args()

    dataset = open_dataset(DEMO)
    records = {"original": dataset.split("train"), "val": dataset.split("val"),
               "field": [r for r in dataset.split("field") if r.label is not None]}
    records = {name: chosen for name, chosen in records.items() if chosen}

    def measure():
        return {name: (measure_factors(load_images(chosen, args.size)), np.array([r.label for r in chosen]), None)
                for name, chosen in records.items()}

    measured, sets = _median_time(measure, args.runs)
    n_classes = len(dataset.classes)
    cheap, shared = _median_time(lambda: val_shared_shortcuts(sets, n_classes, rng=np.random.default_rng(0)), args.runs)
    full, rows = _median_time(lambda: audit_shortcuts(sets, n_classes, rng=np.random.default_rng(0)), args.runs)
    from_rows = [row["factor"] for row in rows if row["flagged"] and row["val_shares"]]
    print(f"images: {', '.join(f'{name} {len(chosen)}' for name, chosen in records.items())}; "
          f"{args.size} px; median of {args.runs} runs")
    print(f"factors of the originals      {measured:7.2f} s  (1.00)")
    print(f"val_shared_shortcuts (cheap)  {cheap:7.2f} s  ({cheap / measured:.2f} x the factors)")
    print(f"audit_shortcuts (every row)   {full:7.2f} s  ({full / measured:.2f} x the factors)")
    print(f"shared with validation: {shared or 'none'} (full audit: {from_rows or 'none'}; "
          f"{'same' if shared == from_rows else 'DIFFERENT'})")


if __name__ == "__main__":
    main()
