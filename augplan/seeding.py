"""The one seeding convention: a `numpy.random.Generator` comes in, children go out.

Public functions take ``rng``, a `numpy.random.Generator`; only the command
line makes one, from ``--seed``. An analysis splits its generator once, with
``rng.spawn(n)``, into one child per independent purpose, so two analyses
handed different children never share a stream.

A few streams must not depend on what else is in the run: an image's draws
in ``evaluate`` are the same whether two recipes are compared or five, and
whichever worker draws them, so a result stored in the ledger can be reused.
Those streams are *keyed*: `keyed_generator` derives them from one integer
drawn from the analysis's generator (`stream_root`) and the key that names
the work (the recipe's hash, the image's position, the purpose).

References
----------
.. [1] NumPy, "Parallel random number generation",
   https://numpy.org/doc/stable/reference/random/parallel.html
"""

import numpy as np

__all__ = ["require_generator", "stream_root", "keyed_generator"]


def require_generator(rng, name="rng"):
    """Return ``rng`` if it is a `numpy.random.Generator`, else raise `TypeError` saying what came."""
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"{name} must be a numpy.random.Generator (e.g. numpy.random.default_rng(seed)), "
                        f"got {type(rng).__name__}")
    return rng


def stream_root(rng):
    """One 63-bit integer drawn from ``rng``: the root of the keyed streams of an analysis.

    Parameters
    ----------
    rng : numpy.random.Generator

    Returns
    -------
    int
    """
    return int(require_generator(rng).integers(2**63))


def keyed_generator(root, *key):
    """The generator of the stream named by ``key`` under ``root``.

    Parameters
    ----------
    root : int
        From `stream_root`.
    *key : int
        Non-negative integers naming the work (purpose, recipe, image, repeat).

    Returns
    -------
    numpy.random.Generator
        Independent of every other key under the same root ([1]_: entropy
        pooled by `numpy.random.SeedSequence`).
    """
    # The key's length goes in too: SeedSequence pools [5] and [5, 0] alike.
    return np.random.default_rng(np.random.SeedSequence([int(root), len(key), *(int(k) for k in key)]))
