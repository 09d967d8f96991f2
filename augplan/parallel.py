"""The one execution layer: every parallel loop in augplan goes through here.

No other module imports joblib or Dask. Work units must be independent and
carry their own randomness (a child ``numpy.random.Generator`` or
``SeedSequence`` spawned from the caller's), so results never depend on worker
order, worker count or the machine that ran them.

Three ways to run the same map:

- in this process (``workers=1``);
- ``N`` local processes through joblib (``workers=N``; ``-1`` = every core);
- an existing Dask cluster (``workers=Cluster("tcp://HOST:PORT")``), reached
  through ``dask.distributed``. Dask is an optional extra
  (``pip install 'augplan[cluster]'``) and is imported only when a cluster
  is used.
"""

import contextlib
import functools
import re
import sys
import warnings
from collections import deque
from dataclasses import dataclass

from tqdm.auto import tqdm

from augplan.errors import BadInputError

__all__ = ["Cluster", "parallel_map", "progress", "resolve_workers", "single_threaded", "tick"]

CLUSTER_INSTALL_HINT = "pip install 'augplan[cluster]'"

# Tasks a failing unit is rerun before its error reaches the user. Covers
# passing faults on a shared file system; a worker that dies is handled by
# the Dask scheduler itself (it reschedules the lost worker's tasks).
TASK_RETRIES = 2

# Seconds to wait for the scheduler before giving up on the address.
CONNECT_TIMEOUT = 20

_ADDRESS = re.compile(r"(?P<scheme>tcp|tls)://(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.\-]+):(?P<port>[0-9]{1,5})")

# Objects too cheap to be worth scattering once to every worker.
_SMALL = (bool, int, float, complex, str, bytes, type(None))


@dataclass(frozen=True)
class Cluster:
    """Address of a running Dask scheduler, e.g. ``Cluster("tcp://10.0.0.5:8786")``.

    Parameters
    ----------
    address : str
        ``tcp://HOST:PORT`` (or ``tls://HOST:PORT``), as printed by
        ``dask scheduler`` when it starts.

    Raises
    ------
    BadInputError
        The address is not of that form.
    """

    address: str

    def __post_init__(self):
        text = self.address
        match = _ADDRESS.fullmatch(text) if isinstance(text, str) else None
        if match is None or not 1 <= int(match["port"]) <= 65535:
            raise BadInputError(f"--cluster must be a Dask scheduler address of the form tcp://HOST:PORT "
                                f"(for example tcp://127.0.0.1:8786); got {text!r}")


def _require_distributed():
    """Import ``distributed`` or say how to install it."""
    try:
        import distributed
    except ImportError:
        raise BadInputError("running on a Dask cluster needs Dask's distributed scheduler, which is not "
                            f"installed; install it with: {CLUSTER_INSTALL_HINT}") from None
    return distributed


#: Most local worker processes: each holds its own copy of the work's
#: arrays, so a count far past any machine's cores only exhausts memory
#: (common practice, no source).
MAX_WORKERS = 256


def resolve_workers(workers, cluster=None):
    """Turn the ``workers`` and ``cluster`` settings into one execution choice.

    Parameters
    ----------
    workers : int or Cluster
        1 runs in this process, N > 1 uses N local processes, -1 uses every
        core; a `Cluster` runs on that Dask cluster.
    cluster : str or Cluster, optional
        A scheduler address; when given it wins over an integer ``workers``.

    Returns
    -------
    int or Cluster

    Raises
    ------
    BadInputError
        A worker count that is 0, below -1, above `MAX_WORKERS` or not a whole number; an address
        not of the form ``tcp://HOST:PORT``; a cluster while Dask is not
        installed (the message gives the install command).
    """
    if cluster is not None and cluster != "":
        workers = cluster if isinstance(cluster, Cluster) else Cluster(cluster)
    if isinstance(workers, Cluster):
        _require_distributed()
        return workers
    if isinstance(workers, bool) or not isinstance(workers, int) and not hasattr(workers, "__index__"):
        raise BadInputError(f"--workers must be a whole number from 1 to at most {MAX_WORKERS}, or -1 (every "
                            f"core); got {workers!r}")
    workers = int(workers)
    if workers == 0 or workers < -1 or workers > MAX_WORKERS:
        raise BadInputError(f"--workers must be a whole number from 1 to at most {MAX_WORKERS}, or -1 (every "
                            f"core); got {workers!r}")
    return workers


def progress(iterable, *, desc, total=None, quiet=False):
    """Wrap ``iterable`` in a progress bar on stderr unless ``quiet``.

    The bar only shows when the work takes more than about a second
    (``delay=1``), so short steps stay silent.
    """
    return tqdm(iterable, desc=desc, total=total, disable=quiet, file=sys.stderr,
                delay=1.0, leave=False, dynamic_ncols=True)


# Where `tick` reports inside a running work unit: None (nowhere), or a
# function of no argument that advances the progress bar (directly in this
# process, through a queue from a local worker process).
_TICK = None


def tick():
    """Advance the progress bar of the `parallel_map` running this work unit by one step.

    For units that report steps within themselves (``parallel_map(...,
    ticks=N)``), such as the epochs of a network's fit. Outside such a map
    (or on a Dask cluster, whose bar moves once per unit) it does nothing.
    """
    if _TICK is not None:
        _TICK()


@contextlib.contextmanager
def _ticking(report):
    global _TICK
    previous, _TICK = _TICK, report
    try:
        yield
    finally:
        _TICK = previous


def parallel_map(function, items, *, workers=1, desc="working", quiet=True, ticks=None):
    """Apply ``function`` to each item, in order, possibly in parallel.

    Parameters
    ----------
    function : callable
        A picklable function of one argument (a module-level function or a
        ``functools.partial`` of one). On a cluster, every worker must be
        able to import augplan.
    items : sequence
        The work units. Each should be small (paths, seeds, indices), never a
        whole data set of decoded images.
    workers : int or Cluster, default 1
        1 runs in this process; N > 1 uses N local processes (joblib's loky
        backend); -1 uses every core; a `Cluster` runs the units on that Dask
        cluster.
    desc : str
        Label of the progress bar.
    quiet : bool, default True
        Hide the progress bar.
    ticks : int, optional
        Steps each unit reports through `tick` (an epoch each, for a
        network's fit): the bar then counts steps, ``len(items) * ticks`` in
        all, instead of units. A unit that reports fewer is counted whole
        when it ends. On a Dask cluster the bar counts units.

    Returns
    -------
    list
        ``[function(item) for item in items]``, in the order of ``items``.

    Raises
    ------
    BadInputError
        Bad ``workers``; a cluster that cannot be reached or Dask missing.
    """
    workers = resolve_workers(workers)
    items = list(items)
    if isinstance(workers, Cluster):
        if not items:
            return []
        results = _dask_ordered(function, items, workers)
        return list(progress(results, desc=desc, total=len(items), quiet=quiet))
    if ticks is not None and not quiet and items:
        return _ticked_map(function, items, workers, desc, int(ticks))
    if workers == 1 or len(items) <= 1:
        return [function(item) for item in progress(items, desc=desc, quiet=quiet)]
    from joblib import Parallel, delayed

    runner = Parallel(n_jobs=workers, return_as="generator")
    with warnings.catch_warnings():
        # joblib's process pool replaces a worker whose memory grew by more
        # than a fixed amount since it started, warning each time; a worker
        # that loaded torch for the cnn model always has. Work units are pure
        # functions of their arguments, so a replaced worker changes no result.
        warnings.filterwarnings("ignore", message="A worker stopped while some jobs were given",
                                category=UserWarning)
        results = runner(delayed(_call_plain)(function, item) for item in items)
        return list(progress(results, desc=desc, total=len(items), quiet=quiet))


def _ticked_map(function, items, workers, desc, ticks):
    """`parallel_map` whose bar counts the steps units report through `tick`."""
    import threading

    total = len(items) * ticks
    bar = tqdm(desc=desc, total=total, file=sys.stderr, delay=1.0, leave=False, dynamic_ncols=True)
    lock = threading.Lock()
    done = [0]  # steps counted so far

    def advance(steps=1):
        with lock:
            steps = min(steps, total - done[0])
            if steps > 0:
                done[0] += steps
                bar.update(steps)

    def settle(finished):  # every finished unit counts whole
        advance(finished * ticks - done[0])

    try:
        if workers == 1:
            results = []
            with _ticking(advance):
                for item in items:
                    results.append(function(item))
                    settle(len(results))
            return results
        import multiprocessing

        from joblib import Parallel, delayed

        with multiprocessing.Manager() as manager:
            queue = manager.Queue()

            def drain():
                while queue.get() is not None:
                    advance()

            reader = threading.Thread(target=drain, daemon=True)
            reader.start()
            try:
                runner = Parallel(n_jobs=workers, return_as="generator")
                with warnings.catch_warnings():
                    warnings.filterwarnings("ignore", message="A worker stopped while some jobs were given",
                                            category=UserWarning)
                    results = list(runner(delayed(_call_ticking)(function, queue, item) for item in items))
                settle(len(results))
            finally:
                queue.put(None)
                reader.join(timeout=5)
            return results
    finally:
        bar.close()


# ------------------------------------------------------------------ Dask


def _shared_positions(items):
    """Tuple positions that hold the very same non-trivial object in every item.

    Callers put shared context (feature matrices, a fitted model, the
    record list) by reference into each unit; on a cluster these are sent
    once to every worker instead of once per task.
    """
    if len(items) < 2 or not all(isinstance(item, tuple) for item in items):
        return []
    width = len(items[0])
    if any(len(item) != width for item in items):
        return []
    first = items[0]
    return [p for p in range(width)
            if not isinstance(first[p], _SMALL) and all(item[p] is first[p] for item in items[1:])]


def _dask_ordered(function, items, cluster):
    """Yield ``function(item)`` for each item, in order, computed on ``cluster``.

    At most a window of a few tasks per worker thread is in flight, so the
    client holds a bounded number of results at a time however many items
    there are. Context shared by every unit (the arguments of a
    ``functools.partial``, or objects repeated by reference in every tuple
    item) is scattered once to all workers.
    """
    distributed = _require_distributed()
    try:
        client = distributed.Client(cluster.address, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError) as error:
        raise BadInputError(f"cannot reach the Dask scheduler at {cluster.address} ({error}); start it with "
                            "'dask scheduler' and workers with 'dask worker ADDRESS', or check --cluster "
                            "and AUGPLAN_CLUSTER") from None
    with client:
        threads = sum(w.get("nthreads", 1) for w in client.scheduler_info().get("workers", {}).values())
        window = max(8, 4 * threads)
        submit = functools.partial(client.submit, pure=False, retries=TASK_RETRIES)

        if isinstance(function, functools.partial):
            context = client.scatter([(function.args, dict(function.keywords))], broadcast=True)[0]
            task, leading = _call_unpacking, (function.func, context)
        else:
            task, leading = _call_plain, (function,)

        positions = _shared_positions(items)
        scattered = {}
        if positions:
            futures = client.scatter([items[0][p] for p in positions], broadcast=True)
            scattered = dict(zip(positions, futures))

        def unit(item):
            if not scattered:
                return item
            return tuple(scattered.get(p, value) for p, value in enumerate(item))

        pending = deque()
        upcoming = iter(items)
        for item in upcoming:
            pending.append(submit(task, *leading, unit(item)))
            if len(pending) >= window:
                break
        while pending:
            future = pending.popleft()
            result = future.result()
            future.release()
            for item in upcoming:
                pending.append(submit(task, *leading, unit(item)))
                break
            yield result


# glibc's mallopt parameters (malloc.h): M_TRIM_THRESHOLD and M_MMAP_THRESHOLD.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_REUSE_BYTES = 256 * 2**20


@functools.lru_cache(maxsize=1)
def _reuse_freed_memory():
    """Let a worker process reuse freed memory instead of returning it at once.

    Work units allocate and free many large numpy temporaries. Dask's nanny
    starts workers with ``MALLOC_TRIM_THRESHOLD_=65536``, which also fixes
    glibc's mmap threshold, so every temporary over 128 kB is mapped and
    unmapped afresh and its pages fault in again. Measured on a 2-worker
    LocalCluster: featurising 4,000 64 x 64 draws took 1.4 s per worker with
    Dask's setting and 0.83 s with both thresholds at 256 MB. Worker
    processes only (never the caller's); a no-op where glibc is absent.
    """
    import ctypes
    import ctypes.util
    import platform

    if platform.system() != "Linux" or platform.libc_ver()[0] != "glibc":
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return bool(libc.mallopt(_M_MMAP_THRESHOLD, _REUSE_BYTES)
                    and libc.mallopt(_M_TRIM_THRESHOLD, _REUSE_BYTES))
    except (OSError, AttributeError):
        return False


@contextlib.contextmanager
def single_threaded():
    """One thread for BLAS/OpenMP pools and for OpenCV inside a work unit.

    augplan parallelises with processes (`parallel_map`); thread pools on top
    oversubscribe the cores. Measured on a shared 2-core machine: a
    logistic-regression fit on 750 x 1112 features took 3.2 s of CPU with the
    default BLAS pool and 0.10 s with one thread (pool threads spin against
    each other and against other processes). OpenCV's own pool is set to one
    thread for the same reason (``cv2.setNumThreads``) and restored after.
    """
    import cv2
    from threadpoolctl import threadpool_limits

    previous = cv2.getNumThreads()
    cv2.setNumThreads(1)
    try:
        with threadpool_limits(limits=1):
            yield
    finally:
        cv2.setNumThreads(previous)


@functools.lru_cache(maxsize=1)
def _one_opencv_thread():
    """A pooled worker process runs OpenCV on one thread (see `single_threaded`)."""
    import cv2

    cv2.setNumThreads(1)


def _call_plain(function, item):
    _reuse_freed_memory()
    _one_opencv_thread()
    return function(item)


def _call_ticking(function, queue, item):
    _reuse_freed_memory()
    _one_opencv_thread()
    with _ticking(lambda: queue.put(1)):
        return function(item)


def _call_unpacking(function, context, item):
    _reuse_freed_memory()
    _one_opencv_thread()
    args, keywords = context
    return function(*args, item, **keywords)
