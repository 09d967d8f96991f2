"""Scale benchmark: `check --sample` and `evaluate` at 2,000 and 20,000 images (a measurement, not a test).

Synthetic 256x256 JPEGs (10 classes, 80 % train / 20 % val) are drawn with
numpy and cached under ``/tmp/augplan-bench-scale`` between runs; the
2,000-image set holds hard links to the first files of the 20,000-image set.
Every (command, size) runs through the command line (``augplan.cli.main``)
in its own child process, so each peak-memory figure belongs to one run:
``ru_maxrss`` of that process and of its own worker processes. The feature
cache is deleted and a fresh ledger is used before every run, so nothing is
served from an earlier one.

Targets (issue 7): peak memory under 2 GB, time per image roughly constant
from 2,000 to 20,000 images.

Run: ``.venv/bin/python benchmarks/bench_scale.py [--workers 1] [--sizes 2000 20000]``
"""

import argparse
import contextlib
import io
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image

CACHE = Path("/tmp/augplan-bench-scale")
SIDE = 256
CLASSES = 10
VAL_SHARE = 0.2

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


def _relpath(index, total):
    split = "val" if (index // CLASSES) % 5 == 0 else "train"   # 20 % of every class
    return f"{split}/c{index % CLASSES}/{index:05d}.jpg"


def make_data(total):
    """Folder of ``total`` images under CACHE; built once, reused afterwards."""
    big = CACHE / "data-20000"
    done = big / ".complete"
    if not done.exists():
        for index in range(20000):
            path = big / _relpath(index, 20000)
            if path.exists():   # resume an interrupted build
                continue
            path.parent.mkdir(parents=True, exist_ok=True)
            rng = np.random.default_rng([20000, index])
            part = path.with_name(path.name + ".part")
            Image.fromarray(_draw(index % CLASSES, rng)).save(part, format="JPEG", quality=90)
            os.replace(part, path)   # an interrupted build leaves no half-written image
        done.write_text("20000\n")
    if total == 20000:
        return big
    folder = CACHE / f"data-{total}"
    marker = folder / ".complete"
    if not marker.exists():
        for index in range(total):
            source = big / _relpath(index, 20000)
            target = folder / _relpath(index, total)
            target.parent.mkdir(parents=True, exist_ok=True)
            if not target.exists():
                os.link(source, target)
        marker.write_text(f"{total}\n")
    return folder


def _child(command, total, workers, sample):
    """Run one command in this process and print a JSON line of figures."""
    from augplan.cli import main

    data = make_data(total)
    recipe = CACHE / "recipe.yaml"
    shutil.rmtree(CACHE / ".augplan", ignore_errors=True)   # cold feature cache
    ledger = CACHE / f"ledger-{command}-{total}-{time.time_ns()}.sqlite"
    argv = [command, str(data), "--recipe", str(recipe), "--json", "--quiet",
            "--workers", str(workers)]
    if command == "check":
        argv += ["--sample", str(sample)]
    else:
        argv += ["--repeats", "1", "--ledger", str(ledger)]
    stdout = io.StringIO()
    started = time.perf_counter()
    with contextlib.redirect_stdout(stdout):
        code = main(argv)
    elapsed = time.perf_counter() - started
    ledger.unlink(missing_ok=True)
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(json.dumps({"command": command, "images": total, "exit": int(code), "seconds": elapsed,
                      "peak_self_mb": own, "peak_children_mb": children}))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--sample", type=int, default=20, help="check --sample (per class)")
    parser.add_argument("--sizes", type=int, nargs="+", default=[2000, 20000])
    parser.add_argument("--child", nargs=2, metavar=("COMMAND", "IMAGES"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    CACHE.mkdir(parents=True, exist_ok=True)
    (CACHE / "recipe.yaml").write_text(RECIPE)
    if args.child:
        _child(args.child[0], int(args.child[1]), args.workers, args.sample)
        return 0

    started = time.perf_counter()
    for total in args.sizes:
        make_data(total)
    print(f"data ready in {time.perf_counter() - started:.0f} s (cached under {CACHE})", flush=True)

    rows = {}
    for command in ("check", "evaluate"):
        for total in args.sizes:
            out = subprocess.run([sys.executable, __file__, "--child", command, str(total),
                                  "--workers", str(args.workers), "--sample", str(args.sample)],
                                 capture_output=True, text=True, check=False)
            lines = [line for line in out.stdout.splitlines() if line.startswith("{")]
            if out.returncode != 0 or not lines:
                print(f"{command} {total}: failed (exit {out.returncode})\n{out.stderr[-2000:]}")
                continue
            row = json.loads(lines[-1])
            rows[(command, total)] = row
            peak = max(row["peak_self_mb"], row["peak_children_mb"])
            print(f"{command:<9s} {total:>6d} images: exit {row['exit']}, {row['seconds']:8.1f} s, "
                  f"{1000 * row['seconds'] / total:7.2f} ms/image, peak self {row['peak_self_mb']:.0f} MB, "
                  f"largest worker {row['peak_children_mb']:.0f} MB "
                  f"({'under' if peak < 2048 else 'OVER'} the 2 GB target)", flush=True)
    if len(args.sizes) >= 2:
        small, large = min(args.sizes), max(args.sizes)
        for command in ("check", "evaluate"):
            if (command, small) in rows and (command, large) in rows:
                a, b = rows[(command, small)], rows[(command, large)]
                ratio = (b["seconds"] / large) / (a["seconds"] / small)
                print(f"{command}: time per image at {large} / at {small} = {ratio:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
