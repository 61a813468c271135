"""Per-point defects: each point's own trustworthiness and continuity terms, stored and drawn."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import make_swiss_roll
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness

from harness.metrics import score


@pytest.fixture(scope="module")
def roll():
    X, _ = make_swiss_roll(500, noise=0.05, random_state=0)
    return X, PCA(2).fit_transform(X)


def test_the_mean_of_point_terms_is_the_measure_and_matches_scikit_learn(roll):
    X, Y = roll
    result = score(X, Y, ks=[5, 12])
    pts = result.points
    assert pts is not None and len(pts) == 500 and list(pts["point"]) == list(range(500))
    for k in (5, 12):
        for name in ("trustworthiness", "continuity", "knn_recall"):
            assert pts[f"{name}@{k}"].mean() == pytest.approx(result.values[f"{name}@{k}"], abs=1e-12)
        # scikit-learn's trustworthiness (Venna and Kaski 2001); continuity is trustworthiness
        # with the two spaces swapped (Venna and Kaski 2006).
        assert pts[f"trustworthiness@{k}"].mean() == pytest.approx(
            trustworthiness(X, Y, n_neighbors=k), abs=1e-12
        )
        assert pts[f"continuity@{k}"].mean() == pytest.approx(trustworthiness(Y, X, n_neighbors=k), abs=1e-12)
        assert pts[f"trustworthiness@{k}"].between(0, 1).all()


def test_a_planted_defect_is_found_where_it_was_planted():
    # Constructed check, answer known by construction: a 30 x 30 grid embedded as itself is
    # perfect; moving a 4 x 4 patch to the far side breaks neighbourhoods only at the patch's
    # old place and around its new one.
    g = np.stack(np.meshgrid(np.arange(30.0), np.arange(30.0)), axis=-1).reshape(-1, 2)
    g += np.random.default_rng(0).normal(scale=1e-3, size=g.shape)  # no distance ties
    Y = g.copy()
    patch = np.flatnonzero((g[:, 0] < 3.5) & (g[:, 1] < 3.5))
    Y[patch] += [40.0, 40.0]
    defect = 1.0 - score(g, Y, ks=[8]).points["trustworthiness@8"].to_numpy()
    assert defect.sum() > 0
    # The patch and the points the patch now sits among (its new embedding neighbours).
    near_new = np.flatnonzero(np.min(np.linalg.norm(Y[:, None, :] - Y[patch][None], axis=2), axis=1) < 4.5)
    old_ring = np.flatnonzero(np.min(np.linalg.norm(g[:, None, :] - g[patch][None], axis=2), axis=1) < 4.5)
    involved = np.union1d(np.union1d(patch, near_new), old_ring)
    assert defect[involved].sum() >= 0.9 * defect.sum()
    assert len(involved) < 0.15 * len(g)


def test_a_run_stores_point_tables_and_reads_them_back(tmp_path):
    from harness.api import load_run, run_suite

    suite = tmp_path / "s.yaml"
    suite.write_text(
        "name: p\nseeds: 1\ndatasets: [{use: iris}]\n"
        "methods: [{use: pca}, {use: random_projection}]\nmeasures: {k: [10]}\n"
    )
    outcome = run_suite(suite, tmp_path / "out", jobs=1, cache=None, isolate=False)
    run = load_run(outcome.run_dir)
    for key in run.scores["key"]:
        pts = run.points(key)
        assert pts is not None and len(pts) == 150
        row = run.scores.set_index("key").loc[key]
        assert pts["trustworthiness@10"].mean() == pytest.approx(row["trustworthiness@10"], abs=1e-12)
    # A damaged table is not used (fail closed), a missing one is None.
    key = run.scores["key"].iloc[0]
    path = run.path / "points" / f"{key}.csv"
    path.write_text(path.read_text().replace("\n1,", "\n0,", 1))  # a repeated point index
    assert run.points(key) is None
    assert run.points("0" * 16) is None


def test_the_report_shows_where_each_embedding_fails(tmp_path):
    from harness.api import run_suite
    from harness.report import write_report

    suite = tmp_path / "s.yaml"
    suite.write_text(
        "name: p\nseeds: 1\ndatasets: [{use: iris}]\n"
        "methods: [{use: pca}, {use: random_projection}]\nmeasures: {k: [10]}\n"
    )
    outcome = run_suite(suite, tmp_path / "out", jobs=1, cache=None, isolate=False)
    page = write_report(outcome.run_dir).read_text()
    assert "Where each embedding fails" in page and "per-point defects on iris" in page
    assert "worst 5% of points carry" in page and "Mean trustworthiness defect by class" in page
    assert (outcome.run_dir / "figures" / "points_iris.png").is_file()


def test_pointwise_gives_each_points_defect_and_counts(roll):
    from harness.metrics import pointwise

    X, Y = roll
    table = pointwise(X, Y, k=7)
    assert list(table.columns) == [
        "point",
        "trustworthiness_defect",
        "continuity_defect",
        "knn_recall",
        "intruders",
        "missing",
    ]
    # The mean defect is the measure's defect: 1 - scikit-learn's trustworthiness (Venna and Kaski 2001).
    assert table["trustworthiness_defect"].mean() == pytest.approx(
        1 - trustworthiness(X, Y, n_neighbors=7), abs=1e-12
    )
    assert table["continuity_defect"].mean() == pytest.approx(
        1 - trustworthiness(Y, X, n_neighbors=7), abs=1e-12
    )
    # Intruders: embedding neighbours outside the data neighbourhood, counted directly with scikit-learn.
    from sklearn.neighbors import NearestNeighbors

    nx = NearestNeighbors(n_neighbors=8).fit(X).kneighbors(X, return_distance=False)[:, 1:]
    ny = NearestNeighbors(n_neighbors=8).fit(Y).kneighbors(Y, return_distance=False)[:, 1:]
    direct = np.array([len(set(b) - set(a)) for a, b in zip(nx, ny)])
    np.testing.assert_array_equal(table["intruders"].to_numpy(), direct)
