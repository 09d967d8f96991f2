"""Training functions as a team would pass them with ``--model team_training:NAME``.

Test helpers only: a nearest-class-mean classifier on raw pixels that
records what augplan hands it, and functions that break the contract.
"""

import hashlib

import numpy as np

#: What each training call received, and every image its predictor was shown.
CALLS = []
PREDICTED = []


def _digest(image):
    return hashlib.sha256(np.ascontiguousarray(image).tobytes()).hexdigest()


class NearestMean:
    """Predicts the class whose mean training image is nearest in pixel space."""

    def __init__(self, images, labels):
        self.classes = np.unique(labels)
        flat = images.reshape(len(images), -1).astype(np.float64)
        self.means = np.stack([flat[labels == c].mean(axis=0) for c in self.classes])

    def predict(self, images):
        PREDICTED.extend(_digest(image) for image in images)
        flat = images.reshape(len(images), -1).astype(np.float64)
        distances = ((flat[:, None, :] - self.means[None]) ** 2).sum(axis=2)
        return self.classes[distances.argmin(axis=1)]


def fit_nearest_mean(images, labels, rng):
    CALLS.append({"dtype": images.dtype, "shape": images.shape, "labels": np.array(labels, copy=True),
                  "rng": rng, "digests": {_digest(image) for image in images}})
    return NearestMean(images, labels)


def returns_no_predictor(images, labels, rng):
    return None


class _NamePredictor:
    def predict(self, images):
        return np.array(["a"] * len(images))


def predicts_names(images, labels, rng):
    return _NamePredictor()


def raises(images, labels, rng):
    return 1 / 0


def exits(images, labels, rng):
    import sys

    sys.exit(0)
