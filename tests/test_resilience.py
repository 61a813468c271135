"""Nothing lost, nothing computed twice: resume, cache, limits, crashes, degenerate output.

Plumbing tests of our own runner with invented suites and misbehaving plug-ins
(tests/runner_plugins.py).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.api import run_suite
from harness.cli import main
from harness.errors import InputError
from harness.run.cache import EmbeddingCache
from harness.run.folder import RunFolder

TESTS = Path(__file__).parent
TIMING = ["fit_seconds", "fit_peak_mb", "score_seconds", "from_cache", "error"]


@pytest.fixture
def suite_file(write_suite, two_datasets):
    """``suite_file(methods, name="tough", seeds=2)``: a suite on iris and a rolled sheet, written."""

    def write(methods: str, name: str = "tough", seeds: int = 2, k: str = "[5]") -> Path:
        return write_suite(two_datasets(methods, name=name, seeds=seeds, k=k), f"{name}.yaml")

    return write


def comparable(scores: pd.DataFrame) -> pd.DataFrame:
    cols = [c for c in scores.columns if c not in TIMING]
    return scores[cols].sort_values(["dataset", "method", "params", "seed"]).reset_index(drop=True)


def test_time_limit_stops_a_cell_and_the_run_goes_on(tmp_path, suite_file):
    # The sleeper sleeps an hour against a 15 s limit that a pca cell on 150 points never
    # nears, even on a loaded machine: the outcome cannot depend on the machine's speed.
    methods = "  - use: pca\n  - use: runner_plugins:Sleeps\n    name: sleepy\n    params: {seconds: 3600}\n"
    suite = suite_file(methods, seeds=1)
    outcome = run_suite(suite, tmp_path / "out", jobs=2, time_limit=15.0)
    s = outcome.scores
    assert set(s[s.method == "sleepy"].status) == {"timeout"}
    assert s[s.method == "sleepy"].error.str.contains("time limit of 15 s").all()
    # the run went on: every pca cell finished and was stored, and only the sleepers count as failed
    assert set(s[s.method == "pca"].status) == {"ok"}
    assert outcome.counts == {"ok": 2, "timeout": 2}
    assert len(list((outcome.run_dir / "cells").glob("*.json"))) == 4


@pytest.mark.parametrize(
    "plugin,status,words",
    [
        ("Exits", "crashed", "exited with code 3"),
        ("RunsOutOfMemory", "failed", "MemoryError"),
        ("Raises", "failed", "always fails"),
    ],
)
def test_a_dying_or_failing_worker_costs_only_its_cell(tmp_path, plugin, status, words, suite_file):
    suite = suite_file(f"  - use: pca\n  - use: runner_plugins:{plugin}\n    name: bad\n", seeds=1)
    outcome = run_suite(suite, tmp_path / "out", jobs=2)
    s = outcome.scores
    assert set(s[s.method == "bad"].status) == {status}
    assert s[s.method == "bad"].error.str.contains(words).all()
    assert set(s[s.method == "pca"].status) == {"ok"}
    assert outcome.failed == 2


def test_degenerate_embedding_is_a_failed_cell(tmp_path, suite_file):
    suite = suite_file(
        "  - use: runner_plugins:Noisy\n    name: flat\n    params: {noise: 1.0e+308}\n", seeds=1
    )
    outcome = run_suite(suite, tmp_path / "out", jobs=1)
    s = outcome.scores
    assert set(s.status) == {"failed"}
    assert s.error.str.startswith("degenerate embedding").all()


@pytest.mark.parametrize("bad", ["../up", "a/b", "/abs", ".hidden", "x" * 80, "a\\b", "..", "ok/../../up"])
def test_suite_name_cannot_escape_the_output_root(tmp_path, bad):
    from harness.suite import parse_suite

    with pytest.raises(InputError, match=r"s\.yaml: name"):
        parse_suite(f"name: '{bad}'\ndatasets: [iris]\nmethods: [pca]\n", "s.yaml")


@pytest.mark.parametrize("bad", ["../up", "ok/../../up", "/tmp/abs", ".."])
def test_the_store_refuses_paths_outside_the_root_even_unvalidated(tmp_path, bad):
    root = tmp_path / "root"
    with pytest.raises(InputError):
        RunFolder.create(root, bad)
    assert sorted(p.name for p in tmp_path.iterdir()) in ([], ["root"])


def test_cache_makes_a_second_run_skip_the_fits(tmp_path, suite_file):
    suite = suite_file("  - use: pca\n  - use: tsne\n    params: {perplexity: 10}\n", seeds=1)
    cache = EmbeddingCache(tmp_path / "cache")
    first = run_suite(suite, tmp_path / "out", jobs=2, cache=cache)
    assert cache.info()["entries"] == 4
    second = run_suite(suite, tmp_path / "out", jobs=2, cache=cache)
    assert second.scores["from_cache"].all()
    # fits and scores both come from the cache: the stored score times are the first run's
    np.testing.assert_array_equal(
        second.scores.sort_values("key")["score_seconds"], first.scores.sort_values("key")["score_seconds"]
    )
    pd.testing.assert_frame_equal(
        comparable(first.scores.drop(columns="key")), comparable(second.scores.drop(columns="key"))
    )
    assert main(["cache", "info", "--cache", str(tmp_path / "cache")]) == 0
    assert main(["cache", "clear", "--cache", str(tmp_path / "cache")]) == 0
    assert cache.info()["entries"] == 0


def test_resume_refuses_a_folder_of_another_suite(tmp_path, suite_file):
    a = suite_file("  - use: pca\n", name="one", seeds=1)
    b = suite_file("  - use: isomap\n", name="two", seeds=1)
    done = run_suite(a, tmp_path / "out")
    with pytest.raises(InputError, match="expected a run of this suite"):
        run_suite(b, tmp_path / "out", resume=done.run_dir)


@pytest.mark.slow
def test_sigkill_then_resume_gives_the_uninterrupted_scores(tmp_path, suite_file):
    methods = (
        "  - use: pca\n  - use: isomap\n    params: {n_neighbors: 8}\n"
        "  - use: runner_plugins:Sleeps\n    name: slow\n    params: {seconds: 0.4}\n"
    )
    suite = suite_file(methods, seeds=3)
    reference = run_suite(suite, tmp_path / "ref", jobs=1)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
    cmd = [
        sys.executable,
        "-m",
        "harness",
        "run",
        str(suite),
        "--out",
        str(tmp_path / "out"),
        "--jobs",
        "1",
        "--no-cache",
        "--quiet",
    ]
    proc = subprocess.Popen(
        cmd, env=env, start_new_session=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    deadline = time.time() + 60
    run_dir = None
    while time.time() < deadline:
        found = list((tmp_path / "out" / "tough").glob("*/cells/*.json"))
        if len(found) >= 4:
            run_dir = found[0].parent.parent
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert run_dir is not None, "the run never stored 4 cells"
    stored = len(list((run_dir / "cells").glob("*.json")))
    assert 4 <= stored < 18
    code = subprocess.run(
        [*cmd[:-1], "--resume", str(run_dir), "--quiet"], env=env, capture_output=True, text=True
    )
    assert code.returncode == 0, code.stderr
    resumed = pd.read_csv(run_dir / "scores.csv")
    assert len(resumed) == 18
    assert not resumed.duplicated(["dataset", "method", "params", "seed"]).any()
    ref = comparable(pd.read_csv(reference.run_dir / "scores.csv"))
    got = comparable(resumed)
    pd.testing.assert_frame_equal(
        ref[got.columns.drop("key")].reset_index(drop=True), got.drop(columns="key"), check_dtype=False
    )


def test_ctrl_c_stops_cleanly_and_says_how_to_resume(tmp_path, suite_file):
    methods = "  - use: runner_plugins:Sleeps\n    name: slow\n    params: {seconds: 1.0}\n"
    suite = suite_file(methods, seeds=4)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "harness",
            "run",
            str(suite),
            "--out",
            str(tmp_path / "out"),
            "--jobs",
            "1",
            "--no-cache",
            "--quiet",
        ],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    deadline = time.time() + 60
    while time.time() < deadline and not list((tmp_path / "out").glob("tough/*/cells/*.json")):
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "Resume with: foldbench run" in err and "--resume" in err
    assert "Traceback" not in err
    run_dir = next((tmp_path / "out" / "tough").iterdir())
    assert (run_dir / "scores.csv").is_file()


def test_a_script_without_a_main_guard_runs_once(tmp_path, suite_file):
    # Children must not re-run the caller's script (multiprocessing would re-import it).
    suite = suite_file("  - use: pca\n", seeds=2)
    script = tmp_path / "unguarded.py"
    script.write_text(
        f"from harness import run_suite\nprint('SCRIPT RAN', flush=True)\n"
        f"o = run_suite({str(suite)!r}, {str(tmp_path / 'out')!r}, jobs=2)\n"
        "print('CELLS', o.counts)\n"
    )
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS.parent), os.environ.get("PYTHONPATH", "")]))
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.count("SCRIPT RAN") == 1
    assert "CELLS {'ok': 4}" in proc.stdout
    piped = subprocess.run(
        [sys.executable, "-"], input=script.read_text(), capture_output=True, text=True, env=env, timeout=120
    )
    assert "CELLS {'ok': 4}" in piped.stdout, piped.stderr[-500:]


def test_new_scoring_settings_reuse_the_fits_but_score_again(tmp_path, suite_file):
    cache = EmbeddingCache(tmp_path / "cache")
    first = run_suite(suite_file("  - use: pca\n", seeds=1), tmp_path / "out", cache=cache)
    changed = suite_file("  - use: pca\n", name="k7", seeds=1, k="[7]")
    second = run_suite(changed, tmp_path / "out", cache=cache)
    assert second.scores["from_cache"].all()
    assert "trustworthiness@7" in second.scores and "trustworthiness@7" not in first.scores
