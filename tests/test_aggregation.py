"""One aggregation behind every table: the terminal, ranking.md, summary.csv and report.html agree.

Plumbing of our own on two real runs: the shared small run (conftest, a grid included) and a
reduced copy of the bundled quickstart suite (every dataset and method, fewer points and seeds).
The numbers are also recomputed from scores.csv with NumPy (mean; sample standard deviation,
ddof = 1) and SciPy (``scipy.stats.rankdata``, ties at their average rank), so the shared
numbers are right as well as equal.
"""

from __future__ import annotations

import contextlib
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy.stats import rankdata

from harness.cli import main
from harness.cli.run import print_ranking
from harness.compare import rank_folder
from harness.run import RunFolder

QUICKSTART = Path(__file__).parent.parent / "suites" / "quickstart.yaml"
#: Measures the two suites rank by (quickstart's rank_by; the small suite uses the default set).
RANK_BY = ["trustworthiness@10", "continuity@10", "shepard_spearman"]
ARROWS = re.compile(r" [↑↓]$")
MEASURE_CELL = re.compile(
    r"^(?P<mean>-?\d+\.\d+)(?P<spread> ± \d+\.\d+| \(seeds agree\)| \(sd < 0\.001\))?†?"
    r"(?:95% t, \d+ seeds \[(?P<lo>-?\d+\.\d+), (?P<hi>-?\d+\.\d+)\])?$"
)


def spread_text(sd: float) -> str:
    """How a seed spread is written (documented in docs/reports.md): never as ``± 0.000``.

    No spread (one seed, or one fit of a seed-free method copied to every seed) writes none."""
    if np.isnan(sd):
        return ""
    if sd == 0:
        return " (seeds agree)"
    if round(sd, 3) == 0:
        return " (sd < 0.001)"
    return f" ± {sd:.3f}"


# ------------------------------------------------------------------ the two runs


def _reduced_quickstart(tmp: Path) -> Path:
    """The quickstart suite with its datasets cut to 150 points and two seeds (same methods)."""
    doc = yaml.safe_load(QUICKSTART.read_text())
    doc["seeds"] = 2
    for entry in doc["datasets"]:
        if "n" in entry.get("params", {}):
            entry["params"]["n"] = 150
    path = tmp / "quickstart.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


@pytest.fixture(scope="module")
def quickstart_run(tmp_path_factory):
    """The reduced quickstart run through the command line: (run folder, what it printed)."""
    root = tmp_path_factory.mktemp("quickstart")
    suite = _reduced_quickstart(root)
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(["run", str(suite), "--out", str(root / "out"), "--jobs", "2", "--no-cache"])
    assert code == 0, printed.getvalue()[-2000:]
    (run_dir,) = (root / "out" / "quickstart").iterdir()
    return run_dir, printed.getvalue()


@pytest.fixture(scope="module")
def small(small_run):
    """The shared small run with the terminal's tables printed from its folder."""
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        print_ranking(rank_folder(RunFolder.open(small_run)))
    return small_run, printed.getvalue()


# ------------------------------------------------------------------ reading the four outputs


def markdown_tables(text: str) -> dict[str, list[dict[str, str]]]:
    """Pipe tables by the heading line above them (``## roll`` or ``roll``), as rows of header -> cell."""
    tables: dict[str, list[dict[str, str]]] = {}
    heading, lines = "", text.splitlines()
    i = 0
    while i < len(lines):
        line = lines[i].strip()
        if line.startswith("|"):
            block = []
            while i < len(lines) and lines[i].strip().startswith("|"):
                block.append([c.strip() for c in lines[i].strip().strip("|").split("|")])
                i += 1
            headers = [ARROWS.sub("", h) for h in block[0]]
            tables[heading] = [dict(zip(headers, row)) for row in block[2:]]
            continue
        if line:
            heading = line.removeprefix("## ")
            if heading.startswith("Across datasets"):
                heading = "Across datasets"
        i += 1
    return tables


class _Tables(HTMLParser):
    """Every ``<table>`` of a page, under the last ``<h2>``/``<h3>`` text before it."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[tuple[str, list[list[str]]]] = []
        self._heading = ""
        self._in_heading = False
        self._rows: list[list[str]] | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag in ("h2", "h3"):
            self._in_heading, self._heading = True, ""
        elif tag == "table":
            self._rows = []
        elif tag == "tr" and self._rows is not None:
            self._rows.append([])
        elif tag in ("td", "th") and self._rows is not None:
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("h2", "h3"):
            self._in_heading = False
        elif tag in ("td", "th") and self._cell is not None and self._rows is not None:
            self._rows[-1].append("".join(self._cell).strip())
            self._cell = None
        elif tag == "table" and self._rows is not None:
            self.tables.append((self._heading, self._rows))
            self._rows = None

    def handle_data(self, data):
        if self._in_heading:
            self._heading += data
        if self._cell is not None:
            self._cell.append(data)


def html_tables(page: str) -> dict[str, list[dict[str, str]]]:
    """The page's first table under each heading (per dataset: the rank-by measures), header -> cell."""
    parser = _Tables()
    parser.feed(page)
    out: dict[str, list[dict[str, str]]] = {}
    for heading, rows in parser.tables:
        if heading not in out:
            headers = [ARROWS.sub("", h) for h in rows[0]]
            out[heading] = [dict(zip(headers, r)) for r in rows[1:]]
    return out


def by_config(rows: list[dict[str, str]]) -> dict[tuple[str, str], dict[str, str]]:
    """Rows keyed by (method, params); ``(tuned)`` dropped from the method."""
    return {(r["method"].removesuffix(" (tuned)"), r["params"]): r for r in rows}


# ------------------------------------------------------------------ references from scores.csv


def reference(scores: pd.DataFrame) -> pd.DataFrame:
    """Mean and sd over ok seeds (NumPy) and mean rank per dataset (SciPy ``rankdata``)."""
    ok = scores[scores.status == "ok"]
    rows = []
    for (dataset, method, params), g in ok.groupby(["dataset", "method", "params"], sort=False):
        row = {"dataset": dataset, "method": method, "params": params}
        # a seed-free method fitted once: its other seeds are copies, and one fit has no seed sd
        one_fit = len(g) > 1 and (g["copy_of"].fillna("") != "").sum() == len(g) - 1
        for m in [*RANK_BY, "fit_seconds"]:
            v = g[m].to_numpy(float)
            no_sd = one_fit and m != "fit_seconds"
            row[m], row[f"{m}_sd"] = np.mean(v), np.nan if no_sd else np.std(v, ddof=1)
        rows.append(row)
    ref = pd.DataFrame(rows)
    # all three ranked measures are higher-is-better: rank the negated means, 1 = best
    ranks = [ref.groupby("dataset")[m].transform(lambda s: rankdata(-s.to_numpy())) for m in RANK_BY]
    ref["mean_rank"] = np.mean(ranks, axis=0)
    return ref


def outputs(run_dir: Path, printed: str):
    summary = pd.read_csv(run_dir / "summary.csv", keep_default_na=False, na_values=[""])
    return (
        summary,
        markdown_tables(printed),
        markdown_tables((run_dir / "ranking.md").read_text(encoding="utf-8")),
        html_tables((run_dir / "report.html").read_text(encoding="utf-8")),
    )


def three(value: float) -> str:
    return f"{value:.3f}"


RUNS = ["small", pytest.param("quickstart_run", marks=pytest.mark.slow)]


# ------------------------------------------------------------------ the checks


@pytest.mark.parametrize("run", RUNS)
def test_summary_csv_holds_the_seed_means_sds_and_ranks(run, request):
    run_dir, _ = request.getfixturevalue(run)
    summary = pd.read_csv(run_dir / "summary.csv", keep_default_na=False, na_values=[""])
    ref = reference(pd.read_csv(run_dir / "scores.csv", keep_default_na=False, na_values=[""]))
    merged = summary.merge(ref, on=["dataset", "method", "params"], suffixes=("", "_ref"), validate="1:1")
    assert len(merged) == len(summary) == len(ref)
    for m in [*RANK_BY, "fit_seconds"]:
        np.testing.assert_allclose(merged[m], merged[f"{m}_ref"], rtol=1e-12, err_msg=m)
        np.testing.assert_allclose(merged[f"{m}_sd"], merged[f"{m}_sd_ref"], rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(merged["mean_rank"], merged["mean_rank_ref"], rtol=0, atol=1e-12)


@pytest.mark.parametrize("run", RUNS)
def test_terminal_and_ranking_md_show_summary_csv(run, request):
    run_dir, printed = request.getfixturevalue(run)
    summary, terminal, ranking_md, _ = outputs(run_dir, printed)
    # the same tables, cell for cell
    assert terminal == ranking_md
    datasets = list(dict.fromkeys(summary["dataset"]))
    assert [h for h in ranking_md if h != "Across datasets"] == datasets
    for dataset in datasets:
        rows = by_config(ranking_md[dataset])
        expected = summary[summary.dataset == dataset]
        assert set(rows) == set(zip(expected.method, expected.params))
        for _, r in expected.iterrows():
            cells = rows[(r["method"], r["params"])]
            assert cells["mean rank"] == f"{r['mean_rank']:.2f}"
            assert cells["place"] == f"{r['place']:.0f}"
            assert cells["fit s"] == f"{r['fit_seconds']:.2f}"
            for m in RANK_BY:
                assert cells[m] == three(r[m]) + spread_text(r[m + "_sd"]), (dataset, m)


@pytest.mark.parametrize("run", RUNS)
def test_report_shows_summary_csv(run, request):
    run_dir, printed = request.getfixturevalue(run)
    summary, _, _, page = outputs(run_dir, printed)
    for dataset, group in summary.groupby("dataset", sort=False):
        shown = by_config(page[dataset])
        assert shown, dataset
        for (method, params), cells in shown.items():
            # the page shows each method at its best grid point: that row of summary.csv
            (r,) = group[(group.method == method) & (group.params == params)].to_dict("records")
            for m in RANK_BY:
                got = MEASURE_CELL.match(cells[m])
                assert got, cells[m]
                assert got["mean"] == three(r[m]), (dataset, m)
                assert (got["spread"] or "") == spread_text(r[m + "_sd"]), (dataset, m)
                if got["lo"] is not None:  # an interval whose ends would print alike is left out
                    digits = len(got["lo"].split(".")[1])  # as many as the ends need to differ
                    half = 0.5 * 10.0**-digits + 1e-12
                    assert float(got["lo"]) == pytest.approx(r[m + "_lo"], abs=half)
                    assert float(got["hi"]) == pytest.approx(r[m + "_hi"], abs=half)
                    assert r[m + "_lo"] <= r[m] <= r[m + "_hi"]


@pytest.mark.parametrize("run", RUNS)
def test_the_ranking_across_datasets_is_the_same_everywhere(run, request):
    run_dir, printed = request.getfixturevalue(run)
    _, terminal, ranking_md, page = outputs(run_dir, printed)
    md = {r["method"].removesuffix(" (tuned)"): r for r in terminal["Across datasets"]}
    html = {r["method"].removesuffix(" (tuned)"): r for r in page["Across datasets"]}
    assert md.keys() == html.keys()
    for method, r in md.items():
        assert (r["place"], r["mean rank"], r["datasets"]) == (
            html[method]["place"],
            html[method]["mean rank"],
            html[method]["datasets"],
        )
    assert terminal["Across datasets"] == ranking_md["Across datasets"]


@pytest.mark.slow
def test_without_a_grid_the_ranking_across_is_the_mean_of_dataset_ranks(quickstart_run):
    run_dir, printed = quickstart_run
    summary, terminal, _, _ = outputs(run_dir, printed)
    # every quickstart method has one parameter point, so its overall mean rank is the plain
    # mean over the datasets of its mean rank there
    expected = summary.groupby("method")["mean_rank"].mean()
    shown = {r["method"]: r for r in terminal["Across datasets"]}
    assert set(shown) == set(expected.index)
    for method, value in expected.items():
        assert shown[method]["mean rank"] == f"{value:.2f}"
        assert shown[method]["datasets"] == str(summary["dataset"].nunique())


def test_seed_intervals_are_clipped_to_the_measure_range_and_are_students_t_inside_it():
    # Reference: the Student t interval of a mean, mean ± t_{0.975, n-1} s / sqrt(n) (Student 1908),
    # from scipy.stats.t; a mean of seconds cannot be negative nor a trustworthiness above 1
    # (Venna and Kaski 2001 normalise it to [0, 1]), so the bounds stop there.
    from scipy import stats

    from harness.compare import aggregate

    fit = np.array([0.001, 0.002, 0.060])
    trust = np.array([0.9990, 0.9995, 0.9900])
    scores = pd.DataFrame(
        {
            "dataset": "d",
            "method": "m",
            "params": "-",
            "seed": [0, 1, 2],
            "status": "ok",
            "copy_of": "",
            "fit_seconds": fit,
            "trustworthiness@10": trust,
        }
    )
    row = aggregate(scores).iloc[0]
    half = lambda v: stats.t.ppf(0.975, len(v) - 1) * v.std(ddof=1) / np.sqrt(len(v))  # noqa: E731
    assert fit.mean() - half(fit) < 0 and row["fit_seconds_lo"] == 0.0
    assert row["fit_seconds_hi"] == pytest.approx(fit.mean() + half(fit), rel=1e-12)
    assert trust.mean() + half(trust) > 1 and row["trustworthiness@10_hi"] == 1.0
    assert row["trustworthiness@10_lo"] == pytest.approx(trust.mean() - half(trust), rel=1e-12)
