"""Bounds benchmark: memory of a `check` with one huge image, and `coverage` over many classes.

(A measurement, not a test.)

1. A small class-coded set (2 classes, 12 training and 4 validation images
   of 16 x 16 each) plus one valid 8000 x 8000 RGBA PNG in a training class.
   `augplan check` runs in its own child process; its peak resident memory
   (``ru_maxrss`` of the children) is printed beside the floor: a child that
   only decodes the huge PNG with Pillow (``Image.open(...).load()``), the
   least any reader of the file must hold. Target (issue 25): under 1 GB.
2. `augplan coverage` on 200 classes of 2 training images (too few for the
   shortcut audit, which says so) and of 5 (audited): wall time of each, in
   its own child. Target: bounded by the images, not the classes squared.

Invented data, drawn by numpy here, cached under ``/tmp/augplan-bench-bounds``.

Run: ``.venv/bin/python benchmarks/bench_bounds.py``
"""

import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image

CACHE = Path("/tmp/augplan-bench-bounds")
SIDE = 8000

RECIPE = "name: bounds\ncopies: 1\ntransforms:\n  - op: rotate\n    degrees: [-10, 10]\n"


def _class_image(index, rng, side=16):
    """A bar at a class-coded angle on a noisy grey ground (invented data)."""
    y, x = np.mgrid[0:side, 0:side] / (side - 1) - 0.5
    angle = np.pi * index / 7 + rng.normal(0, 0.05)
    bar = np.abs(x * np.sin(angle) - y * np.cos(angle)) < 0.12
    grey = rng.uniform(0.3, 0.5) + rng.normal(0, 0.04, (side, side)) + 0.4 * bar
    return np.clip(np.repeat(grey[..., None], 3, axis=2) * 255, 0, 255).astype(np.uint8)


def _write_set(root, classes, train, val):
    if root.exists():
        return root
    rng = np.random.default_rng(0)
    for split, count in (("train", train), ("val", val)):
        for index, name in enumerate(classes):
            folder = root / split / name
            folder.mkdir(parents=True, exist_ok=True)
            for n in range(count):
                Image.fromarray(_class_image(index, rng)).save(folder / f"{n:02d}.png")
    return root


def _huge_set():
    root = CACHE / "huge"
    huge = root / "train" / "c0" / "huge.png"
    if not huge.exists():
        shutil.rmtree(root, ignore_errors=True)
        _write_set(root, ("c0", "c1"), 12, 4)
        ramp = np.linspace(0, 255, SIDE, dtype=np.uint8)
        rgba = np.empty((SIDE, SIDE, 4), np.uint8)
        rgba[..., 0] = ramp[None, :]
        rgba[..., 1] = ramp[:, None]
        rgba[..., 2] = ramp[None, :] // 2 + ramp[:, None] // 2
        rgba[..., 3] = 220
        Image.fromarray(rgba).save(huge, compress_level=1)
    return root, huge


def _child(code, *args):
    """Run ``python -c code args`` in a child; its wall time and peak RSS in MiB."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-c", code, *map(str, args)], capture_output=True, text=True)
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    if done.returncode not in (0, 1):
        raise SystemExit(f"child failed ({done.returncode}): {done.stderr[-2000:]}")
    # ru_maxrss of the children is the largest of any child so far: children run
    # smallest first, so each figure is its own child's (a larger one would show).
    return seconds, max(peak, before) / 1024


_CLI = "import sys\nfrom augplan.cli import main\nsys.exit(main(sys.argv[1:]))\n"
_DECODE_ONLY = "import sys\nfrom PIL import Image\nImage.open(sys.argv[1]).load()\n"


def main():
    CACHE.mkdir(parents=True, exist_ok=True)
    recipe = CACHE / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    root, huge = _huge_set()
    _, floor = _child(_DECODE_ONLY, huge)
    seconds, peak = _child(_CLI, "check", root, "--recipe", recipe, "--quiet")
    print(f"check, one {SIDE}x{SIDE} RGBA image among 32: peak RSS {peak:.0f} MiB in {seconds:.1f} s; "
          f"Pillow decode alone {floor:.0f} MiB (ratio {peak / floor:.2f}); target < 1024 MiB")
    for train in (2, 5):
        data = _write_set(CACHE / f"classes200x{train}", tuple(f"k{i:03d}" for i in range(200)), train, 1)
        seconds, _ = _child(_CLI, "coverage", data, "--recipe", recipe, "--quiet", "--json")
        print(f"coverage, 200 classes x {train} training images: {seconds:.1f} s")


if __name__ == "__main__":
    main()
