"""Seed-free cells fitted once: copies give the scores of fitting every seed, and verify like records.

Plumbing tests of our own runner on iris (Fisher 1936, 150 rows) and a small
generated sheet.  The reference is the same suite run with the sharing switched
off: every seed fitted and scored on its own, as runs were made before.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.compare import aggregate
from harness.methods import get_method_spec
from harness.run.execute import execute_suite
from harness.run.folder import RunFolder
from harness.text import seeds_text

SUITE = """name: copies
seeds: 3
datasets:
  - use: iris
  - use: rolled_sheet
    name: roll
    params: {n: 150, noise: 0.05}
methods:
  - use: pca
  - use: classical_mds
  - use: mds
    params: {max_iter: 20}
  - use: random_projection
  - use: tsne
    params: {perplexity: 10, max_iter: 250}
measures:
  k: [5]
"""


def _run(tmp_path: Path, name: str, share: bool) -> RunFolder:
    path = tmp_path / "copies.yaml"
    path.write_text(SUITE)
    return execute_suite(path, tmp_path / name, jobs=1, isolate=False, share_seed_free=share).folder


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[RunFolder, RunFolder]:
    tmp = tmp_path_factory.mktemp("copies")
    return _run(tmp, "shared", True), _run(tmp, "each", False)


def _measures(scores: pd.DataFrame) -> pd.DataFrame:
    skip = ["error", "fit_seconds", "fit_peak_mb", "score_seconds", "key", "from_cache", "copy_of"]
    return scores.drop(columns=skip).sort_values(["dataset", "method", "seed"]).reset_index(drop=True)


def test_copies_score_like_fitting_every_seed(runs: tuple[RunFolder, RunFolder]) -> None:
    shared, each = runs
    a = _measures(pd.read_csv(shared.path / "scores.csv"))
    b = _measures(pd.read_csv(each.path / "scores.csv"))
    assert list(a.columns) == list(b.columns) and len(a) == len(b) == 30
    numbers = [c for c in a.columns if pd.api.types.is_float_dtype(a[c])]
    # the reference is the run without sharing; equal to 1e-12 is the acceptance bound of the change
    np.testing.assert_allclose(a[numbers].to_numpy(), b[numbers].to_numpy(), rtol=0, atol=1e-12)
    assert (a.drop(columns=numbers) == b.drop(columns=numbers)).all().all()


def test_only_seed_free_methods_are_copied(runs: tuple[RunFolder, RunFolder]) -> None:
    shared, each = runs
    s = shared.scores
    copied = s[s["copy_of"].fillna("") != ""]
    # pca, classical_mds, mds from a classical start, t-SNE from PCA: 2 datasets x 4 x 2 later seeds
    assert sorted(copied["method"].unique()) == ["classical_mds", "mds", "pca", "tsne"] and len(copied) == 16
    assert set(copied["seed"]) == {1, 2}
    firsts = dict(zip(s["key"], s["seed"]))
    assert all(firsts[k] == 0 for k in copied["copy_of"])
    assert (each.scores["copy_of"].fillna("") == "").all()
    for key, source in zip(copied["key"], copied["copy_of"]):
        assert np.array_equal(shared.embedding(key), shared.embedding(source))


def test_ignores_seed_follows_the_parameters() -> None:
    assert get_method_spec("pca").ignores_seed({})
    assert get_method_spec("mds").ignores_seed({"init": "classical_mds"})
    assert not get_method_spec("mds").ignores_seed({"init": "random"})
    assert get_method_spec("isomap").ignores_seed({})  # a fixed ARPACK start: see methods/_isomap.py
    assert not get_method_spec("random_projection").ignores_seed({})
    assert get_method_spec("sammon").ignores_seed({"init": "pca"})
    assert not get_method_spec("sammon").ignores_seed({"init": "random"})
    assert get_method_spec("tsne").ignores_seed({"init": "pca"})
    assert not get_method_spec("tsne").ignores_seed({"init": "pca"}, precomputed=True)  # random start
    assert not get_method_spec("tsne").ignores_seed({"init": "random"})


_TSNE = {"perplexity": 10.0, "early_exaggeration": 12.0, "learning_rate": "auto", "max_iter": 250}
_TSNE.update(init="pca", angle=0.5)


def test_tsne_from_pca_matches_scikit_learn_where_its_start_is_exact() -> None:
    # scikit-learn's PCA picks an exact solver for tall tables (>= 10 rows per feature), so its
    # TSNE(init="pca") is the reference, to the bit, for every seed (scikit-learn 1.x, PCA._fit)
    from sklearn.manifold import TSNE

    from harness.methods.builtin import build_tsne

    x = np.random.default_rng(3).normal(size=(120, 6))
    ours = [build_tsne(2, seed, False, **_TSNE).fit_transform(x) for seed in (0, 5)]
    ref = TSNE(n_components=2, random_state=0, **_TSNE).fit_transform(x)
    assert np.array_equal(ours[0], ref) and np.array_equal(ours[1], ref)


def test_tsne_from_pca_is_seed_free_where_scikit_learn_would_randomize_the_start() -> None:
    # 600 rows x 80 features: scikit-learn's "auto" picks the randomized solver here (fewer than
    # 10 rows per feature, more than 500 rows), so its start moves with the seed; ours is exact
    from sklearn.manifold import TSNE

    from harness.methods._tsne import exact_pca_start
    from harness.methods.builtin import build_tsne

    x = np.random.default_rng(4).normal(size=(600, 80))
    ref = [TSNE(n_components=2, random_state=s, **_TSNE).fit_transform(x) for s in (0, 1)]
    assert not np.array_equal(ref[0], ref[1])  # the premise: scikit-learn's fit moves with the seed
    ours = [build_tsne(2, s, False, **_TSNE).fit_transform(x) for s in (0, 1)]
    assert np.array_equal(ours[0], ours[1])
    start = exact_pca_start(x, 2)
    # the start spans the top-2 principal subspace (SciPy's SVD as the reference) at PC1 sd 1e-4
    from scipy.linalg import svd

    u, sv, _ = svd(x - x.mean(0), full_matrices=False)
    pcs = u[:, :2] * sv[:2]
    np.testing.assert_allclose(np.abs(start), np.abs(pcs / pcs[:, 0].std() * 1e-4), rtol=1e-3, atol=1e-9)
    assert start.dtype == np.float32


def test_sammon_from_pca_gives_the_same_bytes_for_every_seed_even_when_the_start_collapses(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # Plumbing of our own: two distinct items that differ only along the axis PCA drops start on
    # one point, and the mapping nudges them apart.  The nudge is a fixed pattern, so the seed
    # still changes nothing (the claim behind fitting Sammon once and copying it to other seeds).
    from harness.methods import sammon

    rng = np.random.default_rng(0)
    plane = np.c_[10 * rng.normal(size=(40, 2)), np.zeros(40)]
    # two items off the plane on either side of plane[0]: the third axis is exactly orthogonal
    x = np.vstack([plane, plane[0] + [0.0, 0.0, 0.01], plane[0] - [0.0, 0.0, 0.01]])
    seen = []
    real = sammon._SammonObjective.collapsed

    def collapsed(self, Y):
        seen.append(real(self, Y))
        return seen[-1]

    monkeypatch.setattr(sammon._SammonObjective, "collapsed", collapsed)
    SammonMapping = sammon.SammonMapping
    fits = [SammonMapping(max_iter=5, random_state=seed).fit_transform(x) for seed in (0, 1, 12345)]
    assert seen == [True, True, True]  # the start did collapse: the nudge was needed each time
    assert all(np.array_equal(fits[0], other) for other in fits[1:])


def test_a_copy_is_sealed_and_a_damaged_one_is_computed_again(tmp_path: Path) -> None:
    folder = _run(tmp_path, "r", True)
    copied = folder.scores[folder.scores["copy_of"].fillna("") != ""]
    key = str(copied["key"].iloc[0])
    assert key in folder.finished_keys()
    record = folder.path / "cells" / f"{key}.json"
    doc = json.loads(record.read_text())
    source = doc["copy_of"]
    doc["copy_of"] = "0" * 16  # edited after sealing: the digest no longer matches
    record.write_text(json.dumps(doc))
    assert key not in RunFolder.open(folder.path).finished_keys()
    again = execute_suite(tmp_path / "copies.yaml", resume=folder.path, jobs=1, isolate=False)
    assert key in again.folder.finished_keys()
    row = again.folder.scores.set_index("key").loc[key]
    assert row["copy_of"] == source  # copied again from its intact source


def test_resume_copies_from_a_stored_source(tmp_path: Path) -> None:
    folder = _run(tmp_path, "r", True)
    s = folder.scores
    copied = s[s["copy_of"].fillna("") != ""]
    for key in copied["key"]:
        (folder.path / "cells" / f"{key}.json").unlink()
    again = execute_suite(tmp_path / "copies.yaml", resume=folder.path, jobs=1, isolate=False).folder
    t = again.scores.set_index("key")
    assert set(copied["key"]) <= set(t.index)
    assert (t.loc[copied["key"], "copy_of"] == copied.set_index("key")["copy_of"]).all()


def test_seed_statistics_say_deterministic(runs: tuple[RunFolder, RunFolder]) -> None:
    shared, _ = runs
    table = aggregate(shared.scores).set_index(["dataset", "method"])
    pca, rp = table.loc[("iris", "pca")], table.loc[("iris", "random_projection")]
    assert bool(pca["deterministic"]) and not bool(rp["deterministic"])
    # one fit has no seed spread: no sd and no t interval, instead of sd 0 over copies
    assert np.isnan(pca["trustworthiness@5_sd"]) and np.isnan(pca["trustworthiness@5_lo"])
    assert rp["trustworthiness@5_sd"] > 0
    assert seeds_text(pca) == "3/3 deterministic" and seeds_text(rp) == "3/3"


def test_cells_with_a_held_out_split_are_never_copied(tmp_path: Path) -> None:
    # Each seed draws its own split (scikit-learn's train_test_split with random_state=seed),
    # so a seed-free method fits different points for each seed.
    path = tmp_path / "held.yaml"
    path.write_text(SUITE.replace("seeds: 3\n", "seeds: 2\nholdout: 0.3\n"))
    folder = execute_suite(path, tmp_path / "h", jobs=1, isolate=False).folder
    s = folder.scores
    assert (s["copy_of"].fillna("") == "").all()
    pca = s[(s.method == "pca") & (s.dataset == "iris")].set_index("seed")
    assert pca.loc[0, "heldout_trustworthiness@5"] != pca.loc[1, "heldout_trustworthiness@5"]


_ISOMAP_FIT = """
import hashlib, sys
import numpy as np
from harness.datasets._registry import load_dataset
from harness.methods import METHODS
np.random.seed(int(sys.argv[1]))  # another state of the global generator in each process
before = np.random.get_state()[1].copy()
X = load_dataset("digits").X
Y = METHODS["isomap"].build(2, int(sys.argv[2]), False, n_neighbors=10).fit_transform(X)
assert np.array_equal(np.random.get_state()[1], before)  # the caller's global state is left as it was
print(hashlib.sha256(Y.tobytes()).hexdigest())
"""


def test_isomap_gives_the_same_bytes_in_every_process_and_for_every_seed() -> None:
    # plumbing of our own: digits has 1,797 points, so scikit-learn's Isomap uses ARPACK,
    # whose start vector it draws from NumPy's global generator
    import subprocess
    import sys

    digests = {
        subprocess.run(
            [sys.executable, "-c", _ISOMAP_FIT, str(state), str(seed)],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        for state, seed in ((0, 0), (1, 0), (2, 7))
    }
    assert len(digests) == 1


def test_isomap_with_a_fixed_start_is_scikit_learns_isomap() -> None:
    # scikit-learn's Isomap with the dense eigensolver (no start vector) is the reference: the
    # same embedding up to the sign of each axis (eigenvectors have no sign) and rounding
    from sklearn.datasets import load_digits
    from sklearn.manifold import Isomap

    from harness.methods.builtin import build_isomap

    x = load_digits().data[:600]
    ours = build_isomap(2, 0, False, n_neighbors=10).fit_transform(x)
    theirs = Isomap(n_components=2, n_neighbors=10, eigen_solver="dense").fit_transform(x)
    signs = np.sign(np.sum(ours * theirs, axis=0))
    np.testing.assert_allclose(ours, theirs * signs, rtol=0, atol=1e-6 * np.abs(theirs).max())
