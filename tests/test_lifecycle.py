"""A run's life: one process per run folder, nothing left running or staged, output kept in logs.

Plumbing tests of our own runner with invented suites and misbehaving plug-ins
(tests/runner_plugins.py).  Every subprocess has a timeout, and every process
a test starts is killed in a fixture, whatever the test's outcome.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest

from harness.api import run_suite
from harness.cli import main
from harness.run.backends._capture import LOG_LIMIT, MAX_WARNINGS, CappedText, WarningTally
from harness.run.backends.local import sweep_staging
from harness.run.lock import PID_NAME, FolderBusy, folder_lock

TESTS = Path(__file__).parent
#: Seconds any one command of these tests may take before it counts as hung.
HANG = 240


def suite_file(tmp_path: Path, methods: str, name: str = "life", seeds: int = 1) -> Path:
    path = tmp_path / f"{name}.yaml"
    path.write_text(
        f"name: {name}\nseeds: {seeds}\ndatasets:\n  - use: iris\nmethods:\n{methods}measures:\n  k: [5]\n"
    )
    return path


def env_for(tmp_path: Path) -> dict[str, str]:
    """Plug-ins importable, and a temporary folder of the test's own (staging folders land there)."""
    tmp = tmp_path / "tmp"
    tmp.mkdir(exist_ok=True)
    return dict(
        os.environ,
        PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]),
        TMPDIR=str(tmp),
    )


def foldbench(*args: str) -> list[str]:
    return [sys.executable, "-m", "harness", *args]


def alive(procs: list[psutil.Process]) -> list[psutil.Process]:
    """Those still running (a zombie has ended; it only waits to be reaped)."""
    out = []
    for p in procs:
        try:
            if p.is_running() and p.status() != psutil.STATUS_ZOMBIE:
                out.append(p)
        except psutil.NoSuchProcess:
            continue
    return out


def wait_until(condition, seconds: float = 120.0, step: float = 0.1) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(step)
    return False


@pytest.fixture
def spawned():
    """Start processes through this; all of them and everything they started are killed at the end."""
    started: list[tuple[subprocess.Popen, list[psutil.Process]]] = []

    def start(cmd, **kw):
        proc = subprocess.Popen(cmd, start_new_session=True, **kw)
        family: list[psutil.Process] = []
        started.append((proc, family))
        return proc, family

    yield start
    for proc, family in started:
        with contextlib.suppress(psutil.NoSuchProcess):
            family.extend(psutil.Process(proc.pid).children(recursive=True))
        for p in [*family]:
            with contextlib.suppress(psutil.NoSuchProcess):
                p.kill()
        with contextlib.suppress(OSError):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.kill()
        proc.communicate(timeout=30)


def grab_family(proc: subprocess.Popen, family: list[psutil.Process]) -> list[psutil.Process]:
    """Remember every descendant now, so that the fixture and the test can find them after a kill."""
    for child in psutil.Process(proc.pid).children(recursive=True):
        if child.pid not in {p.pid for p in family}:
            family.append(child)
    return family


def cell_is_running(proc: subprocess.Popen) -> bool:
    """A cell runs once a child of the fork server (a grandchild of the main process) exists."""
    try:
        kids = psutil.Process(proc.pid).children()
        return any(k.children() for k in kids)
    except psutil.NoSuchProcess:
        return False


# ---------------------------------------------------------------- one process per run folder


@pytest.fixture
def finished_run(tmp_path):
    suite = suite_file(tmp_path, "  - use: pca\n", seeds=2)
    return suite, run_suite(suite, tmp_path / "out", isolate=False).run_dir


def test_a_held_folder_refuses_resume_and_report_naming_the_holder(tmp_path, finished_run, capsys):
    suite, run_dir = finished_run
    before = json.loads((run_dir / "manifest.json").read_text())
    with folder_lock(run_dir):
        # The holder's process id is written beside the lock (this test process holds it).
        assert (run_dir / PID_NAME).read_text().strip() == str(os.getpid())
        for args in (
            ["run", str(suite), "--resume", str(run_dir), "--no-cache", "--quiet"],
            ["report", str(run_dir)],
        ):
            res = subprocess.run(
                foldbench(*args), env=env_for(tmp_path), capture_output=True, text=True, timeout=HANG
            )
            assert res.returncode == 2, res.stderr
            lines = res.stderr.strip().splitlines()
            assert len(lines) == 1 and "Traceback" not in res.stderr
            assert f"in use by foldbench process {os.getpid()}" in lines[0]
    # Refused untouched: no "resumed" entry was added.
    assert json.loads((run_dir / "manifest.json").read_text()) == before
    assert not (run_dir / PID_NAME).exists()  # the holder removes it when it lets go
    # Free again: the report goes through.
    assert main(["report", str(run_dir)]) == 0


def test_the_lock_goes_with_a_killed_holder(tmp_path, finished_run, spawned):
    _, run_dir = finished_run
    code = (
        "import sys, time\nfrom harness.run.lock import folder_lock\n"
        f"with folder_lock({str(run_dir)!r}):\n    print('held', flush=True)\n    time.sleep(600)\n"
    )
    proc, _ = spawned([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "held"
    with pytest.raises(FolderBusy, match=f"foldbench process {proc.pid}"), folder_lock(run_dir):
        pass
    proc.kill()
    proc.wait(timeout=30)
    with folder_lock(run_dir):  # the operating system released it with the process
        pass


@pytest.mark.slow
def test_two_resumes_of_one_folder_run_one_at_a_time(tmp_path, spawned):
    methods = "  - use: runner_plugins:Sleeps\n    name: slow\n    params: {seconds: 1.0}\n"
    suite = suite_file(tmp_path, methods, seeds=4)
    env = env_for(tmp_path)
    first, _ = spawned(
        foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--jobs", "1", "--no-cache", "--quiet"),
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert wait_until(lambda: list((tmp_path / "out").glob("life/*/cells/*.json")))
    first.send_signal(signal.SIGINT)
    first.communicate(timeout=HANG)
    run_dir = next((tmp_path / "out" / "life").iterdir())
    resume = foldbench("run", str(suite), "--resume", str(run_dir), "--jobs", "1", "--no-cache", "--quiet")
    a, _ = spawned(resume, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert wait_until(lambda: (run_dir / PID_NAME).is_file() or a.poll() is not None)
    b = subprocess.run(resume, env=env, capture_output=True, text=True, timeout=HANG)
    out_a, err_a = a.communicate(timeout=HANG)
    assert a.returncode == 0, err_a
    assert b.returncode == 2 and f"in use by foldbench process {a.pid}" in b.stderr, b.stderr
    manifest = json.loads((run_dir / "manifest.json").read_text())
    assert len(manifest["resumed"]) == 1  # only the resume that ran recorded itself
    assert "4 cells (4 ok)" in out_a


# ---------------------------------------------------------------- nothing left behind


@pytest.mark.slow
def test_sigkill_of_the_main_process_leaves_no_process_of_the_run(tmp_path, spawned):
    methods = "  - use: runner_plugins:Sleeps\n    name: forever\n    params: {seconds: 100000}\n"
    suite = suite_file(tmp_path, methods)
    env = env_for(tmp_path)
    cmd = foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--no-cache", "--quiet")
    proc, family = spawned(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    assert wait_until(lambda: cell_is_running(proc)), "the cell never started"
    time.sleep(1.0)  # let the cell settle into its sleep
    grab_family(proc, family)
    assert len(family) >= 3  # resource tracker, fork server, the cell
    os.kill(proc.pid, signal.SIGKILL)  # the main process only, not its group
    proc.wait(timeout=30)
    # Within 10 s nothing of the run is left (polled: the machine may be busy).
    assert wait_until(lambda: not alive(family), seconds=10), [p.cmdline() for p in alive(family)]
    # The staging folder of the killed run is left; the next run removes it.
    stale = list((tmp_path / "tmp").glob(f"foldbench-data-{proc.pid}-*"))
    assert len(stale) == 1
    quick = suite_file(tmp_path, "  - use: pca\n", name="quick")
    res = subprocess.run(
        foldbench("run", str(quick), "--out", str(tmp_path / "out"), "--no-cache", "--quiet", "--no-report"),
        env=env,
        capture_output=True,
        text=True,
        timeout=HANG,
    )
    assert res.returncode == 0, res.stderr
    assert not stale[0].exists()
    assert not list((tmp_path / "tmp").glob("foldbench-data-*"))


@pytest.mark.slow
def test_sigterm_stops_like_ctrl_c_with_exit_143_and_a_resumable_folder(tmp_path, spawned):
    methods = "  - use: runner_plugins:Sleeps\n    name: slow\n    params: {seconds: 1.0}\n"
    suite = suite_file(tmp_path, methods, seeds=4)
    env = env_for(tmp_path)
    cmd = foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--jobs", "1", "--no-cache", "--quiet")
    proc, family = spawned(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert wait_until(lambda: list((tmp_path / "out").glob("life/*/cells/*.json")))
    grab_family(proc, family)
    proc.send_signal(signal.SIGTERM)
    _out, err = proc.communicate(timeout=HANG)
    assert proc.returncode == 143, err  # 128 + SIGTERM, as a shell reports it
    assert "Resume with: foldbench run" in err and "--resume" in err
    assert "Traceback" not in err
    run_dir = next((tmp_path / "out" / "life").iterdir())
    assert (run_dir / "scores.csv").is_file()
    assert not list((tmp_path / "tmp").glob("foldbench-data-*"))  # staging removed on this exit path
    assert wait_until(lambda: not alive(family), seconds=10)
    res = subprocess.run(
        foldbench("run", str(suite), "--resume", str(run_dir), "--jobs", "1", "--no-cache", "--quiet"),
        env=env,
        capture_output=True,
        text=True,
        timeout=HANG,
    )
    assert res.returncode == 0, res.stderr
    assert "4 cells (4 ok)" in res.stdout


@pytest.mark.slow
def test_sigterm_before_the_first_cell_is_stored_still_leaves_a_resumable_folder(tmp_path, spawned):
    methods = "  - use: runner_plugins:Sleeps\n    name: forever\n    params: {seconds: 100000}\n"
    suite = suite_file(tmp_path, methods)
    cmd = foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--no-cache", "--quiet")
    proc, family = spawned(
        cmd, env=env_for(tmp_path), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    assert wait_until(lambda: cell_is_running(proc)), "the cell never started"
    grab_family(proc, family)
    proc.send_signal(signal.SIGTERM)
    _out, err = proc.communicate(timeout=HANG)
    assert proc.returncode == 143, err
    assert "Interrupted: 0 of 1 cells are stored" in err and "--resume" in err
    assert "Traceback" not in err
    run_dir = next((tmp_path / "out" / "life").iterdir())
    assert (run_dir / "scores.csv").is_file() and not list((run_dir / "cells").glob("*.json"))
    assert wait_until(lambda: not alive(family), seconds=10)  # the sleeping cell was stopped


def test_a_stale_staging_folder_is_swept_and_a_live_one_kept(tmp_path):
    from filelock import FileLock

    dead = tmp_path / "foldbench-data-1-dead"
    dead.mkdir()
    (dead / ".owner.lock").touch()  # nobody holds it: its process is gone
    live = tmp_path / "foldbench-data-2-live"
    live.mkdir()
    held = FileLock(live / ".owner.lock", timeout=0)
    held.acquire(blocking=False)
    other = tmp_path / "foldbench-data-3-nolock"  # no lock file: not ours to judge
    other.mkdir()
    try:
        assert sweep_staging(tmp_path) == 1
    finally:
        held.release()
    assert not dead.exists() and live.exists() and other.exists()


# ---------------------------------------------------------------- output and warnings


@pytest.mark.slow
def test_printed_output_goes_to_the_cell_log_capped_and_warnings_are_tallied(tmp_path):
    methods = (
        "  - use: runner_plugins:Chatty\n    name: chatty\n    params: {lines: 200000, warnings: 10000}\n"
    )
    suite = suite_file(tmp_path, methods)
    res = subprocess.run(
        foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--no-cache", "--no-report"),
        env=env_for(tmp_path),
        capture_output=True,
        text=True,
        timeout=HANG,
    )
    assert res.returncode == 0, res.stderr
    assert "chatty line" not in res.stdout and "chatty wrote" not in res.stderr
    assert res.stdout.strip().splitlines()[-1].startswith("1 cells (1 ok)")
    run_dir = next((tmp_path / "out" / "life").iterdir())
    (log,) = (run_dir / "cells").glob("*.log")
    data = log.read_bytes()
    # 200 000 lines of about 17 bytes are over 3 MB: the log keeps the first 1 MB and says so.
    assert data.startswith(b"chatty line 0\nchatty line 1\n")
    assert LOG_LIMIT < len(data) < LOG_LIMIT + 200
    assert b"[foldbench: output cut at 1048576 bytes;" in data[-200:]
    (record_path,) = (run_dir / "cells").glob("*.json")
    record = json.loads(record_path.read_text())
    warnings = record["warnings"]
    assert len(warnings) == MAX_WARNINGS + 1
    assert warnings[0] == "chatty warning number 0"
    # 10 000 distinct warnings and one repeated 5 times: the first 20 kept, the other 9 985 counted.
    assert warnings[-1].startswith(f"{10000 - MAX_WARNINGS + 5} more warnings")
    assert record_path.stat().st_size < 20_000


def test_a_quiet_cell_leaves_no_log_and_fd_output_is_caught(tmp_path):
    methods = (
        "  - use: pca\n"
        "  - use: runner_plugins:Chatty\n    name: chatty\n    params: {lines: 3, warnings: 0}\n"
    )
    suite = suite_file(tmp_path, methods)
    outcome = run_suite(suite, tmp_path / "out")
    logs = {p.stem: p.read_text() for p in (outcome.run_dir / "cells").glob("*.log")}
    chatty = outcome.scores.set_index("method").loc["chatty", "key"]
    assert list(logs) == [chatty]  # pca printed nothing: no file
    assert "chatty line 2\n" in logs[chatty]
    assert "chatty wrote to file descriptor 2" in logs[chatty]  # C-level writes are caught too
    assert "chatty says the same thing again" in logs[chatty]  # each warning in full in the log
    record = json.loads((outcome.run_dir / "cells" / f"{chatty}.json").read_text())
    assert record["warnings"] == ["chatty says the same thing again (5 times)"]


def test_a_finished_cell_ends_on_its_own_and_leaks_no_named_semaphore(tmp_path):
    # A cell that keeps a named semaphore for the life of its process (numba's parallel layer
    # does, used by pacmap and trimap) must be let to run its exit handlers, which unlink it;
    # killing it at once left one "leaked semaphore" warning per cell at the end of the run
    # (multiprocessing.resource_tracker's own check, Python standard library).
    methods = "  - use: runner_plugins:HoldsNamedLock\n    name: holder\n"
    suite = suite_file(tmp_path, methods, seeds=2)
    res = subprocess.run(
        foldbench("run", str(suite), "--out", str(tmp_path / "out"), "--no-report", "--quiet", "--no-cache"),
        env=env_for(tmp_path),
        capture_output=True,
        text=True,
        timeout=HANG,
    )
    assert res.returncode == 0, res.stderr
    assert "2 cells (2 ok)" in res.stdout
    assert "leaked semaphore" not in res.stderr


def test_tally_and_capped_text_plumbing():
    import logging

    tally = WarningTally()
    logger = logging.getLogger("tally-test")
    logger.addHandler(tally)
    logger.propagate = False
    try:
        for i in range(30):
            logger.warning("w%d", i % 25)
    finally:
        logger.removeHandler(tally)
    lines = tally.lines()
    assert lines[:5] == tuple(f"w{i} (2 times)" for i in range(5))
    assert len(lines) == MAX_WARNINGS + 1 and lines[-1].startswith("5 more warnings")
    sink = CappedText(limit=10)
    sink.write("0123456789abc")
    assert sink.getvalue().startswith(b"0123456789\n[foldbench: output cut") and sink.dropped == 3


# ---------------------------------------------------------------- Dask


def test_an_unreachable_scheduler_leaves_no_run_folder(tmp_path, monkeypatch, capsys):
    pytest.importorskip("distributed")
    from harness.run.backends import dask as dask_backend

    monkeypatch.setattr(dask_backend, "_CONNECT_TIMEOUT", 1)
    suite = suite_file(tmp_path, "  - use: pca\n")
    out = tmp_path / "out"
    code = main(
        ["run", str(suite), "--out", str(out), "--backend", "dask", "--scheduler", "tcp://127.0.0.1:9"]
    )
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("foldbench: error: --scheduler:")
    assert not out.exists() or not any(out.rglob("manifest.json"))
    assert not out.exists() or not any(p.is_dir() for p in out.rglob("*/*"))


@pytest.mark.slow
def test_dask_crash_blames_only_the_cell_that_kills_its_workers(tmp_path):
    distributed = pytest.importorskip("distributed")
    import dask

    from harness.run.backends import Execution, execute
    from harness.run.cells import plan
    from harness.suite import load_datasets, parse_suite

    suite = parse_suite(
        "name: d\nseeds: 2\ndatasets:\n  - use: iris\nmethods:\n  - use: pca\n"
        "  - use: runner_plugins:Sleeps\n    name: nap\n    params: {seconds: 0.5}\n"
        "  - use: runner_plugins:Exits\n    name: bad\n"
        "  - use: runner_plugins:Chatty\n    name: chatty\n    params: {lines: 3}\nmeasures:\n  k: [5]\n"
    )
    data = load_datasets(suite)
    cells, _ = plan(suite, data)
    logs = tmp_path / "logs"
    # A scheduler given by address keeps its own setting of allowed worker deaths per task; one
    # allowed death (two runs) keeps this test to a few worker restarts on a busy machine.
    with (
        dask.config.set({"distributed.scheduler.allowed-failures": 1}),
        distributed.LocalCluster(
            n_workers=2, processes=True, threads_per_worker=1, dashboard_address=":0", silence_logs=40
        ) as cluster,
    ):
        execution = Execution(jobs=2, scheduler=cluster.scheduler_address, log_dir=str(logs))
        results = list(execute(cells, data, suite.scoring, execution, backend="dask"))
    assert sorted(r.cell.key for r in results) == sorted(c.key for c in cells)
    for r in results:
        if r.cell.method == "bad":
            assert r.status == "crashed", r.error
            assert "died each of the 2 times it ran this cell alone" in r.error
        else:
            assert r.status == "ok", (r.cell.method, r.error)
    chatty = [r.cell.key for r in results if r.cell.method == "chatty"]
    assert len(chatty) == 2
    for key in chatty:  # printed on the worker, written here
        assert "chatty line 2\n" in (logs / f"{key}.log").read_text()


def test_a_cell_runs_under_its_share_of_the_blas_threads(tmp_path):
    # plumbing of our own: two jobs (two cells) on a machine of c cores give each cell
    # max(1, c // 2) BLAS threads; one cell alone gets them all (the library list is found once
    # in the fork server; threadpoolctl reads the limit back inside the cell)
    methods = "  - use: runner_plugins:ReportsThreads\n    name: threads\n"
    cores = os.cpu_count() or 1
    for seeds, jobs, share in ((2, 2, max(1, cores // 2)), (1, 2, cores)):
        suite = suite_file(tmp_path, methods, name=f"t{seeds}", seeds=seeds)
        outcome = run_suite(suite, tmp_path / f"out{seeds}", jobs=jobs)
        logs = [p.read_text() for p in (outcome.run_dir / "cells").glob("*.log")]
        assert len(logs) == seeds and all(f"blas threads [{share}]" in text for text in logs), logs
