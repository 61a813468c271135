"""Tests of the parametric mappings: gradients, optimisation quality, estimator API, registry."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import check_grad, minimize
from scipy.spatial.distance import cdist, pdist, squareform
from sklearn.datasets import load_digits, load_iris
from sklearn.decomposition import PCA
from sklearn.manifold._t_sne import _joint_probabilities, _kl_divergence
from sklearn.utils.estimator_checks import parametrize_with_checks

from harness.config import CellStatus, Scoring
from harness.datasets._types import Dataset
from harness.errors import InputError
from harness.methods import METHODS, fit_embedding
from harness.methods.builtin import parse_hidden
from harness.methods.parametric import ParametricMDS, ParametricSammon, ParametricTSNE, TrainingDiverged
from harness.methods.parametric._losses import (
    conditional_affinities,
    joint_affinities,
    sammon_loss,
    stress_loss,
    tsne_loss,
)
from harness.methods.parametric._network import ACTIVATIONS, Architecture
from harness.methods.parametric._training import _penalised
from harness.methods.sammon import SammonMapping
from harness.metrics import evaluate
from harness.run.cells import Cell
from harness.run.compute import compute_cell

PARAMETRIC = ("parametric_sammon", "parametric_mds", "parametric_tsne")


@pytest.fixture(scope="module")
def pairs():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(25, 5))
    X[7] = X[4]  # a duplicated row: target distance zero
    return X, rng.normal(size=(25, 2))


def _losses(X: np.ndarray) -> dict:
    D = cdist(X, X)
    P = joint_affinities(D**2, 5.0)
    return {
        "sammon": sammon_loss(D),
        "stress_raw": stress_loss(D, "raw"),
        "stress_kruskal": stress_loss(D, "kruskal"),
        "tsne_alpha1": tsne_loss(P, 1.0),
        "tsne_alpha0.5": tsne_loss(P, 0.5),
        "tsne_alpha3": tsne_loss(P, 3.0),
    }


def sammon_stress(X: np.ndarray, Y: np.ndarray) -> float:
    # Sammon (1969), eq. 1: E = (1 / sum d) * sum (d - e)^2 / d over pairs i<j.
    d, e = pdist(X), pdist(Y)
    return float(np.sum((d - e) ** 2 / d) / d.sum())


def raw_stress(X: np.ndarray, Y: np.ndarray) -> float:
    # Kruskal (1964): raw stress sum (d - e)^2 over pairs, here divided by sum d^2.
    d, e = pdist(X), pdist(Y)
    return float(np.sum((d - e) ** 2) / np.sum(d**2))


# ---------------------------------------------------------------- losses and gradients


@pytest.mark.parametrize(
    "name", ["sammon", "stress_raw", "stress_kruskal", "tsne_alpha1", "tsne_alpha0.5", "tsne_alpha3"]
)
def test_loss_gradient_wrt_outputs_matches_finite_differences(name, pairs):
    # scipy.optimize.check_grad: analytic gradient against forward differences.
    X, Y0 = pairs
    loss = _losses(X)[name]
    err = check_grad(
        lambda y: loss(y.reshape(Y0.shape))[0], lambda y: loss(y.reshape(Y0.shape))[1].ravel(), Y0.ravel()
    )
    assert err <= 1e-5 * np.linalg.norm(loss(Y0)[1])


@pytest.mark.parametrize("activation", ACTIVATIONS)
@pytest.mark.parametrize("name", ["sammon", "stress_kruskal", "tsne_alpha1", "tsne_alpha3"])
def test_loss_gradient_wrt_weights_matches_finite_differences(name, activation, pairs):
    # Backpropagation through two hidden layers plus weight decay, against
    # scipy.optimize.check_grad.
    X, _ = pairs
    loss = _losses(X)[name]
    arch = Architecture((5, 7, 6, 2), activation)
    theta = arch.init(np.random.default_rng(1))
    mask = arch.weight_mask()

    def value(t):
        return _penalised(arch, t, X, loss, 0.01, mask)[0]

    def grad(t):
        return _penalised(arch, t, X, loss, 0.01, mask)[1]

    assert check_grad(value, grad, theta) <= 1e-5 * np.linalg.norm(grad(theta))


def test_losses_match_the_published_formulas(pairs):
    # Sammon (1969) eq. 1 and Kruskal (1964) stress-1 written out with pdist.
    X, Y = pairs
    keep = pdist(X) > 0
    d, e = pdist(X)[keep], pdist(Y)[keep]
    D = cdist(X, X)
    assert sammon_loss(D)(Y)[0] == pytest.approx(np.sum((d - e) ** 2 / d) / d.sum(), rel=1e-9)
    d, e = pdist(X), pdist(Y)
    assert stress_loss(D, "raw")(Y)[0] == pytest.approx(np.sum((d - e) ** 2) / np.sum(d**2), rel=1e-9)
    kruskal = np.sqrt(np.sum((d - e) ** 2) / np.sum(e**2))
    assert stress_loss(D, "kruskal")(Y)[0] == pytest.approx(kruskal, rel=1e-9)


def test_tsne_loss_is_the_kl_divergence_with_a_student_t_kernel(pairs):
    # van der Maaten (2009), eq. for q_ij with alpha degrees of freedom; KL(P||Q) by scipy.
    from scipy.special import rel_entr

    X, Y = pairs
    P = joint_affinities(cdist(X, X, "sqeuclidean"), 5.0)
    alpha = 2.5
    W = (1 + squareform(pdist(Y, "sqeuclidean")) / alpha) ** (-(alpha + 1) / 2)
    np.fill_diagonal(W, 0)
    Q = W / W.sum()
    off = ~np.eye(len(Y), dtype=bool)
    assert tsne_loss(P, alpha)(Y)[0] == pytest.approx(rel_entr(P[off], Q[off]).sum(), rel=1e-9)


@pytest.mark.parametrize("alpha", [1.0, 3.0])
def test_tsne_loss_matches_scikit_learn(alpha, pairs):
    # scikit-learn's private _kl_divergence (exact t-SNE, with degrees_of_freedom) is the
    # reference for the value; our gradient must match finite differences of *its* value.
    # Its own gradient agrees with ours at alpha = 1 only: for other alphas it weighs pairs by
    # the kernel w_ij instead of (1 + d_ij^2 / alpha)^-1, which finite differences of its
    # value do not support (measured at alpha = 3: check_grad error 0.14 against 2.4e-7 for ours).
    X, Y = pairs
    P = squareform(joint_affinities(cdist(X, X, "sqeuclidean"), 5.0), checks=False)

    def reference(y):
        return _kl_divergence(y, P, alpha, *Y.shape)

    loss = tsne_loss(squareform(P), alpha)
    value, grad = loss(Y)
    assert value == pytest.approx(reference(Y.ravel())[0], rel=1e-9)
    err = check_grad(lambda y: reference(y)[0], lambda y: loss(y.reshape(Y.shape))[1].ravel(), Y.ravel())
    assert err <= 1e-5 * np.linalg.norm(grad)
    if alpha == 1.0:
        np.testing.assert_allclose(grad.ravel(), reference(Y.ravel())[1], rtol=1e-7, atol=1e-12)


def test_affinities_reach_the_perplexity_and_match_scikit_learn():
    # van der Maaten and Hinton (2008): perplexity 2^H(P_i) of every row equals the target;
    # scikit-learn's private _joint_probabilities is the reference for the symmetrised P.
    X = load_digits().data[:300]
    S = cdist(X, X, "sqeuclidean")
    C = conditional_affinities(S, 20.0)
    C_safe = np.where(C > 0, C, 1.0)
    entropy = -(C * np.log(C_safe)).sum(axis=1)
    np.testing.assert_allclose(np.exp(entropy), 20.0, rtol=1e-4)
    np.testing.assert_allclose(np.diag(C), 0.0)
    reference = squareform(_joint_probabilities(S, 20.0, 0))
    np.testing.assert_allclose(joint_affinities(S, 20.0), reference, atol=1e-8)


# ---------------------------------------------------------------- quality against outside references


@pytest.fixture(scope="module")
def iris():
    return load_iris().data


def test_linear_network_reaches_the_best_linear_stress_on_iris(iris):
    # Torgerson (1952) / Eckart-Young: PCA is the best rank-2 fit of the *inner products*, not
    # of metric stress; its projection shrinks every distance, so rescaling it lowers raw
    # stress.  The reference is the best affine map found by scipy.optimize (BFGS from the PCA
    # axes) on the same loss written independently with pdist; the network must reach it
    # within 1%.
    centred = iris - iris.mean(axis=0)
    axes = PCA(2, svd_solver="full").fit(iris).components_.T
    best = minimize(lambda w: raw_stress(iris, centred @ w.reshape(4, 2)), axes.ravel(), method="BFGS")
    pca_stress = raw_stress(iris, centred @ axes)
    assert best.fun < pca_stress  # measured: 0.001400 against 0.001747 for PCA
    net = ParametricMDS(
        hidden=(),
        activation="identity",
        batch_size=150,
        validation_fraction=0.0,
        epochs=1500,
        learning_rate=1e-2,
        random_state=0,
    )
    ours = raw_stress(iris, net.fit_transform(iris))
    assert ours <= 1.01 * best.fun
    assert ours <= pca_stress


def test_parametric_sammon_is_close_to_our_sammon_mapping_on_iris(iris):
    # Sammon (1969) stress of our iterative Sammon mapping as the reference; the network
    # (full batch, no early stopping) must come within 10% of it.  Duplicated iris rows have
    # distance zero and are left out of the stress, as in both implementations.
    keep = np.unique(iris, axis=0, return_index=True)[1]
    X = iris[np.sort(keep)]
    reference = sammon_stress(X, SammonMapping(random_state=0).fit_transform(X))
    net = ParametricSammon(
        batch_size=150, validation_fraction=0.0, epochs=1000, learning_rate=1e-3, random_state=0
    )
    ours = sammon_stress(X, net.fit_transform(X))
    assert ours <= 1.10 * reference  # measured: 1.017 times (0.004029 against 0.003960)


@pytest.mark.slow
def test_parametric_tsne_keeps_digit_neighbourhoods_far_better_than_pca():
    # Trustworthiness@10 (Venna and Kaski 2001) via harness.evaluate on all 1797 digits:
    # measured 0.967 for parametric t-SNE against 0.830 for PCA; van der Maaten (2009)
    # reports parametric t-SNE well above linear maps on handwritten digits.
    X = load_digits().data
    ours = evaluate(X, ParametricTSNE(random_state=0).fit_transform(X))["trustworthiness"]
    pca = evaluate(X, PCA(2, svd_solver="full").fit_transform(X))["trustworthiness"]
    assert ours > pca + 0.08


# ---------------------------------------------------------------- behaviour of the estimators


@pytest.mark.parametrize("cls", [ParametricSammon, ParametricMDS, ParametricTSNE])
def test_same_random_state_gives_identical_bytes(cls, iris):
    first = cls(epochs=5, random_state=4).fit_transform(iris)
    again = cls(epochs=5, random_state=4).fit_transform(iris)
    other = cls(epochs=5, random_state=5).fit_transform(iris)
    assert first.tobytes() == again.tobytes()
    assert first.tobytes() != other.tobytes()


@pytest.mark.parametrize("cls", [ParametricSammon, ParametricMDS])
def test_distance_mappings_follow_a_change_of_units(cls, iris):
    # Invented check of our own plumbing: the losses see distances divided by one global
    # scale and transform multiplies back, so data in millimetres gives the map times ten.
    cm = cls(epochs=20, random_state=0).fit_transform(iris)
    mm = cls(epochs=20, random_state=0).fit_transform(iris * 10.0)
    np.testing.assert_allclose(mm, cm * 10.0, rtol=1e-6, atol=1e-9)


def test_transform_maps_new_points_like_the_fitted_ones(iris):
    model = ParametricSammon(epochs=20, random_state=0).fit(iris[:100])
    np.testing.assert_array_equal(model.transform(iris[100:]), model.transform(iris)[100:])
    assert model.n_validation_ == 10
    assert model.best_epoch_ <= model.n_epochs_ <= 20


def test_early_stopping_keeps_the_best_validation_epoch(iris):
    model = ParametricSammon(epochs=400, patience=3, learning_rate=0.05, random_state=0).fit(iris)
    curve = model.validation_curve_
    assert len(curve) == model.n_epochs_ < 400
    assert curve[model.best_epoch_ - 1] == curve.min()
    assert model.n_epochs_ - model.best_epoch_ == 3


def test_diverging_training_raises_with_epoch_and_loss(iris):
    with pytest.raises(TrainingDiverged, match=r"diverged at epoch \d+: .*(nan|inf)"):
        ParametricMDS(learning_rate=1e250, epochs=50, random_state=0).fit(iris)


def test_diverging_cell_fails_with_the_epoch_in_its_error(iris):
    # The runner records an exception from the fit as a failed cell, never an ok embedding.
    data = Dataset("iris_plain", X=iris)
    cell = Cell(
        "iris_plain",
        "parametric_mds",
        "parametric_mds",
        (("learning_rate", 1e250),),
        0,
        2,
        data.fingerprint(),
    )
    result = compute_cell(cell, data, Scoring())
    assert result.status == CellStatus.FAILED
    assert "diverged at epoch" in result.error and result.embedding is None


def test_bad_parameters_are_refused():
    X = np.random.default_rng(0).normal(size=(20, 3))
    for bad in (
        {"activation": "sigmoid"},
        {"hidden": (0,)},
        {"validation_fraction": 1.0},
        {"learning_rate": 0.0},
        {"epochs": 0},
    ):
        with pytest.raises(ValueError):
            ParametricSammon(**bad).fit(X)
    with pytest.raises(ValueError, match="stress"):
        ParametricMDS(stress="nonmetric").fit(X)
    with pytest.raises(ValueError, match="alpha"):
        ParametricTSNE(alpha=-1.0).fit(X)
    with pytest.raises(ValueError, match="identical"):
        ParametricSammon().fit(np.ones((10, 3)))


def test_alpha_auto_is_output_dimension_minus_one():
    # van der Maaten (2009): alpha = q - 1 degrees of freedom for a q-dimensional map, at least 1.
    assert ParametricTSNE(n_components=2).degrees_of_freedom == 1.0
    assert ParametricTSNE(n_components=5).degrees_of_freedom == 4.0
    assert ParametricTSNE(n_components=5, alpha=0.5).degrees_of_freedom == 0.5


# ---------------------------------------------------------------- scikit-learn estimator checks


@parametrize_with_checks(
    [
        ParametricSammon(epochs=3, random_state=0),
        ParametricMDS(epochs=3, random_state=0),
        ParametricMDS(epochs=3, stress="kruskal", random_state=0),
        ParametricTSNE(epochs=3, random_state=0),
    ]
)
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


# ---------------------------------------------------------------- registry


@pytest.mark.parametrize("name", PARAMETRIC)
def test_registry_defaults_are_the_estimators_defaults(name):
    spec = METHODS[name]
    estimator = spec.build(2, 7, False, **{p.name: p.default for p in spec.params})
    cls = type(estimator)
    expected = cls().get_params()
    expected["random_state"] = 7
    assert estimator.get_params() == expected
    assert not spec.accepts_distances


@pytest.mark.parametrize("name", PARAMETRIC)
def test_parametric_methods_refuse_a_distance_matrix(name, iris):
    data = Dataset("iris_distances", distances=cdist(iris, iris))
    with pytest.raises(InputError, match="needs feature coordinates"):
        fit_embedding(METHODS[name], data, 2, {}, seed=0)


def test_planned_cells_on_a_distance_matrix_are_skipped():
    from harness.run.cells import _refusal

    data = Dataset("d", distances=cdist(np.eye(4), np.eye(4)))
    assert "needs feature coordinates" in _refusal(METHODS["parametric_tsne"], data, 10_000)


@pytest.mark.parametrize("text, widths", [("128,64", (128, 64)), ("none", ()), (" 32 ", (32,))])
def test_hidden_widths_parse(text, widths):
    assert parse_hidden(text) == widths


def test_hidden_widths_check_names_the_format():
    from harness.params import validate_params

    with pytest.raises(InputError, match="comma-separated"):
        validate_params({"hidden": "128;64"}, METHODS["parametric_sammon"].params, "suite.yaml: methods[0]")
