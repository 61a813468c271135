"""One embedding's measures spread over a Dask cluster: the same numbers as the local engine.

The reference of every comparison here is our own local engine (``backend="local"``, the
default), which is itself checked against scikit-learn's ``trustworthiness`` and against naive
full-sort references in tests/test_metrics_engine.py and tests/test_metrics_local.py.  The
cluster computes the same blocks with the same operands and only re-assembles them (per-point
terms in query order, integer overlap counts summed), so equality is exact: ``==`` and
``array_equal``, never a tolerance.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")

from harness import evaluate  # noqa: E402
from harness.errors import InputError  # noqa: E402
from harness.metrics import _cluster, score  # noqa: E402
from harness.run.execute import execute_suite  # noqa: E402
from harness.suite import load_datasets, parse_suite  # noqa: E402


@pytest.fixture(scope="module")
def cluster():
    # Threads in this process: no worker start-up cost, and each task still runs in a thread of
    # its own, as on a real worker.
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0", silence_logs=40
    ) as local:
        yield local


def _curved(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = rng.uniform(0, 3 * np.pi, n)
    x = np.column_stack([t * np.cos(t), rng.uniform(0, 5, n), t * np.sin(t), rng.normal(0, 0.3, (n, 7))])
    y = np.column_stack([t, x[:, 1]]) + rng.normal(0, 0.4, (n, 2))
    return x, y, (t > 1.5 * np.pi).astype(int)


def _same(a, b) -> None:
    assert a.values == b.values
    assert a.intervals == b.intervals
    assert a.estimated == b.estimated
    assert a.curve.equals(b.curve)
    assert a.points.equals(b.points)


def test_evaluate_on_the_cluster_equals_the_local_engine(cluster):
    x, y, labels = _curved(500)
    local = evaluate(x, y, k=10, labels=labels)
    spread = evaluate(x, y, k=10, labels=labels, backend="dask", scheduler=cluster.scheduler_address)
    assert spread == local
    assert {"trustworthiness", "continuity", "mrre_data", "lcmc", "rnx_auc", "stress"} <= set(spread)


def test_every_measure_curve_and_point_at_several_k(cluster):
    x, y, labels = _curved(500, seed=1)
    options = {
        "ks": [5, 12, 30],
        "labels": labels,
        "latent": x[:, :1],
        "curve_k_max": 60,
        "memory_bytes": 2**21,
    }
    local = score(x, y, **options)
    spread = score(x, y, **options, backend="dask", scheduler=cluster.scheduler_address)
    _same(local, spread)


def test_sampled_queries_and_a_precomputed_matrix(cluster):
    # Sampled query points (estimates with intervals) and the sampled R_NX area; the data given as
    # distances: both take other paths through the engine.
    from scipy.spatial.distance import cdist

    x, y, _ = _curved(600, seed=2)
    d = cdist(x, x)
    options = {"ks": [10], "metric": "precomputed", "estimate_above": 100, "n_queries": 150}
    local = score(d, y, **options)
    spread = score(d, y, **options, backend="dask", scheduler=cluster.scheduler_address)
    _same(local, spread)
    assert "trustworthiness@10" in spread.estimated


def test_ties_on_a_grid(cluster):
    # Integer coordinates: exact distances with many true ties, resolved by index in both places.
    rng = np.random.default_rng(3)
    x = rng.integers(0, 4, (400, 3)).astype(float)
    y = x[:, :2] + rng.integers(0, 2, (400, 2))
    local = score(x, y, ks=[8])
    spread = score(x, y, ks=[8], backend="dask", scheduler=cluster.scheduler_address)
    _same(local, spread)


@pytest.mark.slow
def test_twenty_thousand_points_on_two_worker_processes():
    # Two worker processes (one BLAS thread each), as in production; the local engine here uses
    # two threads, so blocks are computed in other processes and thread counts than the reference.
    x, y, _ = _curved(20_000, seed=4)
    options = {"ks": [10, 50], "curve_k_max": 100}
    local = score(x, y, **options)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0", silence_logs=40
    ) as two:
        spread = score(x, y, **options, backend="dask", scheduler=two.scheduler_address)
    _same(local, spread)


def test_an_unknown_backend_is_one_line():
    x, y, _ = _curved(50)
    with pytest.raises(InputError, match=r"^backend: one of local, dask, got 'spark'$"):
        evaluate(x, y, backend="spark")


def test_dask_without_a_scheduler_is_one_line():
    x, y, _ = _curved(50)
    with pytest.raises(InputError, match=r"^scheduler: the address of a running Dask scheduler"):
        evaluate(x, y, backend="dask")


def test_an_unreachable_scheduler_is_one_line_naming_it(monkeypatch):
    monkeypatch.setattr(_cluster, "CONNECT_TIMEOUT", 1.0)
    x, y, _ = _curved(50)
    with pytest.raises(InputError) as caught:
        evaluate(x, y, backend="dask", scheduler="tcp://127.0.0.1:9")
    message = str(caught.value)
    assert message.startswith("scheduler: expected the address of a running Dask scheduler")
    assert "'tcp://127.0.0.1:9'" in message
    assert "\n" not in message


def test_without_the_dask_extra_is_one_line(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # the import then raises ImportError
    x, y, _ = _curved(50)
    with pytest.raises(InputError, match=r"^backend: backend='dask' needs the dask extra: pip install"):
        evaluate(x, y, backend="dask", scheduler="tcp://127.0.0.1:9")


#: Measures computed on the workers (docs/cluster.md, "What runs where").
SPREAD_MEASURES = (
    "trustworthiness",
    "continuity",
    "knn_recall",
    "mrre_data",
    "mrre_embedding",
    "lcmc",
    "rnx_auc",
)

SUITE = """name: spread
seeds: 1
datasets:
  - {use: rolled_sheet, params: {n: 400}}
methods:
  - pca
measures:
  k: [5, 10]
  backend: BACKEND
run:
  backend: dask
"""


def test_a_suite_with_measures_on_the_cluster_scores_as_the_local_run(tmp_path):
    # Both runs put their cells on the cluster (run.backend: dask); only the second spreads each
    # cell's measures over it, as tasks of the engine's row blocks.  One worker thread: the cell's
    # task must leave it free for those tasks.
    scores = {}
    walked = []
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0", silence_logs=40
    ) as one:
        for where in ("local", "dask"):
            suite = parse_suite(SUITE.replace("BACKEND", where))
            run = execute_suite(suite, tmp_path / where, scheduler=one.scheduler_address, isolate=False)
            table = run.folder.scores
            assert set(table["status"]) == {"ok"}
            scores[where] = table.drop(columns=[c for c in table if "seconds" in c or "_mb" in c])
            walked.append(any("walk_part" in name for name in one.scheduler.task_prefixes))
    assert walked == [False, True]
    local, spread = scores["local"], scores["dask"]
    on_workers = [c for c in local if c.split("@")[0] in SPREAD_MEASURES]
    assert len(on_workers) == 7 * 2 + 1  # seven at each of k = 5, 10, and the full-range rnx_auc
    assert spread[on_workers].equals(local[on_workers])
    # The distance measures are computed in the cell in both runs, not on the cluster, and their last
    # bits follow the BLAS thread count (docs/cluster.md, "Same numbers as the local backend"), so
    # they are held to 1e-12; everything else exactly.
    rest = [c for c in local if c not in on_workers]
    numeric = [c for c in rest if local[c].dtype.kind == "f"]
    assert spread[[c for c in rest if c not in numeric]].equals(local[[c for c in rest if c not in numeric]])
    assert np.allclose(spread[numeric], local[numeric], rtol=1e-12, atol=0, equal_nan=True)


def test_a_suite_on_the_cluster_the_run_starts_itself(tmp_path):
    # No scheduler given: the run starts worker processes of its own, and each cell (a task on one
    # of them) finds the scheduler's address from its worker and leaves its thread while it waits.
    suite = parse_suite(SUITE.replace("BACKEND", "dask").replace("seeds: 1", "seeds: 2") + "  jobs: 2\n")
    run = execute_suite(suite, tmp_path)
    table = run.folder.scores
    assert list(table["status"]) == ["ok", "ok"]
    x = load_datasets(suite)["rolled_sheet"]
    reference = score(x.X, run.folder.embedding(table["key"].iloc[0]), ks=[5, 10], latent=x.latent)
    row = table.iloc[0]
    for key in reference.values:
        if key.split("@")[0] in SPREAD_MEASURES:
            assert row[key] == reference.values[key], key


def test_the_suite_field_names_the_allowed_values():
    with pytest.raises(InputError, match=r"measures\.backend: expected one of local, dask, got 'gpu'"):
        parse_suite(SUITE.replace("BACKEND", "gpu"))


def test_measures_on_dask_need_a_run_on_dask(tmp_path):
    suite = parse_suite(
        SUITE.replace("BACKEND", "dask").replace("run:\n  backend: dask", "run:\n  backend: local")
    )
    with pytest.raises(InputError, match=r"^measures\.backend: dask expected together with run\.backend"):
        execute_suite(suite, tmp_path)


def test_where_the_measures_ran_is_no_part_of_a_cached_score_name():
    # The values are the same wherever they were computed (the tests above), so a score cached by a
    # run on the cluster serves a local run and the other way round.
    from harness.config import Scoring
    from harness.run.cache import scoring_digest

    assert scoring_digest(Scoring(backend="dask", scheduler="tcp://10.0.0.5:8786")) == scoring_digest(
        Scoring()
    )
    assert scoring_digest(Scoring(seed=1)) != scoring_digest(Scoring())
