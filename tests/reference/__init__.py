"""Outside data committed for the tests, with its source and licence (README.md here).

One home for the paths, so a test reads the same file from any folder of the suite.
"""

from pathlib import Path

FOLDER = Path(__file__).resolve().parent

#: 100 images per class of Fashion-MNIST's test set (Xiao, Rasul & Vollgraf 2017),
#: cut from Debian's dataset-fashion-mnist package by cut_fashion_mnist.py.
FASHION_SUBSET = FOLDER / "fashion-mnist-subset.npz"
