"""The report of a small real run: files, tables, page, figures (plumbing on the shared small run)."""

from __future__ import annotations

import base64
import io
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from harness.compare.stats import critical_difference
from harness.report import FIGURES
from harness.report.analysis import analyse
from harness.report.tables import best_mask, measure_table, tex_escape
from harness.report.verdict import verdict


@pytest.fixture(scope="module")
def run_dir(small_run) -> Path:
    """The shared small run (conftest.SMALL_SUITE: iris and roll, pca, random_projection, isomap, tsne)."""
    return small_run


@pytest.fixture(scope="module")
def analysis(run_dir):
    return analyse(run_dir)


def drawn(run_dir: Path) -> int:
    """Figures the page embeds: the fixed set and one per-point map per dataset of the run."""
    maps = sorted(p.name for p in (run_dir / "figures").glob("points_*.png"))
    assert maps == ["points_iris.png", "points_roll.png"]  # conftest.SMALL_SUITE's two datasets
    return len(FIGURES) + len(maps)


@pytest.mark.slow
def test_every_file_is_written(run_dir):
    for name in ("report.html", "tables.md", "tables.tex"):
        assert (run_dir / name).stat().st_size > 0, name
    for name in FIGURES.values():
        img = Image.open(run_dir / "figures" / name)
        assert img.format == "PNG" and min(img.size) > 100, name


@pytest.mark.slow
def test_page_is_self_contained(run_dir):
    page = (run_dir / "report.html").read_text(encoding="utf-8")
    assert not re.search(r"<script|<link|@import|url\(|src=\"(?!data:)", page)
    sources = re.findall(r'src="data:image/png;base64,([^"]+)"', page)
    assert len(sources) == drawn(run_dir)
    for data in sources:
        assert Image.open(io.BytesIO(base64.b64decode(data))).format == "PNG"


@pytest.mark.slow
def test_page_opens_with_the_verdict_and_cautions(run_dir, analysis):
    page = (run_dir / "report.html").read_text(encoding="utf-8")
    body = page[page.index("<main>") :]
    assert body.index("Verdict") < body.index("Across datasets") < body.index("Pictures")
    assert "carry little meaning" in page  # tsne is a neighbour-family method
    assert "isomap (tuned)" in page  # run over a grid
    assert "Student t-interval" in page  # the page says which interval it prints
    assert "Monte Carlo permutation" in page or "exact permutation" in page  # and which p-value
    # 2 datasets: the asymptotic p-values are held back and the critical difference flagged
    assert "not shown" in page and "asymptotic value" in page
    assert not re.search(r"± 0\.0+(?!\d)", page)  # a spread is never printed as ± 0
    assert not re.search(r"\bp = 0(?![.\d])", page)  # nor a p-value as 0


@pytest.mark.slow
def test_verdict_names_each_datasets_leader(analysis):
    sentences = verdict(analysis)
    assert sentences[0].startswith("Across 2 datasets")
    for name in ("iris", "roll"):
        t = analysis.tuned[analysis.tuned.dataset == name].sort_values("mean_rank")
        leader = t.iloc[0]["method"]
        line = next(s for s in sentences if s.startswith(f"On {name},"))
        assert f"pick {leader}" in line


@pytest.mark.slow
def test_tuned_point_is_the_best_grid_point(analysis):
    r = analysis.ranked
    for name in ("iris", "roll"):
        grid = r[(r.dataset == name) & (r.method == "isomap")]
        assert len(grid) == 2
        chosen = analysis.tuned[(analysis.tuned.dataset == name) & (analysis.tuned.method == "isomap")]
        assert chosen["params"].iloc[0] == grid.sort_values("mean_rank")["params"].iloc[0]
        assert bool(chosen["tuned"].iloc[0])


@pytest.mark.slow
def test_cross_dataset_test_uses_two_datasets_four_methods(analysis):
    assert analysis.friedman is not None
    assert (analysis.friedman.n_blocks, analysis.friedman.n_treatments) == (2, 4)
    assert analysis.cd == pytest.approx(critical_difference(4, 2))
    # each dataset's Friedman ranks are a permutation-with-ties of 1..4: they sum to 10 per block
    assert analysis.friedman.mean_ranks.sum() == pytest.approx(10.0)


@pytest.mark.slow
def test_stability_of_a_deterministic_method_is_perfect(analysis):
    # pca ignores its seed, so both seeds give the same embedding (plumbing)
    pca = analysis.stability[analysis.stability.method == "pca"]
    assert (pca["knn_overlap"] == 1.0).all()
    assert np.allclose(pca["procrustes"], 0.0, atol=1e-10)


@pytest.mark.slow
def test_latex_tables_use_booktabs(run_dir):
    tex = (run_dir / "tables.tex").read_text(encoding="utf-8")
    assert tex.count("\\toprule") == tex.count("\\midrule") == tex.count("\\bottomrule") > 2
    assert "\\textbf{" in tex and "$\\pm$" in tex
    assert "±" not in tex
    # method names with an underscore are written with TeX's escaped underscore, never bare
    assert "random\\_projection" in tex
    assert "random_projection" not in tex


@pytest.mark.slow
def test_html_renders_in_headless_chromium(run_dir, tmp_path):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (apt-get install -y chromium)")
    page = (run_dir / "report.html").read_text(encoding="utf-8")
    # A copy with a probe that records, once loaded, how many images decoded.
    probe = (
        "<script>window.addEventListener('load',()=>{const i=[...document.images];"
        "document.body.setAttribute('data-decoded',i.filter(x=>x.complete&&x.naturalWidth>0).length"
        "+'/'+i.length);});</script></body>"
    )
    probed = tmp_path / "probe.html"
    probed.write_text(page.replace("</body>", probe), encoding="utf-8")
    flags = [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--virtual-time-budget=15000",
    ]
    dom = subprocess.run(
        [browser, *flags, "--dump-dom", probed.as_uri()], capture_output=True, text=True, timeout=120
    ).stdout
    n = drawn(run_dir)
    assert f'data-decoded="{n}/{n}"' in dom
    shot = tmp_path / "shot.png"
    subprocess.run(
        [
            browser,
            *flags,
            f"--screenshot={shot}",
            "--window-size=1280,1600",
            (run_dir / "report.html").as_uri(),
        ],
        capture_output=True,
        timeout=120,
    )
    pixels = np.asarray(Image.open(shot).convert("L"), dtype=float)
    assert pixels.std() > 10  # not a blank page


def test_best_mask_marks_printed_ties():
    values = pd.Series([0.9991, 0.9994, 0.5, np.nan])
    # both print as 0.999, so both are best (plumbing)
    assert best_mask(values, higher=True).tolist() == [True, True, False, False]
    assert best_mask(values, higher=False).tolist() == [False, False, True, False]


def test_measure_table_bold_and_escape():
    frame = pd.DataFrame(
        {
            "method": ["a_b", "c"],
            "params": ["-", "-"],
            "stress": [0.2, 0.1],
            "stress_sd": [0.01, 0.02],
            "trustworthiness@10": [0.9, 0.8],
            "trustworthiness@10_sd": [np.nan, 0.1],
        }
    )
    md = measure_table(frame, ["stress", "trustworthiness@10"], ["method", "params"])
    assert "**0.100 ± 0.020**" in md and "**0.900**" in md
    tex = measure_table(frame, ["stress", "trustworthiness@10"], ["method", "params"], style="latex")
    assert "a\\_b" in tex and "\\textbf{0.100 $\\pm$ 0.020}" in tex
    assert tex.splitlines()[1] == "\\toprule"
    assert tex_escape("50% & #1_x") == "50\\% \\& \\#1\\_x"


def test_no_spread_or_interval_prints_as_zero():
    # plumbing: a zero spread reads as a note, a zero-width interval is left out
    from harness.text import interval_text, mean_sd

    assert mean_sd(0.912, 0.0) == "0.912 (seeds agree)"
    assert mean_sd(0.912, 0.0002) == "0.912 (sd < 0.001)"
    assert mean_sd(0.912, 0.004) == "0.912 ± 0.004"
    assert interval_text(0.912, 0.912) is None
    assert interval_text(0.9958111, 0.9958114) is None  # would print with equal ends
    assert interval_text(0.91201, 0.91204) == "[0.91201, 0.91204]"


def test_p_values_are_never_printed_as_zero():
    from harness.text import pvalue_text

    assert pvalue_text(0.0) == "p < 1e-4"
    assert pvalue_text(5e-5) == "p < 1e-4"
    assert pvalue_text(0.032) == "p = 0.032"
    assert pvalue_text(1.2e-3) == "p = 1.2e-3"
