"""Shared suites and runs for the tests (plumbing: invented suites on bundled and generated data).

- ``write_suite(text, name="suite.yaml")`` writes suite text (dedented) into the test's folder.
- ``two_datasets(methods, ...)`` is the text of a suite on iris and a 150-point rolled sheet
  with the methods given, the shape most runner and command-line tests need.
- ``small_run`` is one finished run of :data:`SMALL_SUITE`, report included, made once per
  session; tests that only read a run folder share it and must not change it.
"""

from __future__ import annotations

import textwrap
from collections.abc import Callable
from pathlib import Path

import pytest

from harness.api import run_suite
from harness.report import write_report
from harness.suite import parse_suite

#: Two datasets, four methods (one over a grid, one neighbour-based), two seeds: small but
#: enough for ranks across datasets, a Friedman test, a tuned grid point and the report.
SMALL_SUITE = """\
name: tiny
seeds: 2
datasets:
  - use: iris
  - use: rolled_sheet
    name: roll
    params: {n: 150, noise: 0.05}
methods:
  - use: pca
  - use: random_projection
  - use: isomap
    grid: {n_neighbors: [6, 12]}
  - use: tsne
    params: {perplexity: 10}
measures:
  k: [10]
"""


@pytest.fixture
def write_suite(tmp_path: Path) -> Callable[..., Path]:
    """Write suite text into ``tmp_path`` and return the file's path."""

    def write(text: str, name: str = "suite.yaml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text))
        return path

    return write


def two_dataset_text(
    methods: str, *, name: str = "tiny", seeds: int = 2, k: str = "[5]", n: int = 150
) -> str:
    """Suite text on iris and a rolled sheet of ``n`` points; ``methods`` is the indented list body."""
    return (
        f"name: {name}\nseeds: {seeds}\ndatasets:\n  - use: iris\n  - use: rolled_sheet\n    name: roll\n"
        f"    params: {{n: {n}}}\nmethods:\n{methods}measures:\n  k: {k}\n"
    )


@pytest.fixture
def two_datasets() -> Callable[..., str]:
    """The suite-text builder :func:`two_dataset_text`."""
    return two_dataset_text


@pytest.fixture(scope="session")
def small_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The folder of one finished run of :data:`SMALL_SUITE` with its report (read it, do not change it)."""
    out = tmp_path_factory.mktemp("small-run")
    outcome = run_suite(parse_suite(SMALL_SUITE, str(out / "tiny.yaml")), out, jobs=2, isolate=True)
    assert outcome.failed == 0, outcome.counts
    write_report(outcome.run_dir)
    return outcome.run_dir
