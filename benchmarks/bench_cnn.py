"""Benchmark of evaluating with the default model, the network (a measurement, not a test).

5 recipes x 3 repeats, 10 classes of synthetic images (2,000 training + 500
validation, bench_evaluate.py's drawing), workers=2, the network's
documented defaults, at a side of 32 and of 64 pixels. Targets: at most
120 s at 32 px and 300 s at 64 px. Prints wall time, time per fit, the
cost of a fit per thousand images and epoch (the README quotes it), and
peak memory of this process and of the largest worker.

Run: ``.venv/bin/python benchmarks/bench_cnn.py [--workers 2] [--sides 32 64] [--linear]``
(``--linear`` also times the linear proxy on the same data, for the ratio).
``--one-fit`` instead times one fit of the network in this process, with a
recipe's fresh draws every epoch, in CPU seconds (`time.process_time`), which
a machine shared with other work inflates far less than wall time.
"""

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from bench_evaluate import RECIPES, _peak_mb, _worker_peak_mb, write_dataset

from augplan.evaluate import evaluate_recipes
from augplan.measure.convnet import ConvNetClassifier

REPEATS = 3
TARGETS = {32: 120.0, 64: 300.0}


def one_fit(sides, n_train=2000):
    """CPU seconds of one default fit on ``n_train`` images, per side, with a recipe's draws each epoch."""
    import numpy as np

    from augplan.augment.transforms import augment_batch
    from augplan.data import load_images

    recipe = RECIPES[-1]
    for side in sides:
        with tempfile.TemporaryDirectory() as scratch:
            dataset = write_dataset(Path(scratch) / "DATA", n_train, 10, size=side)
            records = dataset.split("train")
            images = load_images(records, side)
            labels = np.array([r.label for r in records])

        def draw(batch, batch_labels, rng):
            generators = rng.spawn(len(batch))
            drawn, new_labels = augment_batch(batch, recipe, generators, list(batch_labels), 1)
            return drawn, np.asarray(new_labels)

        model = ConvNetClassifier()
        wall, cpu = time.perf_counter(), time.process_time()
        model.fit(images, labels, np.random.default_rng(0), draw=draw)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        presentations = model.steps_ * model.batch_size
        print(f"{side} px: one fit on {n_train} images, recipe {recipe.name!r}: {model.steps_} steps "
              f"({model.epochs_} epochs), {cpu:.1f} CPU s ({wall:.1f} s wall); "
              f"{cpu / (presentations / 1000):.2f} CPU s per thousand images and epoch", flush=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--sides", type=int, nargs="+", default=[32, 64])
    parser.add_argument("--linear", action="store_true")
    parser.add_argument("--one-fit", action="store_true")
    args = parser.parse_args(argv)
    if args.one_fit:
        one_fit(args.sides)
        return 0
    n_train = 2000
    epochs = ConvNetClassifier().training_epochs(n_train)[0]
    fits = (len(RECIPES) + 1) * REPEATS
    for side in args.sides:
        with tempfile.TemporaryDirectory() as scratch:
            dataset = write_dataset(Path(scratch) / "DATA", n_train, 500, size=side)
            for model in ([None] + (["linear"] if args.linear else [])):
                start = time.perf_counter()
                document = evaluate_recipes(dataset, RECIPES, np.random.default_rng(0), repeats=REPEATS, size=side,
                                            workers=args.workers, cache_dir=False, model=model)
                seconds = time.perf_counter() - start
                # The pool's workers outlive the call: RUSAGE_CHILDREN alone misses them.
                own, reaped = _peak_mb()
                worker = max(reaped, _worker_peak_mb())
                per_fit = seconds * args.workers / fits
                line = (f"{side} px, {document['model']['name']}: {seconds:.1f} s for {fits} fits "
                        f"({per_fit:.1f} s a fit per worker")
                if model is None:
                    line += f", {per_fit / (n_train / 1000 * epochs):.2f} s per thousand images and epoch"
                line += (f"), baseline accuracy {document['baseline']['accuracy']:.3f}; peak RSS main {own:.0f} MB, "
                         f"largest worker {worker:.0f} MB")
                if model is None:
                    target = TARGETS.get(side)
                    if target:
                        line += f"; target <= {target:.0f} s: {'met' if seconds <= target else 'NOT met'}"
                print(line, flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
