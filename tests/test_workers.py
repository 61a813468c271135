"""Cell processes that run several cells: same results, each cell's own log, plug-ins alone.

Plumbing of our own (no outside reference): the local backend keeps a worker process per lane
for the cells of built-in methods; these tests hold it to giving what a process per cell gives.
"""

from __future__ import annotations

import pandas as pd
import pytest
from test_lifecycle import suite_file

from harness.api import run_suite
from harness.run.backends import local

BUILT_IN = "  - use: pca\n  - use: random_projection\n  - use: mds\n    params: {max_iter: 20}\n"


@pytest.fixture
def started(monkeypatch) -> list[int]:
    """Counts the worker processes a run starts."""
    count: list[int] = []
    original = local._Worker.__init__

    def counting(self, *args, **kwargs):
        count.append(1)
        original(self, *args, **kwargs)

    monkeypatch.setattr(local._Worker, "__init__", counting)
    return count


def _values(outcome) -> pd.DataFrame:
    s = outcome.scores.sort_values("key").set_index("key")
    return s[[c for c in s.columns if "@" in c or c in ("stress", "shepard_spearman")]]


def test_built_in_cells_share_workers_and_score_as_in_a_process_each(tmp_path, started, monkeypatch):
    suite = suite_file(tmp_path, BUILT_IN, seeds=4)
    shared = run_suite(suite, tmp_path / "shared", cache=None, jobs=2)
    assert (shared.scores["status"] == "ok").all() and len(shared.scores) == 12
    assert 1 <= len(started) <= 2  # one worker per lane for the 12 cells (9 fitted, 3 copies)
    started.clear()
    monkeypatch.setattr(local, "_reusable", lambda cell, result, worker: False)
    alone = run_suite(suite, tmp_path / "alone", cache=None, jobs=2)
    assert len(started) == len(alone.scores[alone.scores["copy_of"].fillna("") == ""])
    pd.testing.assert_frame_equal(_values(shared), _values(alone), check_exact=True)


def test_plug_in_cells_run_in_a_worker_each(tmp_path, started):
    methods = "  - use: runner_plugins:FirstColumns\n    name: first\n"
    outcome = run_suite(suite_file(tmp_path, methods, seeds=3), tmp_path / "out", cache=None, jobs=1)
    assert (outcome.scores["status"] == "ok").all()
    assert len(started) == 3


def test_a_shared_worker_keeps_each_cells_output_apart(tmp_path, started, monkeypatch):
    monkeypatch.setattr(local, "_reusable", lambda cell, result, worker: result.status == "ok")
    methods = "  - use: runner_plugins:Chatty\n    name: chatty\n    params: {lines: 3, warnings: 0}\n"
    outcome = run_suite(suite_file(tmp_path, methods, seeds=3), tmp_path / "out", cache=None, jobs=1)
    assert len(started) == 1
    for _, row in outcome.scores.iterrows():
        text = (outcome.run_dir / "cells" / f"{row['key']}.log").read_text()
        assert text.count("chatty seed ") == 1 and f"chatty seed {row['seed']}\n" in text
        assert text.count("chatty line 2\n") == 1
        assert text.count("chatty wrote to file descriptor 2") == 1
        record = outcome.run_dir / "cells" / f"{row['key']}.json"
        assert "chatty says the same thing again (5 times)" in record.read_text()


def test_after_a_crash_or_a_timeout_the_next_cell_gets_a_new_worker(tmp_path, started, monkeypatch):
    monkeypatch.setattr(local, "_reusable", lambda cell, result, worker: result.status == "ok")
    methods = (
        "  - use: runner_plugins:FirstColumns\n    name: first\n"
        "  - use: runner_plugins:Exits\n    name: exits\n"
        "  - use: runner_plugins:Sleeps\n    name: sleeps\n"
        "  - use: runner_plugins:Noisy\n    name: noisy\n    params: {noise: 0.1}\n"
    )
    suite = suite_file(tmp_path, methods)
    text = suite.read_text() + "run:\n  time_limit: 3\n"
    suite.write_text(text)
    outcome = run_suite(suite, tmp_path / "out", cache=None, jobs=1)
    status = dict(zip(outcome.scores["method"], outcome.scores["status"]))
    assert status == {"first": "ok", "exits": "crashed", "sleeps": "timeout", "noisy": "ok"}
    # first and exits share one worker (exits kills it); sleeps gets a new one, stopped at the
    # limit; noisy a third.
    assert len(started) == 3
