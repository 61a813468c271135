"""The adapters of the optional ``methods`` extra: UMAP, FFT t-SNE, PaCMAP, TriMap, PHATE.

CI installs the extra (``.ci/run``), so these run there; without it the module is skipped
as a whole, and the tests at the bottom check what a user without the extra sees.
"""

from __future__ import annotations

import sys
import textwrap
from collections.abc import Callable

import numpy as np
import pytest
from sklearn.datasets import load_digits, load_iris
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness
from sklearn.model_selection import train_test_split

from harness.cli import main
from harness.datasets._types import Dataset
from harness.errors import InputError
from harness.methods import METHODS, cell_threads, fit_embedding, get_method_spec, thread_budget
from harness.methods._threads import limit_numba_threads
from harness.run.cache import cache_key
from harness.run.cells import Cell
from harness.suite import load_suite

MODERN = ("umap", "fft_tsne", "pacmap", "trimap", "phate")
PACKAGES = {"umap": "umap", "fft_tsne": "openTSNE", "pacmap": "pacmap", "trimap": "trimap", "phate": "phate"}

#: Fewer optimisation steps where a fit's time goes there (the other methods' time on iris is
#: numba compiling, once per process): whether the bytes follow the seed does not depend on the
#: number of steps.  ``early_exaggeration_iter`` is openTSNE's own, passed on by the adapter.
SHORT_RUNS: dict[str, dict[str, int]] = {"fft_tsne": {"n_iter": 50, "early_exaggeration_iter": 50}}

installed = pytest.mark.skipif(
    any(METHODS[m].missing_package() for m in MODERN), reason="the 'methods' extra is not installed"
)


def build(name: str, seed: int = 0, precomputed: bool = False, **params):
    values = {p.name: p.default for p in METHODS[name].params}
    values.update(params)
    return METHODS[name].build(2, seed, precomputed, **values)


@pytest.fixture(scope="module")
def iris() -> np.ndarray:
    return load_iris().data.astype(np.float64)


@pytest.fixture(scope="module")
def digits() -> tuple[np.ndarray, np.ndarray]:
    d = load_digits()
    return d.data.astype(np.float64), d.target


@installed
@pytest.mark.slow
@pytest.mark.parametrize("name", MODERN)
def test_adapter_gives_a_finite_reproducible_embedding_that_follows_the_seed(name, iris):
    short = SHORT_RUNS.get(name, {})
    first = build(name, seed=3, **short).fit_transform(iris)
    again = build(name, seed=3, **short).fit_transform(iris)
    other = build(name, seed=4, **short).fit_transform(iris)
    assert first.shape == (150, 2) and first.dtype == np.float64
    assert np.isfinite(first).all()
    # Each library promises a fixed result for a fixed random_state (umap-learn, openTSNE,
    # pacmap, phate docs); trimap has no seed argument, and our adapter seeds the NumPy and
    # numba generators it draws from and runs numba on one thread, so bytes match as well.
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)


@pytest.fixture(scope="module")
def digits_embedding(digits) -> Callable[[str], np.ndarray]:
    """Each method's embedding of digits at its defaults and seed 0, fitted once for the module."""
    fits: dict[str, np.ndarray] = {}

    def embedding(name: str) -> np.ndarray:
        if name not in fits:
            fits[name] = fit_embedding(METHODS[name], Dataset(name="digits", X=digits[0]), 2, {}, seed=0)
        return fits[name]

    return embedding


@installed
@pytest.mark.slow
@pytest.mark.parametrize("name", MODERN)
def test_adapter_embeds_digits(name, digits_embedding):
    Y = digits_embedding(name)
    assert Y.shape == (1797, 2) and np.isfinite(Y).all()


@installed
@pytest.mark.slow
@pytest.mark.parametrize("name", ["umap", "fft_tsne"])
def test_neighbour_methods_keep_local_structure_on_digits(name, digits, digits_embedding):
    # Rule of thumb from common practice (no single source): UMAP and t-SNE keep
    # trustworthiness@10 (Venna and Kaski 2001; scikit-learn's implementation) above 0.95
    # on the 8x8 digits, well above PCA (about 0.83 here, measured).
    X, _ = digits
    t_method = trustworthiness(X, digits_embedding(name), n_neighbors=10)
    t_pca = trustworthiness(X, PCA(2).fit_transform(X), n_neighbors=10)
    assert t_method >= 0.95
    assert t_method > t_pca + 0.08


@installed
@pytest.mark.slow
def test_umap_transform_matches_the_library_on_the_same_split(iris):
    import umap

    train, test = train_test_split(iris, test_size=0.2, random_state=0)
    ours = build("umap", seed=5).fit(train)
    direct = umap.UMAP(n_components=2, random_state=5, n_jobs=1).fit(train)
    np.testing.assert_allclose(ours.embedding_, direct.embedding_, rtol=0, atol=1e-12)
    np.testing.assert_allclose(ours.transform(test), direct.transform(test), rtol=0, atol=1e-12)


@installed
@pytest.mark.slow
def test_fft_tsne_transform_matches_the_library_on_the_same_split(iris):
    import openTSNE

    train, test = train_test_split(iris, test_size=0.2, random_state=0)
    with thread_budget(1):
        ours = build("fft_tsne", seed=5).fit(train)
    direct = openTSNE.TSNE(
        n_components=2, negative_gradient_method="fft", n_jobs=1, random_state=5, verbose=False
    ).fit(train)
    np.testing.assert_allclose(ours.embedding_, np.asarray(direct), rtol=0, atol=1e-12)
    np.testing.assert_allclose(ours.transform(test), np.asarray(direct.transform(test)), rtol=0, atol=1e-12)


@installed
@pytest.mark.slow
@pytest.mark.parametrize("name", ["umap", "fft_tsne"])
def test_methods_that_take_distances_embed_a_distance_matrix(name, iris):
    from scipy.spatial.distance import pdist, squareform

    D = squareform(pdist(iris))
    Y = fit_embedding(METHODS[name], Dataset(name="iris_d", distances=D), 2, {}, seed=0)
    assert Y.shape == (150, 2) and np.isfinite(Y).all()


@pytest.mark.parametrize("name", ["pacmap", "trimap", "phate"])
def test_methods_that_need_coordinates_refuse_a_distance_matrix(name):
    D = np.abs(np.subtract.outer(np.arange(10.0), np.arange(10.0)))
    with pytest.raises(InputError, match="needs feature coordinates"):
        fit_embedding(METHODS[name], Dataset(name="d", distances=D), 2, {}, seed=0)


@pytest.mark.parametrize(
    ("name", "params", "field"),
    [
        ("umap", "{n_neighbors: 1}", "n_neighbors"),
        ("umap", "{min_dist: 2.0}", "min_dist"),
        ("fft_tsne", "{perplexity: -5}", "perplexity"),
        ("pacmap", "{init: spectral}", "init"),
        ("trimap", "{n_iters: 0}", "n_iters"),
        ("phate", "{knn: 0}", "knn"),
    ],
)
def test_a_bad_parameter_is_refused_with_the_field(tmp_path, name, params, field):
    path = tmp_path / "s.yaml"
    path.write_text(
        textwrap.dedent(f"""\
        name: s
        datasets: [{{use: iris}}]
        methods:
          - use: {name}
            params: {params}
        """)
    )
    with pytest.raises(InputError) as info:
        load_suite(path)
    assert field in str(info.value) and "expected" in str(info.value)


def test_a_missing_package_gives_the_install_line_and_exit_2(tmp_path, monkeypatch, capsys):
    # A module set to None in sys.modules is what Python reports as not importable.
    monkeypatch.setitem(sys.modules, "umap", None)
    path = tmp_path / "s.yaml"
    path.write_text("name: s\ndatasets: [{use: iris}]\nmethods: [{use: umap}]\n")
    assert main(["validate", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "pip install 'foldbench[methods]'" in err and "umap-learn" in err
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    with pytest.raises(InputError, match="not installed"):
        get_method_spec("umap")


def test_list_methods_marks_a_missing_package(monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "phate", None)
    assert main(["list", "methods"]) == 0
    out = capsys.readouterr().out
    line = next(x for x in out.splitlines() if x.startswith("phate "))
    assert "not installed: pip install 'foldbench[methods]'" in line


def test_the_cache_key_follows_the_method_package_version(monkeypatch):
    cell = Cell("iris", "umap", "umap", (), 0, 2, "f" * 16)
    base = Cell("iris", "pca", "pca", (), 0, 2, "f" * 16)
    before, before_pca = cache_key(cell), cache_key(base)
    monkeypatch.setattr(type(METHODS["umap"]), "package_version", lambda self: "0.0.1-other")
    assert cache_key(cell) != before
    assert cache_key(base) == before_pca  # base-install methods carry no package version


def test_the_thread_budget_reaches_numba():
    numba = pytest.importorskip("numba")
    with thread_budget(1):
        assert cell_threads() == 1
        limit_numba_threads()
        assert numba.get_num_threads() == 1
    assert cell_threads() >= 1


def test_every_modern_method_says_where_it_comes_from():
    for name in MODERN:
        spec = METHODS[name]
        assert spec.requires and spec.requires[0] == PACKAGES[name]
        assert spec.source and spec.randomized
    assert METHODS["umap"].places_new_points and METHODS["fft_tsne"].places_new_points
    assert METHODS["pca"].places_new_points and not METHODS["tsne"].places_new_points
