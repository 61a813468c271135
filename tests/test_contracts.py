"""Contracts of the package's structure: who touches sys.path, how plug-ins are found, what the
settings name and the run folders store, and that the import and lint contracts hold.

Plumbing tests of our own; the plug-in classes are invented (tests/plugins_for_tests.py), the
entry-point files follow the packaging specification of installed distributions
(``*.dist-info/entry_points.txt``, read by :mod:`importlib.metadata`).
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.decomposition import PCA

import harness
from harness import check_method, load_suite
from harness.api import run_suite
from harness.config import BACKEND_NAMES, STORED_STATUSES, CellStatus
from harness.datasets import load_dataset
from harness.errors import InputError
from harness.methods import get_method_spec
from harness.methods.plugins import ENTRY_POINT_GROUP
from harness.run import RunFolder
from harness.run.backends import BACKENDS

REPO = Path(__file__).resolve().parent.parent
PACKAGE = Path(harness.__file__).resolve().parent
PLUGIN_LOADER = PACKAGE / "methods" / "plugins.py"


# ---------------------------------------------------------------- sys.path


def test_only_the_plugin_loader_mentions_sys_path():
    mentions = sorted(
        p.relative_to(PACKAGE).as_posix() for p in PACKAGE.rglob("*.py") if "sys.path" in p.read_text()
    )
    assert mentions == [PLUGIN_LOADER.relative_to(PACKAGE).as_posix()]


@pytest.fixture
def lab_suite(tmp_path, write_suite):
    """A suite whose plug-in lives in a package next to it (``mylab/embed.py``), not on sys.path."""
    package = tmp_path / "mylab"
    package.mkdir()
    (package / "__init__.py").write_text("")
    (package / "embed.py").write_text(
        textwrap.dedent(
            """\
            import numpy as np


            class Stretch:
                \"\"\"The first columns of the data, each scaled by `factor`.\"\"\"

                def __init__(self, n_components=2, factor=2.0):
                    self.n_components = n_components
                    self.factor = factor

                def fit_transform(self, X, y=None):
                    return self.factor * np.asarray(X, dtype=float)[:, : self.n_components]
            """
        )
    )
    path = write_suite(
        """\
        name: lab
        seeds: 1
        datasets: [iris]
        methods:
          - use: mylab.embed:Stretch
            params: {factor: 3.0}
        measures: {k: [5]}
        """,
        "lab.yaml",
    )
    yield path
    for name in [m for m in sys.modules if m == "mylab" or m.startswith("mylab.")]:
        del sys.modules[name]


def test_a_plugin_next_to_the_suite_loads_and_runs(lab_suite, tmp_path, monkeypatch):
    monkeypatch.chdir(REPO)  # the suite's folder is not the working folder
    before = list(sys.path)
    suite = load_suite(lab_suite)
    assert sys.path == before
    assert suite.methods[0].use == "mylab.embed:Stretch"
    outcome = run_suite(suite, tmp_path / "out", jobs=1)
    assert sys.path == before
    assert outcome.counts == {"ok": 1}
    (key,) = outcome.scores["key"]
    # the plug-in's own code ran: 3 x the first two columns of the data
    X = load_dataset("iris").X
    np.testing.assert_allclose(outcome.folder.embedding(key), 3.0 * X[:, :2])


def test_loading_a_run_folder_leaves_sys_path_alone(small_run):
    before = list(sys.path)
    run = RunFolder.open(small_run)
    assert run.suite.name == "tiny" and len(run.scores) > 0 and run.manifest
    assert sys.path == before


# ---------------------------------------------------------------- entry points


def test_a_method_registered_through_an_entry_point_is_found(tmp_path, monkeypatch, write_suite):
    with pytest.raises(InputError, match="unknown method 'flat'"):
        get_method_spec("flat")
    # an installed distribution as importlib.metadata finds it: <name>.dist-info on the path
    site = tmp_path / "site"
    info = site / "flatland-1.0.dist-info"
    info.mkdir(parents=True)
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: flatland\nVersion: 1.0\n")
    (info / "entry_points.txt").write_text(
        f"[{ENTRY_POINT_GROUP}]\nflat = plugins_for_tests:ScaledProjection\n"
    )
    monkeypatch.syspath_prepend(str(site))
    assert ENTRY_POINT_GROUP == "foldbench.methods"
    spec = get_method_spec("flat", "s.yaml: methods[0].use")
    assert spec.name == "flat" and spec.source == "plugins_for_tests:ScaledProjection"
    assert [p.name for p in spec.params] == ["scale"]
    suite = load_suite(
        write_suite("name: ep\ndatasets: [iris]\nmethods:\n  - use: flat\n    params: {scale: 2}\n")
    )
    assert suite.methods[0].use == "flat" and suite.methods[0].params["scale"] == 2


# ---------------------------------------------------------------- check_method


class _NotSeeded:
    """Ignores its random_state: every call draws new numbers."""

    def __init__(self, n_components=2, random_state=None):
        self.n_components = n_components

    def fit_transform(self, X):
        return np.random.default_rng().normal(size=(len(X), self.n_components))


class _DistancesWithoutMetric:
    accepts_distances = True

    def __init__(self, n_components=2):
        self.n_components = n_components

    def fit_transform(self, X):
        return np.asarray(X)[:, : self.n_components]


class _Fails:
    def __init__(self, n_components=2):
        raise ValueError("needs a licence key")

    def fit_transform(self, X):
        return X


def test_check_method_accepts_a_good_estimator():
    import plugins_for_tests

    # scikit-learn's PCA keeps the contract (fit_transform, n_components, random_state)
    assert check_method(PCA) == []
    assert check_method(plugins_for_tests.ScaledProjection) == []
    assert check_method(plugins_for_tests.make_projection) == []


@pytest.mark.parametrize(
    "name, reason",
    [
        ("NoFitTransform", "has no fit_transform method"),
        ("NOT_AN_ESTIMATOR", "expected an estimator class or a factory"),
        ("ReturnsNaN", "fit_transform output is not usable: "),
        ("ReturnsWrongShape", "shape (60, 3), expected (60, 2)"),
        ("ReturnsOnePoint", "all points coincide"),
    ],
)
def test_check_method_names_what_is_wrong(name, reason):
    import plugins_for_tests

    problems = check_method(getattr(plugins_for_tests, name))
    assert len(problems) == 1, problems
    assert reason in problems[0] and "\n" not in problems[0]


@pytest.mark.parametrize(
    "cls, reason",
    [
        (_NotSeeded, "the same random_state gave different embeddings"),
        (_DistancesWithoutMetric, "declares accepts_distances but its constructor has no 'metric' parameter"),
        (_Fails, "raised ValueError: needs a licence key"),
    ],
)
def test_check_method_rejects_contract_breaches(cls, reason):
    problems = check_method(cls)
    assert len(problems) == 1 and reason in problems[0], problems


# ---------------------------------------------------------------- settings and records


def test_the_backend_names_are_the_registered_backends():
    assert sorted(BACKEND_NAMES) == sorted(BACKENDS)


def test_stored_statuses_are_cell_status_values(tmp_path, write_suite):
    suite = write_suite(
        """\
        name: statuses
        seeds: 1
        datasets: [iris]
        methods:
          - use: pca
          - {use: "runner_plugins:Raises", name: raises}
          - {use: "runner_plugins:Exits", name: exits}
          - use: sammon
        measures: {k: [5]}
        """
    )
    outcome = run_suite(suite, tmp_path / "out", jobs=2, quadratic_limit=100)
    records = [json.loads(p.read_text()) for p in (outcome.run_dir / "cells").glob("*.json")]
    by_method = {r["cell"]["method"]: r["status"] for r in records}
    # sammon's memory grows as n squared, so on 150 points with a limit of 100 it is skipped
    assert by_method == {
        "pca": CellStatus.OK.value,
        "raises": CellStatus.FAILED.value,
        "exits": CellStatus.CRASHED.value,
        "sammon": CellStatus.SKIPPED.value,
    }
    assert {r["status"] for r in records} <= {s.value for s in STORED_STATUSES}
    assert sorted(pd.read_csv(outcome.run_dir / "scores.csv")["status"]) == sorted(by_method.values())
    assert CellStatus.INTERRUPTED not in STORED_STATUSES


# ---------------------------------------------------------------- import and lint contracts


def _tool(name: str) -> str:
    path = Path(sys.executable).parent / name
    assert path.is_file(), f"{name} is not installed next to {sys.executable} (pip install -e '.[test]')"
    return str(path)


@pytest.mark.parametrize(
    "command",
    [["lint-imports"], ["ruff", "check", "harness", "tests", "bench"]],
    ids=["lint-imports", "ruff-check"],
)
def test_the_import_and_lint_contracts_hold(command):
    proc = subprocess.run(
        [_tool(command[0]), *command[1:]], cwd=REPO, capture_output=True, text=True, timeout=600
    )
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-2000:]


def test_a_registered_backend_is_accepted_by_suites_and_the_command_line():
    # A backend added with register_backend needs no second list to be usable by name.
    from harness.config import BACKEND_NAMES
    from harness.run.backends import BACKENDS, register_backend
    from harness.suite import parse_suite

    try:
        register_backend("elsewhere", BACKENDS["local"])
        suite = parse_suite(
            "name: b\ndatasets: [iris]\nmethods: [pca]\nrun: {backend: elsewhere}\n", "b.yaml"
        )
        assert suite.run.backend == "elsewhere"
    finally:
        BACKENDS.pop("elsewhere", None)
        if "elsewhere" in BACKEND_NAMES:
            BACKEND_NAMES.remove("elsewhere")
