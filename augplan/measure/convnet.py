"""A small convolutional network on the CPU: the evaluator's ``cnn`` model.

Needs the ``cnn`` extra (``pip install 'augplan[cnn]'``). Only this module
and `augplan.torch` import torch, and the evaluator imports this module only
when ``--model cnn`` is chosen.

The network is two 3x3 convolution blocks (convolution, batch
normalisation, 2x2 max pooling, ReLU) with 16 and 32 channels, pooled to a
4x4 grid and read by one linear layer: about 15,000 weights, small enough to
train in seconds per thousand images on one core, yet it learns from pixels
as the team's network will, so the augmentations it is shown change what it
learns in the same direction (a linear model on fixed features does not:
see the README's "Which model scores a recipe").

Training is AdamW with a cosine-decayed learning rate, on batches drawn in
an order shuffled by the generator passed in. When the caller passes a
``draw`` function, every epoch trains on a fresh draw of the whole training
set through it (one call of the batch engine per epoch), as a training
loader runs a recipe on every image of every epoch.

How long it trains follows one stated rule: a fixed number of optimiser
steps (``steps``, 300 batches of 64 by default), and at least ``min_epochs``
passes over the training set, so the cost of a fit is known in advance and
does not grow with the data beyond ``min_epochs`` passes; no validation image
is ever used to decide when to stop. Tensors are channels-last (NHWC), the
layout the CPU convolution kernels run fastest on; the layout changes no
arithmetic result's meaning, only speed.

Determinism: the weights are initialised from a torch seed taken from the
generator inside `torch.random.fork_rng` (torch's global state is left as it
was); the network runs on one thread with torch's deterministic algorithms,
so one machine gives the same predictions byte for byte.
"""

import contextlib
import math

import numpy as np
import torch
from torch import nn

__all__ = ["ConvNetClassifier"]


@contextlib.contextmanager
def _deterministic_one_thread():
    """One torch thread and deterministic kernels inside the block; restored after.

    Deterministic mode also fills every new buffer with NaN by default, a
    guard for kernels that read memory they never wrote. No kernel of this
    network does (its weights come out the same with the fill off), and the
    fill took 29% of a fit's CPU time (5,986 fills in 60 steps at 64 px,
    torch's profiler), so it is off inside the block.
    """
    threads = torch.get_num_threads()
    deterministic = torch.are_deterministic_algorithms_enabled()
    fill = torch.utils.deterministic.fill_uninitialized_memory
    torch.set_num_threads(1)
    torch.use_deterministic_algorithms(True)
    torch.utils.deterministic.fill_uninitialized_memory = False
    try:
        yield
    finally:
        torch.utils.deterministic.fill_uninitialized_memory = fill
        torch.use_deterministic_algorithms(deterministic)
        torch.set_num_threads(threads)


def _channel_statistics(images):
    """Mean and standard deviation of each channel of a uint8 batch, on the 0-1 scale.

    Exact, from each channel's 256-bin histogram, so no float copy of the batch
    is made (a float64 copy of 20,000 images of 64 x 64 x 3 would take 1.6 GB).
    """
    values = np.arange(256, dtype=np.float64) / 255.0
    means, stds = [], []
    for channel in range(images.shape[-1]):
        counts = np.bincount(images[..., channel].ravel(), minlength=256).astype(np.float64)
        total = counts.sum()
        mean = counts @ values / total
        means.append(mean)
        stds.append(np.sqrt(counts @ (values - mean) ** 2 / total))
    return np.array(means), np.array(stds)


def _network(n_channels, widths, n_classes):
    layers, previous = [], n_channels
    for width in widths:
        # ReLU in place: batch normalisation's backward pass reads its input,
        # not its output, so overwriting the output changes no gradient, and
        # a fit takes about a third less CPU time without the extra buffer
        # (60 steps at 64 px: 2.6-3.0 s against 1.9 s, same weights). ReLU
        # after the pooling: max pooling and ReLU commute (ReLU is monotone),
        # forward and backward, so the weights come out the same bit for bit
        # while ReLU touches a quarter of the values.
        layers += [nn.Conv2d(previous, width, 3, padding=1, bias=False), nn.BatchNorm2d(width),
                   nn.MaxPool2d(2), nn.ReLU(inplace=True)]
        previous = width
    return nn.Sequential(*layers, nn.AdaptiveAvgPool2d(4), nn.Flatten(), nn.Linear(previous * 16, n_classes))


class ConvNetClassifier:
    """Two convolution blocks and a linear read-out, trained with AdamW on the CPU.

    Parameters
    ----------
    widths : tuple of int, default (16, 32)
        Channels of the convolution blocks (one block per entry).
    steps : int, default 300
        Optimiser steps of training, whatever the size of the training set
        (the last epoch may stop part-way).
    min_epochs : int, default 3
        Passes over the training set at least: a large training set trains
        for ``min_epochs * ceil(N / batch_size)`` steps instead of ``steps``.
    batch_size : int, default 64
    learning_rate : float, default 0.003
        Peak AdamW learning rate, decayed to zero on a cosine over training.
    weight_decay : float, default 0.0005

    Attributes
    ----------
    classes_ : numpy.ndarray
        Sorted labels seen in fit.
    epochs_ : int
        Epochs trained (the last may be partial).
    steps_ : int
        Optimiser steps taken.
    network_ : torch.nn.Module

    Notes
    -----
    The defaults (widths, 300 steps of batches of 64, AdamW at 3e-3 with a
    cosine schedule [1]_ [2]_) were chosen on scikit-learn's digits and the
    committed Fashion-MNIST subset, where the gains they measure rank recipes
    as a deeper network trained several times longer does
    (``benchmarks/bench_transfer.py``; common practice, no source beyond the
    papers of the optimiser and schedule).

    References
    ----------
    .. [1] I. Loshchilov and F. Hutter, "Decoupled weight decay
       regularization", ICLR 2019.
    .. [2] I. Loshchilov and F. Hutter, "SGDR: stochastic gradient descent
       with warm restarts", ICLR 2017.
    """

    def __init__(self, widths=(16, 32), steps=300, min_epochs=3, batch_size=64, learning_rate=0.003,
                 weight_decay=0.0005):
        self.widths = widths
        self.steps = steps
        self.min_epochs = min_epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.weight_decay = weight_decay

    def get_params(self):
        """The constructor's parameters, as scikit-learn's ``get_params`` gives them."""
        return {name: getattr(self, name) for name in
                ("widths", "steps", "min_epochs", "batch_size", "learning_rate", "weight_decay")}

    def __repr__(self):
        return f"ConvNetClassifier({', '.join(f'{k}={v!r}' for k, v in self.get_params().items())})"

    def _to_tensor(self, images):
        batch = np.asarray(images)
        if batch.ndim == 3:
            batch = batch[..., None]
        # NHWC in memory, as numpy holds it: a channels-last view, no copy of the layout.
        tensor = torch.from_numpy(np.ascontiguousarray(batch)).permute(0, 3, 1, 2).to(torch.float32)
        return ((tensor / 255.0 - self.mean_) / self.std_).contiguous(memory_format=torch.channels_last)

    def training_epochs(self, n_images):
        """Epochs (the last may be partial) and optimiser steps a fit on ``n_images`` takes.

        The rule of the class docstring: ``steps`` optimiser steps, or
        ``min_epochs`` whole passes when that is more.
        """
        batches_per_epoch = math.ceil(int(n_images) / self.batch_size)
        total = max(int(self.steps), int(self.min_epochs) * batches_per_epoch)
        return math.ceil(total / batches_per_epoch), total

    def fit(self, images, labels, rng, draw=None, progress=None):
        """Train on uint8 images.

        Parameters
        ----------
        images : numpy.ndarray, uint8, shape (N, H, W, C) or (N, H, W)
        labels : array_like, shape (N,)
        rng : numpy.random.Generator
            Seeds the weights and the batch order (and is handed to ``draw``).
        draw : callable, optional
            ``draw(images, labels, rng) -> (images, labels)``: the training
            set of one epoch, drawn afresh each epoch (an augmentation
            recipe). None trains on ``images`` as they are.
        progress : callable, optional
            Called with no argument after every epoch (a progress bar's tick).

        Returns
        -------
        ConvNetClassifier
            self.
        """
        images = np.asarray(images)
        labels = np.asarray(labels)
        if images.dtype != np.uint8 or images.ndim not in (3, 4) or len(images) != len(labels) or not len(images):
            raise ValueError(f"fit takes a non-empty uint8 batch (N, H, W[, C]) and one label per image; "
                             f"got {images.dtype} {images.shape} and {labels.shape[0]} labels.")
        self.classes_, targets = np.unique(labels, return_inverse=True)
        self.epochs_, self.steps_ = self.training_epochs(len(images))
        originals = images if images.ndim == 4 else images[..., None]
        # Inputs standardised per channel with the originals' statistics.
        mean, std = _channel_statistics(originals)
        self.mean_ = torch.tensor(mean, dtype=torch.float32).view(1, -1, 1, 1)
        self.std_ = torch.tensor(np.maximum(std, 1e-3), dtype=torch.float32).view(1, -1, 1, 1)
        index_of = {label: i for i, label in enumerate(self.classes_)}
        with _deterministic_one_thread():
            with torch.random.fork_rng(devices=[]):
                torch.manual_seed(int(rng.integers(2**63 - 1)))
                self.network_ = _network(originals.shape[-1], self.widths, len(self.classes_))
            self.network_ = self.network_.to(memory_format=torch.channels_last)
            optimiser = torch.optim.AdamW(self.network_.parameters(), lr=self.learning_rate,
                                          weight_decay=self.weight_decay)
            schedule = torch.optim.lr_scheduler.CosineAnnealingLR(optimiser, T_max=self.steps_)
            self.network_.train()
            remaining = self.steps_
            for _ in range(self.epochs_):
                if draw is None:
                    epoch_images, epoch_targets = images, targets
                else:
                    epoch_images, epoch_labels = draw(images, labels, rng)
                    epoch_targets = np.array([index_of[label] for label in epoch_labels])
                y = torch.from_numpy(np.asarray(epoch_targets, dtype=np.int64))
                order = rng.permutation(len(y))
                for start in range(0, min(len(y), remaining * self.batch_size), self.batch_size):
                    batch = order[start:start + self.batch_size]
                    remaining -= 1
                    optimiser.zero_grad(set_to_none=True)
                    # The epoch stays uint8; only a batch is ever float (4 bytes a
                    # value), so memory does not grow with the training set.
                    inputs = self._to_tensor(epoch_images[batch])
                    loss = nn.functional.cross_entropy(self.network_(inputs), y[torch.from_numpy(batch)])
                    loss.backward()
                    optimiser.step()
                    schedule.step()
                if progress is not None:
                    progress()
        self.network_.eval()
        return self

    def predict(self, images):
        """Predicted labels of a uint8 batch (the network in evaluation mode)."""
        if not hasattr(self, "network_"):
            raise RuntimeError("ConvNetClassifier is not fitted yet; call fit first.")
        images = np.asarray(images)
        if not len(images):
            return self.classes_[:0]
        with _deterministic_one_thread(), torch.no_grad():
            outputs = [self.network_(self._to_tensor(images[start:start + 256])).argmax(dim=1).numpy()
                       for start in range(0, len(images), 256)]
        return self.classes_[np.concatenate(outputs)]
