"""Suite validation: every mistake is one line naming file, path and what was expected.

These are checks of our own plumbing (invented suites); the expected paths follow
the suite format documented in the README.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from harness.cli import main
from harness.errors import InputError
from harness.suite import load_datasets, load_suite, parse_suite

GOOD = """\
name: tiny
seeds: 2
datasets:
  - use: iris
  - use: rolled_sheet
    name: roll
    params: {n: 200}
methods:
  - use: pca
  - use: tsne
    grid: {perplexity: [5, 10]}
measures:
  k: [5, 10]
"""


def test_good_suite_parses_and_expands_grid(write_suite):
    suite = load_suite(write_suite(GOOD))
    assert suite.seeds == (0, 1)
    assert [d.name for d in suite.datasets] == ["iris", "roll"]
    assert [p["perplexity"] for p in suite.methods[1].grid_points()] == [5.0, 10.0]
    assert suite.scoring.ks == (5, 10)
    data = load_datasets(suite)
    assert data["iris"].n == 150


BAD = [
    # (replace this, with this, expected location, expected words)
    ("seeds: 2", "seed: 2", "suite.yaml: seed", "did you mean 'seeds'"),
    ("seeds: 2", "seeds: -1", "suite.yaml: seeds", ">= 1"),
    (
        "grid: {perplexity: [5, 10]}",
        "grid: {perplexity: [5, 10, abc]}",
        "suite.yaml: methods[1].grid.perplexity[2]",
        "expected a number",
    ),
    (
        "grid: {perplexity: [5, 10]}",
        "grid: {perplexity: [5, 60]}",
        "suite.yaml: methods[1].grid.perplexity[1]",
        "perplexity < n/3",
    ),
    (
        "grid: {perplexity: [5, 10]}",
        "grid: {perplexity: []}",
        "suite.yaml: methods[1].grid.perplexity",
        "grid is empty",
    ),
    (
        "grid: {perplexity: [5, 10]}",
        "grid: {perplexty: [5]}",
        "suite.yaml: methods[1].grid.perplexty",
        "did you mean 'perplexity'",
    ),
    ("k: [5, 10]", "k: [5, 149]", "suite.yaml: measures.k[1]", "k < n/2"),
    ("k: [5, 10]", "k: [5, 0]", "suite.yaml: measures.k[1]", ">= 1"),
    ("seeds: 2", "seeds: 2\ndimensions: 5", "suite.yaml: dimensions", "at most 4"),
    ("params: {n: 200}", "params: {n: -5}", "suite.yaml: datasets[1].params.n", "got -5"),
    ("use: iris", "use: irsi", "suite.yaml: datasets[0].use", "did you mean 'iris'"),
    ("use: pca", "use: pcaa", "suite.yaml: methods[0].use", "did you mean 'pca'"),
    (
        "k: [5, 10]",
        "k: [5, 10]\n  rank_by: [trustworthyness]",
        "suite.yaml: measures.rank_by.trustworthyness",
        "did you mean 'trustworthiness'",
    ),
    ("name: tiny", "name: ../escape", "suite.yaml: name", "no '..'"),
    ("name: tiny", "name: /abs/path", "suite.yaml: name", "expected a name"),
    ("use: pca", "use: no_such_module_xyz:Thing", "suite.yaml: methods[0].use", "no_such_module_xyz"),
]


@pytest.mark.parametrize(
    "old,new,where,words", BAD, ids=[b[2].split(": ")[-1] + "-" + b[1][:12] for b in BAD]
)
def test_bad_suite_names_place_and_expectation(write_suite, old, new, words, where):
    assert old in GOOD
    path = write_suite(GOOD.replace(old, new, 1))
    with pytest.raises(InputError) as info:
        load_datasets(load_suite(path))
    message = str(info.value)
    assert message.startswith(where), message
    assert words in message
    assert "\n" not in message


@pytest.mark.parametrize(
    "text,where,words",
    [
        # the file is named once, then the position of the YAML error
        ("name: x\ndatasets: [iris\n", "broken.yaml: line 3, column 1", "expected valid YAML"),
        ("\x1f", "broken.yaml", "expected valid YAML"),
        ("- just\n- a list\n", "broken.yaml", "expected a mapping"),
        ("name: x\nmethods: [pca]\n", "broken.yaml: datasets", "missing"),
        ("", "broken.yaml", "expected a mapping"),
        # an empty or odd key is quoted, so the message still says which key
        ("? ''\n: 1\nname: x\n", "broken.yaml: ''", "unknown key"),
        ("name: x\n.hidden: 1\n", "broken.yaml: .hidden", "unknown key"),
    ],
)
def test_malformed_documents(text, where, words):
    with pytest.raises(InputError) as info:
        parse_suite(text, "broken.yaml")
    assert info.value.where == where, str(info.value)
    assert words in str(info.value)


def test_validate_command_exit_codes(write_suite, capsys):
    good = write_suite(GOOD)
    assert main(["validate", str(good)]) == 0
    assert "valid" in capsys.readouterr().out
    bad = write_suite(GOOD.replace("k: [5, 10]", "k: [5, 500]"), "bad.yaml")
    assert main(["validate", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "bad.yaml: measures.k[1]" in err


def test_validate_through_the_console_has_no_traceback(write_suite):
    bad = write_suite(GOOD.replace("use: iris", "use: irsi"))
    proc = subprocess.run(
        [sys.executable, "-m", "harness", "validate", str(bad)], capture_output=True, text=True
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.strip().splitlines() == [
        "foldbench: error: suite.yaml: datasets[0].use: unknown dataset 'irsi' (did you mean 'iris'?); "
        "see 'foldbench list datasets'"
    ]


def test_missing_suite_file(tmp_path, capsys):
    assert main(["validate", str(tmp_path / "nope.yaml")]) == 2
    assert "nope.yaml: no such file" in capsys.readouterr().err


def test_table_paths_resolve_next_to_the_suite(tmp_path, write_suite):
    (tmp_path / "data").mkdir()
    rows = "\n".join(f"{i},{i * i % 7},{(3 * i) % 5},{'ab'[i % 2]}" for i in range(30))
    (tmp_path / "data" / "t.csv").write_text("a,b,c,kind\n" + rows + "\n")
    path = write_suite(
        """\
        name: tab
        datasets:
          - use: table
            params: {path: data/t.csv, label: kind}
        methods: [pca]
        measures: {k: 5}
        """,
    )
    data = load_datasets(load_suite(path))
    assert data["table"].n == 30 and data["table"].n_features == 3
