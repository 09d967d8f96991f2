"""The checked images, decoded once per process: the one process-wide cache of the checker.

Why it exists: `augplan.parallel.parallel_map` asks for small work units
(paths and indices, never decoded images), yet every screen and network
unit of one check reads the same sample. A unit therefore carries the
records, and the process that runs it decodes them once and keeps them
here for the next unit; the parent process fills the cache with the images
it already holds before a map and empties it after (`holding`), so with
``workers=1`` nothing is decoded twice.

Measured: decoding 1,600 photos of 640 x 480 (JPEG) at side 64 takes
3.6 s on one core, so without the cache a recipe of six steps on a grid of
seven values (some 40 screen units) would spend over two minutes decoding
the same images again; 1,000 Fashion-MNIST images of 28 px take 0.08 s.

The cache holds one sample, keyed by the images' hashes and side, so another
check (or another data set) never sees a stale one. Nothing here changes a
result: a miss decodes the same pixels.
"""

from __future__ import annotations

import contextlib
import hashlib

__all__ = ["sample_key", "decoded_sample", "holding"]

_DECODED_SAMPLE = {}


def sample_key(records, size):
    """Key of a sample: the SHA-256 of its side and its images' hashes, in order."""
    digest = hashlib.sha256(str(int(size)).encode())
    for record in records:
        digest.update(record.sha256.encode())
    return digest.hexdigest()


def decoded_sample(records, size, key):
    """The images of ``records`` at side ``size``, from the cache when ``key`` is there."""
    from augplan.data import load_images

    images = _DECODED_SAMPLE.get(key)
    if images is None:
        images = load_images(records, size=size)
        _DECODED_SAMPLE.clear()
        _DECODED_SAMPLE[key] = images
    return images


@contextlib.contextmanager
def holding(key, images):
    """Keep ``images`` under ``key`` in this process for the duration of a map, then forget them."""
    _DECODED_SAMPLE.clear()
    _DECODED_SAMPLE[key] = images
    try:
        yield
    finally:
        _DECODED_SAMPLE.clear()
