"""The same answers on a Dask cluster: a 2-worker LocalCluster on loopback,
started and closed here, against in-process runs with the same seed."""

import contextlib
import functools
import io
import json
import os
import signal
import threading
import time

import numpy as np
import pytest

distributed = pytest.importorskip("distributed", reason="Dask is an optional extra: pip install 'augplan[cluster]'")

from augplan import parallel  # noqa: E402
from augplan.cli import main  # noqa: E402
from augplan.errors import BadInputError  # noqa: E402
from augplan.parallel import Cluster, parallel_map  # noqa: E402

from conftest import TINY_RECIPE, write_tiny_dataset  # noqa: E402

# alpha and delta bars lie at 0 and pi: the same orientation, so the models
# confuse them and scores depend on the seeded draws (a run that scored 1.0
# everywhere would match whatever the execution order).
CLASSES = ("alpha", "beta", "gamma", "delta")


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1",
                                  dashboard_address=None) as local:
        yield local


@pytest.fixture(scope="module")
def recipe(tmp_path_factory):
    path = tmp_path_factory.mktemp("recipe") / "recipe.yaml"
    path.write_text(TINY_RECIPE, encoding="utf-8")
    return path


def _fresh_data(root, train=6):
    """A new copy of the same data set, so no feature cache or ledger is shared between runs."""
    return write_tiny_dataset(root / "DATA", classes=CLASSES, train=train, val=4)


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = int(main([str(a) for a in argv]))
    return code, out.getvalue(), err.getvalue()


def _evaluate(root, recipe, *extra, train=6):
    data = _fresh_data(root, train)
    return _run(["evaluate", data, "--recipe", recipe, "--repeats", "2", "--seed", "3", "--quiet", "--json",
                 "--ledger", root / "ledger.sqlite", *extra])


def _noisy_draw(context, item):
    index, rng = item
    return index, float(context["scale"] * rng.normal()), int(context["table"][index])


def test_parallel_map_on_cluster_matches_in_process(cluster):
    context = {"scale": 2.5, "table": np.arange(30) * 7}
    function = functools.partial(_noisy_draw, context)

    def units():
        return list(enumerate(np.random.default_rng(11).spawn(30)))

    local = parallel_map(function, units(), workers=1)
    remote = parallel_map(function, units(), workers=Cluster(cluster.scheduler_address))
    assert remote == local
    assert [r[0] for r in remote] == list(range(30))
    # numpy's SeedSequence children as the outside reference for unit 0.
    assert local[0][1] == 2.5 * np.random.default_rng(np.random.SeedSequence(11).spawn(1)[0]).normal()


def test_unreachable_scheduler_is_bad_input(monkeypatch):
    monkeypatch.setattr(parallel, "CONNECT_TIMEOUT", 1)
    with pytest.raises(BadInputError, match="cannot reach the Dask scheduler at tcp://127.0.0.1:9"):
        parallel_map(abs, [1, 2], workers=Cluster("tcp://127.0.0.1:9"))


def test_check_json_same_on_cluster(cluster, recipe, tmp_path):
    runs = []
    for name, extra in (("local", []), ("cluster", ["--cluster", cluster.scheduler_address])):
        data = _fresh_data(tmp_path / name)
        runs.append(_run(["check", data, "--recipe", recipe, "--seed", "3", "--quiet", "--json", *extra]))
    (local_code, local_out, local_err), (code, out, err) = runs
    assert local_code in (0, 1), local_err
    assert (code, out) == (local_code, local_out), err
    assert json.loads(out)["transforms"]


def test_evaluate_json_same_on_cluster(cluster, recipe, tmp_path):
    local_code, local_out, local_err = _evaluate(tmp_path / "local", recipe)
    assert local_code in (0, 1), local_err
    document = json.loads(local_out)
    assert document["from_ledger"] is False
    assert min(document["recipes"][0]["repeat_accuracy"]) < 1.0  # the comparison is not trivially equal
    code, out, err = _evaluate(tmp_path / "cluster", recipe, "--cluster", cluster.scheduler_address)
    assert (code, out) == (local_code, local_out), err


def test_the_network_scores_the_same_on_cluster(cluster, recipe, tmp_path):
    from augplan.data import open_dataset
    from augplan.evaluate import evaluate_recipes
    from augplan.measure.models import ConvNet
    from augplan.recipe.parse import read_recipe

    # A short network: the point is the execution layer, not the network's accuracy.
    model = ConvNet(params=(("widths", (4, 8)), ("steps", 20), ("min_epochs", 5)))
    dataset = open_dataset(_fresh_data(tmp_path))
    runs = [evaluate_recipes(dataset, [read_recipe(recipe)], np.random.default_rng(3), repeats=2, size=16, cache_dir=False,
                             model=model, workers=workers)
            for workers in (1, Cluster(cluster.scheduler_address))]
    assert runs[0]["model"]["name"] == "cnn"
    assert json.dumps(runs[0], sort_keys=True) == json.dumps(runs[1], sort_keys=True)


def test_shipped_images_need_no_shared_folder(cluster, recipe, tmp_path):
    # --ship-images: the records carry their files' bytes, so the run on the
    # cluster gives the local answer even after the data folder is gone.
    from augplan.data import open_dataset
    from augplan.evaluate import evaluate_recipes
    from augplan.recipe.parse import read_recipe

    recipes = [read_recipe(recipe)]
    options = dict(repeats=2, size=16)
    local = evaluate_recipes(open_dataset(_fresh_data(tmp_path / "local")), recipes, np.random.default_rng(3),
                             cache_dir=tmp_path / "local-cache", **options)
    shipped = open_dataset(_fresh_data(tmp_path / "shipped")).with_image_bytes()
    (tmp_path / "shipped" / "DATA").rename(tmp_path / "out-of-reach")
    remote = evaluate_recipes(shipped, recipes, np.random.default_rng(3), workers=Cluster(cluster.scheduler_address),
                              cache_dir=tmp_path / "remote-cache", **options)
    assert json.dumps(remote["recipes"]) == json.dumps(local["recipes"])
    assert remote["baseline"] == local["baseline"]


def test_check_with_shipped_images_needs_no_shared_folder(cluster, recipe, tmp_path):
    # The checker's units carry records, not decoded images; with the bytes
    # on board the cluster run needs no data folder and gives the local answer.
    from augplan.data import open_dataset
    from augplan.check import check_recipe
    from augplan.recipe.parse import read_recipe

    options = dict(size=16)
    local = check_recipe(open_dataset(_fresh_data(tmp_path / "local")), read_recipe(recipe),
                         rng=np.random.default_rng(3), **options)
    shipped = open_dataset(_fresh_data(tmp_path / "shipped")).with_image_bytes()
    (tmp_path / "shipped" / "DATA").rename(tmp_path / "out-of-reach")
    remote = check_recipe(shipped, read_recipe(recipe), rng=np.random.default_rng(3),
                          workers=Cluster(cluster.scheduler_address), **options)
    assert json.dumps(remote, sort_keys=True) == json.dumps(local, sort_keys=True)


def _worker_pids(client):
    return client.run(os.getpid)


def test_evaluate_survives_a_killed_worker(cluster, recipe, tmp_path):
    local = _evaluate(tmp_path / "local", recipe, train=40)
    assert local[0] in (0, 1), local[2]

    outcome = {}
    runner = threading.Thread(target=lambda: outcome.update(
        result=_evaluate(tmp_path / "cluster", recipe, "--cluster", cluster.scheduler_address, train=40)))
    with distributed.Client(cluster.scheduler_address, set_as_default=False) as watcher:
        pids = _worker_pids(watcher)
        runner.start()
        victim = None
        deadline = time.monotonic() + 60
        while victim is None and runner.is_alive() and time.monotonic() < deadline:
            busy = [address for address, keys in watcher.processing().items() if keys]
            if busy:
                victim = busy[0]
                os.kill(pids[victim], signal.SIGKILL)
            else:
                time.sleep(0.02)
        assert victim is not None, "the run ended before any task reached a worker"
        runner.join(timeout=120)
        assert not runner.is_alive()
        assert pids[victim] not in _worker_pids(watcher).values()  # the worker really died (its nanny restarted it)
    assert outcome["result"][:2] == local[:2], outcome["result"][2]
