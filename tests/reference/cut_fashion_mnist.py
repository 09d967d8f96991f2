"""Cut the committed Fashion-MNIST subset from the full IDX files.

Takes the first ``--train-per-class`` images of each class from the training
file and the first ``--test-per-class`` of each class from the t10k file, in
file order (no randomness), and writes them to one compressed ``.npz``.

Usage::

    python tests/reference/cut_fashion_mnist.py \
        --source /usr/share/datasets/fashion-mnist \
        -o tests/reference/fashion-mnist-subset.npz

The default source is the folder of the Debian package
``dataset-fashion-mnist`` (version 0.0~git20200523.55506a9-1).

References
----------
.. [1] H. Xiao, K. Rasul and R. Vollgraf, "Fashion-MNIST: a novel image
   dataset for benchmarking machine learning algorithms", arXiv:1708.07747,
   2017.
"""

from __future__ import annotations

import argparse
import gzip
import os
import tempfile
from pathlib import Path

import numpy as np

# Label order of the data set's own description (its README's label table).
CLASS_NAMES = ("T-shirt/top", "Trouser", "Pullover", "Dress", "Coat",
               "Sandal", "Shirt", "Sneaker", "Bag", "Ankle boot")


def read_idx(path):
    """Array stored in an IDX file (big-endian header: magic, then one size per axis)."""
    with gzip.open(path, "rb") as handle:
        data = handle.read()
    if data[0] != 0 or data[1] != 0 or data[2] != 0x08:
        raise ValueError(f"{path}: not an unsigned-byte IDX file")
    ndim = data[3]
    shape = tuple(int.from_bytes(data[4 + 4 * i: 8 + 4 * i], "big") for i in range(ndim))
    return np.frombuffer(data, dtype=np.uint8, offset=4 + 4 * ndim).reshape(shape)


def first_per_class(labels, per_class):
    """Indices of the first ``per_class`` images of each class, in file order."""
    picks = [np.flatnonzero(labels == c)[:per_class] for c in range(len(CLASS_NAMES))]
    if any(len(p) < per_class for p in picks):
        raise ValueError(f"fewer than {per_class} images in some class")
    return np.sort(np.concatenate(picks))


def cut(source, train_per_class, test_per_class):
    source = Path(source)
    out = {}
    for split, stem, per_class in (("train", "train", train_per_class),
                                   ("test", "t10k", test_per_class)):
        images = read_idx(source / f"{stem}-images-idx3-ubyte.gz")
        labels = read_idx(source / f"{stem}-labels-idx1-ubyte.gz")
        keep = first_per_class(labels, per_class)
        out[f"{split}_images"] = np.ascontiguousarray(images[keep])
        out[f"{split}_labels"] = labels[keep].astype(np.uint8)
    out["class_names"] = np.array(CLASS_NAMES)
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--source", default="/usr/share/datasets/fashion-mnist")
    parser.add_argument("--train-per-class", type=int, default=100)
    parser.add_argument("--test-per-class", type=int, default=50)
    parser.add_argument("-o", "--output", default=str(Path(__file__).with_name("fashion-mnist-subset.npz")))
    args = parser.parse_args(argv)
    arrays = cut(args.source, args.train_per_class, args.test_per_class)
    output = Path(args.output)
    handle, temp = tempfile.mkstemp(dir=output.parent, suffix=".npz")
    os.close(handle)
    np.savez_compressed(temp, **arrays)
    os.chmod(temp, 0o644)  # mkstemp's private mode would follow the file into the repository
    os.replace(temp, output)


if __name__ == "__main__":
    main()
