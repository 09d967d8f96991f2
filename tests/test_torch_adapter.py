"""The PyTorch adapter in a real torch DataLoader with worker processes.

Runs where the ``cnn`` extra (torch) is installed, as ``make test`` does.
"""

import numpy as np
import pytest

torch = pytest.importorskip("torch", reason="torch is not installed (the 'cnn' extra); adapter tests skipped")

from augplan.augment.augmenter import Augmenter  # noqa: E402
from augplan.recipe.parse import parse_recipe  # noqa: E402
from augplan.torch import TensorAugmenter  # noqa: E402

CLASSES = ["left", "right", "plain"]
RECIPE = """
name: loader
transforms:
  - op: rotate
    degrees: [-20, 20]
  - op: noise
    sigma: [0.0, 0.05]
  - op: flip
    axis: horizontal
    probability: 0.5
    only: [left, right]
    relabel: {left: right, right: left}
"""


class _Tiles(torch.utils.data.Dataset):
    """Sixteen small images with integer labels, augmented in ``__getitem__``."""

    def __init__(self, transform):
        rng = np.random.default_rng(7)
        self.images = rng.integers(0, 256, size=(16, 12, 10, 3), dtype=np.uint8)
        self.labels = [i % len(CLASSES) for i in range(16)]
        self.transform = transform

    def __len__(self):
        return len(self.images)

    def __getitem__(self, index):
        return self.transform(self.images[index], self.labels[index])


# Workers start from a fresh server process: a worker forked from a process
# whose OpenCV thread pool already ran (as earlier tests' did) can hang.
def _epoch(seed, epoch=0, workers=2):
    to_tensor = TensorAugmenter(Augmenter(parse_recipe(RECIPE), classes=CLASSES), seed=seed)
    to_tensor.set_epoch(epoch)
    loader = torch.utils.data.DataLoader(
        _Tiles(to_tensor), batch_size=4, shuffle=True, num_workers=workers,
        worker_init_fn=to_tensor.worker_init_fn, generator=torch.Generator().manual_seed(0),
        multiprocessing_context="forkserver")
    return [(images.clone(), labels.clone()) for images, labels in loader]


@pytest.fixture(scope="module")
def first_run():
    return _epoch(seed=3)


def test_batches_are_float_tensors_in_channel_first_layout(first_run):
    images, labels = first_run[0]
    assert images.shape == (4, 3, 12, 10) and images.dtype == torch.float32
    assert float(images.min()) >= 0.0 and float(images.max()) <= 1.0
    assert labels.dtype == torch.int64 and set(labels.tolist()) <= {0, 1, 2}


def test_two_runs_with_two_workers_give_identical_batches(first_run):
    again = _epoch(seed=3)
    assert len(again) == len(first_run) == 4
    for (a, la), (b, lb) in zip(first_run, again):
        assert torch.equal(a, b) and torch.equal(la, lb)


@pytest.mark.parametrize("change", [{"seed": 4}, {"seed": 3, "epoch": 1}], ids=["other-seed", "next-epoch"])
def test_another_seed_or_epoch_draws_differently(first_run, change):
    other = _epoch(**change)
    assert any(not torch.equal(a, b) for (a, _), (b, _) in zip(first_run, other))


def test_each_worker_draws_from_its_own_generator():
    to_tensor = TensorAugmenter(Augmenter(parse_recipe(RECIPE), classes=CLASSES), seed=3)
    image = np.full((12, 10, 3), 128, dtype=np.uint8)
    draws = []
    for worker in (0, 1):
        to_tensor.worker_init_fn(worker)
        draws.append(to_tensor(image))
    assert not torch.equal(draws[0], draws[1])


def test_pil_image_in_and_label_free_call():
    from PIL import Image

    to_tensor = TensorAugmenter(Augmenter(parse_recipe(RECIPE), classes=CLASSES), seed=0)
    out = to_tensor(Image.fromarray(np.zeros((8, 6, 3), dtype=np.uint8)))
    assert isinstance(out, torch.Tensor) and out.shape == (3, 8, 6)


@pytest.mark.parametrize("bad", [None, "recipe"], ids=["none", "string"])
def test_only_an_augmenter_is_accepted(bad):
    with pytest.raises(TypeError, match="load_recipe"):
        TensorAugmenter(bad)
