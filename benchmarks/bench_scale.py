"""Scale benchmark: check, coverage and evaluate at 2,000, 5,000 and 20,000 images (a measurement, not a test).

Synthetic 64x64 JPEGs (10 classes, 80 % train / 20 % val) are drawn with
numpy and cached under ``/tmp/augplan-bench-scale-64`` between runs; the
smaller sets hold hard links to the first files of the 20,000-image set.
Every (command, size) runs through the command line (``augplan.cli.main``)
on the whole data set (no ``--sample``), in its own child process, so each
peak-memory figure belongs to one run: ``ru_maxrss`` of that process and the
largest peak of its worker processes. The feature cache is deleted and a
fresh ledger is used before every run, so nothing is served from an earlier
one. ``evaluate`` scores with the default model (``--model`` not given).

Prints time and peak memory per step and the growth exponent between
sizes, ``log(t2 / t1) / log(n2 / n1)`` (1 = linear). Targets: exponent at
most 1.1 for each command, peak memory at most 2 GB at 20,000.

With ``--dask`` each command also runs at the largest size on a 2-worker
``dask.distributed.LocalCluster`` on loopback (one thread per worker),
reached through ``--cluster ADDRESS`` as a remote cluster would be; its
time is printed and its JSON document compared with the local run's (the
rule of tests/test_cluster.py: identical).

Run: ``.venv/bin/python benchmarks/bench_scale.py [--workers 2] [--sizes 2000 5000 20000] [--dask]``
"""

import argparse
import contextlib
import io
import json
import math
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image

CACHE = Path("/tmp/augplan-bench-scale-64")
SIDE = 64
CLASSES = 10
LARGEST = 20000
COMMANDS = ("check", "coverage", "evaluate")

RECIPE = """\
name: scale-bench
seed: 0
copies: 1
transforms:
  - op: rotate
    degrees: [-10, 10]
  - op: brightness
    factor: [0.8, 1.25]
"""


_GRID = np.mgrid[0:SIDE, 0:SIDE].astype(np.float32) / (SIDE - 1) - 0.5
_GRAIN = np.random.default_rng(256).normal(0, 4, (2 * SIDE, 2 * SIDE, 3)).astype(np.float32)


def _draw(label, rng):
    """A class-coded bar (angle by class) over a lit gradient with mild grain.

    The grain is a window of one shared noise field at a random offset, which
    keeps drawing 20,000 images cheap.
    """
    y, x = _GRID
    angle = np.pi * label / CLASSES + rng.normal(0, 0.08)
    offset = rng.normal(0, 0.05)
    bar = np.abs(x * np.sin(angle) - y * np.cos(angle) - offset) < 0.06 + 0.01 * rng.random()
    background = rng.uniform(0.2, 0.6) + 0.2 * (x * rng.normal() + y * rng.normal())
    tint = rng.uniform(0.8, 1.2, 3).astype(np.float32) * 255
    top, left = rng.integers(0, SIDE, 2)
    image = (background + 0.4 * bar)[..., None] * tint + _GRAIN[top:top + SIDE, left:left + SIDE]
    return np.clip(image, 0, 255).astype(np.uint8)


def _relpath(index):
    split = "val" if (index // CLASSES) % 5 == 0 else "train"   # 20 % of every class
    return f"{split}/c{index % CLASSES}/{index:05d}.jpg"


def make_data(total):
    """Folder of ``total`` images under CACHE; built once, reused afterwards."""
    big = CACHE / f"data-{LARGEST}"
    done = big / ".complete"
    if not done.exists():
        for index in range(LARGEST):
            path = big / _relpath(index)
            if path.exists():   # resume an interrupted build
                continue
            path.parent.mkdir(parents=True, exist_ok=True)
            rng = np.random.default_rng([LARGEST, index])
            part = path.with_name(path.name + ".part")
            Image.fromarray(_draw(index % CLASSES, rng)).save(part, format="JPEG", quality=90)
            os.replace(part, path)   # an interrupted build leaves no half-written image
        done.write_text(f"{LARGEST}\n")
    if total == LARGEST:
        return big
    folder = CACHE / f"data-{total}"
    marker = folder / ".complete"
    if not marker.exists():
        for index in range(total):
            target = folder / _relpath(index)
            target.parent.mkdir(parents=True, exist_ok=True)
            if not target.exists():
                os.link(big / _relpath(index), target)
        marker.write_text(f"{total}\n")
    return folder


def _worker_peak_mb():
    """Largest peak RSS (VmHWM) among live child processes (a worker pool outlives each call)."""
    peak = 0.0
    for status in Path("/proc").glob("[0-9]*/status"):
        try:
            fields = dict(line.split(":", 1) for line in status.read_text().splitlines() if ":" in line)
        except OSError:
            continue
        if fields.get("PPid", "").strip() == str(os.getpid()) and "VmHWM" in fields:
            peak = max(peak, float(fields["VmHWM"].split()[0]) / 1024)
    return peak


def _child(command, total, workers, cluster, document):
    """Run one command in this process; print a JSON line of figures, keep its JSON document."""
    from augplan.cli import main

    data = make_data(total)
    shutil.rmtree(CACHE / ".augplan", ignore_errors=True)   # cold feature cache
    ledger = CACHE / f"ledger-{command}-{total}-{time.time_ns()}.sqlite"
    argv = [command, str(data), "--recipe", str(CACHE / "recipe.yaml"), "--json", "--quiet"]
    argv += ["--cluster", cluster] if cluster else ["--workers", str(workers)]
    if command == "evaluate":
        argv += ["--repeats", "1", "--ledger", str(ledger)]
    stdout = io.StringIO()
    started = time.perf_counter()
    with contextlib.redirect_stdout(stdout):
        code = main(argv)
    elapsed = time.perf_counter() - started
    ledger.unlink(missing_ok=True)
    Path(document).write_text(stdout.getvalue())
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    workers_mb = max(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024, _worker_peak_mb())
    print(json.dumps({"command": command, "images": total, "exit": int(code), "seconds": elapsed,
                      "peak_self_mb": own, "peak_workers_mb": workers_mb}))


def _run(command, total, workers, cluster=None):
    document = CACHE / f"out-{command}-{total}-{'dask' if cluster else 'local'}.json"
    argv = [sys.executable, __file__, "--child", command, str(total), "--workers", str(workers),
            "--document", str(document)]
    if cluster:
        argv += ["--cluster", cluster]
    out = subprocess.run(argv, capture_output=True, text=True, check=False)
    lines = [line for line in out.stdout.splitlines() if line.startswith("{")]
    if out.returncode != 0 or not lines:
        print(f"{command} {total}: failed (exit {out.returncode})\n{out.stderr[-2000:]}", flush=True)
        return None, None
    return json.loads(lines[-1]), document.read_text()


def _report(label, row):
    peak = max(row["peak_self_mb"], row["peak_workers_mb"])
    print(f"{label:<9s} {row['images']:>6d} images: exit {row['exit']}, {row['seconds']:8.1f} s, "
          f"{1000 * row['seconds'] / row['images']:6.2f} ms/image, peak main {row['peak_self_mb']:.0f} MB, "
          f"largest worker {row['peak_workers_mb']:.0f} MB ({'within' if peak <= 2048 else 'OVER'} 2 GB)",
          flush=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--sizes", type=int, nargs="+", default=[2000, 5000, LARGEST])
    parser.add_argument("--commands", nargs="+", default=list(COMMANDS), choices=COMMANDS)
    parser.add_argument("--dask", action="store_true", help="also run the largest size on a 2-worker LocalCluster")
    parser.add_argument("--child", nargs=2, metavar=("COMMAND", "IMAGES"), help=argparse.SUPPRESS)
    parser.add_argument("--cluster", help=argparse.SUPPRESS)
    parser.add_argument("--document", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if max(args.sizes) > LARGEST:
        parser.error(f"sizes are at most {LARGEST}")
    CACHE.mkdir(parents=True, exist_ok=True)
    (CACHE / "recipe.yaml").write_text(RECIPE)
    if args.child:
        _child(args.child[0], int(args.child[1]), args.workers, args.cluster, args.document)
        return 0

    started = time.perf_counter()
    for total in args.sizes:
        make_data(total)
    print(f"data ready in {time.perf_counter() - started:.0f} s (cached under {CACHE}); "
          f"{args.workers} local workers; the machine may be shared (times are upper bounds)", flush=True)
    sizes = sorted(args.sizes)
    rows, documents = {}, {}
    for command in args.commands:
        for total in sizes:
            row, document = _run(command, total, args.workers)
            if row is not None:
                rows[(command, total)], documents[(command, total)] = row, document
                _report(command, row)
    print("growth exponent log(t2 / t1) / log(n2 / n1), target <= 1.1:")
    for command in args.commands:
        for small, large in zip(sizes, sizes[1:]):
            if (command, small) in rows and (command, large) in rows:
                ratio = rows[(command, large)]["seconds"] / rows[(command, small)]["seconds"]
                exponent = math.log(ratio) / math.log(large / small)
                print(f"  {command:<9s} {small:>6d} -> {large:>6d}: {exponent:5.2f}"
                      f"{'' if exponent <= 1.1 else '  (over)'}")
    if args.dask:
        from distributed import LocalCluster

        total = sizes[-1]
        start = time.perf_counter()
        with LocalCluster(n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1",
                          dashboard_address=None) as cluster:
            print(f"2-worker LocalCluster up in {time.perf_counter() - start:.1f} s (not counted)", flush=True)
            for command in args.commands:
                row, document = _run(command, total, args.workers, cluster.scheduler_address)
                if row is None:
                    continue
                _report(f"{command}*", row)
                same = documents.get((command, total)) == document
                print(f"  {command} on the cluster: JSON identical to the local run: {same}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
