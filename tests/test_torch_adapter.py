"""The PyTorch adapter in a real torch DataLoader with worker processes.

Runs where the ``cnn`` extra (torch) is installed, as ``make test`` does.
The images are 8x8 and few, so each start method costs a couple of worker
start-ups, not training time.
"""

import multiprocessing

import numpy as np
import pytest

torch = pytest.importorskip("torch", reason="torch is not installed (the 'cnn' extra); adapter tests skipped")

from augplan.augment.augmenter import Augmenter  # noqa: E402
from augplan.recipe.parse import parse_recipe  # noqa: E402
from augplan.torch import TensorAugmenter  # noqa: E402

CLASSES = ["left", "right", "plain"]
# Noise and a flip only: no OpenCV call that starts a thread pool, so a
# forked worker is safe here whatever earlier tests ran.
RECIPE = """
name: loader
seed: 11
transforms:
  - op: noise
    sigma: [0.02, 0.1]
  - op: flip
    axis: horizontal
    probability: 0.5
    only: [left, right]
    relabel: {left: right, right: left}
"""
ITEMS = 8


def _adapter(seed=None):
    return TensorAugmenter(Augmenter(parse_recipe(RECIPE), classes=CLASSES), seed=seed)


class _Tiles(torch.utils.data.Dataset):
    """Eight identical grey squares: any two draws differ only through their generators."""

    def __init__(self, transform):
        self.image = np.full((8, 8, 3), 128, dtype=np.uint8)
        self.labels = [i % len(CLASSES) for i in range(ITEMS)]
        self.transform = transform

    def __len__(self):
        return ITEMS

    def __getitem__(self, index):
        import cv2

        tensor, label = self.transform(self.image, self.labels[index], index=index)
        info = torch.utils.data.get_worker_info()
        return tensor, label, -1 if info is None else info.id, index, cv2.getNumThreads()


def _run(method, seed=3, epochs=2, workers=2, threads=None):
    """Every draw of ``epochs`` epochs: ``{(epoch, worker, index): (tensor, label)}``.

    ``threads``, a set, collects OpenCV's thread count in each call.
    """
    to_tensor = _adapter(seed)
    loader = torch.utils.data.DataLoader(
        _Tiles(to_tensor), batch_size=2, shuffle=True, num_workers=workers,
        generator=torch.Generator().manual_seed(0), multiprocessing_context=method if workers else None,
        # Workers that outlive an epoch must still see set_epoch (a shared tensor).
        persistent_workers=workers > 0 and method != "fork",
        timeout=120 if workers else 0)  # a hung worker fails the test instead of stalling the suite
    draws = {}
    for epoch in range(epochs):
        to_tensor.set_epoch(epoch)
        for images, labels, worker_ids, indices, counts in loader:
            for image, label, worker, index in zip(images, labels, worker_ids, indices):
                draws[epoch, int(worker), int(index)] = (image.clone(), int(label))
            if threads is not None:
                threads.update(int(c) for c in counts)
    return draws


@pytest.mark.parametrize("method", ["fork", "forkserver", "spawn"])
def test_every_start_method_draws_afresh_per_worker_and_epoch_and_repeats_per_seed(method):
    if method not in multiprocessing.get_all_start_methods():
        pytest.skip(f"start method {method} is not available on this platform")
    if method == "fork":
        # OpenCV's thread pool has run in this process (a large blur): a forked
        # worker that reset OpenCV's thread count here would hang.
        import cv2

        cv2.GaussianBlur(np.zeros((1024, 1024, 3), np.uint8), (0, 0), 3)
    threads = set()
    draws = _run(method, threads=threads)
    if method != "fork":
        assert threads == {1}  # each fresh worker runs OpenCV on one thread
    assert len(draws) == 2 * ITEMS
    assert {worker for _, worker, _ in draws} == {0, 1}
    # The images are identical, so equal tensors would be a repeated draw.
    tensors = [image.numpy().tobytes() for image, _ in draws.values()]
    assert len(set(tensors)) == len(tensors)
    for epoch in (0, 1):
        per_worker = [[image for (e, w, _), (image, _) in draws.items() if e == epoch and w == worker]
                      for worker in (0, 1)]
        assert all(len(images) == ITEMS // 2 for images in per_worker)
    again = _run(method)
    assert draws.keys() == again.keys()
    assert all(torch.equal(draws[key][0], again[key][0]) and draws[key][1] == again[key][1] for key in draws)


def test_another_seed_draws_differently():
    first, other = _run(None, workers=0, epochs=1), _run(None, seed=4, workers=0, epochs=1)
    assert all(not torch.equal(first[key][0], other[key][0]) for key in first)


def test_the_default_seed_is_the_recipes_own():
    assert _adapter().seed == 11 and _adapter(seed=5).seed == 5


def test_batches_are_float_tensors_in_channel_first_layout():
    to_tensor = _adapter(0)
    image, label = to_tensor(np.full((12, 10, 3), 90, dtype=np.uint8), 1, index=0)
    assert image.shape == (3, 12, 10) and image.dtype == torch.float32
    assert 0.0 <= float(image.min()) and float(image.max()) <= 1.0 and label in (0, 1)


# A module-level adapter: a spawned worker makes it again when it imports
# this module, apart from the main process's set_epoch.
MODULE_LEVEL = _adapter(3)


def test_an_adapter_made_again_inside_a_worker_raises_instead_of_repeating_epochs():
    loader = torch.utils.data.DataLoader(_UsesModuleLevel(MODULE_LEVEL), batch_size=2, num_workers=1,
                                         multiprocessing_context="spawn")
    with pytest.raises(RuntimeError, match="created inside a DataLoader worker"):
        next(iter(loader))


class _UsesModuleLevel(_Tiles):
    """Reads the module-level adapter by name in the worker, not the copy the loader carries."""

    def __getitem__(self, index):
        tensor, label = MODULE_LEVEL(self.image, self.labels[index], index=index)
        return tensor, label, torch.utils.data.get_worker_info().id, index


def test_a_child_process_that_is_no_loader_worker_raises_unless_given_its_rank(monkeypatch):
    image = np.full((8, 8, 3), 128, dtype=np.uint8)
    monkeypatch.setattr(multiprocessing, "parent_process", lambda: object())
    with pytest.raises(RuntimeError, match="every such process would draw the same stream"):
        _adapter(0)(image, index=0)
    ranks = [TensorAugmenter(Augmenter(parse_recipe(RECIPE), classes=CLASSES), seed=0, rank=r) for r in (0, 1)]
    assert not torch.equal(ranks[0](image, index=0), ranks[1](image, index=0))


def test_a_call_without_the_index_says_how_to_pass_it():
    with pytest.raises(TypeError, match=r"index=i"):
        _adapter(0)(np.zeros((4, 4, 3), dtype=np.uint8), 0)


def test_a_sampler_that_repeats_an_index_gets_a_fresh_draw():
    to_tensor = _adapter(0)
    image = np.full((8, 8, 3), 128, dtype=np.uint8)
    assert not torch.equal(to_tensor(image, index=2), to_tensor(image, index=2))


def test_pil_image_in_and_label_free_call():
    from PIL import Image

    out = _adapter(0)(Image.fromarray(np.zeros((8, 6, 3), dtype=np.uint8)), index=0)
    assert isinstance(out, torch.Tensor) and out.shape == (3, 8, 6)


@pytest.mark.parametrize("bad", [None, "recipe"], ids=["none", "string"])
def test_only_an_augmenter_is_accepted(bad):
    with pytest.raises(TypeError, match="load_recipe"):
        TensorAugmenter(bad)
