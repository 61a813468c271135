"""Regression check against a baseline, tolerances and suite expectations.

Statistics are checked against SciPy; the rest are plumbing tests on invented
score tables and on tiny real runs (150-point rolled and S-shaped sheets).
"""

from __future__ import annotations

import json
import textwrap
from pathlib import Path
from xml.etree import ElementTree as ET

import numpy as np
import pandas as pd
import pytest
from runner_plugins import Noisy
from scipy import stats

from harness.api import run_suite
from harness.compare.check import check_markdown, check_runs, check_text, junit_xml, welch_test
from harness.compare.environment import environment_changes
from harness.compare.expectations import evaluate_expectations
from harness.errors import InputError
from harness.suite import parse_suite
from harness.suite.tolerances import Tolerance, parse_tolerance_flags, parse_tolerances, resolve_tolerance


def blurred(n_components: int = 2, random_state: int | None = None) -> Noisy:
    """The 'proj' method after a bad change: same name, same (no) parameters, noise 1.0."""
    return Noisy(n_components, random_state, noise=1.0)


SUITE = """\
name: gate
seeds: {seeds}
datasets:
  - {{use: rolled_sheet, name: roll, params: {{n: 150}}}}
  - {{use: s_sheet, name: s, params: {{n: 150}}}}
methods:
  - use: pca
  - {{use: "runner_plugins:Noisy", name: jitter, params: {{noise: 0.3}}}}
  - {{use: "{proj}", name: proj}}
measures: {{k: [5, 10]}}
"""


def _run(root: Path, seeds: list[int], proj: str = "runner_plugins:FirstColumns") -> Path:
    suite = parse_suite(SUITE.format(seeds=seeds, proj=proj), str(root / "gate.yaml"))
    return run_suite(suite, root, jobs=2, isolate=False).run_dir


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("runs")
    return {
        "baseline": _run(root, [0, 1, 2]),
        "reseeded": _run(root, [3, 4, 5]),
        "worse": _run(root, [3, 4, 5], proj="test_check:blurred"),
    }


# ---------------------------------------------------------------- Welch's test


@pytest.mark.parametrize("higher", [True, False])
@pytest.mark.parametrize("shift", [-0.3, 0.0, 0.4])
def test_welch_matches_scipy(higher, shift):
    rng = np.random.default_rng(7)
    current = rng.normal(1.0 + shift, 0.5, size=6)
    baseline = rng.normal(1.0, 1.2, size=4)
    ours = welch_test(current, baseline, higher_is_better=higher)
    # scipy.stats.ttest_ind(equal_var=False) is Welch's test; the bad direction is
    # "current less" for higher-is-better measures and "current greater" otherwise.
    ref = stats.ttest_ind(current, baseline, equal_var=False, alternative="less" if higher else "greater")
    assert ours.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert ours.p_worse == pytest.approx(ref.pvalue, rel=1e-10)
    assert ours.df == pytest.approx(ref.df, rel=1e-12)


def test_welch_zero_spread_is_exact():
    # Deterministic methods give the same value for every seed: a difference is then certain.
    assert welch_test([0.8, 0.8], [0.9, 0.9], higher_is_better=True).p_worse == 0.0
    assert welch_test([0.9, 0.9], [0.8, 0.8], higher_is_better=True).p_worse == 1.0


# ---------------------------------------------------------------- tolerances


def test_tolerance_defaults_and_overrides():
    entries = parse_tolerances(
        {"default": 0.02, "stress": "25%", "fit_seconds": "0.1 + 50%", "silhouette": False}
    )
    assert resolve_tolerance("trustworthiness@10", {}) == Tolerance(0.01, 0.0, True)
    assert resolve_tolerance("trustworthiness@10", entries).abs == 0.02
    assert resolve_tolerance("stress", entries).allowance(0.4) == pytest.approx(0.1)  # max(0.02, 25% of 0.4)
    assert resolve_tolerance("fit_seconds", {}).gate is False  # cost: listed, not gated
    assert resolve_tolerance("fit_seconds", entries) == Tolerance(0.1, 0.5, True)
    assert resolve_tolerance("silhouette", entries).gate is False


@pytest.mark.parametrize(
    "flag, words",
    [
        ("stress", "MEASURE=VALUE"),
        ("stres=0.1", "did you mean 'stress'"),
        ("stress=-1", ">= 0"),
        ("stress=abc", "a percentage like 25%"),
        ("alpha=1.5", "between 0 and 1"),
    ],
)
def test_bad_tolerance_flags(flag, words):
    with pytest.raises(InputError) as err:
        parse_tolerance_flags([flag])
    assert str(err.value).startswith("--tolerance") and words in str(err.value)


def test_tolerance_flags():
    got = parse_tolerance_flags(["stress=0.02", "fit_seconds=0.1+25%", "alpha=0.01"])
    assert got == {"stress": Tolerance(abs=0.02), "fit_seconds": Tolerance(0.1, 0.25, None), "alpha": 0.01}


# ---------------------------------------------------------------- verdicts on invented tables


def _folder(path: Path, rows: list[dict], manifest: dict | None = None, suite: str = "") -> Path:
    path.mkdir(parents=True)
    (path / "manifest.json").write_text(json.dumps(manifest or {"seeds": sorted({r["seed"] for r in rows})}))
    pd.DataFrame(rows).to_csv(path / "scores.csv", index=False)
    if suite:
        (path / "suite.yaml").write_text(textwrap.dedent(suite))
    return path


def _rows(
    method: str, values: list[float], measure: str = "trustworthiness@10", params: str = "-", seed0: int = 0
) -> list[dict]:
    return [
        {"dataset": "d", "method": method, "params": params, "seed": seed0 + i, "status": "ok", measure: v}
        for i, v in enumerate(values)
    ]


def test_verdicts_on_invented_tables(tmp_path):
    base = _folder(
        tmp_path / "b",
        _rows("same", [0.90, 0.91, 0.92])
        + _rows("drop", [0.90, 0.905, 0.91])
        + _rows("noisy", [0.70, 0.95, 0.80])
        + _rows("gain", [0.80, 0.81, 0.80])
        + _rows("gone", [0.5, 0.5, 0.5]),
    )
    cur = _folder(
        tmp_path / "c",
        _rows("same", [0.905, 0.91, 0.915])
        + _rows("drop", [0.85, 0.86, 0.855])
        + _rows("noisy", [0.60, 0.90, 0.75])
        + _rows("gain", [0.90, 0.91, 0.90])
        + _rows("fresh", [0.5, 0.5, 0.5]),
    )
    out = check_runs(cur, base)
    verdict = out.table.set_index("method")["verdict"].to_dict()
    assert verdict == {
        "same": "unchanged",
        "drop": "regression",
        "noisy": "within noise",
        "gain": "improvement",
        "gone": "missing",
        "fresh": "new",
    }
    assert not out.passed
    assert list(out.regressions["method"]) == ["drop"]


def test_single_seed_uses_the_tolerance_alone(tmp_path):
    base = _folder(tmp_path / "b", _rows("m", [0.90]))
    cur = _folder(tmp_path / "c", _rows("m", [0.88]))
    out = check_runs(cur, base)
    assert out.table["verdict"].tolist() == ["regression"]
    assert out.table["p_value"].isna().all()
    assert any("single seed" in n and "tolerance alone" in n for n in out.notes)
    assert check_runs(cur, base, tolerances={"default": 0.05}).passed


def test_lower_is_better_and_suite_tolerances(tmp_path):
    # stress is lower-is-better: a rise is the bad direction
    base = _folder(tmp_path / "b", _rows("m", [0.30, 0.31, 0.30], "stress"))
    rows = _rows("m", [0.35, 0.36, 0.35], "stress")
    assert not check_runs(_folder(tmp_path / "c", rows), base).passed
    loose = _folder(tmp_path / "c2", rows, suite="tolerances: {stress: 25%}\n")
    assert check_runs(loose, base).passed  # suite block: 25% of 0.303 covers +0.05
    assert not check_runs(loose, base, tolerances={"stress": 0.01}).passed  # a flag overrides it


def test_cost_measures_are_listed_not_gated(tmp_path):
    base = _folder(tmp_path / "b", _rows("m", [1.0, 1.1, 1.0], "fit_seconds"))
    cur = _folder(tmp_path / "c", _rows("m", [3.0, 3.1, 3.0], "fit_seconds"))
    out = check_runs(cur, base)
    assert out.table["verdict"].tolist() == ["regression"] and out.passed
    assert "not gated" in check_text(out)
    assert not check_runs(cur, base, tolerances={"fit_seconds": "50%"}).passed


def test_all_seeds_failing_is_a_regression(tmp_path):
    base = _folder(tmp_path / "b", _rows("m", [0.9, 0.9]))
    failed = [dict(r, status="failed", **{"trustworthiness@10": np.nan}) for r in _rows("m", [0, 0])]
    out = check_runs(_folder(tmp_path / "c", failed), base)
    assert out.table["verdict"].tolist() == ["regression"] and not out.passed


def test_environment_changes_name_old_and_new():
    old = {
        "environment": {
            "python": "3.11.4",
            "packages": {"scikit-learn": "1.8.0", "numpy": "2.1.0"},
            "blas": [{"internal_api": "openblas", "version": "0.3.27", "num_threads": 4}],
        },
        "suite": {"hash": "aaaa"},
        "datasets": {"roll": {"fingerprint": "f1"}},
        "seeds": [0, 1, 2],
    }
    new = {
        "environment": {
            "python": "3.11.4",
            "packages": {"scikit-learn": "1.9.1", "numpy": "2.1.0"},
            "blas": [{"internal_api": "openblas", "version": "0.3.27", "num_threads": 2}],
        },
        "suite": {"hash": "aaaa"},
        "datasets": {"roll": {"fingerprint": "f2"}},
        "seeds": [5, 6, 7],
    }
    assert environment_changes(old, new) == [
        "scikit-learn 1.8.0 → 1.9.1",
        "openblas threads 4 → 2",
        "seeds 0-2 → 5-7",
        "dataset roll fingerprint f1 → f2",
    ]


# ---------------------------------------------------------------- bad folders


def test_missing_baseline_folder(tmp_path):
    current = _folder(tmp_path / "c", _rows("m", [0.9]))
    with pytest.raises(InputError) as err:
        check_runs(current, tmp_path / "nowhere")
    msg = str(err.value)
    assert "\n" not in msg and msg.startswith(f"baseline folder {tmp_path / 'nowhere'}")


@pytest.mark.parametrize(
    "breakage, words",
    [
        ("no manifest", "no manifest.json"),
        ("bad manifest", "manifest.json: expected readable JSON"),
        ("no scores", "no finished cells"),
        ("bad scores", "scores.csv: expected columns"),
    ],
)
def test_malformed_baseline_folder(tmp_path, breakage, words):
    current = _folder(tmp_path / "c", _rows("m", [0.9]))
    folder = tmp_path / "base"
    folder.mkdir()
    if breakage != "no manifest":
        (folder / "manifest.json").write_text("{not json" if breakage == "bad manifest" else "{}")
    if breakage == "bad scores":
        (folder / "scores.csv").write_text("a,b\n1,2\n")
    with pytest.raises(InputError) as err:
        check_runs(current, folder)
    msg = str(err.value)
    assert "\n" not in msg and msg.startswith("baseline folder") and words in msg


# ---------------------------------------------------------------- real runs


def test_reseeded_run_passes(runs):
    out = check_runs(runs["reseeded"], runs["baseline"])
    assert out.passed, check_text(out)
    jitter = out.table[(out.table["method"] == "jitter") & out.table["gated"]]
    # different seeds really gave different numbers, so the gate was exercised
    assert (jitter["difference"].abs() > 0).any()
    assert set(out.table["verdict"]) <= {"unchanged", "within noise", "improvement", "regression"}
    assert any("different seeds" in n for n in out.notes)
    assert "seeds 0-2 → 3-5" in out.environment_changes


def test_worse_method_fails_and_is_named(runs):
    out = check_runs(runs["worse"], runs["baseline"])
    assert not out.passed
    bad = out.regressions
    assert set(bad["method"]) == {"proj"}
    assert {"roll", "s"} == set(bad["dataset"])
    assert "trustworthiness@10" in set(bad["measure"])
    text = check_text(out)
    line = next(
        line
        for line in text.splitlines()
        if line.startswith("roll") and "trustworthiness@10" in line and "proj" in line
    )
    assert line.rstrip().endswith("regression")
    assert text.splitlines()[-1].startswith("FAILED")
    assert "**regression**" in check_markdown(out)


def test_junit_has_one_case_per_comparison(runs):
    out = check_runs(runs["worse"], runs["baseline"])
    root = ET.fromstring(junit_xml(out))
    cases = root.findall(".//testcase")
    assert len(cases) == len(out.table)
    failed = [c for c in cases if c.find("failure") is not None]
    assert len(failed) == len(out.regressions) == int(root.get("failures"))
    assert {c.get("classname").split(".", 1)[1] for c in failed} == {"proj[-]"}


def test_expectations_on_a_run(runs):
    from harness.api import load_run

    run = load_run(runs["worse"])
    suite = parse_suite(
        SUITE.format(seeds=[5], proj="runner_plugins:FirstColumns")
        + textwrap.dedent("""\
        expect:
          - {dataset: s, method: pca, measure: trustworthiness, at_least: 0.9}
          - {method: proj, measure: trustworthiness@10, at_least: 0.9}
          - {dataset: roll, method: [pca, jitter], measure: stress, at_most: 5}
        """),
        "gate.yaml",
    )
    results = evaluate_expectations(suite, run.scores)
    by = {(r.expectation.where, r.dataset): r for r in results}
    assert by[("expect[0]", "s")].seeds == 3
    assert by[("expect[0]", "s")].passed == (by[("expect[0]", "s")].value >= 0.9)
    proj = [r for r in results if r.expectation.where == "expect[1]"]
    assert len(proj) == 2 and not any(r.passed for r in proj)
    assert all("proj [-] on" in r.message and "NOT met" in r.message for r in proj)
    assert sum(r.expectation.where == "expect[2]" for r in results) == 2


@pytest.mark.parametrize(
    "entry, where, words",
    [
        ("{measure: stress, at_most: 1, datset: iris}", "expect[0].datset", "did you mean 'dataset'"),
        ("{measure: stres, at_most: 1}", "expect[0].measure", "did you mean 'stress'"),
        ("{measure: stress, at_most: high}", "expect[0].at_most", "expected a number"),
        ("{measure: stress}", "expect[0]", "at_least, at_most or both"),
        ("{measure: stress, at_most: 1, method: pcaa}", "expect[0].method", "did you mean 'pca'"),
        ("{measure: trustworthiness@7, at_least: 1}", "expect[0].measure", "measures.k [5, 10]"),
    ],
)
def test_bad_expectations(entry, where, words):
    with pytest.raises(InputError) as err:
        parse_suite(
            SUITE.format(seeds=1, proj="runner_plugins:FirstColumns") + f"expect:\n  - {entry}\n", "gate.yaml"
        )
    assert str(err.value).startswith(f"gate.yaml: {where}:") and words in str(err.value)


def test_expectation_without_a_match_fails(runs):
    from harness.api import load_run

    suite = parse_suite(
        SUITE.format(seeds=1, proj="runner_plugins:FirstColumns")
        + "expect:\n  - {method: pca, params: {whiten: true}, measure: stress, at_most: 1}\n",
        "gate.yaml",
    )
    (result,) = evaluate_expectations(suite, load_run(runs["baseline"]).scores)
    assert not result.passed and "no configuration" in result.message


def test_a_tolerance_flag_on_the_command_line_reaches_the_gate(runs, capsys):
    # `--tolerance MEASURE=VALUE` is parsed once by the CLI and must pass through check_runs as it is.
    from harness.cli import main

    code = main(
        ["check", str(runs["reseeded"]), "--baseline", str(runs["baseline"]), "--tolerance", "stress=0.5"]
    )
    out = capsys.readouterr().out
    assert code == 0 and "PASSED" in out.splitlines()[-1]
    code = main(
        ["check", str(runs["reseeded"]), "--baseline", str(runs["baseline"]), "--tolerance", "stress=x%"]
    )
    assert code == 2 and "--tolerance" in capsys.readouterr().err
