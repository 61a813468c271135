"""Scoring embeddings made elsewhere: ``embedding_file`` entries, ``foldbench score``, AnnData."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness

from harness.cli import main
from harness.datasets import load_dataset
from harness.errors import InputError
from harness.methods import METHODS
from harness.run import plan
from harness.run.cache import cache_key
from harness.suite import load_datasets, load_suite

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def iris_files(tmp_path):
    """Iris as a table with an id column, and its PCA written aligned, shuffled and as .npy.

    Iris is measured to 0.1 cm, so many distances tie; a jitter far below that resolution
    breaks the ties, so that the engine's documented tie rule and scikit-learn's order agree.
    """
    iris = load_iris()
    X = iris.data + np.random.default_rng(1).normal(scale=1e-6, size=iris.data.shape)
    target = iris.target
    ids = [f"flower-{i:03d}" for i in range(len(X))]
    table = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    table.insert(0, "flower", ids)
    table["species"] = target
    table.to_csv(tmp_path / "iris.csv", index=False)
    Y = PCA(2).fit_transform(X)
    np.save(tmp_path / "pca.npy", Y)
    pd.DataFrame({"flower": ids, "x": Y[:, 0], "y": Y[:, 1]}).to_csv(tmp_path / "aligned.csv", index=False)
    order = np.random.default_rng(0).permutation(len(X))
    shuffled = pd.DataFrame({"flower": np.array(ids)[order], "x": Y[order, 0], "y": Y[order, 1]})
    shuffled.to_csv(tmp_path / "shuffled.csv", index=False)
    return tmp_path, X, Y


def _suite(folder: Path, methods: str, dataset_params: str = "id_column: flower, label: species") -> Path:
    path = folder / "s.yaml"
    path.write_text(
        textwrap.dedent(f"""\
        name: files
        seeds: 1
        datasets:
          - use: table
            name: iris
            params: {{path: iris.csv, {dataset_params}}}
        methods:
        """)
        + textwrap.indent(textwrap.dedent(methods), "  ")
        + "measures: {k: [10]}\n"
    )
    return path


def _scores(folder: Path, suite: Path) -> pd.DataFrame:
    from harness.api import run_suite

    outcome = run_suite(suite, folder / "out", jobs=1, cache=None, isolate=False)
    return outcome.scores.set_index("method")


def test_shuffled_rows_with_ids_score_like_the_aligned_file(iris_files):
    folder, X, Y = iris_files
    suite = _suite(
        folder,
        """\
        - {use: embedding_file, name: npy, params: {path: pca.npy}}
        - {use: embedding_file, name: aligned, params: {path: aligned.csv, id_column: flower}}
        - {use: embedding_file, name: shuffled, params: {path: shuffled.csv, id_column: flower}}
        """,
    )
    scores = _scores(folder, suite)
    assert set(scores["status"]) == {"ok"}
    measures = ["trustworthiness@10", "continuity@10", "stress", "knn_accuracy@10"]
    for name in ("aligned", "shuffled"):
        np.testing.assert_allclose(
            scores.loc[name, measures].astype(float), scores.loc["npy", measures].astype(float), atol=1e-12
        )
    # Outside reference: scikit-learn's trustworthiness of the same PCA (Venna and Kaski 2001).
    assert scores.loc["shuffled", "trustworthiness@10"] == pytest.approx(
        trustworthiness(X, Y, n_neighbors=10), abs=1e-12
    )


def test_a_missing_id_is_refused_naming_it(iris_files):
    folder, _, _ = iris_files
    shuffled = pd.read_csv(folder / "shuffled.csv")
    shuffled[shuffled.flower != "flower-042"].to_csv(folder / "short.csv", index=False)
    suite = _suite(folder, "- {use: embedding_file, params: {path: short.csv, id_column: flower}}\n")
    s = load_suite(suite)
    with pytest.raises(InputError, match="'flower-042' is missing"):
        plan(s, load_datasets(s))


def test_a_row_count_mismatch_and_a_dimension_mismatch_are_refused(iris_files):
    folder, _, Y = iris_files
    np.save(folder / "few.npy", Y[:100])
    np.save(folder / "three.npy", np.column_stack([Y, Y[:, 0]]))
    suite = _suite(
        folder,
        """\
        - {use: embedding_file, name: few, params: {path: few.npy}}
        - {use: embedding_file, name: three, params: {path: three.npy}}
        """,
    )
    s = load_suite(suite)
    with pytest.raises(InputError) as info:
        plan(s, load_datasets(s))
    assert (
        "methods[0] (few)" in str(info.value)
        and "150 rows" in str(info.value)
        and "got 100" in str(info.value)
    )
    suite = _suite(folder, "- {use: embedding_file, name: three, params: {path: three.npy}}\n")
    s = load_suite(suite)
    with pytest.raises(InputError, match=r"3 coordinate columns.*dimensions: 3"):
        plan(s, load_datasets(s))


def test_a_missing_file_is_refused_by_validate(iris_files, capsys):
    folder, _, _ = iris_files
    suite = _suite(folder, "- {use: embedding_file, params: {path: nowhere.npy}}\n")
    assert main(["validate", str(suite)]) == 2
    err = capsys.readouterr().err.strip()
    assert "methods[0].params.path" in err and "not found" in err and len(err.splitlines()) == 1


def test_an_edited_file_changes_the_cache_key(iris_files):
    folder, _, Y = iris_files
    suite = _suite(folder, "- {use: embedding_file, params: {path: pca.npy}}\n")
    s = load_suite(suite)
    cells, _ = plan(s, load_datasets(s))
    before = cache_key(cells[0])
    np.save(folder / "pca.npy", Y * 2)
    assert cache_key(cells[0]) != before


def test_id_column_is_not_a_feature(iris_files):
    folder, X, _ = iris_files
    ds = load_dataset("table", {"path": str(folder / "iris.csv"), "id_column": "flower", "label": "species"})
    np.testing.assert_allclose(ds.X, X, rtol=1e-14)  # through CSV text and back
    assert list(ds.info["row_ids"][:2]) == ["flower-000", "flower-001"]
    with pytest.raises(InputError, match="a column named"):
        load_dataset("table", {"path": str(folder / "iris.csv"), "id_column": "nope"})


def test_score_command_ranks_files_against_a_table(iris_files, capsys):
    folder, _, _ = iris_files
    rc = main(
        [
            "score",
            str(folder / "iris.csv"),
            str(folder / "pca.npy"),
            str(folder / "shuffled.csv"),
            "--label",
            "species",
            "--id-column",
            "flower",
            "--out",
            str(folder / "runs"),
            "--no-report",
        ]
    )
    out = capsys.readouterr().out
    assert rc == 0
    assert "pca " in out and "shuffled " in out and "2 cells (2 ok)" in out


def test_score_command_refuses_a_file_that_does_not_match(iris_files, capsys):
    folder, _, Y = iris_files
    np.save(folder / "few.npy", Y[:10])
    rc = main(["score", str(folder / "iris.csv"), str(folder / "few.npy"), "--out", str(folder / "r")])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and "few" in err and "150 rows" in err and len(err.splitlines()) == 1
    assert not (folder / "r").exists()  # nothing written for bad input


def test_h5ad_obsm_embeddings_score_like_the_npy_files(tmp_path):
    anndata = pytest.importorskip("anndata")
    X = load_iris().data
    Y = PCA(2).fit_transform(X)
    other = PCA(3).fit_transform(X)[:, [0, 2]]
    adata = anndata.AnnData(X=X.astype(np.float32).astype(np.float64))
    adata.obs_names = [f"cell{i}" for i in range(len(X))]
    adata.obs["species"] = pd.Categorical(load_iris().target.astype(str))
    adata.obsm["X_pca"] = Y
    adata.obsm["X_other"] = other
    adata.write_h5ad(tmp_path / "cells.h5ad")
    np.save(tmp_path / "pca.npy", Y)
    np.save(tmp_path / "other.npy", other)
    np.save(tmp_path / "cells.npy", adata.X)  # the same float64 values, no text round trip
    a = main(
        [
            "score",
            str(tmp_path / "cells.h5ad"),
            "--obsm",
            "X_pca",
            "--obsm",
            "X_other",
            "--out",
            str(tmp_path / "h"),
            "--no-report",
            "--quiet",
        ]
    )
    b = main(
        [
            "score",
            str(tmp_path / "cells.npy"),
            str(tmp_path / "pca.npy"),
            str(tmp_path / "other.npy"),
            "--out",
            str(tmp_path / "n"),
            "--no-report",
            "--quiet",
        ]
    )
    assert a == b == 0
    h = pd.read_csv(next((tmp_path / "h").rglob("scores.csv"))).set_index("method")
    n = pd.read_csv(next((tmp_path / "n").rglob("scores.csv"))).set_index("method")
    cols = ["trustworthiness@10", "continuity@10", "stress", "shepard_spearman"]
    np.testing.assert_allclose(
        h.loc["X_pca", cols].astype(float), n.loc["pca", cols].astype(float), atol=1e-12
    )
    np.testing.assert_allclose(
        h.loc["X_other", cols].astype(float), n.loc["other", cols].astype(float), atol=1e-12
    )


def test_without_anndata_an_h5ad_is_refused_with_the_install_line(tmp_path, monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "anndata", None)
    (tmp_path / "cells.h5ad").write_bytes(b"not really")
    rc = main(["score", str(tmp_path / "cells.h5ad"), "--obsm", "X_umap", "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and "pip install 'foldbench[anndata]'" in err and len(err.splitlines()) == 1


@pytest.mark.slow
def test_the_bundled_suite_scores_the_fleet_exports(tmp_path):
    data = tmp_path / "data"
    subprocess.run(
        [sys.executable, str(REPO / "suites" / "data" / "make_fleet_embeddings.py"), str(data)],
        check=True,
        timeout=600,
    )
    suite = tmp_path / "own_embeddings.yaml"
    suite.write_text((REPO / "suites" / "own_embeddings.yaml").read_text())
    s = load_suite(suite)
    cells, refused = plan(s, load_datasets(s))
    assert not refused and len(cells) == 3
    assert METHODS["embedding_file"].content_identity is not None


def test_one_file_per_seed_through_the_seed_field(iris_files):
    folder, _, Y = iris_files
    np.save(folder / "emb_0.npy", Y)
    np.save(folder / "emb_1.npy", Y[:, ::-1] * 2.0)  # an isometry and a scaling: the same local scores
    suite = _suite(folder, "- {use: embedding_file, name: per_seed, params: {path: 'emb_{seed}.npy'}}\n")
    suite.write_text(suite.read_text().replace("seeds: 1", "seeds: 2"))
    scores = _scores(folder, suite).reset_index().set_index("seed")
    assert list(scores.index) == [0, 1] and set(scores["status"]) == {"ok"}
    assert (scores["copy_of"].fillna("") == "").all()  # a file per seed: each seed read, none copied
    assert scores.loc[0, "trustworthiness@10"] == pytest.approx(
        scores.loc[1, "trustworthiness@10"], abs=1e-12
    )
    (folder / "emb_1.npy").unlink()
    with pytest.raises(InputError, match=r"emb_1\.npy: expected an existing file"):
        s = load_suite(suite)
        plan(s, load_datasets(s))


def test_a_file_matching_no_dataset_stops_the_suite(iris_files, capsys):
    folder, _, Y = iris_files
    bad = Y.copy()
    bad[7, 1] = np.nan
    np.save(folder / "nan.npy", bad)
    suite = _suite(folder, "- {use: embedding_file, params: {path: nan.npy}}\n")
    assert main(["validate", str(suite)]) == 2
    err = capsys.readouterr().err.strip()
    assert (
        "methods[0]" in err and "finite coordinates" in err and "row 8" in err and len(err.splitlines()) == 1
    )


def test_extra_ids_are_named(iris_files):
    folder, _, _ = iris_files
    shuffled = pd.read_csv(folder / "shuffled.csv")
    extra = pd.DataFrame({"flower": ["stranger"], "x": [0.0], "y": [0.0]})
    pd.concat([shuffled, extra]).to_csv(folder / "extra.csv", index=False)
    suite = _suite(folder, "- {use: embedding_file, params: {path: extra.csv, id_column: flower}}\n")
    s = load_suite(suite)
    with pytest.raises(InputError, match="first 'stranger'"):
        plan(s, load_datasets(s))
