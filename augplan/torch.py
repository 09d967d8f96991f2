"""An optional PyTorch adapter: an augmenter for ``Dataset.__getitem__``.

Needs the ``cnn`` extra (``pip install 'augplan[cnn]'``); torch is imported
here only, so the rest of augplan never loads it.

Reproducibility: each loader worker gets its own generator, derived from one
seed, the epoch number and the worker's id; a worker processes the same
indices in the same order for the same sampler, so two runs with the same
seed (and a seeded sampler) give identical batches::

    to_tensor = TensorAugmenter(augplan.load_recipe("vetted-recipe.yaml"), seed=1234)
    loader = DataLoader(dataset, num_workers=2, worker_init_fn=to_tensor.worker_init_fn,
                        generator=torch.Generator().manual_seed(1234))
    for epoch in range(epochs):
        to_tensor.set_epoch(epoch)   # fresh, reproducible draws every epoch
        for images, labels in loader:
            ...
"""

import numpy as np
import torch
from PIL import Image

from augplan.augment.augmenter import Augmenter

__all__ = ["TensorAugmenter"]


class TensorAugmenter:
    """Augment one training image and return it as a float tensor.

    Parameters
    ----------
    augmenter : augplan.augmenter.Augmenter
        From `augplan.load_recipe`; give it ``classes`` for integer labels
        of a class-scoped recipe.
    seed : int, default 0
        The one seed every worker's generator derives from.

    Notes
    -----
    The generator lives in this object: ``worker_init_fn`` sets it in each
    worker process's copy (the loader hands every worker the same dataset
    and ``worker_init_fn``, so the copy the dataset holds is the one set).
    Without workers (``num_workers=0``) the main process uses the generator
    of worker 0.
    """

    def __init__(self, augmenter, *, seed=0):
        if not isinstance(augmenter, Augmenter):
            raise TypeError(f"TensorAugmenter expects an augplan Augmenter (augplan.load_recipe); "
                            f"got {type(augmenter).__name__}")
        if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
            raise ValueError(f"seed must be a non-negative integer; got {seed!r}")
        self.augmenter = augmenter
        self.seed = int(seed)
        self.epoch = 0
        self._rng = None

    def __repr__(self):
        return f"TensorAugmenter({self.augmenter!r}, seed={self.seed}, epoch={self.epoch})"

    def set_epoch(self, epoch):
        """Use the draws of ``epoch`` from the next loader iteration on (call before iterating)."""
        if isinstance(epoch, bool) or not isinstance(epoch, (int, np.integer)) or epoch < 0:
            raise ValueError(f"epoch must be a non-negative integer; got {epoch!r}")
        self.epoch = int(epoch)
        self._rng = None

    def worker_init_fn(self, worker_id):
        """Give loader worker ``worker_id`` its own generator; pass as ``DataLoader(worker_init_fn=...)``.

        It also runs OpenCV (the engine) on one thread in the worker, so the
        loader's processes do not oversubscribe the cores.
        """
        import cv2

        cv2.setNumThreads(1)
        self._rng = np.random.default_rng(np.random.SeedSequence([self.seed, self.epoch, int(worker_id)]))

    def __call__(self, image, label=None):
        """One augmented draw as a ``(C, H, W)`` float32 tensor with values in [0, 1].

        Parameters
        ----------
        image : PIL.Image.Image or numpy.ndarray (H, W, 3), (H, W, 1) or (H, W) uint8
            A grey image gives a one-channel tensor.
        label : str or int, optional
            With a label, class scopes and relabels apply and
            ``(tensor, label)`` is returned; without one, class-scoped
            transforms are skipped and only the tensor is returned.

        Returns
        -------
        torch.Tensor or (torch.Tensor, label)
        """
        if self._rng is None:
            self.worker_init_fn(0)
        if isinstance(image, Image.Image):
            image = np.asarray(image.convert("L" if image.mode == "L" else "RGB"))
        augmented, new_label = self.augmenter.apply(image, label, self._rng)
        array = np.asarray(augmented)
        if array.ndim == 2:
            array = array[:, :, None]
        # uint8 -> [0, 1] floats, channels first: the layout torch's conv layers read.
        tensor = torch.from_numpy(np.ascontiguousarray(array.transpose(2, 0, 1))).to(torch.float32) / 255.0
        return tensor if label is None else (tensor, new_label)
