"""Held-out scoring: the split, the out-of-sample maps, the heldout_ measures and their refusals."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import special_ortho_group
from sklearn.decomposition import PCA
from sklearn.model_selection import train_test_split
from sklearn.neighbors import NearestNeighbors

from harness.api import run_suite
from harness.cli import main
from harness.compare import check_runs, evaluate_expectations
from harness.datasets import load_dataset
from harness.methods import knn_interpolation
from harness.metrics import MEASURES, placement_measures
from harness.report import write_report
from harness.run.folder import RunFolder
from harness.run.integrity import value_problem
from harness.suite import parse_suite

HELDOUT_SUITE = """\
name: held
seeds: [0, 1]
holdout: 0.2
datasets:
  - use: iris
  - use: rolled_sheet
    name: roll
    params: {n: 200}
    holdout: 50
methods:
  - use: pca
  - use: random_projection
  - use: tsne
    params: {perplexity: 10}
  - use: mds
    name: mds_knn
    out_of_sample: knn_interpolation
    params: {max_iter: 60}
measures:
  k: [5]
  rank_by: [trustworthiness, heldout_trustworthiness, heldout_placement]
expect:
  - {method: pca, measure: heldout_placement@5, at_least: 0.0}
  - {method: pca, dataset: iris, measure: heldout_knn_accuracy@5, at_least: 0.5}
"""


@pytest.fixture(scope="module")
def held_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("held-run")
    outcome = run_suite(parse_suite(HELDOUT_SUITE, str(out / "held.yaml")), out, jobs=2, isolate=False)
    assert outcome.failed == 0, outcome.counts
    write_report(outcome.run_dir)
    return outcome.run_dir


def _records(run_dir: Path) -> list[dict]:
    return [json.loads(p.read_text()) for p in sorted((run_dir / "cells").glob("*.json"))]


def _record(run_dir: Path, dataset: str, method: str, seed: int) -> dict:
    (found,) = [
        r
        for r in _records(run_dir)
        if r["cell"]["dataset"] == dataset and r["cell"]["method"] == method and r["cell"]["seed"] == seed
    ]
    return found


def test_pca_places_held_out_points_like_scikit_learn(held_run):
    # reference: scikit-learn PCA(2).fit(train).transform(test) on the same rows
    record = _record(held_run, "iris", "pca", 1)
    test = np.array(record["heldout"]["rows"])
    X = load_dataset("iris", {}).X
    train = np.setdiff1d(np.arange(len(X)), test)
    expected = PCA(2, svd_solver="full").fit(X[train]).transform(X[test])
    got = RunFolder.open(held_run).embedding(record["key"])[test]
    assert np.abs(got - expected).max() <= 1e-12


def test_split_is_the_same_for_every_method_and_stratified(held_run):
    X, labels = load_dataset("iris", {}).X, load_dataset("iris", {}).labels
    for seed in (0, 1):
        splits = {
            m: _record(held_run, "iris", m, seed)["heldout"]["rows"] for m in ("pca", "tsne", "mds_knn")
        }
        assert splits["pca"] == splits["tsne"] == splits["mds_knn"]
        # reference: scikit-learn's train_test_split with stratify and random_state = seed
        _, expected = train_test_split(np.arange(len(X)), test_size=0.2, stratify=labels, random_state=seed)
        assert splits["pca"] == sorted(expected.tolist())
        held = np.asarray(labels)[splits["pca"]]
        for cls in np.unique(labels):
            # iris has 50 rows per class (Fisher 1936): 0.2 of them is 10, within one
            assert abs(int((held == cls).sum()) - 0.2 * int((np.asarray(labels) == cls).sum())) <= 1
    assert (
        _record(held_run, "iris", "pca", 0)["heldout"]["rows"]
        != _record(held_run, "iris", "pca", 1)["heldout"]["rows"]
    )
    roll = _record(held_run, "roll", "pca", 0)["heldout"]
    assert (roll["n_train"], roll["n_heldout"]) == (150, 50)  # a count of 50 of n=200


def test_method_without_transform_has_empty_heldout_columns_and_the_reason(held_run):
    record = _record(held_run, "iris", "tsne", 0)
    assert record["heldout"]["reason"] == "no out-of-sample map" and record["heldout"]["map"] == ""
    assert not [k for k in record["values"] if k.startswith("heldout_")]
    assert record["values"]["trustworthiness@5"] > 0  # in-sample values on the training rows stand
    summary = pd.read_csv(held_run / "summary.csv")
    row = summary[(summary["dataset"] == "iris") & (summary["method"] == "tsne")].iloc[0]
    assert pd.isna(row["heldout_trustworthiness@5"]) and pd.isna(row["gap_trustworthiness@5"])
    assert row["heldout_reason"] == "no out-of-sample map"


def test_knn_interpolation_is_recorded_and_labelled(held_run):
    assert _record(held_run, "iris", "mds_knn", 0)["heldout"]["map"] == "knn_interpolation"
    assert _record(held_run, "iris", "pca", 0)["heldout"]["map"] == "transform"
    summary = pd.read_csv(held_run / "summary.csv").set_index(["dataset", "method"])
    assert summary.loc[("iris", "mds_knn"), "out_of_sample"] == "knn_interpolation"
    assert np.isfinite(summary.loc[("iris", "mds_knn"), "heldout_trustworthiness@5"])
    ranking = (held_run / "ranking.md").read_text()
    assert "## Held-out points" in ranking and "| knn_interpolation" in ranking
    page = (held_run / "report.html").read_text()
    assert "<h2>Held-out points</h2>" in page
    # one sentence per dataset names the configuration with the best held-out trustworthiness
    held = summary["heldout_trustworthiness@5"].dropna()
    for dataset in ("iris", "roll"):
        best = held.loc[dataset].idxmax()
        assert f"On {dataset}, {best} places new points best" in ranking
        assert f"On {dataset}, {best} places new points best" in page


def test_a_method_without_a_map_ranks_last_on_a_heldout_measure(held_run):
    # our ranking rule (docs/notes/heldout.md): no held-out value is the worst rank, never a skipped one
    summary = pd.read_csv(held_run / "summary.csv")
    iris = summary[summary["dataset"] == "iris"].set_index("method")
    ranks = iris["rank_heldout_trustworthiness@5"]
    assert ranks["tsne"] == len(iris) and ranks.drop("tsne").max() < len(iris)


def test_gap_is_in_sample_minus_held_out(held_run):
    summary = pd.read_csv(held_run / "summary.csv")
    gap = summary["trustworthiness@5"] - summary["heldout_trustworthiness@5"]
    assert np.allclose(summary["gap_trustworthiness@5"], gap, equal_nan=True)


def test_heldout_measures_are_measures_like_any_other(held_run):
    for name in ("heldout_trustworthiness", "heldout_placement", "heldout_knn_accuracy", "heldout_stress"):
        assert name in MEASURES
    assert MEASURES["heldout_stress"].higher_is_better is False
    suite = RunFolder.open(held_run).suite
    results = evaluate_expectations(suite, RunFolder.open(held_run).scores)
    assert results and all(r.passed for r in results)
    assert check_runs(held_run, held_run).passed
    # ranges: placement and an accuracy are fractions, stress-1 at most 1 (see integrity.MEASURE_RANGES)
    assert value_problem("heldout_placement@5", 1.5) and value_problem("heldout_knn_accuracy@5", -0.1)
    assert value_problem("heldout_stress", 1.2) and value_problem("heldout_placement@5", 0.4) is None


def test_a_run_folder_with_damaged_heldout_values_is_refused(held_run, tmp_path):
    import shutil

    from harness.run.integrity import seal

    copy = tmp_path / "copy"
    shutil.copytree(held_run, copy)
    path = next(p for p in (copy / "cells").glob("*.json") if "heldout_placement@5" in p.read_text())
    doc = json.loads(path.read_text())
    doc["values"]["heldout_placement@5"] = 3.0
    doc.pop("sha256", None)
    path.write_text(json.dumps(seal(doc)))
    keys = RunFolder.open(copy).finished_keys()
    assert doc["key"] not in keys


def test_keys_of_cells_without_holdout_do_not_change():
    from harness.run.cells import Cell

    # the key is the hash of the seven original fields when no holdout is set (old run folders resume)
    cell = Cell("iris", "pca", "pca", (), 0, 2, "f" * 16)
    assert set(cell.as_dict()) == {
        "dataset",
        "method",
        "use",
        "params",
        "seed",
        "dimensions",
        "data_fingerprint",
    }
    assert Cell("iris", "pca", "pca", (), 0, 2, "f" * 16, 0.2).key != cell.key


def test_knn_interpolation_is_the_inverse_distance_weighted_mean():
    # the documented formula, checked against a direct computation with scikit-learn's neighbours
    rng = np.random.default_rng(3)
    X_train, Y_train, X_new = rng.normal(size=(40, 5)), rng.normal(size=(40, 2)), rng.normal(size=(7, 5))
    dist, idx = NearestNeighbors(n_neighbors=10).fit(X_train).kneighbors(X_new)
    w = (1 / dist) / (1 / dist).sum(axis=1, keepdims=True)
    expected = np.stack([w[i] @ Y_train[idx[i]] for i in range(7)])
    assert np.allclose(knn_interpolation(X_train, Y_train, X_new), expected, rtol=0, atol=1e-12)
    # a new point on a training point lands on that point's embedding
    assert np.allclose(knn_interpolation(X_train, Y_train, X_train[:3]), Y_train[:3])


def test_placement_does_not_change_under_rotation_scaling_and_translation():
    rng = np.random.default_rng(5)
    X, Y = rng.normal(size=(80, 6)), rng.normal(size=(80, 2))
    base = placement_measures(X[:60], Y[:60], X[60:], Y[60:], [5])
    R = special_ortho_group.rvs(6, random_state=1)
    Xt = 3.0 * X @ R + 7.0
    moved = placement_measures(Xt[:60], Y[:60] * 0.25 - 2, Xt[60:], Y[60:] * 0.25 - 2, [5])
    assert moved == pytest.approx(base, abs=1e-12)
    # an embedding equal to the data (2-D) keeps every new point's training neighbours: placement 1
    same = placement_measures(Y[:60], Y[:60], Y[60:], Y[60:], [5])
    assert same["heldout_placement@5"] == 1.0


@pytest.mark.parametrize(
    ("value", "words"),
    [
        ("0", "fraction in (0, 1)"),
        ("1.0", "fraction in (0, 1)"),
        ("1.5", "fraction in (0, 1)"),
        ("-0.2", "fraction in (0, 1)"),
        ("abc", "fraction in (0, 1)"),
        ("true", "fraction in (0, 1)"),
        ("140", "leaves 10 training and 140 held-out"),
        ("0.05", "leaves 142 training and 8 held-out"),
    ],
)
def test_bad_holdout_is_refused_with_one_line(write_suite, capsys, value, words):
    path = write_suite(
        f"name: bad\nholdout: {value}\ndatasets: [iris]\nmethods: [pca]\nmeasures: {{k: [5]}}\n"
    )
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and words in err and "holdout" in err
    if value in ("140", "0.05"):
        assert "iris" in err and "n=150" in err


def test_per_dataset_holdout_overrides_and_is_checked(write_suite, capsys):
    path = write_suite(
        "name: bad\nholdout: 0.2\ndatasets:\n  - use: iris\n  - use: wine\n    holdout: 170\n"
        "methods: [pca]\nmeasures: {k: [5]}\n"
    )
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "datasets[1] ('wine') holdout" in err and "leaves 8 training and 170 held-out" in err


def test_holdout_on_a_distance_matrix_is_refused(write_suite, capsys, tmp_path):
    rng = np.random.default_rng(0)
    P = rng.normal(size=(30, 3))
    D = np.linalg.norm(P[:, None] - P[None], axis=-1)
    pd.DataFrame(D).to_csv(tmp_path / "d.csv", index=False, header=False)
    path = write_suite(
        "name: bad\nholdout: 0.3\ndatasets:\n  - use: distance_matrix\n    name: dm\n"
        "    params: {path: d.csv}\nmethods: [mds]\nmeasures: {k: [3]}\n"
    )
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "('dm') holdout" in err and "distance matrix" in err


def test_bad_out_of_sample_is_refused(write_suite, capsys):
    path = write_suite("name: bad\ndatasets: [iris]\nmethods:\n  - {use: tsne, out_of_sample: nearest}\n")
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "methods[0].out_of_sample" in err and "knn_interpolation" in err


@pytest.mark.slow
def test_parametric_tsne_generalises_better_than_pca_on_digits(tmp_path):
    # from memory (van der Maaten 2009): a parametric t-SNE keeps the neighbourhoods of new digits
    # far better than a linear projection; we require a margin of at least 0.05 at k = 10
    suite = parse_suite(
        "name: digits-held\nseeds: [0]\nholdout: 0.2\ndatasets: [digits]\n"
        "methods: [pca, parametric_tsne]\nmeasures: {k: [10]}\n",
        str(tmp_path / "d.yaml"),
    )
    outcome = run_suite(suite, tmp_path, jobs=2, isolate=False)
    assert outcome.failed == 0, outcome.counts
    summary = pd.read_csv(outcome.run_dir / "summary.csv").set_index("method")
    t = summary["heldout_trustworthiness@10"]
    print(f"held-out trustworthiness@10: parametric_tsne {t['parametric_tsne']:.4f}, pca {t['pca']:.4f}")
    assert t["parametric_tsne"] - t["pca"] >= 0.05
