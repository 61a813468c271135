"""Re-running a finished run from its folder (plumbing tests on a tiny suite)."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest

from harness.api import rerun, run_suite
from harness.compare.rerun import compare_cells, rerun_text
from harness.errors import InputError
from harness.run import RunFolder
from harness.run.integrity import array_facts, seal
from harness.suite import parse_suite

SUITE = """\
name: again
seeds: [0, 2]
datasets:
  - {use: rolled_sheet, name: roll, params: {n: 150}}
methods:
  - use: pca
  - use: isomap
    params: {n_neighbors: 10}
  - {use: "runner_plugins:Noisy", name: jitter, params: {noise: 0.5}}
measures: {k: [5]}
"""


@pytest.fixture(scope="module")
def original(tmp_path_factory):
    root = tmp_path_factory.mktemp("orig")
    return run_suite(parse_suite(SUITE, str(root / "again.yaml")), root, jobs=2, isolate=False).run_dir


def test_rerun_reproduces_a_small_suite(original, tmp_path):
    out = rerun(original, tmp_path, jobs=2, isolate=False)
    assert out.run_dir.parent.parent == tmp_path and out.run_dir != original
    assert len(out.table) == 6  # 3 methods x 2 seeds, matched cell by cell
    assert sorted(out.table["seed"].unique()) == [0, 2]  # the manifest's seeds were used
    assert out.table["verdict"].tolist() == ["identical"] * 6, rerun_text(out)
    assert out.reproduced
    assert rerun_text(out).splitlines()[-1] == "REPRODUCED: 6 cells (6 identical)"


def _copy(original, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(original, copy)
    return copy


def _reseal(record, doc, embedding=None):
    """Write a changed record as a run would have (sealed), so it stands for a run that differs."""
    if embedding is not None:
        doc["embedding"] = array_facts(embedding)
    record.write_text(json.dumps(seal(doc)))


def test_a_changed_embedding_is_reported(original, tmp_path):
    copy = _copy(original, tmp_path)
    key = RunFolder(copy).scores["key"].iloc[0]
    path = copy / "embeddings" / f"{key}.npy"
    Y = np.load(path)
    Y[3, 1] += 1e-6
    np.save(path, Y)
    record = copy / "cells" / f"{key}.json"
    _reseal(record, json.loads(record.read_text()), Y)
    table = compare_cells(RunFolder(original), RunFolder(copy))
    row = table[table["verdict"] != "identical"]
    assert len(row) == 1 and row["verdict"].iloc[0] == "different"
    assert row["where"].iloc[0] == "embedding"
    assert row["largest_difference"].iloc[0] == pytest.approx(1e-6, rel=1e-6)


def test_round_off_counts_as_equal_within_tolerance(original, tmp_path):
    copy = _copy(original, tmp_path)
    record = next((copy / "cells").glob("*.json"))
    doc = json.loads(record.read_text())
    doc["values"]["stress"] += 1e-12
    _reseal(record, doc)
    table = compare_cells(RunFolder(original), RunFolder(copy))
    changed = table[table["verdict"] != "identical"]
    assert changed["verdict"].tolist() == ["equal within 1e-9"]
    assert changed["where"].tolist() == ["stress"]


def test_rerun_of_a_folder_that_is_not_a_run(tmp_path):
    with pytest.raises(InputError) as err:
        rerun(tmp_path, tmp_path / "out")
    assert "\n" not in str(err.value) and "no manifest.json" in str(err.value)
