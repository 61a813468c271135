"""The Dask backend: same results as the local backend, and every cell ends cleanly.

Plumbing tests with invented suites and misbehaving plug-ins (tests/runner_plugins.py).
The reference for the numbers is our own local backend (harness.run.backends.local):
the Dask backend must reproduce it for the same seeds.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import psutil
import pytest

distributed = pytest.importorskip("distributed")

from harness.errors import InputError  # noqa: E402
from harness.run.backends import Execution, execute  # noqa: E402
from harness.run.backends import dask as dask_backend  # noqa: E402
from harness.run.cache import EmbeddingCache  # noqa: E402
from harness.run.cells import plan  # noqa: E402
from harness.suite import load_datasets, parse_suite  # noqa: E402


def planned(methods: str, seeds: int = 1, datasets: str = "  - use: iris\n"):
    suite = parse_suite(
        f"name: dask-test\nseeds: {seeds}\ndatasets:\n{datasets}methods:\n{methods}measures:\n  k: [5, 10]\n"
    )
    data = load_datasets(suite)
    cells, _ = plan(suite, data)
    return cells, data, suite.scoring


def on_dask(cells, data, scoring, jobs=1, time_limit=None, *, scheduler=None, cache=None, stop=None):
    return execute(
        cells,
        data,
        scoring,
        Execution(jobs=jobs, time_limit=time_limit, scheduler=scheduler),
        backend="dask",
        cache=cache,
        stop=stop,
    )


def by_key(results):
    out = {}
    for r in results:
        assert r.cell.key not in out, "a cell came back twice"
        out[r.cell.key] = r
    return out


@pytest.fixture(scope="module")
def cluster():
    # Worker processes are spawned from this one and inherit its sys.path, which holds tests/
    # (pytest's pythonpath setting), so the plug-ins import on the workers. A task that kills its
    # worker is given up after its first death, as on the cluster foldbench starts itself
    # (Dask's default of 3 retries costs 8 worker restarts per crashing cell).
    import dask

    retries = {"distributed.scheduler.allowed-failures": dask_backend._LOCAL_ALLOWED_FAILURES}
    with (
        dask.config.set(retries),
        distributed.LocalCluster(
            n_workers=2, processes=True, threads_per_worker=1, dashboard_address=":0", silence_logs=40
        ) as local,
    ):
        yield local


@pytest.mark.slow
def test_same_scores_as_the_local_backend(cluster):
    cells, data, scoring = planned(
        "  - use: pca\n  - use: isomap\n  - use: tsne\n    params: {perplexity: 10}\n",
        seeds=2,
        datasets="  - use: iris\n  - use: rolled_sheet\n    name: roll\n    params: {n: 150}\n",
    )
    local = by_key(execute(cells, data, scoring, Execution(jobs=2)))
    remote = by_key(on_dask(cells, data, scoring, jobs=2, scheduler=cluster.scheduler_address))
    assert local.keys() == remote.keys() == {c.key for c in cells}
    for key, mine in remote.items():
        ref = local[key]
        assert mine.status == ref.status == "ok"
        assert mine.values.keys() == ref.values.keys()
        # Same seeds, same code, one BLAS thread on both sides: equal up to summation order
        # (at most a few ulps when the local backend gives a cell more BLAS threads).
        for name, value in ref.values.items():
            assert mine.values[name] == pytest.approx(value, rel=0, abs=1e-12), name
        np.testing.assert_allclose(mine.embedding, ref.embedding, rtol=0, atol=1e-12)


@pytest.mark.slow  # the crashing cell is run again alone: a few worker restarts
def test_a_cell_that_kills_its_worker_is_crashed_and_the_others_finish(cluster):
    cells, data, scoring = planned("  - use: pca\n  - use: runner_plugins:Exits\n    name: bad\n", seeds=2)
    results = by_key(on_dask(cells, data, scoring, jobs=2, scheduler=cluster.scheduler_address))
    assert results.keys() == {c.key for c in cells}
    for r in results.values():
        if r.cell.method == "bad":
            assert r.status == "crashed"
            assert "worker process died" in r.error and "alone" in r.error
        else:
            assert r.status == "ok"


@pytest.mark.slow
def test_a_worker_killed_mid_run_costs_no_cell(cluster):
    cells, data, scoring = planned(
        "  - use: runner_plugins:Sleeps\n    name: sleepy\n    params: {seconds: 1.5}\n", seeds=4
    )
    client = distributed.Client(cluster)
    pids = client.run(os.getpid)

    def kill_one():
        time.sleep(0.7)  # while the first cells sleep on both workers
        os.kill(next(iter(pids.values())), signal.SIGKILL)

    killer = threading.Thread(target=kill_one)
    killer.start()
    try:
        results = by_key(on_dask(cells, data, scoring, jobs=2, scheduler=cluster.scheduler_address))
    finally:
        killer.join()
        client.close()
    assert results.keys() == {c.key for c in cells}
    assert {r.status for r in results.values()} == {"ok"}


def test_time_limit_gives_timeout_and_the_run_goes_on(cluster):
    # An hour's sleep against a 15 s limit that a pca cell on iris never nears, even with the
    # machine's load at 20 (a 1 s limit once timed pca out): the outcome does not hang on speed.
    cells, data, scoring = planned(
        "  - use: pca\n  - use: runner_plugins:Sleeps\n    name: sleepy\n    params: {seconds: 3600}\n",
        seeds=2,
    )
    results = by_key(
        on_dask(cells, data, scoring, jobs=2, time_limit=15.0, scheduler=cluster.scheduler_address)
    )
    assert results.keys() == {c.key for c in cells}
    for r in results.values():
        if r.cell.method == "sleepy":
            assert r.status == "timeout"
            assert "time limit of 15 s" in r.error
        else:
            # the run went on past the overrunning cells: both pca seeds finished
            assert (r.status, r.error) == ("ok", "")


def test_a_task_error_is_a_failed_cell(cluster):
    cells, data, scoring = planned("  - use: runner_plugins:Raises\n    name: bad\n")
    (result,) = on_dask(cells, data, scoring, jobs=2, scheduler=cluster.scheduler_address)
    assert result.status == "failed"
    assert "always fails" in result.error


def test_stop_cancels_outstanding_cells(cluster):
    cells, data, scoring = planned(
        "  - use: runner_plugins:Sleeps\n    name: sleepy\n    params: {seconds: 3}\n", seeds=6
    )
    stop = threading.Event()
    timer = threading.Timer(0.5, stop.set)
    timer.start()
    results = by_key(on_dask(cells, data, scoring, jobs=2, stop=stop, scheduler=cluster.scheduler_address))
    timer.cancel()
    assert results.keys() == {c.key for c in cells}
    # Six 3-second cells on two workers need 9 s; stopped at 0.5 s, none of them finishes.
    assert {r.status for r in results.values()} == {"interrupted"}


def test_cached_fits_are_sent_with_the_cell_and_only_scored(cluster, tmp_path):
    cells, data, scoring = planned(
        "  - use: pca\n  - use: runner_plugins:Noisy\n    name: noisy\n    params: {noise: 0.5}\n", seeds=2
    )
    first = by_key(on_dask(cells, data, scoring, jobs=2, scheduler=cluster.scheduler_address))
    # Only the parent reads the cache: a hit travels to the worker with its cell.
    cache = EmbeddingCache(tmp_path / "cache")
    for r in first.values():
        cache.put(r.cell, r.embedding, r.fit_seconds, r.fit_peak_mb)
    again = by_key(on_dask(cells, data, scoring, jobs=2, cache=cache, scheduler=cluster.scheduler_address))
    for key, r in again.items():
        assert r.status == "ok" and r.from_cache
        # scored again on a worker: equal up to BLAS summation order (silhouette's distances)
        assert r.values == pytest.approx(first[key].values, rel=1e-12, abs=1e-15)
        assert r.fit_seconds == first[key].fit_seconds


def test_without_a_scheduler_a_local_cluster_is_started_and_closed():
    cells, data, scoring = planned("  - use: pca\n", seeds=2)
    before = {p.pid for p in psutil.Process().children(recursive=True)}
    results = list(on_dask(cells, data, scoring, jobs=2))
    assert sorted(r.status for r in results) == ["ok", "ok"]
    deadline = time.time() + 10
    while {p.pid for p in psutil.Process().children(recursive=True)} - before and time.time() < deadline:
        time.sleep(0.2)
    assert not {p.pid for p in psutil.Process().children(recursive=True)} - before


def test_unreachable_scheduler_is_an_input_error(monkeypatch):
    monkeypatch.setattr(dask_backend, "_CONNECT_TIMEOUT", 1)
    cells, data, scoring = planned("  - use: pca\n")
    with pytest.raises(InputError, match=r"^--scheduler: .*tcp://127\.0\.0\.1:9"):
        list(on_dask(cells, data, scoring, scheduler="tcp://127.0.0.1:9"))


def test_missing_extra_names_the_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes `import distributed` fail
    cells, data, scoring = planned("  - use: pca\n")
    with pytest.raises(InputError) as err:
        list(on_dask(cells, data, scoring))
    assert str(err.value) == "--backend: the dask backend needs the dask extra: pip install 'foldbench[dask]'"


def test_importing_the_package_does_not_import_dask():
    code = (
        "import sys, harness, harness.run.backends.dask; "
        "print(sorted({'dask', 'distributed'} & set(sys.modules)))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=os.path.dirname(os.path.dirname(os.path.abspath(__file__))),
    )
    assert out.stdout.strip() == "[]"


@pytest.mark.slow
def test_the_command_line_runs_a_suite_on_a_cluster(cluster, tmp_path, write_suite, two_datasets):
    import pandas as pd

    from harness.cli import main

    methods = "  - use: pca\n  - use: isomap\n  - use: tsne\n    params: {perplexity: 10}\n"
    suite = write_suite(two_datasets(methods, name="onc", k="[5, 10]"), "onc.yaml")
    address = cluster.scheduler_address
    for backend in (["--backend", "dask", "--scheduler", address], ["--backend", "local"]):
        code = main(
            [
                "run",
                str(suite),
                "--out",
                str(tmp_path / backend[1]),
                "--jobs",
                "2",
                "--quiet",
                "--no-report",
                "--no-cache",
                *backend,
            ]
        )
        assert code == 0
    frames = [pd.read_csv(next((tmp_path / b / "onc").iterdir()) / "scores.csv") for b in ("dask", "local")]
    values = [f.sort_values("key").filter(regex="@|stress|spearman").to_numpy() for f in frames]
    # the same seeds give the same scores on both backends
    np.testing.assert_allclose(values[0], values[1], rtol=0, atol=1e-12)
    manifest = (next((tmp_path / "dask" / "onc").iterdir()) / "manifest.json").read_text()
    assert address in manifest


def test_a_scheduler_needs_the_dask_backend():
    with pytest.raises(InputError, match=r"run\.scheduler: expected only together with backend: dask"):
        parse_suite("name: x\ndatasets: [iris]\nmethods: [pca]\nrun: {scheduler: 'tcp://h:1'}\n", "s.yaml")
    with pytest.raises(InputError, match=r"run\.backend: expected one of local, dask"):
        parse_suite("name: x\ndatasets: [iris]\nmethods: [pca]\nrun: {backend: dusk}\n", "s.yaml")


def test_a_cluster_without_workers_gives_the_cells_up_instead_of_waiting_for_ever(monkeypatch):
    # A scheduler whose workers are all gone (here: it never had one) must not hang the run:
    # after the grace period every cell still to do ends as crashed with the reason.
    monkeypatch.setattr(dask_backend, "NO_WORKER_GRACE", 1.0)
    cells, data, scoring = planned("  - use: pca\n", seeds=2)
    with distributed.LocalCluster(n_workers=0, dashboard_address=":0", silence_logs=40) as empty:
        results = by_key(on_dask(cells, data, scoring, jobs=1, scheduler=empty.scheduler_address))
    assert results.keys() == {c.key for c in cells}
    assert {r.status for r in results.values()} == {"crashed"}
    assert all("no worker for 1 s" in r.error and "--resume" in r.error for r in results.values())
