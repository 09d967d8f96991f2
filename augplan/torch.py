"""An optional PyTorch adapter: an augmenter for ``Dataset.__getitem__``.

Needs the ``cnn`` extra (``pip install 'augplan[cnn]'``); torch is imported
here only, so the rest of augplan never loads it.

Reproducibility without hidden process state: every draw has its own
generator, keyed by ``(seed, epoch, worker, index)``: the seed and the epoch
the adapter object carries, the id of the loader worker that calls it (read
from ``torch.utils.data.get_worker_info`` at the call) and the dataset index
the caller passes. Nothing has to be initialised in the worker, so the draws
are the same under every start method (``fork``, ``forkserver``, ``spawn``):
distinct for every worker, index and epoch, and identical for two runs with
the same seed, sampler and number of workers::

    to_tensor = TensorAugmenter(augplan.load_recipe("vetted-recipe.yaml"), seed=1234)

    class Images(torch.utils.data.Dataset):
        def __getitem__(self, i):
            return to_tensor(self.images[i], self.labels[i], index=i)

    loader = DataLoader(Images(...), num_workers=2, generator=torch.Generator().manual_seed(1234))
    for epoch in range(epochs):
        to_tensor.set_epoch(epoch)   # fresh, reproducible draws every epoch
        for images, labels in loader:
            ...
"""

import multiprocessing
import os

import numpy as np
import torch
from PIL import Image

from augplan.augment import Augmenter
from augplan.seeding import keyed_generator

__all__ = ["TensorAugmenter"]

_MAIN_PROCESS = 0  # the worker slot of draws made outside loader workers (num_workers=0)


def _non_negative_int(value, name):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
        raise ValueError(f"{name} must be a non-negative integer; got {value!r}")
    return int(value)


class TensorAugmenter:
    """Augment one training image and return it as a float tensor.

    Parameters
    ----------
    augmenter : augplan.augment.augmenter.Augmenter
        From `augplan.load_recipe`; give it ``classes`` for integer labels
        of a class-scoped recipe.
    seed : int, optional
        The seed every draw derives from. Default: the recipe's own ``seed``
        (its ``seed:`` field, 0 when the file has none), so a vetted recipe
        reproduces its draws in the training loop without a second number.
    rank : int, optional
        This process's number among sibling training processes (the
        distributed rank), for a process started by another one that is not
        a loader worker, such as one rank of ``torch.multiprocessing.spawn``:
        ranks then draw apart even where their samplers share an index.

    Notes
    -----
    The adapter holds no generator. Each call builds one keyed by
    ``(epoch, rank + 1, worker + 1, index, repeat)`` under ``seed``
    (`augplan.seeding.keyed_generator`; rank slot 0 without a rank), where
    ``worker`` is the loader worker's id (slot 0 is the main process, when
    ``num_workers=0``), ``index`` the dataset index passed by the caller and
    ``repeat`` how often this process already drew that index in this epoch
    (0 unless the sampler repeats indices, as one drawing with replacement
    does). The epoch lives in a shared-memory tensor, so ``set_epoch`` reaches
    workers that outlive an epoch (``persistent_workers=True``) as well as
    new ones. The object pickles under every start method.

    Two checks raise where draws would silently repeat. A process that is a
    child of another but not a loader worker (a ``multiprocessing`` pool,
    say) cannot tell itself from its siblings: every such process would draw
    the same stream. And an adapter made inside a loader worker (a
    module-level object the worker re-created on import under ``spawn`` or
    ``forkserver``) never sees the main process's `set_epoch`, so every epoch
    would repeat: hand the adapter to the dataset instead, which the loader
    pickles to its workers.
    """

    def __init__(self, augmenter, *, seed=None, rank=None):
        if not isinstance(augmenter, Augmenter):
            raise TypeError(f"TensorAugmenter expects an augplan Augmenter (augplan.load_recipe); "
                            f"got {type(augmenter).__name__}")
        self.augmenter = augmenter
        self.seed = int(augmenter.recipe.seed) if seed is None else _non_negative_int(seed, "seed")
        self.rank = None if rank is None else _non_negative_int(rank, "rank")
        # Shared memory: workers forked, forkserved or spawned read the value set_epoch writes.
        self._epoch = torch.zeros((), dtype=torch.int64).share_memory_()
        self._repeats = {}
        self._threads_set_in = None
        # The process that made the object. A loader worker holds a copy made
        # elsewhere (pickled by the loader, or inherited by fork); one it made
        # itself (a module-level object re-created when a spawn or forkserver
        # worker imported its module) is cut off from the main process's set_epoch.
        self._made_in = os.getpid()
        self._pickled_in = None  # set by unpickling (see __setstate__)

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_repeats"], state["_threads_set_in"] = {}, None  # per-process bookkeeping
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        # A copy the loader pickled to a spawn or forkserver worker: a fresh
        # process, where OpenCV's thread count can be set safely.
        self._pickled_in = os.getpid()

    @property
    def epoch(self):
        """The epoch whose draws the next calls make (see `set_epoch`)."""
        return int(self._epoch.item())

    def __repr__(self):
        rank = "" if self.rank is None else f", rank={self.rank}"
        return f"TensorAugmenter({self.augmenter!r}, seed={self.seed}{rank}, epoch={self.epoch})"

    def set_epoch(self, epoch):
        """Use the draws of ``epoch`` from the next loader iteration on (call before iterating)."""
        self._epoch.fill_(_non_negative_int(epoch, "epoch"))

    def worker_init_fn(self, worker_id):
        """Optional ``DataLoader(worker_init_fn=...)``: runs OpenCV on one thread in the worker.

        The draws do not depend on it, and a call does the same on its first
        use in a spawn or forkserver worker. Do not pass it with the ``fork``
        start method once the main process has run OpenCV: in a forked child
        ``cv2.setNumThreads`` can hang.
        """
        import cv2

        cv2.setNumThreads(1)
        self._threads_set_in = os.getpid()

    def _worker_slot(self):
        info = torch.utils.data.get_worker_info()
        if info is not None:
            if self._made_in == os.getpid():
                raise RuntimeError(
                    "this TensorAugmenter was created inside a DataLoader worker (a module-level object that "
                    "the worker made again when it imported the module, as the spawn and forkserver start "
                    "methods do), so the set_epoch calls of the main process never reach it and every epoch "
                    "would repeat the same draws. Hand the adapter to the dataset (for example "
                    "Dataset.__init__(self, ..., transform) storing self.transform = transform) so the "
                    "loader carries it to the workers.")
            if self._threads_set_in != os.getpid() and self._pickled_in == os.getpid():
                # Not in a forked worker: there cv2.setNumThreads can hang
                # when the parent's OpenCV thread pool has run.
                self.worker_init_fn(info.id)
            return info.id + 1
        if multiprocessing.parent_process() is not None and self.rank is None:
            raise RuntimeError(
                "TensorAugmenter was called in a child process that is not a torch DataLoader worker: "
                "its draws are keyed by the loader worker's id, so every such process would draw the same "
                "stream. Give each process its own number, TensorAugmenter(..., rank=r), or call it from "
                "Dataset.__getitem__ under a DataLoader (any num_workers), or in the main process.")
        return _MAIN_PROCESS

    def generator(self, index):
        """The generator of the next draw of dataset item ``index`` in this process.

        Parameters
        ----------
        index : int
            The dataset index (``__getitem__``'s argument).

        Returns
        -------
        numpy.random.Generator
            The stream keyed by ``(epoch, rank + 1, worker + 1, index, repeat)``
            under ``seed``; see the class notes.
        """
        index = _non_negative_int(index, "index")
        worker, epoch = self._worker_slot(), self.epoch
        if self._repeats.get("epoch") != epoch:
            self._repeats = {"epoch": epoch}
        repeat = self._repeats.get(index, 0)
        self._repeats[index] = repeat + 1
        rank = 0 if self.rank is None else self.rank + 1
        return keyed_generator(self.seed, epoch, rank, worker, index, repeat)

    def __call__(self, image, label=None, *, index=None):
        """One augmented draw as a ``(C, H, W)`` float32 tensor with values in [0, 1].

        Parameters
        ----------
        image : PIL.Image.Image or numpy.ndarray (H, W, 3), (H, W, 1) or (H, W) uint8
            A grey image gives a one-channel tensor.
        label : str or int, optional
            With a label, class scopes and relabels apply and
            ``(tensor, label)`` is returned; without one, class-scoped
            transforms are skipped and only the tensor is returned.
        index : int
            The dataset index of the image (``__getitem__``'s argument);
            required, since the draw is keyed by it.

        Returns
        -------
        torch.Tensor or (torch.Tensor, label)
        """
        if index is None:
            raise TypeError("TensorAugmenter needs the dataset index of the image, which keys its draw: "
                            "call to_tensor(image, label, index=i) in Dataset.__getitem__(self, i)")
        rng = self.generator(index)
        if isinstance(image, Image.Image):
            image = np.asarray(image.convert("L" if image.mode == "L" else "RGB"))
        augmented, new_label = self.augmenter.apply(image, label, rng)
        array = np.asarray(augmented)
        if array.ndim == 2:
            array = array[:, :, None]
        # uint8 -> [0, 1] floats, channels first: the layout torch's conv layers read.
        tensor = torch.from_numpy(np.ascontiguousarray(array.transpose(2, 0, 1))).to(torch.float32) / 255.0
        return tensor if label is None else (tensor, new_label)
