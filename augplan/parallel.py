"""The one execution layer: every parallel loop in augplan goes through here.

No other module imports joblib. Work units must be independent and carry
their own randomness (a child ``numpy.random.Generator`` spawned from the
caller's), so results never depend on worker order or worker count.
"""

import sys

from tqdm.auto import tqdm

__all__ = ["parallel_map", "progress"]


def progress(iterable, *, desc, total=None, quiet=False):
    """Wrap ``iterable`` in a progress bar on stderr unless ``quiet``.

    The bar only shows when the work takes more than about a second
    (``delay=1``), so short steps stay silent.
    """
    return tqdm(iterable, desc=desc, total=total, disable=quiet, file=sys.stderr,
                delay=1.0, leave=False, dynamic_ncols=True)


def parallel_map(function, items, *, workers=1, desc="working", quiet=True):
    """Apply ``function`` to each item, in order, possibly in parallel.

    Parameters
    ----------
    function : callable
        A picklable function of one argument.
    items : sequence
        The work units. Each should be small (paths, seeds, indices), never a
        whole data set of decoded images.
    workers : int, default 1
        1 runs in this process; N > 1 uses N local processes (joblib's loky
        backend); -1 uses every core.
    desc : str
        Label of the progress bar.
    quiet : bool, default True
        Hide the progress bar.

    Returns
    -------
    list
        ``[function(item) for item in items]``, in the order of ``items``.
    """
    items = list(items)
    if workers == 1 or len(items) <= 1:
        return [function(item) for item in progress(items, desc=desc, quiet=quiet)]
    from joblib import Parallel, delayed

    runner = Parallel(n_jobs=workers, return_as="generator")
    results = runner(delayed(function)(item) for item in items)
    return list(progress(results, desc=desc, total=len(items), quiet=quiet))
