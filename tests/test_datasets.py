"""Dataset loaders: shapes of open data, shapes of generated data, user tables and their errors."""

from __future__ import annotations

import inspect
import logging

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats
from scipy.spatial.distance import pdist, squareform
from sklearn.metrics import r2_score
from sklearn.model_selection import train_test_split
from sklearn.neighbors import KNeighborsRegressor
from sklearn.preprocessing import StandardScaler

from harness.datasets import DATASETS, Dataset, load_dataset, scenario, synthetic
from harness.errors import InputError
from harness.params import validate_params

GENERATED = ["rolled_sheet", "s_sheet", "gaussian_clusters", "machine_fleet"]


# ---------------------------------------------------------------- registry


@pytest.mark.parametrize("name", sorted(DATASETS))
def test_declared_params_match_loader_signature(name):
    # plumbing: the suite loader validates exactly the keyword arguments the loader takes
    spec = DATASETS[name]
    signature = set(inspect.signature(spec.load).parameters)
    assert {p.name for p in spec.params} == signature
    assert spec.description and spec.source
    assert all(p.doc for p in spec.params)


@pytest.mark.parametrize(
    "name", [n for n in sorted(DATASETS) if n not in ("table", "distance_matrix", "anndata")]
)
def test_defaults_load_with_registry_name(name):
    ds = load_dataset(name, validate_params({}, DATASETS[name].params, name))
    assert isinstance(ds, Dataset) and ds.name == name
    assert ds.X.dtype == np.float64 and np.isfinite(ds.X).all()


@pytest.mark.parametrize(
    "name, given, fragment",
    [
        ("rolled_sheet", {"n": 3}, "rolled_sheet.n"),
        ("rolled_sheet", {"noise": -0.1}, ">= 0"),
        ("gaussian_clusters", {"cluster_std": 0}, "> 0"),
        ("table", {"path": "x.csv", "duplicates": "remove"}, "keep, drop"),
        ("iris", {"n": 1}, "iris.n"),
    ],
)
def test_impossible_params_are_refused_before_loading(name, given, fragment):
    with pytest.raises(InputError, match=fragment.replace(".", r"\.")):
        validate_params(given, DATASETS[name].params, name)


# ---------------------------------------------------------------- open data in scikit-learn


@pytest.mark.parametrize(
    "name, shape, class_sizes",
    [
        # scikit-learn dataset documentation (Toy datasets): digits 1797 x 64, 10 classes of about 180
        ("digits", (1797, 64), None),
        # scikit-learn documentation: iris 150 x 4, 3 classes of 50
        ("iris", (150, 4), [50, 50, 50]),
        # scikit-learn documentation: wine 178 x 13, class_0 59, class_1 71, class_2 48
        ("wine", (178, 13), [59, 71, 48]),
        # scikit-learn documentation: breast cancer 569 x 30, 357 benign and 212 malignant
        ("breast_cancer", (569, 30), [357, 212]),
    ],
)
def test_open_data_documented_shapes(name, shape, class_sizes):
    ds = load_dataset(name)
    assert ds.X.shape == shape
    _, counts = np.unique(ds.labels, return_counts=True)
    if class_sizes is None:
        assert counts.size == 10  # scikit-learn documentation: 10 classes
    else:
        assert sorted(counts) == sorted(class_sizes)
    assert len(ds.info["feature_names"]) == shape[1]


def test_iris_class_names():
    # scikit-learn documentation: Iris-Setosa, Iris-Versicolour, Iris-Virginica
    assert set(load_dataset("iris").labels) == {"setosa", "versicolor", "virginica"}


@pytest.mark.parametrize("name", ["wine", "breast_cancer"])
def test_standardised_by_default_matches_standard_scaler(name):
    ds = load_dataset(name)
    raw = load_dataset(name, {"standardise": False})
    # reference: scikit-learn StandardScaler (population standard deviation)
    np.testing.assert_allclose(ds.X, StandardScaler().fit_transform(raw.X), atol=1e-12)


def test_standardised_digits_stay_finite():
    # scikit-learn StandardScaler also leaves constant columns (blank corner pixels) at zero
    X = load_dataset("digits", {"standardise": True}).X
    raw = load_dataset("digits").X
    np.testing.assert_allclose(X, StandardScaler().fit_transform(raw), atol=1e-12)


def test_digits_keeps_pixel_scale_by_default():
    # scikit-learn documentation: pixel values are integers 0..16
    X = load_dataset("digits").X
    assert X.min() == 0 and X.max() == 16


def test_stratified_subsample_keeps_class_shares():
    full = load_dataset("iris")
    ds = load_dataset("iris", {"n": 30, "seed": 3})
    _, counts = np.unique(ds.labels, return_counts=True)
    assert list(counts) == [10, 10, 10]  # 30 rows from 3 classes of 50
    rows = {tuple(r) for r in full.X}
    assert all(tuple(r) in rows for r in ds.X)
    again = load_dataset("iris", {"n": 30, "seed": 3})
    other = load_dataset("iris", {"n": 30, "seed": 4})
    assert again.fingerprint() == ds.fingerprint() != other.fingerprint()


def test_uneven_subsample_rounds_shares():
    # wine shares 59:71:48 of 178; 50 rows -> 16.6, 19.9, 13.5 -> 17, 20, 13 (largest remainders)
    ds = load_dataset("wine", {"n": 50})
    counts = dict(zip(*np.unique(ds.labels, return_counts=True)))
    assert counts == {"class_0": 17, "class_1": 20, "class_2": 13}


def test_subsample_larger_than_data_is_an_input_error():
    with pytest.raises(InputError, match=r"iris\.n.*at most 150"):
        load_dataset("iris", {"n": 151})


# ---------------------------------------------------------------- generated shapes


def test_rolled_sheet_radius_equals_angle_and_latent_is_arc_length():
    ds = load_dataset("rolled_sheet", {"n": 300, "seed": 1})
    x, y, z = ds.X.T
    t = np.hypot(x, z)
    # the documented parametrisation x = t cos t, z = t sin t
    np.testing.assert_allclose(np.cos(t) * t, x, atol=1e-9)
    np.testing.assert_allclose(np.sin(t) * t, z, atol=1e-9)
    assert t.min() >= 1.5 * np.pi - 1e-9 and t.max() <= 4.5 * np.pi + 1e-9
    np.testing.assert_array_equal(ds.latent[:, 1], y)
    # reference: numerical quadrature (SciPy quad) of the spiral's speed sqrt(1 + t^2)
    for ti, si in list(zip(t, ds.latent[:, 0]))[:20]:
        length, _ = integrate.quad(lambda u: np.sqrt(1 + u * u), 1.5 * np.pi, ti)
        assert si == pytest.approx(length, rel=1e-7, abs=1e-7)


def test_rolled_sheet_is_uniform_over_unrolled_length():
    ds = load_dataset("rolled_sheet", {"n": 2000, "seed": 0})
    total = synthetic.roll_arc_length(4.5 * np.pi) - synthetic.roll_arc_length(1.5 * np.pi)
    # reference: Kolmogorov-Smirnov test against the uniform law (SciPy)
    assert stats.kstest(ds.latent[:, 0] / total, "uniform").pvalue > 0.01
    assert stats.kstest(ds.latent[:, 1] / synthetic.ROLL_HEIGHT, "uniform").pvalue > 0.01


def _in_hole(latent):
    total = synthetic.roll_arc_length(4.5 * np.pi) - synthetic.roll_arc_length(1.5 * np.pi)
    s, h = latent[:, 0] / total, latent[:, 1] / synthetic.ROLL_HEIGHT
    return (s >= 0.4) & (s <= 0.6) & (h >= 1 / 3) & (h <= 2 / 3)


def test_hole_removes_the_documented_rectangle():
    with_hole = load_dataset("rolled_sheet", {"n": 1500, "hole": True})
    without = load_dataset("rolled_sheet", {"n": 1500, "hole": False})
    assert with_hole.n == without.n == 1500
    assert not _in_hole(with_hole.latent).any()
    # the rectangle is 0.2 x 1/3 of the sheet, so about 1/15 of the points fall in it
    assert _in_hole(without.latent).mean() == pytest.approx(1 / 15, abs=0.02)


def test_rolled_sheet_noise_has_requested_spread():
    clean = load_dataset("rolled_sheet", {"n": 3000, "noise": 0.0})
    noisy = load_dataset("rolled_sheet", {"n": 3000, "noise": 0.5})
    np.testing.assert_array_equal(clean.latent, noisy.latent)
    assert np.std(noisy.X - clean.X) == pytest.approx(0.5, rel=0.05)


def test_s_sheet_parametrisation():
    ds = load_dataset("s_sheet", {"n": 400, "seed": 2})
    t, h = ds.latent.T
    np.testing.assert_allclose(ds.X[:, 0], np.sin(t))
    np.testing.assert_allclose(ds.X[:, 2], np.sign(t) * (np.cos(t) - 1))
    np.testing.assert_array_equal(ds.X[:, 1], h)
    # t is arc length: the polyline through points sorted by t is as long as the t range
    order = np.argsort(t)
    curve = ds.X[order][:, [0, 2]]
    polyline = np.linalg.norm(np.diff(curve, axis=0), axis=1).sum()
    assert polyline == pytest.approx(t.max() - t.min(), rel=1e-3)


@pytest.mark.parametrize("name", GENERATED)
def test_same_seed_same_bytes_other_seed_differs(name):
    a = load_dataset(name, {"seed": 5})
    b = load_dataset(name, {"seed": 5})
    c = load_dataset(name, {"seed": 6})
    assert a.X.tobytes() == b.X.tobytes() and a.fingerprint() == b.fingerprint()
    assert a.X.tobytes() != c.X.tobytes() and a.fingerprint() != c.fingerprint()


def test_gaussian_clusters_centres_are_separation_apart():
    ds = load_dataset(
        "gaussian_clusters",
        {"n": 1000, "n_features": 50, "n_clusters": 5, "separation": 10.0, "cluster_std": 1.0},
    )
    _, counts = np.unique(ds.labels, return_counts=True)
    assert list(counts) == [200] * 5
    means = np.array([ds.X[ds.labels == k].mean(axis=0) for k in range(5)])
    # reference: SciPy pdist; sample means of 200 points wobble by about 1/sqrt(200) per axis
    np.testing.assert_allclose(pdist(means), 10.0, atol=0.3)
    within = np.concatenate([ds.X[ds.labels == k] - means[k] for k in range(5)])
    assert within.std() == pytest.approx(1.0, rel=0.02)


def test_gaussian_clusters_more_clusters_than_features():
    ds = load_dataset("gaussian_clusters", {"n": 60, "n_features": 2, "n_clusters": 6})
    assert ds.X.shape == (60, 2) and np.unique(ds.labels).size == 6


def test_gaussian_clusters_too_few_points():
    with pytest.raises(InputError, match="n_clusters"):
        load_dataset("gaussian_clusters", {"n": 3, "n_clusters": 5})


# ---------------------------------------------------------------- demo scenario


def test_machine_fleet_shape_and_names():
    ds = load_dataset("machine_fleet")
    assert ds.X.shape == (600, 12) and ds.latent.shape == (600, 2)
    assert len(ds.info["feature_names"]) == 12 == len(set(ds.info["feature_names"]))
    assert ((ds.latent >= 0) & (ds.latent <= 1)).all()
    assert set(ds.labels) == set(scenario.REGIMES)


def test_machine_fleet_features_are_a_function_of_latent():
    ds = load_dataset("machine_fleet", {"n": 2000, "noise": 0.0, "seed": 1})
    tr_lat, te_lat, tr_x, te_x = train_test_split(ds.latent, ds.X, test_size=0.25, random_state=0)
    # outside check: scikit-learn KNeighborsRegressor from (load, wear) predicts every one of
    # the 12 noiseless readings of held-out machines (scikit-learn r2_score per channel)
    predicted = KNeighborsRegressor(n_neighbors=5).fit(tr_lat, tr_x).predict(te_lat)
    assert r2_score(te_x, predicted, multioutput="raw_values").min() > 0.95
    # noise touches the readings only, not the hidden conditions or the regimes
    noisy = load_dataset("machine_fleet", {"n": 2000, "noise": 1.0, "seed": 1})
    np.testing.assert_array_equal(noisy.latent, ds.latent)
    np.testing.assert_array_equal(noisy.labels, ds.labels)


def test_machine_fleet_noise_matches_channel_scales():
    clean = load_dataset("machine_fleet", {"n": 4000, "noise": 0.0})
    noisy = load_dataset("machine_fleet", {"n": 4000, "noise": 2.0})
    scales = np.array([ch.noise_scale for ch in scenario.SENSOR_CHANNELS])
    np.testing.assert_allclose((noisy.X - clean.X).std(axis=0), 2.0 * scales, rtol=0.06)


def test_machine_fleet_regime_rules():
    load = np.array([0.2, 0.5, 0.9, 0.9, 0.5])
    wear = np.array([0.1, 0.1, 0.1, 0.7, 0.6])
    assert list(scenario.operating_regime(load, wear)) == [
        "light_duty",
        "production",
        "peak_load",
        "service_due",
        "service_due",
    ]


# ---------------------------------------------------------------- user tables


@pytest.fixture
def frame():
    rng = np.random.default_rng(0)
    return pd.DataFrame(
        {
            "a": rng.normal(size=20),
            "b": rng.normal(size=20),
            "c": rng.normal(size=20),
            "kind": ["x", "y"] * 10,
        }
    )


def _write(df, path):
    if path.suffix == ".csv":
        df.to_csv(path, index=False)
    elif path.suffix == ".tsv":
        df.to_csv(path, index=False, sep="\t")
    else:
        df.to_parquet(path, index=False)
    return str(path)


@pytest.mark.parametrize("ext", [".csv", ".tsv", ".parquet"])
def test_table_reads_numeric_columns_and_label(tmp_path, frame, ext):
    path = _write(frame, tmp_path / f"data{ext}")
    ds = load_dataset("table", {"path": path, "label": "kind"})
    np.testing.assert_allclose(ds.X, frame[["a", "b", "c"]].to_numpy(), rtol=1e-12)
    assert list(ds.labels) == list(frame["kind"])
    assert ds.info["feature_names"] == ["a", "b", "c"] and ds.name == "table"


def test_table_chosen_features_in_given_order(tmp_path, frame):
    path = _write(frame, tmp_path / "data.csv")
    ds = load_dataset("table", {"path": path, "features": ["c", "a"]})
    np.testing.assert_allclose(ds.X, frame[["c", "a"]].to_numpy(), rtol=1e-12)
    assert ds.labels is None


def test_table_leaves_out_text_columns_by_default(tmp_path, frame):
    ds = load_dataset("table", {"path": _write(frame, tmp_path / "data.csv")})
    assert ds.X.shape == (20, 3) and ds.info["ignored_columns"] == ["kind"]


def test_table_format_override(tmp_path, frame):
    path = tmp_path / "data.txt"
    frame.to_csv(path, index=False, sep="\t")
    ds = load_dataset("table", {"path": str(path), "format": "tsv", "label": "kind"})
    assert ds.X.shape == (20, 3)


def test_table_standardise_matches_standard_scaler(tmp_path, frame):
    ds = load_dataset("table", {"path": _write(frame, tmp_path / "d.csv"), "standardise": True})
    # reference: scikit-learn StandardScaler
    np.testing.assert_allclose(ds.X, StandardScaler().fit_transform(frame[["a", "b", "c"]]), atol=1e-12)


def test_npy_table_with_labels_file(tmp_path):
    X = np.random.default_rng(1).normal(size=(15, 4))
    np.save(tmp_path / "x.npy", X)
    (tmp_path / "y.csv").write_text("group\n" + "\n".join(["p", "q", "r"] * 5) + "\n")
    ds = load_dataset("table", {"path": str(tmp_path / "x.npy"), "labels_path": str(tmp_path / "y.csv")})
    np.testing.assert_array_equal(ds.X, X)
    assert list(ds.labels[:3]) == ["p", "q", "r"] and ds.info["feature_names"] == ["0", "1", "2", "3"]


def test_duplicates_kept_with_warning_or_dropped(tmp_path, frame, caplog):
    doubled = pd.concat([frame, frame.iloc[:5]], ignore_index=True)
    path = _write(doubled, tmp_path / "dup.csv")
    with caplog.at_level(logging.WARNING, logger="harness.datasets.tables"):
        kept = load_dataset("table", {"path": path, "label": "kind"})
    assert kept.n == 25 and kept.info["duplicate_rows"] == 5
    assert any("5 rows repeat" in r.getMessage() for r in caplog.records)
    dropped = load_dataset("table", {"path": path, "label": "kind", "duplicates": "drop"})
    assert dropped.n == 20
    np.testing.assert_allclose(dropped.X, frame[["a", "b", "c"]].to_numpy(), rtol=1e-12)


# -- every error names the file and, where there is one, the column


def _csv(tmp_path, text, name="bad.csv"):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


GOOD_ROWS = "".join(f"{i},{i * i % 7},{i % 3}\n" for i in range(12))


@pytest.mark.parametrize(
    "text, params, column, fragment",
    [
        ("a,b,kind\n" + GOOD_ROWS, {"features": ["a", "bb"]}, "bb", "did you mean 'b'"),
        ("a,b,kind\n" + GOOD_ROWS, {"label": "knd"}, "knd", "did you mean 'kind'"),
        ("a,b,c\n1,2,3\n2,3,4\n3,x,5\n4,5,6\n" + GOOD_ROWS, {}, "b", "'x' in row 3 (line 4)"),
        ("a,b,c\n1,2,3\n2,3,4\n3,x,5\n" + GOOD_ROWS, {"features": ["a", "b"]}, "b", "'x' in row 3"),
        (
            "a,b,c\n1,2,3\n2,,4\n3,4,5\n4,nan,6\n" + GOOD_ROWS,
            {},
            "b",
            "2 rows hold NaN, inf or an empty cell, first at row 2 (line 3)",
        ),
        ("a,b,c\n1,inf,3\n" + GOOD_ROWS, {}, "b", "first at row 1"),
        ("a,b,c\n" + "".join(f"{i},7,{i % 3}\n" for i in range(12)), {}, "b", "every row holds 7"),
        (
            "a,b,kind\n" + GOOD_ROWS.replace("3,2,0\n", "3,2,\n"),
            {"label": "kind"},
            "kind",
            "label in every row",
        ),
        ("a,b,kind\n" + GOOD_ROWS, {"features": ["a", "kind"], "label": "kind"}, "kind", "left out"),
    ],
)
def test_table_column_errors_name_file_and_column(tmp_path, text, params, column, fragment):
    path = _csv(tmp_path, text)
    with pytest.raises(InputError) as err:
        load_dataset("table", {"path": path, **params})
    message = str(err.value)
    assert "bad.csv" in message and f"column '{column}'" in message and fragment in message
    assert "\n" not in message


@pytest.mark.parametrize(
    "text, params, fragment",
    [
        ("a,b\n1,2\n2,3\n", {}, "at least 10 rows (min_rows), found 2"),
        ("a,b\n1,2\n2,3\n3,1\n", {"min_rows": 3}, None),
        ("a,b\n", {}, "found 0"),
        ("name,city\nx,y\nz,w\n", {}, "at least one numeric feature column"),
        ("a;b\n1;2\n", {}, "separated by ','"),
        ("a,b,c\n1,2,3\n", {"features": []}, "'features' is empty"),
    ],
)
def test_table_file_errors_name_the_file(tmp_path, text, params, fragment):
    path = _csv(tmp_path, text)
    if fragment is None:  # the boundary case loads
        assert load_dataset("table", {"path": path, **params}).n == 3
        return
    with pytest.raises(InputError) as err:
        load_dataset("table", {"path": path, **params})
    assert "bad.csv" in str(err.value) and fragment in str(err.value)


def test_table_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nowhere\.csv: .*not found"):
        load_dataset("table", {"path": str(tmp_path / "nowhere.csv")})


def test_table_without_path():
    with pytest.raises(InputError, match=r"table\.path"):
        load_dataset("table", {})


def test_table_unknown_extension(tmp_path):
    path = _csv(tmp_path, "a,b\n1,2\n", name="data.xlsx")
    with pytest.raises(InputError, match=r"data\.xlsx.*'format'"):
        load_dataset("table", {"path": path})


def test_table_unreadable_parquet(tmp_path):
    path = _csv(tmp_path, "not parquet at all", name="broken.parquet")
    with pytest.raises(InputError, match=r"broken\.parquet: a readable Parquet file"):
        load_dataset("table", {"path": path})


def test_npy_table_errors(tmp_path):
    np.save(tmp_path / "flat.npy", np.arange(12.0))
    with pytest.raises(InputError, match=r"flat\.npy: a 2-D array"):
        load_dataset("table", {"path": str(tmp_path / "flat.npy")})
    X = np.random.default_rng(0).normal(size=(12, 3))
    X[4, 2] = np.nan
    np.save(tmp_path / "gap.npy", X)
    with pytest.raises(InputError, match=r"gap\.npy, column 2: finite numbers; 1 row hold.*row 5"):
        load_dataset("table", {"path": str(tmp_path / "gap.npy")})
    with pytest.raises(InputError, match=r"gap\.npy: no 'features' or 'label'"):
        load_dataset("table", {"path": str(tmp_path / "gap.npy"), "label": "y"})


def test_labels_file_of_wrong_length(tmp_path):
    np.save(tmp_path / "x.npy", np.random.default_rng(0).normal(size=(12, 3)))
    (tmp_path / "y.csv").write_text("1\n2\n3\n")
    with pytest.raises(InputError, match=r"y\.csv: 12 labels .*found 3"):
        load_dataset("table", {"path": str(tmp_path / "x.npy"), "labels_path": str(tmp_path / "y.csv")})


# ---------------------------------------------------------------- distance matrices


@pytest.fixture
def distances():
    # reference: SciPy pdist + squareform give a valid Euclidean distance matrix
    points = np.random.default_rng(2).normal(size=(9, 3))
    return squareform(pdist(points))


def test_distance_matrix_round_trip_csv_without_header(tmp_path, distances):
    path = tmp_path / "d.csv"
    np.savetxt(path, distances, delimiter=",", fmt="%.17g")
    ds = load_dataset("distance_matrix", {"path": str(path)})
    assert ds.is_precomputed and ds.X is None and ds.name == "distance_matrix"
    np.testing.assert_array_equal(ds.distances, distances)


def test_distance_matrix_round_trip_with_header_and_row_names(tmp_path, distances):
    names = [f"item{i}" for i in range(9)]
    path = tmp_path / "d.csv"
    pd.DataFrame(distances, index=names, columns=names).to_csv(path, float_format="%.17g")
    np.testing.assert_array_equal(load_dataset("distance_matrix", {"path": str(path)}).distances, distances)


def test_distance_matrix_round_trip_tsv_header_only(tmp_path, distances):
    path = tmp_path / "d.tsv"
    pd.DataFrame(distances, columns=list("abcdefghi")).to_csv(
        path, sep="\t", index=False, float_format="%.17g"
    )
    np.testing.assert_array_equal(load_dataset("distance_matrix", {"path": str(path)}).distances, distances)


def test_distance_matrix_npy_with_labels(tmp_path, distances):
    np.save(tmp_path / "d.npy", distances)
    (tmp_path / "labels.csv").write_text("".join(f"{i % 3}\n" for i in range(9)))
    ds = load_dataset(
        "distance_matrix", {"path": str(tmp_path / "d.npy"), "labels_path": str(tmp_path / "labels.csv")}
    )
    np.testing.assert_array_equal(ds.distances, distances)
    assert ds.labels.dtype == np.int64 and list(ds.labels[:4]) == [0, 1, 2, 0]


def test_distance_matrix_tiny_asymmetry_is_evened_out(tmp_path, distances):
    D = distances.copy()
    D[0, 1] *= 1 + 1e-12
    np.save(tmp_path / "d.npy", D)
    out = load_dataset("distance_matrix", {"path": str(tmp_path / "d.npy")}).distances
    np.testing.assert_array_equal(out, out.T)


def _broken(D, kind):
    D = D.copy()
    if kind == "asymmetric":
        D[2, 5] += 0.5
    elif kind == "diagonal":
        D[3, 3] = 0.25
    elif kind == "negative":
        D[1, 4] = D[4, 1] = -1.0
    elif kind == "nan":
        D[6, 7] = D[7, 6] = np.nan
    elif kind == "not_square":
        D = D[:, :-1]
    return D


@pytest.mark.parametrize(
    "kind, fragment, line",
    [
        ("asymmetric", "a symmetric matrix; row 3{line}, column 6 holds", 3),
        ("diagonal", "zeros on the diagonal; row 4{line}, column 4 holds 0.25", 4),
        ("negative", "non-negative distances; row 2{line}, column 5 holds -1", 2),
        ("nan", "finite distances; 2 cells hold NaN or inf, first at row 7{line}, column 8", 7),
        ("not_square", "a square matrix (n rows x n columns), got 9 x 8", None),
    ],
)
def test_distance_matrix_errors_name_file_and_cell(tmp_path, distances, kind, fragment, line):
    broken = _broken(distances, kind)
    np.savetxt(tmp_path / "dist.csv", broken, delimiter=",")
    np.save(tmp_path / "dist.npy", broken)
    for name, line_text in [("dist.csv", f" (line {line})"), ("dist.npy", "")]:
        with pytest.raises(InputError) as err:
            load_dataset("distance_matrix", {"path": str(tmp_path / name)})
        assert str(err.value).startswith(str(tmp_path / name) + ": ")
        assert fragment.format(line=line_text) in str(err.value)


def test_distance_matrix_error_counts_lines_after_header(tmp_path, distances):
    path = tmp_path / "dist.csv"
    pd.DataFrame(_broken(distances, "asymmetric"), columns=list("abcdefghi")).to_csv(path, index=False)
    with pytest.raises(InputError, match=r"dist\.csv: a symmetric matrix; row 3 \(line 4\), column 6"):
        load_dataset("distance_matrix", {"path": str(path)})


def test_distance_matrix_numeric_header_gets_a_hint(tmp_path, distances):
    path = tmp_path / "dist.csv"
    pd.DataFrame(distances).to_csv(path, index=False)
    with pytest.raises(
        InputError,
        match=r"dist\.csv: a square matrix .*got 10 x 9 \(the first row looks like a header of numbers",
    ):
        load_dataset("distance_matrix", {"path": str(path)})


def test_distance_matrix_text_cell(tmp_path):
    path = _csv(tmp_path, "0,1,2\n1,0,oops\n2,3,0\n", name="words.csv")
    with pytest.raises(
        InputError,
        match=r"words\.csv: a number in every cell; found 'oops' at row 2 \(line 2\), "
        r"column 3",
    ):
        load_dataset("distance_matrix", {"path": path})


def test_a_table_subsample_keeps_class_shares_and_rows(tmp_path):
    # stratified sampling keeps each class's share (70/30 of 100 rows -> 14/6 of 20; common practice)
    from harness.datasets import load_dataset as load

    rng = np.random.default_rng(3)
    X = rng.normal(size=(100, 3))
    labels = ["a"] * 70 + ["b"] * 30
    path = tmp_path / "t.csv"
    path.write_text(
        "x,y,z,site\n" + "\n".join(f"{r[0]:.6f},{r[1]:.6f},{r[2]:.6f},{g}" for r, g in zip(X, labels)),
        encoding="utf-8",
    )
    full = load("table", {"path": str(path), "label": "site"})
    part = load("table", {"path": str(path), "label": "site", "n": 20, "seed": 1})
    assert part.n == 20 and sorted(np.unique(part.labels, return_counts=True)[1]) == [6, 14]
    rows = {tuple(r) for r in full.X}
    assert all(tuple(r) in rows for r in part.X)
    again = load("table", {"path": str(path), "label": "site", "n": 20, "seed": 1})
    np.testing.assert_array_equal(part.X, again.X)
