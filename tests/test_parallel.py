"""The execution layer: same ordered results in-process and in local processes,
worker and cluster settings checked at the boundary, Dask optional."""

import functools
import json
import sys

import numpy as np
import pytest

from augplan.errors import BadInputError
from augplan.parallel import CLUSTER_INSTALL_HINT, Cluster, _shared_positions, parallel_map, resolve_workers


def _draw(item):
    """A work unit carrying its own generator, as augplan's callers build them."""
    index, rng = item
    return index, rng.integers(0, 2**31, size=3).tolist(), float(rng.normal())


def _scaled(factor, offsets, item):
    return factor * offsets[item]


def _units(seed, n):
    return [(i, rng) for i, rng in enumerate(np.random.default_rng(seed).spawn(n))]


@pytest.mark.parametrize("workers", [1, 2], ids=["in-process", "two-processes"])
def test_ordered_results_match_numpy_child_streams(workers):
    results = parallel_map(_draw, _units(7, 9), workers=workers)
    # Reference: numpy's own SeedSequence.spawn children, drawn one by one
    # outside augplan (numpy.random.Generator.spawn is defined through it).
    children = np.random.SeedSequence(7).spawn(9)
    expected = []
    for i, child in enumerate(children):
        rng = np.random.default_rng(child)
        expected.append((i, rng.integers(0, 2**31, size=3).tolist(), float(rng.normal())))
    assert results == expected


def test_two_processes_equal_in_process_with_partial():
    offsets = np.arange(40.0) ** 2
    function = functools.partial(_scaled, 3.0, offsets)
    items = list(range(39, -1, -1))  # reversed, so order is really tested
    local = parallel_map(function, items, workers=1)
    assert parallel_map(function, items, workers=2) == local
    assert local == [3.0 * i * i for i in items]  # plain arithmetic as the reference


def test_empty_and_single_item():
    assert parallel_map(_draw, [], workers=2) == []
    assert parallel_map(abs, [-4], workers=2) == [4]


@pytest.mark.parametrize("workers, expected", [(1, 1), (3, 3), (-1, -1), (np.int64(2), 2)],
                         ids=["one", "three", "every-core", "numpy-int"])
def test_resolve_workers_counts(workers, expected):
    assert resolve_workers(workers) == expected


@pytest.mark.parametrize("workers", [0, -2, 257, 1.5, "2", True, None],
                         ids=["zero", "minus-two", "past-the-bound", "fraction", "text", "bool", "none"])
def test_resolve_workers_rejects(workers):
    with pytest.raises(BadInputError, match="--workers must be a whole number from 1 to at most 256, or -1"):
        resolve_workers(workers)


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:8786", "tcp://scheduler.lab:8786", "tls://10.0.0.5:443",
                                     "tcp://[::1]:8786"], ids=["ipv4", "hostname", "tls", "ipv6"])
def test_cluster_accepts_addresses(address):
    assert Cluster(address).address == address


@pytest.mark.parametrize("address", ["127.0.0.1:8786", "tcp://127.0.0.1", "http://host:8786", "tcp://host:0",
                                     "tcp://host:99999", "tcp://ho st:8786", "", 8786],
                         ids=["no-scheme", "no-port", "http", "port-zero", "port-too-big", "space", "empty",
                              "number"])
def test_cluster_rejects_addresses(address):
    with pytest.raises(BadInputError, match="tcp://HOST:PORT"):
        Cluster(address)


def test_cluster_address_wins_over_worker_count():
    pytest.importorskip("distributed")
    assert resolve_workers(4, "tcp://127.0.0.1:8786") == Cluster("tcp://127.0.0.1:8786")
    assert resolve_workers(4, "") == 4  # an empty AUGPLAN_CLUSTER means no cluster


def test_shared_positions_finds_objects_repeated_by_reference():
    features = np.zeros((100, 8))
    model = object()
    items = [(model, np.random.default_rng(i), features, 64) for i in range(3)]
    assert _shared_positions(items) == [0, 2]  # the int 64 is too cheap to scatter
    copies = [(np.zeros(3), i) for i in range(3)]  # equal but separate arrays are not shared
    assert _shared_positions(copies) == []
    assert _shared_positions([(features, 1)]) == []


@pytest.fixture
def without_dask(monkeypatch):
    """Make ``import distributed`` fail as on a machine without the extra."""
    monkeypatch.setitem(sys.modules, "distributed", None)


def test_cluster_without_dask_names_the_install(without_dask):
    with pytest.raises(BadInputError) as caught:
        parallel_map(abs, [1, -2], workers=Cluster("tcp://127.0.0.1:8786"))
    assert CLUSTER_INSTALL_HINT in str(caught.value)


@pytest.mark.parametrize("command", ["check", "coverage", "evaluate", "vet", "demo"])
def test_cli_cluster_without_dask_exits_2(without_dask, run_cli, tiny_dataset, tiny_recipe, tmp_path, command):
    argv = {"demo": ["demo", "-o", tmp_path / "out"],
            "vet": ["vet", tiny_dataset, "--recipe", tiny_recipe, "-o", tmp_path / "out"]}.get(
        command, [command, tiny_dataset, "--recipe", tiny_recipe])
    result = run_cli(*argv, "--cluster", "tcp://127.0.0.1:8786")
    assert result.code == 2
    assert "pip install 'augplan[cluster]'" in result.err
    assert "Traceback" not in result.err
    assert not (tmp_path / "out").exists()  # stopped before doing any work


@pytest.mark.parametrize("address", ["localhost:8786", "tcp://host", "udp://host:8786"],
                         ids=["no-scheme", "no-port", "wrong-scheme"])
def test_cli_bad_cluster_address_exits_2(run_cli, tiny_dataset, tiny_recipe, address):
    result = run_cli("evaluate", tiny_dataset, "--recipe", tiny_recipe, "--cluster", address)
    assert result.code == 2
    assert "tcp://HOST:PORT" in result.err and repr(address) in result.err
    assert "Traceback" not in result.err


def test_cli_reads_cluster_from_environment(monkeypatch, run_cli, tiny_dataset, tiny_recipe):
    monkeypatch.setenv("AUGPLAN_CLUSTER", "not-an-address")
    result = run_cli("check", tiny_dataset, "--recipe", tiny_recipe)
    assert result.code == 2
    assert "'not-an-address'" in result.err


def test_cli_empty_environment_cluster_runs_locally(monkeypatch, run_cli, tiny_dataset, tiny_recipe, tmp_path):
    monkeypatch.setenv("AUGPLAN_CLUSTER", "")
    result = run_cli("evaluate", tiny_dataset, "--recipe", tiny_recipe, "--repeats", "1", "--quiet", "--json",
                     "--ledger", tmp_path / "ledger.sqlite")
    assert result.code in (0, 1), result.err
    assert result.out.lstrip().startswith("{")


@pytest.mark.parametrize("command", ["check", "coverage", "evaluate"])
def test_ship_images_gives_the_same_json(command, run_cli, tmp_path):
    # The flag changes how images reach the workers (bytes, not paths), never
    # the answer: two local processes with it, in-process without it.
    from conftest import TINY_RECIPE, write_tiny_dataset

    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(TINY_RECIPE, encoding="utf-8")
    outputs = []
    for name, extra in (("paths", []), ("bytes", ["--ship-images", "--workers", "2"])):
        data = write_tiny_dataset(tmp_path / name / "DATA", train=6, val=4)
        ledger = ["--ledger", tmp_path / name / "ledger.sqlite"] if command == "evaluate" else []
        result = run_cli(command, data, "--recipe", recipe, "--seed", "2", "--quiet", "--json", *ledger, *extra)
        assert result.code in (0, 1), result.err
        outputs.append(json.loads(result.out))
    paths, shipped = outputs
    assert shipped == paths


def _allocator_tuned(_):
    from augplan import parallel

    return parallel._reuse_freed_memory.cache_info().currsize == 1 and parallel._reuse_freed_memory()


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt is Linux-only")
def test_worker_processes_keep_freed_memory_for_reuse():
    # mallopt returns 1 when glibc accepts a setting (glibc manual, "Malloc
    # Tunable Parameters"); every worker process has made the call before its
    # first unit ran.
    assert parallel_map(_allocator_tuned, range(4), workers=2) == [True] * 4


def test_the_callers_allocator_is_left_alone(monkeypatch):
    from augplan import parallel

    calls = []
    monkeypatch.setattr(parallel, "_reuse_freed_memory", lambda: calls.append(1))
    assert parallel_map(abs, [-1, -2], workers=1) == [1, 2]
    assert calls == []


def _opencv_threads(_):
    import cv2

    return cv2.getNumThreads()


def test_worker_processes_run_opencv_on_one_thread():
    # Two workers on two cores: OpenCV's default pool (one thread per core)
    # in each would oversubscribe them.
    assert parallel_map(_opencv_threads, range(4), workers=2) == [1] * 4


def test_single_threaded_limits_blas_and_opencv_and_restores_them():
    import cv2
    from threadpoolctl import threadpool_info

    from augplan.parallel import single_threaded

    before = cv2.getNumThreads()
    with single_threaded():
        assert cv2.getNumThreads() == 1
        assert all(pool["num_threads"] == 1 for pool in threadpool_info())
    assert cv2.getNumThreads() == before
