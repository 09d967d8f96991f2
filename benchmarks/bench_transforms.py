"""Images per second for each op at 224x224 RGB: augplan's op function versus
a direct call of the underlying primitive doing the same work, in one run.

Run: ``python benchmarks/bench_transforms.py [--rounds 7] [--size 224]``.
Each round times a batch of calls to both sides back to back; the best round
is kept for each side, which damps noise from other processes on a shared
machine. The ratio is augplan's time per image over the primitive's (1.0 =
no overhead; the target is at most 1.3).
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import ndimage
from skimage import color as skcolor
from skimage import data
from skimage.transform import resize

from augplan.augment import transforms

COEFFS = np.array([0.2126, 0.7152, 0.0722], dtype=np.float32)  # ITU-R BT.709


def _decode_table():
    v = np.arange(256) / 255.0
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _encode(lin):
    lin = np.clip(lin, 0.0, 1.0)
    enc = np.where(lin <= 0.0031308, lin * 12.92, 1.055 * lin ** (1 / 2.4) - 0.055)
    return (enc * 255 + 0.5).astype(np.uint8)


def _affine(image, matrix, translation, mode="reflect"):
    h, w = image.shape[:2]
    centre = np.array([(h - 1) / 2, (w - 1) / 2])
    offset = centre - matrix @ centre + np.asarray(translation)
    out = np.empty_like(image)
    for k in range(3):
        ndimage.affine_transform(image[..., k], matrix, offset, order=1, mode=mode, output=out[..., k])
    return out


def raw_cases(size):
    """op name -> (augplan params, raw callable(image, rng))."""
    theta = math.radians(12.0)
    rot = np.array([[math.cos(theta), math.sin(theta)], [-math.sin(theta), math.cos(theta)]])

    def raw_brightness(img, rng):
        return _encode(_decode_table() * 1.3)[img]

    def raw_contrast(img, rng):
        table = _decode_table()
        mean = float((table[img] @ COEFFS.astype(np.float64)).mean())
        return _encode(mean + 1.2 * (table - mean))[img]

    def raw_saturation(img, rng):
        lin = _decode_table().astype(np.float32)[img]
        grey = (lin @ COEFFS)[..., None]
        return _encode(grey + 1.3 * (lin - grey))

    def raw_hue(img, rng):
        hsv = skcolor.rgb2hsv(img)
        hsv[..., 0] = (hsv[..., 0] + 10 / 360) % 1.0
        return (skcolor.hsv2rgb(hsv) * 255 + 0.5).astype(np.uint8)

    def raw_noise(img, rng):
        out = img + rng.normal(0.0, 0.03 * 255, img.shape)
        return np.clip(out + 0.5, 0, 255).astype(np.uint8)

    return {
        "flip": ({"axis": "horizontal"}, lambda img, rng: np.ascontiguousarray(img[:, ::-1])),
        "rotate": ({"degrees": 12.0, "fill": "reflect"}, lambda img, rng: _affine(img, rot, (0, 0))),
        "zoom": ({"factor": 1.2, "fill": "reflect"}, lambda img, rng: _affine(img, np.eye(2) / 1.2, (0, 0))),
        "shift": (
            {"fraction": (0.1, -0.05), "fill": "reflect"},
            lambda img, rng: _affine(img, np.eye(2), (0.05 * size, -0.1 * size)),
        ),
        "brightness": ({"factor": 1.3}, raw_brightness),
        "contrast": ({"factor": 1.2}, raw_contrast),
        "saturation": ({"factor": 1.3}, raw_saturation),
        "hue": ({"degrees": 10.0}, raw_hue),
        "blur": ({"sigma": 1.5}, lambda img, rng: ndimage.gaussian_filter(img, (1.5, 1.5, 0), mode="reflect")),
        "noise": ({"sigma": 0.03}, raw_noise),
    }


def best_rate(function, image, rng, calls, rounds_out, key):
    start = time.perf_counter()
    for _ in range(calls):
        function(image, rng)
    elapsed = (time.perf_counter() - start) / calls
    rounds_out[key] = min(rounds_out.get(key, math.inf), elapsed)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=224)
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--seconds", type=float, default=0.15, help="target time per batch")
    args = parser.parse_args(argv)

    # skimage.data.chelsea() ships with scikit-image; resized to size x size.
    image = (resize(data.chelsea(), (args.size, args.size), order=1, anti_aliasing=True) * 255 + 0.5)
    image = image.astype(np.uint8)
    rng = np.random.default_rng(0)

    print(f"{'op':<11} {'augplan img/s':>14} {'primitive img/s':>16} {'ratio':>7}")
    worst = 0.0
    for name, (params, raw) in raw_cases(args.size).items():
        ours = transforms.OPS[name].function

        def run_ours(img, gen, ours=ours, params=params):
            return ours(img, params, gen)

        # Warm up and size the batch to about args.seconds.
        start = time.perf_counter()
        run_ours(image, rng)
        raw(image, rng)
        once = max(time.perf_counter() - start, 1e-6) / 2
        calls = max(3, int(args.seconds / once))
        times = {}
        for _ in range(args.rounds):
            best_rate(run_ours, image, rng, calls, times, "ours")
            best_rate(raw, image, rng, calls, times, "raw")
        ratio = times["ours"] / times["raw"]
        worst = max(worst, ratio)
        print(f"{name:<11} {1 / times['ours']:>14.0f} {1 / times['raw']:>16.0f} {ratio:>7.2f}")
    print(f"worst ratio {worst:.2f} (target <= 1.30)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
