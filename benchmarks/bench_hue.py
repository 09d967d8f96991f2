"""Hue rotation candidates at 224x224 RGB on one core: speed and accuracy, in one run.

Run: ``python benchmarks/bench_hue.py [--rounds 15]``.

Rotating the HSV hue keeps each pixel's largest channel V and smallest
channel m, so only the position along the hexagon's perimeter moves. In
whole codes that position is ``p = sextant * C + offset`` with chroma
``C = V - m``; a turn adds ``C * degrees / 60`` and, since ``p`` is an
integer, rounding the sum once rounds the result: an integer path. The
candidates:

- ``augplan``: the op as shipped (`augplan.augment.transforms.hue`), OpenCV's
  float32 HSV round trip with every step after the float copy in place;
- ``float, three buffers``: the same round trip allocating each step's output;
- ``integer + table (numpy)``: the integer path above, the shift a 256-entry
  table over C and the way back one gather from a fixed table over
  ``(C, p)`` of how far each channel lies below V;
- ``OpenCV 8-bit HSV pair``: the primitive (hue in 256 steps a turn, so
  1.4-degree steps: not within one code).

Each row prints the median time per call over alternating rounds, its
ratio to the 8-bit pair, and the largest difference, in codes, from
``colorsys`` (Python's standard library) on a 16-step lattice of the RGB
cube at six turns.
"""

import argparse
import colorsys
import statistics
import time

import cv2
import numpy as np
from skimage import data

from augplan.augment.transforms import hue
from augplan.parallel import _reuse_freed_memory

_WIDTH = 3072   # p + shift + C lies in [0, 12 C) for C <= 255


def _drop_table():
    """Fixed table over (C, q): how far R, G and B lie below V, packed in a uint32."""
    c = np.arange(256)[:, None]
    q = np.arange(_WIDTH)[None, :]
    out = np.zeros((256, _WIDTH, 4), np.uint8)
    for channel, n in enumerate((5, 3, 1)):   # k = (n + H / 60) mod 6, Smith's hexcone
        k = (n * c + q - c) % np.maximum(6 * c, 1)
        out[..., channel] = np.clip(np.minimum(k, 4 * c - k), 0, c)
    return out.view(np.uint32).reshape(-1)


_DROPS = _drop_table()


def integer_table(image, degrees):
    c_range = np.arange(256)
    shift = (np.rint(c_range * (degrees / 60.0)).astype(np.int64) % np.maximum(6 * c_range, 1)).astype(np.int32)
    r, g, b = cv2.split(image)
    top = cv2.max(cv2.max(r, g), b)
    chroma = cv2.subtract(top, cv2.min(cv2.min(r, g), b))
    r, g, b = (plane.astype(np.int32) for plane in (r, g, b))
    c = chroma.astype(np.int32)
    p = np.where(top == image[..., 0], g - b, np.where(top == image[..., 1], 2 * c + b - r, 4 * c + r - g))
    drops = np.take(_DROPS, c * _WIDTH + p + c + np.take(shift, chroma)).view(np.uint8)
    drops = drops.reshape(image.shape[:2] + (4,))
    return cv2.cvtColor(cv2.subtract(cv2.merge((top, top, top, top)), drops), cv2.COLOR_RGBA2RGB)


def float_three_buffers(image, degrees):
    hsv = cv2.cvtColor(image.astype(np.float32), cv2.COLOR_RGB2HSV)
    hsv = cv2.add(hsv, (degrees % 360.0, 0.0, 0.0, 0.0))
    return cv2.convertScaleAbs(cv2.cvtColor(hsv, cv2.COLOR_HSV2RGB))


def shipped(image, degrees):
    return hue(image, {"degrees": degrees})


def opencv_8bit(image, degrees):
    hsv = cv2.cvtColor(image, cv2.COLOR_RGB2HSV_FULL)
    hsv[..., 0] += np.uint8(round(degrees * 256 / 360) % 256)
    return cv2.cvtColor(hsv, cv2.COLOR_HSV2RGB_FULL)


def largest_error(function):
    levels = np.arange(0, 256, 17, dtype=np.uint8)
    image = np.stack(np.meshgrid(levels, levels, levels, indexing="ij"), axis=-1).reshape(16, -1, 3)
    unit = image.reshape(-1, 3) / 255.0
    worst = 0.0
    for degrees in (-179.0, -61.0, 7.5, 60.0, 133.0, 180.0):
        expected = np.array([colorsys.hsv_to_rgb((h + degrees / 360.0) % 1.0, s, v)
                             for h, s, v in (colorsys.rgb_to_hsv(*pixel) for pixel in unit)]) * 255
        worst = max(worst, np.abs(function(image, degrees).reshape(-1, 3) - expected).max())
    return worst


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=224)
    parser.add_argument("--rounds", type=int, default=15)
    parser.add_argument("--calls", type=int, default=50, help="calls per round and candidate")
    args = parser.parse_args(argv)
    cv2.setNumThreads(1)
    _reuse_freed_memory()
    # skimage.data.chelsea() ships with scikit-image; resized to size x size.
    image = cv2.resize(data.chelsea(), (args.size, args.size), interpolation=cv2.INTER_AREA)
    candidates = {"augplan (float32, in place)": shipped, "float32, three buffers": float_three_buffers,
                  "integer + table (numpy)": integer_table, "OpenCV 8-bit HSV pair": opencv_8bit}
    times = {name: [] for name in candidates}
    for _ in range(args.rounds):
        for name, function in candidates.items():
            start = time.perf_counter()
            for _ in range(args.calls):
                function(image, 10.0)
            times[name].append((time.perf_counter() - start) / args.calls)
    base = statistics.median(times["OpenCV 8-bit HSV pair"])
    print(f"hue +10 degrees, {args.size}x{args.size} RGB, one thread, median of {args.rounds} rounds")
    print(f"{'candidate':<30} {'us':>8} {'ratio':>6} {'max |error| vs colorsys, codes':>32}")
    for name, function in candidates.items():
        median = statistics.median(times[name])
        print(f"{name:<30} {median * 1e6:8.1f} {median / base:6.2f} {largest_error(function):32.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
