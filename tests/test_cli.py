"""The command line end to end, in a temporary folder (plumbing; invented suites)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.cli import main

SUITE = """\
name: e2e
seeds: 2
datasets:
  - use: iris
  - use: rolled_sheet
    name: roll
    params: {n: 150}
methods:
  - use: pca
  - use: isomap
    grid: {n_neighbors: [6, 10]}
  - use: runner_plugins:Raises
    name: broken
measures:
  k: [5, 10]
"""


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("e2e")
    suite = root / "e2e.yaml"
    suite.write_text(SUITE)
    code = main(
        ["run", str(suite), "--out", str(root / "out"), "--jobs", "2", "--quiet", "--no-report", "--no-cache"]
    )
    runs = list((root / "out" / "e2e").iterdir())
    return code, runs


def test_failing_plugin_is_recorded_and_others_finish(finished_run):
    code, runs = finished_run
    assert code == 1  # some cells failed
    assert len(runs) == 1
    scores = pd.read_csv(runs[0] / "scores.csv")
    # 2 datasets x (1 + 2 + 1 configurations) x 2 seeds
    assert len(scores) == 16
    broken = scores[scores.method == "broken"]
    assert set(broken.status) == {"failed"}
    assert broken.error.str.contains("this plug-in always fails").all()
    others = scores[scores.method != "broken"]
    assert set(others.status) == {"ok"}
    for col in (
        "trustworthiness@5",
        "continuity@10",
        "knn_recall@10",
        "stress",
        "sammon_stress",
        "shepard_spearman",
        "fit_seconds",
        "fit_peak_mb",
    ):
        assert others[col].notna().all(), col
    iris = others[others.dataset == "iris"]
    assert iris["knn_accuracy@5"].notna().all()
    assert scores.duplicated(["dataset", "method", "params", "seed"]).sum() == 0


def test_run_folder_contents(finished_run):
    _, runs = finished_run
    run = runs[0]
    for name in ("scores.csv", "summary.csv", "ranking.md", "manifest.json", "suite.yaml"):
        assert (run / name).is_file(), name
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["seeds"] == [0, 1]
    assert manifest["environment"]["packages"]["scikit-learn"]
    assert set(manifest["datasets"]) == {"iris", "roll"}
    keys = pd.read_csv(run / "scores.csv").query("status == 'ok'")["key"]
    for key in keys:
        emb = np.load(run / "embeddings" / f"{key}.npy")
        assert emb.shape[1] == 2
    summary = pd.read_csv(run / "summary.csv")
    assert {"dataset", "method", "params", "mean_rank", "place"} <= set(summary.columns)
    text = (run / "ranking.md").read_text()
    assert "## Across datasets" in text and "## roll" in text


def test_list_commands(capsys):
    for what in ("datasets", "methods", "measures"):
        assert main(["list", what]) == 0
    out = capsys.readouterr().out
    for word in ("rolled_sheet", "machine_fleet", "digits", "sammon", "tsne", "trustworthiness", "Kruskal"):
        assert word in out


def test_init_writes_a_suite_that_validates(tmp_path, capsys):
    target = tmp_path / "mine.yaml"
    assert main(["init", str(target)]) == 0
    assert main(["validate", str(target)]) == 0
    assert main(["init", str(target)]) == 2  # refuses to overwrite
    assert "already exists" in capsys.readouterr().err


def test_run_on_a_single_table(tmp_path):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(120, 5)), columns=list("abcde"))
    frame["group"] = np.where(frame["a"] > 0, "up", "down")
    table = tmp_path / "my table.csv"
    frame.to_csv(table, index=False)
    code = main(
        [
            "run",
            "--table",
            str(table),
            "--label",
            "group",
            "--out",
            str(tmp_path / "out"),
            "--quiet",
            "--no-report",
            "--no-cache",
        ]
    )
    assert code == 0
    run = next((tmp_path / "out" / "my_table").iterdir())
    scores = pd.read_csv(run / "scores.csv")
    assert {"pca", "tsne", "isomap"} <= set(scores.method)
    assert scores["knn_accuracy@10"].notna().all()


def test_console_script_module_entry(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).parent))
    proc = subprocess.run(
        [sys.executable, "-m", "harness", "run", "--jobs", "0", "x.yaml"],
        capture_output=True,
        text=True,
        env=env,
    )
    assert proc.returncode == 2 and "--jobs" in proc.stderr and "Traceback" not in proc.stderr
