"""Input that would fail later (hang, run out of memory, fail every cell) is refused up front.

Each case is one reproduction: a suite, a table or a flag that used to hang, print a
traceback, pass validation and then fail every cell, or print a misleading message.
Every refusal is checked the same way: one line on stderr that names the field and
what was expected, the exit code, and no traceback.  Cases that would allocate are
checked by behaviour, never by the clock: the loader that would allocate is replaced
by one that fails the test if it is called, or the command runs under an
address-space limit smaller than the allocation.
"""

from __future__ import annotations

import errno
import json
import logging
import os
import resource
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from harness.cli import main
from harness.compare.environment import environment_changes
from harness.config import MAX_EXPECT, MAX_SEEDS, MAX_SUITE_BYTES, MAX_YAML_NODES, Scoring
from harness.datasets import DATASETS, Dataset
from harness.methods._fit import DegenerateEmbedding, check_embedding
from harness.run.cells import Cell
from harness.run.compute import score_cell

HERE = Path(__file__).parent

SMALL = "datasets:\n  - use: s_sheet\n    params: {n: 60}\nmethods: [pca]\n"
# nine lists of nine, nested eight deep: 9**8 = 43 million leaves from ten short lines
BOMB = (
    "[&a [x,x,x,x,x,x,x,x,x], &b [*a,*a,*a,*a,*a,*a,*a,*a,*a], &c [*b,*b,*b,*b,*b,*b,*b,*b,*b], "
    "&d [*c,*c,*c,*c,*c,*c,*c,*c,*c], &e [*d,*d,*d,*d,*d,*d,*d,*d,*d], &f [*e,*e,*e,*e,*e,*e,*e,*e,*e], "
    "&g [*f,*f,*f,*f,*f,*f,*f,*f,*f], &h [*g,*g,*g,*g,*g,*g,*g,*g,*g]]"
)


def _points(n: int, d: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).normal(size=(n, d))


def _write_table(path: Path, X: np.ndarray, labels: list[str] | None = None) -> None:
    cols = [f"f{j}" for j in range(X.shape[1])] + (["lab"] if labels is not None else [])
    rows = [",".join(f"{v:.6f}" for v in r) + (f",{labels[i]}" if labels else "") for i, r in enumerate(X)]
    path.write_text(",".join(cols) + "\n" + "\n".join(rows) + "\n")


def _distances(n: int) -> np.ndarray:
    P = _points(n, 3)
    return np.sqrt(((P[:, None] - P[None]) ** 2).sum(-1))


def _files_bigexpect(tmp: Path) -> None:
    line = "  - {dataset: s_sheet, method: pca, measure: trustworthiness, at_least: 0.1}\n"
    count = MAX_SUITE_BYTES // len(line) + 10
    (tmp / "suite.yaml").write_text("name: r\n" + SMALL + "expect:\n" + line * count)


def _files_table(name: str, n: int, labels: str | None = None):
    def make(tmp: Path) -> None:
        X = _points(n, 4)
        lab = None
        if labels == "one_member":
            lab = ["solo"] + ["a" if i % 2 else "b" for i in range(1, n)]
        elif labels == "ids":
            lab = [f"row{i}" for i in range(n)]
        _write_table(tmp / name, X, lab)

    return make


def _files_d4039(tmp: Path) -> None:
    np.savetxt(tmp / "d.csv", _distances(40)[:, :39], delimiter=",")


def _files_exit_plugin(tmp: Path) -> None:
    (tmp / "exit_at_import.py").write_text("import sys\nsys.exit(7)\n")


def _files_binary(tmp: Path) -> None:
    (tmp / "t.csv").write_bytes(b"TOKEN-do-not-print-7f3a\x00\x01\x02\n\x03\x04\n")


def _files_text(tmp: Path) -> None:
    (tmp / "t.csv").write_text("TOKEN-do-not-print-7f3a is a line of prose\nanother line\n")


def _files_complex(tmp: Path) -> None:
    np.save(tmp / "t.npy", _points(60, 4) + 1j * _points(60, 4, 1))


def _suite(body: str, files=None):
    return ("suite.yaml", "name: r\n" + textwrap.dedent(body), files)


def _table_suite(params: str, method: str = "pca"):
    return f"datasets:\n  - use: table\n    params: {{{params}}}\nmethods: [{method}]\n"


# (id, suite text or None, files, argv, exit code, words the one line must hold, words it must not)
CASES = [
    # 1. sizes that allocate, checked before anything is built
    (
        "seeds-count",
        *_suite(SMALL + "seeds: 100000000\n"),
        ["validate"],
        2,
        ["seeds", f"at most {MAX_SEEDS}"],
        [],
    ),
    (
        "seeds-list-value",
        *_suite(SMALL + "seeds: [4294967296]\n"),
        ["validate"],
        2,
        ["seeds[0]", "2**32 - 1"],
        [],
    ),
    (
        "grid-points",
        *_suite(
            "datasets: [s_sheet]\nmethods:\n  - use: tsne\n    grid: {perplexity: "
            + str(list(range(2, 30)))
            + ", learning_rate: "
            + str([float(v) for v in range(10, 400)])
            + "}\n"
        ),
        ["validate"],
        2,
        ["methods[0].grid", "grid points"],
        [],
    ),
    ("expect-entries", "suite.yaml", None, None, ["validate"], 2, [f"at most {MAX_SUITE_BYTES:,} bytes"], []),
    (
        "expect-entries-over-count",
        *_suite(SMALL + "expect:\n" + "  - {measure: stress, at_most: 1}\n" * (MAX_EXPECT + 1)),
        ["validate"],
        2,
        ["expect", f"at most {MAX_EXPECT:,} bounds"],
        [],
    ),
    (
        "alias-bomb-description",
        *_suite(SMALL + f"description: {BOMB}\n"),
        ["validate"],
        2,
        ["YAML nodes"],
        [],
    ),
    ("alias-bomb-name", "suite.yaml", None, None, ["validate"], 2, ["YAML nodes"], ["'x'"]),
    (
        "alias-bomb-plugin-params",
        *_suite(
            "datasets: [s_sheet]\nmethods:\n  - use: plugins_for_tests:ScaledProjection\n"
            f"    params: {{scale: {BOMB}}}\n"
        ),
        ["validate"],
        2,
        [f"at most {MAX_YAML_NODES:,} YAML nodes"],
        [],
    ),
    (
        "duplicated-key",
        *_suite(SMALL + "seeds: 2\nseeds: 3\n"),
        ["validate"],
        2,
        ["line 6", "'seeds' given twice"],
        [],
    ),
    (
        "time-limit-nan",
        *_suite(SMALL + "run: {time_limit: .nan}\n"),
        ["validate"],
        2,
        ["run.time_limit", "> 0"],
        [],
    ),
    (
        "noise-nan",
        *_suite(SMALL.replace("n: 60", "n: 60, noise: .nan")),
        ["validate"],
        2,
        ["params.noise", "finite"],
        [],
    ),
    (
        "rank-by-nan",
        *_suite(SMALL + "measures: {rank_by: {stress: .nan}}\n"),
        ["validate"],
        2,
        ["rank_by.stress", "finite"],
        [],
    ),
    (
        "rank-by-inf",
        *_suite(SMALL + "measures: {rank_by: {stress: .inf}}\n"),
        ["validate"],
        2,
        ["rank_by.stress", "finite"],
        [],
    ),
    # 2. data too large for the machine: refused with the estimate, before generation
    (
        "n-1e11",
        *_suite(SMALL.replace("n: 60", "n: 100000000000")),
        ["validate"],
        2,
        ["datasets[0].params", "GiB"],
        [],
    ),
    (
        "wide-3e6-by-1000",
        *_suite(
            "datasets:\n  - use: gaussian_clusters\n"
            "    params: {n: 3000000, n_features: 1000}\nmethods: [pca]\n"
        ),
        ["validate"],
        2,
        ["n=3,000,000, n_features=1,000", "GiB"],
        [],
    ),
    # 3. accepted before, then every cell failed
    (
        "k-above-half-n",
        *_suite(SMALL.replace("n: 60", "n: 40") + "measures: {k: [25]}\n"),
        ["validate"],
        2,
        ["measures.k[0]", "k < n/2 = 20"],
        [],
    ),
    (
        "noise-inf",
        *_suite(SMALL.replace("n: 60", "n: 60, noise: .inf")),
        ["validate"],
        2,
        ["params.noise", "finite"],
        [],
    ),
    (
        "label-one-member-class",
        *_suite(_table_suite("path: t.csv, label: lab"), _files_table("t.csv", 60, "one_member")),
        ["validate"],
        2,
        ["labels", "at least 2 rows in every class", "'solo'"],
        [],
    ),
    (
        "label-is-an-id-column",
        *_suite(_table_suite("path: t.csv, label: lab"), _files_table("t.csv", 60, "ids")),
        ["validate"],
        2,
        ["labels", "all 60 rows have different labels"],
        [],
    ),
    # 4. misleading messages
    (
        "matrix-40-by-39",
        *_suite(
            "datasets:\n  - use: distance_matrix\n    params: {path: d.csv}\nmethods: [mds]\n", _files_d4039
        ),
        ["validate"],
        2,
        ["square matrix", "40 x 39"],
        ["header"],
    ),
    (
        "one-row-csv",
        *_suite(_table_suite("path: t.csv"), _files_table("t.csv", 1)),
        ["validate"],
        2,
        ["at least 10 rows", "found 1"],
        ["vary"],
    ),
    (
        "plugin-sys-exit-at-import",
        *_suite("datasets: [s_sheet]\nmethods:\n  - use: exit_at_import:Thing\n", _files_exit_plugin),
        ["validate"],
        2,
        ["methods[0].use", "sys.exit(7)"],
        [],
    ),
    (
        "binary-file-as-table",
        *_suite(_table_suite("path: t.csv"), _files_binary),
        ["validate"],
        2,
        ["t.csv"],
        ["TOKEN"],
    ),
    (
        "prose-file-as-table",
        *_suite(_table_suite("path: t.csv"), _files_text),
        ["validate"],
        2,
        ["one column"],
        ["TOKEN"],
    ),
    (
        "complex-npy-table",
        *_suite(_table_suite("path: t.npy"), _files_complex),
        ["validate"],
        2,
        ["t.npy", "complex"],
        [],
    ),
]


def _prepare(case_id: str, tmp: Path, name: str | None, text, files) -> None:
    if case_id == "expect-entries":
        _files_bigexpect(tmp)
    elif case_id == "alias-bomb-name":
        (tmp / "suite.yaml").write_text(f"name: {BOMB}\n" + SMALL)
    elif name is not None:
        (tmp / name).write_text(text)
    if files:
        files(tmp)


def _run(argv: list[str], capsys) -> tuple[int, list[str], str]:
    code = main(argv)
    out = capsys.readouterr()
    lines = [line for line in out.err.splitlines() if line.strip()]
    return code, lines, out.err


def _no_generation(monkeypatch) -> None:
    """Every generated dataset's loader fails the test if called: refusals must come before building."""
    for name in ("s_sheet", "rolled_sheet", "gaussian_clusters", "machine_fleet"):
        spec = DATASETS[name]

        def refuse(*_a, _name=name, **_k):
            raise AssertionError(f"{_name} was generated before its size was checked")

        monkeypatch.setitem(DATASETS, name, type(spec)(**{**spec.__dict__, "load": refuse}))


@pytest.mark.parametrize(
    ("case_id", "name", "text", "files", "argv", "code", "words", "banned"), CASES, ids=[c[0] for c in CASES]
)
def test_refused_up_front(
    tmp_path, monkeypatch, capsys, case_id, name, text, files, argv, code, words, banned
):
    monkeypatch.chdir(tmp_path)
    monkeypatch.syspath_prepend(str(HERE))  # plugins_for_tests
    _prepare(case_id, tmp_path, name, text, files)
    if case_id in ("n-1e11", "wide-3e6-by-1000", "seeds-count"):
        _no_generation(monkeypatch)
    got, lines, err = _run([*argv, "suite.yaml"], capsys)
    assert got == code, err
    assert "Traceback" not in err
    assert len(lines) == 1 and lines[0].startswith("foldbench: error: "), lines
    assert len(lines[0]) < 400, lines[0]  # never a value printed whole
    for word in words:
        assert word in lines[0], (word, lines[0])
    for word in banned:
        assert word not in lines[0], (word, lines[0])


# ---------------------------------------------------------------- under an address-space limit

LIMIT_BYTES = 3 * 2**30  # far below what seeds: 1e8 or n: 1e9 would take


def _limited() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (LIMIT_BYTES, LIMIT_BYTES))


@pytest.mark.parametrize(
    ("suite", "words"),
    [
        ("name: r\n" + SMALL + "seeds: 100000000\n", ["seeds: expected at most"]),
        ("name: r\n" + SMALL.replace("n: 60", "n: 1000000000"), ["datasets[0].params", "GiB"]),
        ("name: r\n" + SMALL + f"description: {BOMB}\n", ["YAML nodes"]),
    ],
    ids=["seeds-1e8", "n-1e9", "alias-bomb"],
)
def test_refused_within_a_memory_limit(tmp_path, suite, words):
    """Before the fix these ran out of memory (MemoryError traceback) under a 3 GiB limit."""
    (tmp_path / "suite.yaml").write_text(suite)
    proc = subprocess.run(
        [sys.executable, "-m", "harness.cli", "validate", "suite.yaml"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        preexec_fn=_limited,
        timeout=600,  # a hang guard only; nothing is asserted about time
        env={**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"},
    )
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr and len(lines) == 1, proc.stderr
    for word in words:
        assert word in lines[0], lines[0]


# ---------------------------------------------------------------- flags and folders

OK_SUITE = "name: r\nseeds: 1\n" + SMALL


@pytest.mark.parametrize(
    ("flags", "words"),
    [
        (["--out", "afile"], ["--out", "is a file"]),
        (["--out", "/dev/null"], ["--out", "path of the running system"]),
        (["--out", "/proc/self"], ["--out", "path of the running system"]),
        (["--cache", "afile"], ["--cache", "is a file"]),
        (["--time-limit", "nan"], ["--time-limit", "> 0"]),
        (["--resume", "nowhere"], ["--resume", "does not exist"]),
    ],
    ids=["out-file", "out-dev-null", "out-proc-self", "cache-file", "time-limit-nan", "resume-missing"],
)
def test_run_flags_checked_before_work(tmp_path, monkeypatch, capsys, flags, words):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "suite.yaml").write_text(OK_SUITE)
    (tmp_path / "afile").write_text("x")
    _no_generation(monkeypatch)  # refused before the dataset is even built
    argv = ["run", "suite.yaml", *flags, "--quiet", "--no-report"]
    if "--cache" not in flags:
        argv.append("--no-cache")
    code, lines, err = _run(argv, capsys)
    assert code == 2 and "Traceback" not in err and len(lines) == 1, err
    for word in words:
        assert word in lines[0], lines[0]
    assert (tmp_path / "afile").read_text() == "x"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["afile", "suite.yaml"]  # nothing else written


def _read_only(monkeypatch, folder: Path) -> None:
    """Make ``folder`` refuse new files as a read-only mount does (EROFS); root ignores chmod."""
    import harness.cli._base as base

    real = base.tempfile.mkstemp

    def mkstemp(*args, dir=None, **kwargs):
        if dir is not None and Path(dir).resolve().is_relative_to(folder.resolve()):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(dir))
        return real(*args, dir=dir, **kwargs)

    monkeypatch.setattr(base.tempfile, "mkstemp", mkstemp)


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    root = tmp_path_factory.mktemp("finished")
    (root / "suite.yaml").write_text(OK_SUITE)
    old = Path.cwd()
    os.chdir(root)
    try:
        assert main(["run", "suite.yaml", "--out", "res", "--no-cache", "--quiet", "--no-report"]) == 0
    finally:
        os.chdir(old)
    (run_dir,) = (root / "res" / "r").iterdir()
    return root, run_dir


@pytest.mark.parametrize("command", ["run", "resume", "report"])
def test_read_only_results_folder(finished, monkeypatch, capsys, command):
    root, run_dir = finished
    monkeypatch.chdir(root)
    _read_only(monkeypatch, root / "res")
    before = sorted(p.relative_to(run_dir) for p in run_dir.rglob("*"))
    argv = {
        "run": ["run", "suite.yaml", "--out", "res", "--no-cache", "--quiet", "--no-report"],
        "resume": ["run", "suite.yaml", "--resume", str(run_dir), "--no-cache", "--quiet", "--no-report"],
        "report": ["report", str(run_dir)],
    }[command]
    code, lines, err = _run(argv, capsys)
    assert code == 2 and "Traceback" not in err and len(lines) == 1, err
    assert "can write in" in lines[0] and "Read-only file system" in lines[0], lines[0]
    assert sorted(p.relative_to(run_dir) for p in run_dir.rglob("*")) == before


def test_disk_full_is_one_line_and_keeps_stored_cells(tmp_path, monkeypatch, capsys):
    """The disk fills up after the cells are stored, while the tables are written (ENOSPC)."""
    import harness.run.atomic as atomic

    monkeypatch.chdir(tmp_path)
    (tmp_path / "suite.yaml").write_text(OK_SUITE)
    real = atomic.write_bytes

    def write_bytes(path, data, **kwargs):
        if Path(path).suffix == ".csv" and Path(path).parent.name not in ("curves", "points"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(path, data, **kwargs)

    monkeypatch.setattr(atomic, "write_bytes", write_bytes)
    code, lines, err = _run(
        ["run", "suite.yaml", "--out", "res", "--no-cache", "--quiet", "--no-report"], capsys
    )
    assert code == 1 and "Traceback" not in err and len(lines) == 1, err
    assert "No space left on device" in lines[0] and "already stored are kept" in lines[0]
    records = list((tmp_path / "res").rglob("cells/*.json"))
    assert len(records) == 1 and json.loads(records[0].read_text())["status"] == "ok"


def test_memory_error_is_one_line(tmp_path, monkeypatch, capsys):
    import harness.suite

    def out_of_memory(_path):
        raise MemoryError

    monkeypatch.setattr(harness.suite, "load_suite", out_of_memory)
    (tmp_path / "suite.yaml").write_text(OK_SUITE)
    code, lines, err = _run(["validate", str(tmp_path / "suite.yaml")], capsys)
    assert code == 1 and "Traceback" not in err and len(lines) == 1 and "out of memory" in lines[0], err


# ---------------------------------------------------------------- accepted data, scored sensibly


def test_run_table_of_few_rows_scores_every_cell(tmp_path, monkeypatch, capsys):
    """``run --table`` on 11 rows: the default suite picks k < n/2, so no cell fails."""
    monkeypatch.chdir(tmp_path)
    _write_table(tmp_path / "small.csv", _points(11, 4))
    code, _lines, err = _run(
        ["run", "--table", "small.csv", "--out", "res", "--no-cache", "--quiet", "--no-report"], capsys
    )
    assert code == 0, err
    records = [json.loads(p.read_text()) for p in (tmp_path / "res").rglob("cells/*.json")]
    assert records and all(r["status"] == "ok" for r in records)


def _cell() -> Cell:
    return Cell("d", "m", "pca", (), 0, 2, "f")


@pytest.mark.parametrize(
    ("labels", "dropped"),
    [
        (np.array(["solo"] + ["a", "b"] * 29 + ["a"]), "knn_accuracy@5"),
        (np.arange(60).astype(str), "silhouette"),
    ],
    ids=["one-member-class", "id-labels"],
)
def test_label_measure_drops_alone(caplog, labels, dropped):
    """A label measure the labels cannot support is left out with the reason logged; the others stay."""
    X = _points(60, 4)
    Y = X[:, :2]
    with caplog.at_level(logging.WARNING):
        result = score_cell(_cell(), Dataset("d", X=X, labels=labels), Y, Scoring(ks=(5,)))
    assert result.status == "ok", result.error
    assert dropped not in result.values  # an ok cell carries no NaN measure
    assert np.isfinite(result.values["trustworthiness@5"]) and np.isfinite(result.values["stress"])
    assert any(f"{dropped} left out" in r.getMessage() for r in caplog.records)


def test_round_off_below_the_tolerance_is_accepted(tmp_path):
    """-1e-12 on the diagonal of distances up to ~5 is round-off under the 1e-8 relative tolerance."""
    from harness.datasets import load_dataset

    D = _distances(20)
    D[3, 3] = -1e-12
    np.save(tmp_path / "d.npy", D)
    ds = load_dataset(
        "distance_matrix", {"path": str(tmp_path / "d.npy"), "format": "auto", "labels_path": None}
    )
    assert ds.distances[3, 3] == 0.0 and (ds.distances >= 0).all()


def test_complex_plugin_output_is_refused():
    with pytest.raises(DegenerateEmbedding, match="complex"):
        check_embedding(_points(10, 2) * (1 + 1j), 10, 2)


# ---------------------------------------------------------------- environment comparison


def test_blas_libraries_compare_as_a_set():
    """threadpoolctl lists loaded libraries in load order; two OpenBLAS copies may come either way."""
    numpy_blas = {"user_api": "blas", "internal_api": "openblas", "version": "0.3.30", "num_threads": 2}
    scipy_blas = {"user_api": "blas", "internal_api": "openblas", "version": "0.3.31.188.0", "num_threads": 2}
    openmp = {"user_api": "openmp", "internal_api": "openmp", "version": None, "num_threads": 2}
    one = {"environment": {"blas": [numpy_blas, scipy_blas, openmp]}}
    other = {"environment": {"blas": [openmp, scipy_blas, numpy_blas]}}
    assert environment_changes(one, other) == []
    newer = {"environment": {"blas": [dict(numpy_blas, version="0.3.32"), scipy_blas, openmp]}}
    assert environment_changes(one, newer) == ["openblas 0.3.30, 0.3.31.188.0 → 0.3.31.188.0, 0.3.32"]


def test_sys_exit_while_a_command_runs_is_one_line(tmp_path, monkeypatch, capsys):
    """Code a command runs (a plug-in, say) calling sys.exit(7): exit 2 and one line, not a silent 7."""
    import harness.suite

    def exits(_path):
        sys.exit(7)

    monkeypatch.setattr(harness.suite, "load_suite", exits)
    (tmp_path / "suite.yaml").write_text(OK_SUITE)
    code, lines, err = _run(["validate", str(tmp_path / "suite.yaml")], capsys)
    assert code == 2 and "Traceback" not in err and len(lines) == 1 and "sys.exit(7)" in lines[0], err
