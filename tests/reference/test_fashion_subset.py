"""The committed Fashion-MNIST subset is what its README says it is."""

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from reference import FASHION_SUBSET as SUBSET
from reference import FOLDER as DATA
# Folder of the Debian package dataset-fashion-mnist (tests/reference/README.md).
DEBIAN_SOURCE = Path("/usr/share/datasets/fashion-mnist")


@pytest.fixture(scope="module")
def subset():
    with np.load(SUBSET) as arrays:
        return {name: arrays[name] for name in arrays.files}


@pytest.mark.parametrize("split, per_class", [("train", 100), ("test", 50)])
def test_subset_is_balanced_grey_28x28(subset, split, per_class):
    images, labels = subset[f"{split}_images"], subset[f"{split}_labels"]
    assert images.dtype == np.uint8 and images.shape == (10 * per_class, 28, 28)
    assert np.array_equal(np.bincount(labels, minlength=10), [per_class] * 10)


def test_subset_class_names_follow_the_data_sets_label_table(subset):
    # Label table of Fashion-MNIST's README (Xiao, Rasul & Vollgraf 2017).
    assert subset["class_names"][0] == "T-shirt/top" and subset["class_names"][9] == "Ankle boot"


def test_subset_stays_under_3_megabytes():
    assert SUBSET.stat().st_size < 3_000_000


@pytest.mark.skipif(not DEBIAN_SOURCE.is_dir(), reason="dataset-fashion-mnist is not installed")
def test_cutting_script_reproduces_the_committed_subset(subset):
    spec = importlib.util.spec_from_file_location("cut_fashion_mnist", DATA / "cut_fashion_mnist.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    fresh = module.cut(DEBIAN_SOURCE, 100, 50)
    for name in ("train_images", "train_labels", "test_images", "test_labels"):
        assert np.array_equal(fresh[name], subset[name]), name
