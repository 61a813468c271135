"""Tests of the method registry, the fitting call, plug-ins and our Sammon mapping."""

from __future__ import annotations

import logging

import numpy as np
import pytest
from scipy.spatial.distance import cdist, pdist
from scipy.stats import spearmanr
from sklearn.datasets import load_digits, load_iris, make_swiss_roll
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness
from sklearn.model_selection import cross_val_score
from sklearn.neighbors import KNeighborsClassifier

from harness.datasets._types import Dataset
from harness.errors import InputError
from harness.methods import METHODS, DegenerateEmbedding, fit_embedding, get_method_spec
from harness.methods.sammon import SammonMapping
from harness.params import validate_params


def defaults(name: str) -> dict:
    return {p.name: p.default for p in METHODS[name].params}


def build(name: str, n_components: int = 2, seed: int = 0, precomputed: bool = False, **params):
    return METHODS[name].build(n_components, seed, precomputed, **{**defaults(name), **params})


def sammon_stress(D: np.ndarray, Y: np.ndarray) -> float:
    # Sammon (1969), eq. 1: E = (1 / sum d) * sum (d - e)^2 / d over pairs i<j.
    d, e = D[np.triu_indices(len(D), 1)], pdist(Y)
    return float(np.sum((d - e) ** 2 / d) / d.sum())


@pytest.fixture(scope="module")
def roll():
    X, t = make_swiss_roll(800, random_state=0)
    # Intrinsic coordinates: arc length of the spiral r = t (closed form of
    # integral sqrt(1 + t^2) dt) and the height, column 1 in scikit-learn's generator.
    arc = 0.5 * (t * np.sqrt(1 + t**2) + np.arcsinh(t))
    return X, np.column_stack([arc, X[:, 1]])


@pytest.fixture(scope="module")
def small():
    rng = np.random.default_rng(7)
    return rng.normal(size=(90, 5))


# ---------------------------------------------------------------- reference results


def test_pca_iris_explained_variance():
    # Iris PCA explained-variance ratios 0.9246 and 0.0531 (from memory; widely reproduced,
    # e.g. in scikit-learn's PCA example output).
    ratios = build("pca").fit(load_iris().data).explained_variance_ratio_
    np.testing.assert_allclose(ratios, [0.9246, 0.0531], atol=5e-4)


def test_isomap_recovers_rolled_sheet_better_than_pca(roll):
    # Tenenbaum, de Silva and Langford (2000): Isomap unrolls the swiss roll, PCA cannot.
    X, truth = roll
    rho = {
        name: spearmanr(pdist(truth), pdist(build(name).fit_transform(X)))[0] for name in ("pca", "isomap")
    }
    assert rho["isomap"] > 0.95
    assert rho["isomap"] > rho["pca"] + 0.3


def test_sammon_lowers_stress_below_pca_start(roll):
    # Sammon (1969): the iteration decreases E from its start configuration.
    X = roll[0][:400]
    D = cdist(X, X)
    start = sammon_stress(D, PCA(n_components=2).fit_transform(X))
    model = SammonMapping(max_iter=100).fit(X)
    assert model._stress_history[0] == pytest.approx(start, rel=1e-9)
    assert model.stress_ < 0.9 * start
    assert model.stress_ == pytest.approx(sammon_stress(D, model.embedding_), rel=1e-9)


def test_sammon_stress_never_increases(roll):
    model = SammonMapping(max_iter=100, init="random", random_state=3).fit(roll[0][:400])
    history = model._stress_history
    assert len(history) == model.n_iter_ + 1 > 10
    assert np.all(np.diff(history) <= 0)


def test_sammon_from_distances_matches_coordinates(roll):
    X = roll[0][:300]
    from_coords = SammonMapping(max_iter=60).fit_transform(X)
    from_dists = SammonMapping(max_iter=60, metric="precomputed").fit_transform(cdist(X, X))
    np.testing.assert_allclose(from_dists, from_coords, atol=1e-6 * np.abs(from_coords).max())


def test_sammon_keeps_duplicates_together_without_nan():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(40, 4))
    X[10] = X[11] = X[3]
    Y = SammonMapping(max_iter=50).fit_transform(X)
    assert np.all(np.isfinite(Y))
    np.testing.assert_allclose(Y[10], Y[3])
    np.testing.assert_allclose(Y[11], Y[3])


def test_sammon_refuses_all_coincident_points():
    with pytest.raises(ValueError, match="all distances are zero"):
        SammonMapping().fit(np.ones((5, 3)))


@pytest.mark.slow
def test_tsne_beats_random_projection_on_digits():
    # Common practice, no source: t-SNE separates the digit classes far better
    # than a random linear map, locally (trustworthiness, Venna and Kaski 2001,
    # via scikit-learn) and by 5-NN accuracy.
    digits = load_digits()
    pick = np.random.default_rng(0).choice(len(digits.target), 600, replace=False)
    X, y = digits.data[pick], digits.target[pick]
    scores = {}
    for name in ("tsne", "random_projection"):
        Y = build(name).fit_transform(X)
        knn = cross_val_score(KNeighborsClassifier(n_neighbors=5), Y, y, cv=5).mean()
        scores[name] = (trustworthiness(X, Y, n_neighbors=10), knn)
    assert scores["tsne"][0] > scores["random_projection"][0] + 0.05
    assert scores["tsne"][1] > scores["random_projection"][1] + 0.3


# ---------------------------------------------------------------- every registered method

# Shorter runs where the default is sized for real data; plumbing only.
QUICK = {"tsne": {"max_iter": 250}, "mds": {"max_iter": 50}}


# Methods of optional packages are fitted in tests/test_methods_modern.py (slow); an embedding file
# fits nothing (tests/test_embedding_files.py).
FITTED_HERE = sorted(m for m, s in METHODS.items() if not s.requires and m != "embedding_file")


@pytest.mark.parametrize("name", FITTED_HERE)
def test_method_fits_with_right_shape_and_is_reproducible(name, small):
    data = Dataset("noise", X=small)
    first = fit_embedding(METHODS[name], data, 2, QUICK.get(name, {}), seed=5)
    again = fit_embedding(METHODS[name], data, 2, QUICK.get(name, {}), seed=5)
    assert first.shape == (90, 2) and first.dtype == np.float64
    np.testing.assert_array_equal(first, again)


@pytest.mark.parametrize("name", [n for n in FITTED_HERE if METHODS[n].accepts_distances])
def test_distance_methods_take_a_distance_matrix(name, small):
    data = Dataset("noise_distances", distances=cdist(small, small))
    Y = fit_embedding(METHODS[name], data, 2, QUICK.get(name, {}), seed=1)
    assert Y.shape == (90, 2) and np.all(np.isfinite(Y))


@pytest.mark.parametrize("name", sorted(n for n, m in METHODS.items() if not m.accepts_distances))
def test_coordinate_methods_refuse_a_distance_matrix(name, small):
    data = Dataset("noise_distances", distances=cdist(small, small))
    with pytest.raises(InputError) as info:
        fit_embedding(METHODS[name], data, 2, {}, seed=1)
    message = str(info.value)
    assert f"'{name}'" in message and "'noise_distances'" in message
    assert "distance matrix" in message and "\n" not in message


def test_builtin_defaults_pass_their_own_checks():
    for name, spec in METHODS.items():
        if name == "embedding_file":  # its path is required and has no default
            continue
        assert validate_params({}, spec.params, name) == defaults(name)


@pytest.mark.parametrize("value, ok", [("auto", True), (200, True), (0, False), ("fast", False)])
def test_tsne_learning_rate_check(value, ok):
    params = METHODS["tsne"].params
    if ok:
        validate_params({"learning_rate": value}, params, "suite.yaml: methods[0]")
    else:
        with pytest.raises(InputError, match=r"methods\[0\]\.learning_rate"):
            validate_params({"learning_rate": value}, params, "suite.yaml: methods[0]")


def test_hessian_lle_needs_enough_neighbours():
    with pytest.raises(InputError, match="n_neighbors >= 6"):
        build("lle", method="hessian", n_neighbors=5)


def test_laplacian_eigenmaps_rbf_needs_coordinates(small):
    data = Dataset("noise_distances", distances=cdist(small, small))
    with pytest.raises(InputError, match="rbf"):
        fit_embedding(METHODS["laplacian_eigenmaps"], data, 2, {"affinity": "rbf"}, seed=0)


def test_tsne_above_three_dimensions_uses_exact_gradient():
    assert build("tsne", n_components=4).method == "exact"
    assert build("tsne", n_components=2, precomputed=True).init == "random"


# ---------------------------------------------------------------- plug-ins


def test_plugin_resolves_and_receives_components_and_seed(small):
    spec = get_method_spec("plugins_for_tests:ScaledProjection", "suite.yaml: methods[2]")
    assert [p.name for p in spec.params] == ["scale"]
    assert spec.randomized and not spec.accepts_distances and spec.family == "other"
    data = Dataset("noise", X=small)
    Y = fit_embedding(spec, data, 3, {"scale": 2.0}, seed=11)
    expected = 2.0 * small @ np.random.default_rng(11).standard_normal((5, 3))
    np.testing.assert_allclose(Y, expected)


def test_plugin_factory_function(small):
    spec = get_method_spec("plugins_for_tests:make_projection")
    assert fit_embedding(spec, Dataset("noise", X=small), 2, {}, seed=0).shape == (90, 2)


def test_plugin_declaring_distances_gets_precomputed_metric(small):
    spec = get_method_spec("plugins_for_tests:FirstColumns")
    assert spec.accepts_distances and spec.quadratic_memory
    estimator = spec.build(2, 0, True)
    assert estimator.metric == "precomputed"
    D = cdist(small, small)
    np.testing.assert_array_equal(fit_embedding(spec, Dataset("d", distances=D), 2, {}, 0), D[:, :2])


@pytest.mark.parametrize(
    "path, expected",
    [
        ("no_such_module_anywhere:Thing", "cannot import module 'no_such_module_anywhere'"),
        ("plugins_for_tests:ScaledProjektion", "did you mean 'ScaledProjection'"),
        ("plugins_for_tests:NoFitTransform", "has no fit_transform"),
        ("plugins_for_tests:NOT_AN_ESTIMATOR", "expected an estimator class"),
        ("plugins_for_tests", "unknown method"),
        ("plugins for tests:X", "package.module:Name"),
    ],
)
def test_bad_plugin_paths(path, expected):
    with pytest.raises(InputError) as info:
        get_method_spec(path, "suite.yaml: methods[4].use")
    message = str(info.value)
    assert message.startswith("suite.yaml: methods[4].use: ")
    assert expected in message and "\n" not in message


@pytest.mark.parametrize(
    "name, reason",
    [
        ("ReturnsNaN", "NaN or infinite"),
        ("ReturnsWrongShape", "shape (90, 3), expected (90, 2)"),
        ("ReturnsOnePoint", "all points coincide"),
    ],
)
def test_degenerate_outputs_are_refused(name, reason, small):
    spec = get_method_spec(f"plugins_for_tests:{name}")
    with pytest.raises(DegenerateEmbedding) as info:
        fit_embedding(spec, Dataset("noise", X=small), 2, {}, seed=0)
    assert reason in info.value.reason
    assert str(info.value).startswith(f"plugins_for_tests:{name} on noise: ")


def test_estimator_warnings_go_to_the_log(small, caplog, recwarn):
    spec = get_method_spec("plugins_for_tests:WarnsWhileFitting")
    with caplog.at_level(logging.WARNING, logger="harness.methods"):
        fit_embedding(spec, Dataset("noise", X=small), 2, {}, seed=0)
    assert "RuntimeWarning: did not converge" in caplog.text
    assert len(recwarn) == 0
