"""Fail closed wherever data is reused: the cache, cell records, baselines, cache clearing.

Each case of :data:`CASES` damages one thing a run reuses, does what a user
would do next, and names the outcome: ``correct`` (recomputed to the same
numbers, or refused with one line and exit code 2), ``silently wrong``,
``traceback`` or ``data lost``.  Every case must come out ``correct``.  The
reference for "the same numbers" is a run of the same suite without cache or
resume: fitting and scoring are pure functions of the cell and the data, so a
recomputation must reproduce it exactly (common practice, no source).

Plumbing tests of our own code with an invented suite; the fuzz tests at the
end corrupt cache entries and run folders at random (Hypothesis).
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from harness.cli import main
from harness.errors import InputError
from harness.run.folder import RunFolder
from harness.run.integrity import seal

SUITE = """\
name: tiny
seeds: 2
dimensions: 2
datasets:
  - use: rolled_sheet
    name: roll
    params: {n: 150, noise: 0.05}
methods:
  - use: pca
  - use: random_projection
measures:
  k: [10]
"""
OTHER = """\
name: other
seeds: 2
datasets:
  - use: iris
methods:
  - use: pca
measures:
  k: [10]
"""
QUIET = ["--no-report", "--quiet"]
TIMING = ["fit_seconds", "fit_peak_mb", "score_seconds", "from_cache", "error", "status"]
MEASURE = "trustworthiness@10"


class Env:
    """A reference run, a filled cache and a scratch folder for one case."""

    def __init__(self, root: Path, shared: dict[str, Path], capsys: pytest.CaptureFixture[str]) -> None:
        self.root, self.capsys = root, capsys
        self.suite = root / "tiny.yaml"
        shutil.copy(shared["suite"], self.suite)
        self.other = shared["other"]
        self.cache = root / "cache"
        shutil.copytree(shared["cache"], self.cache)
        self.run = root / "run"
        shutil.copytree(shared["run"], self.run)
        self.reference = shared["run"]

    def cli(self, *argv: str | Path) -> tuple[int | str, str, str]:
        """Exit code, stdout and stderr of a command; ``"traceback"`` when it raised."""
        self.capsys.readouterr()
        try:
            rc: int | str = main([str(a) for a in argv])
        except Exception as exc:  # the outcome "traceback" is what these tests look for
            rc = f"traceback: {type(exc).__name__}"
        out, err = self.capsys.readouterr()
        return rc, out, err

    def rerun_cached(self) -> tuple[int | str, str, str, Path | None]:
        before = set((self.root / "out").glob("*/*"))
        rc, out, err = self.cli("run", self.suite, *QUIET, "--cache", self.cache, "--out", self.root / "out")
        made = sorted(set((self.root / "out").glob("*/*")) - before)
        return rc, out, err, made[-1] if made else None

    def entries(self) -> list[Path]:
        return sorted(self.cache.glob("*/*.json"))

    def baseline_csv(
        self, edit: Callable[[pd.DataFrame], pd.DataFrame] | None = None, text: str = ""
    ) -> Path:
        """A copy of the run as a baseline of manifest + scores.csv only, the table edited."""
        base = self.root / "base"
        shutil.copytree(self.run, base)
        shutil.rmtree(base / "cells")
        if edit is not None:
            edit(pd.read_csv(base / "scores.csv", dtype=str, keep_default_na=False)).to_csv(
                base / "scores.csv", index=False
            )
        if text:
            (base / "scores.csv").write_text(text)
        return base

    def check(self, baseline: Path, *extra: str) -> tuple[int | str, str, str]:
        return self.cli("check", self.run, "--baseline", baseline, *extra)


def measures(folder: Path) -> pd.DataFrame:
    """Measure columns of a run's scores, one row per cell key (timing left out)."""
    s = pd.read_csv(folder / "scores.csv")
    cols = [c for c in s.columns if c not in TIMING]
    return s[cols].sort_values("key").reset_index(drop=True)


def same_numbers(folder: Path | None, reference: Path) -> bool:
    """All cells ok, with the reference's measures and embeddings."""
    if folder is None:
        return False
    s = pd.read_csv(folder / "scores.csv")
    if not (s["status"] == "ok").all() or len(s) != len(pd.read_csv(reference / "scores.csv")):
        return False
    try:
        pd.testing.assert_frame_equal(measures(folder), measures(reference), rtol=1e-10)
    except AssertionError:
        return False
    return all(
        np.array_equal(
            np.load(folder / "embeddings" / f"{k}.npy"), np.load(reference / "embeddings" / f"{k}.npy")
        )
        for k in s["key"]
    )


def refused(rc: int | str, err: str) -> str:
    """``correct`` for exit 2 with one line on stderr (log warnings before it allowed)."""
    if isinstance(rc, str):
        return "traceback"
    if "Traceback" in err:
        return "traceback"
    lines = [line for line in err.splitlines() if line.startswith("foldbench: error:")]
    return "correct" if rc == 2 and len(lines) == 1 else "silently wrong"


def recomputed(rc: int | str, err: str, folder: Path | None, reference: Path) -> str:
    if isinstance(rc, str) or "Traceback" in err:
        return "traceback"
    return "correct" if rc == 0 and same_numbers(folder, reference) else "silently wrong"


# ---------------------------------------------------------------- the cache


def _rewrite_npy(env: Env, make: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> None:
    """Replace the first entry's embedding; ``b`` is another entry's, one that differs from it."""
    first, *others = env.entries()
    a = np.load(first.with_suffix(".npy"))
    b = next(e for e in (np.load(o.with_suffix(".npy")) for o in others) if not np.array_equal(a, e))
    np.save(first.with_suffix(".npy"), make(a, b))


def _cache_npy(make: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> Callable[[Env], str]:
    def case(env: Env) -> str:
        _rewrite_npy(env, make)
        rc, _out, err, made = env.rerun_cached()
        return recomputed(rc, err, made, env.reference)

    return case


def _edit_meta(env: Env, edit: Callable[[dict], object]) -> None:
    meta = env.entries()[0]
    doc = json.loads(meta.read_text())
    meta.write_text(json.dumps(edit(doc)))


def _cache_meta(edit: Callable[[dict], object]) -> Callable[[Env], str]:
    def case(env: Env) -> str:
        _edit_meta(env, edit)
        rc, _out, err, made = env.rerun_cached()
        return recomputed(rc, err, made, env.reference)

    return case


def _scores_edited(doc: dict) -> dict:
    for scored in doc["scores"].values():
        scored["values"][MEASURE] = 0.123
    return doc


def _score_text(doc: dict) -> dict:
    for scored in doc["scores"].values():
        scored["values"][MEASURE] = "abc"
    return doc


def _format_one(doc: dict) -> dict:
    """An entry as the cache wrote it before format 2: no seal, no digests."""
    return {k: v for k, v in doc.items() if k not in ("format", "sha256", "key", "embedding")}


def _resealed(change: Callable[[dict], None]) -> Callable[[dict], dict]:
    """Change a document and seal it again: only the checks beyond the seal can catch it."""

    def edit(doc: dict) -> dict:
        change(doc)
        return seal(doc)

    return edit


def _fails_at_rescoring(env: Env) -> str:
    """No cached scores and a 10 x 2 embedding: the known fit fails to score and must be refitted."""
    _edit_meta(env, lambda doc: {**doc, "scores": {}})
    _rewrite_npy(env, lambda a, b: a[:10])
    rc, _out, err, made = env.rerun_cached()
    return recomputed(rc, err, made, env.reference)


def _logged_once(env: Env, caplog: pytest.LogCaptureFixture) -> str:
    _rewrite_npy(env, lambda a, b: np.zeros_like(a))
    caplog.clear()
    rc, _out, err, made = env.rerun_cached()
    told = [r for r in caplog.records if "not used" in r.getMessage()]
    outcome = recomputed(rc, err, made, env.reference)
    return outcome if outcome != "correct" or len(told) == 1 else "silently wrong"


def _clear_keeps_user_files(env: Env) -> str:
    mine = env.root / "mine"
    (mine / "ab" / "keepme").mkdir(parents=True)
    (mine / "ab" / "keepme" / "x").write_text("precious")
    rc, _out, err = env.cli("cache", "clear", "--cache", mine)
    if not (mine / "ab" / "keepme" / "x").exists():
        return "data lost"
    return refused(rc, err)


def _clear_deletes_entries_only(env: Env) -> str:
    stray = env.cache / env.entries()[0].parent.name / "notes.txt"
    stray.write_text("mine")
    rc, out, _err = env.cli("cache", "clear", "--cache", env.cache)
    if not stray.exists():
        return "data lost"
    if isinstance(rc, str):
        return "traceback"
    return "correct" if rc == 0 and not env.entries() and "removed 4" in out else "silently wrong"


# ---------------------------------------------------------------- check against a baseline


def _check_refused(make: Callable[[Env], Path], *extra: str) -> Callable[[Env], str]:
    def case(env: Env) -> str:
        rc, _out, err = env.check(make(env), *extra)
        return refused(rc, err)

    return case


def _set_first(column: str, value: str) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def edit(frame: pd.DataFrame) -> pd.DataFrame:
        frame.loc[0, column] = value
        return frame

    return edit


def _only(method: str) -> Callable[[pd.DataFrame], pd.DataFrame]:
    return lambda frame: frame[frame["method"] == method]


def _missing_fails(env: Env) -> str:
    rc, out, _err = env.check(env.baseline_csv(_only("pca")))
    if isinstance(rc, str):
        return "traceback"
    return "correct" if rc == 1 and "--allow-missing" in out.splitlines()[-1] else "silently wrong"


def _missing_allowed(env: Env) -> str:
    rc, out, _err = env.check(env.baseline_csv(_only("pca")), "--allow-missing")
    if isinstance(rc, str):
        return "traceback"
    return "correct" if rc == 0 and out.splitlines()[-1].startswith("PASSED") else "silently wrong"


def _verdict_counts(env: Env) -> str:
    rc, out, _err = env.check(env.baseline_csv())
    if isinstance(rc, str):
        return "traceback"
    last = out.splitlines()[-1]
    # 2 configurations x 14 gated measures at k = 5 (the local set, both R_NX areas, the global set)
    return "correct" if rc == 0 and "28 comparisons" in last else "silently wrong"


def _junit_folder(env: Env) -> str:
    folder = env.root / "reports"
    folder.mkdir()
    base = env.baseline_csv()
    before = set(env.root.rglob("*"))
    rc, _out, err = env.check(base, "--junit", folder)
    written = set(env.root.rglob("*")) - before
    outcome = refused(rc, err)
    return "silently wrong" if outcome == "correct" and written else outcome


def _bad_manifest(env: Env) -> Path:
    base = env.baseline_csv()
    doc = json.loads((base / "manifest.json").read_text())
    doc.update(seeds="0-1", environment=[1], datasets={"roll": 3})
    (base / "manifest.json").write_text(json.dumps(doc))
    return base


def _header_only(env: Env) -> Path:
    header = (env.run / "scores.csv").read_text().splitlines()[0]
    return env.baseline_csv(text=header + "\n")


# ---------------------------------------------------------------- cell records in the run folder


def _record(env: Env, index: int = 0) -> Path:
    return sorted((env.run / "cells").glob("*.json"))[index]


def _resume(env: Env) -> tuple[int | str, str, str]:
    return env.cli("run", env.suite, *QUIET, "--no-cache", "--resume", env.run)


def _record_edit(edit: Callable[[dict], object]) -> Callable[[Env], str]:
    def case(env: Env) -> str:
        path = _record(env)
        path.write_text(json.dumps(edit(json.loads(path.read_text()))))
        rc, _out, err = _resume(env)
        return recomputed(rc, err, env.run, env.reference)

    return case


def _trust_five(doc: dict) -> dict:
    doc["values"][MEASURE] = 5.0
    return doc


def _extra_copy(env: Env) -> str:
    shutil.copy(_record(env), env.run / "cells" / "0123456789abcdef.json")
    rc, out, err = _resume(env)
    if isinstance(rc, str):
        return "traceback"
    return recomputed(rc, err, env.run, env.reference) if out.startswith("4 cells") else "silently wrong"


def _report_record(doc: object) -> Callable[[Env], str]:
    def case(env: Env) -> str:
        _record(env).write_text(json.dumps(doc))
        rc, _out, err = env.cli("report", env.run)
        return refused(rc, err)

    return case


def _report_short_embedding(env: Env) -> str:
    path = sorted((env.run / "embeddings").glob("*.npy"))[0]
    np.save(path, np.load(path)[:10])
    rc, _out, err = env.cli("report", env.run)
    return refused(rc, err)


CASES: dict[str, Callable[..., str]] = {
    "cache: another cell's embedding": _cache_npy(lambda a, b: b),
    "cache: all zeros": _cache_npy(lambda a, b: np.zeros_like(a)),
    "cache: 10 x 2 for n = 150": _cache_npy(lambda a, b: a[:10]),
    "cache: a NaN": _cache_npy(lambda a, b: np.where(np.arange(a.size).reshape(a.shape) == 3, np.nan, a)),
    "cache: edited scores": _cache_meta(_scores_edited),
    "cache: fails at re-scoring": _fails_at_rescoring,
    "cache: metadata [1]": _cache_meta(lambda doc: [1]),
    "cache: a score 'abc'": _cache_meta(_score_text),
    "cache: a bad entry is logged once": _logged_once,
    "cache: an entry of format 1": _cache_meta(_format_one),
    "cache: sealed, written for another key": _cache_meta(_resealed(lambda d: d.update(key="0" * 32))),
    "cache: sealed, a score out of range": _cache_meta(
        _resealed(lambda d: [v["values"].update({MEASURE: 5.0}) for v in d["scores"].values()])
    ),
    "cache clear: a folder that is not a cache": _clear_keeps_user_files,
    "cache clear: only entries": _clear_deletes_entries_only,
    "check: a baseline of another suite": _check_refused(lambda env: env.other),
    "check: scores.csv with only a header": _check_refused(_header_only),
    "check: a value 'abc'": _check_refused(lambda env: env.baseline_csv(_set_first(MEASURE, "abc"))),
    "check: a value NaN": _check_refused(lambda env: env.baseline_csv(_set_first(MEASURE, "NaN"))),
    "check: a value inf": _check_refused(lambda env: env.baseline_csv(_set_first(MEASURE, "inf"))),
    "check: a value out of range": _check_refused(lambda env: env.baseline_csv(_set_first(MEASURE, "1.5"))),
    "check: status banana": _check_refused(lambda env: env.baseline_csv(lambda f: f.assign(status="banana"))),
    "check: duplicated rows": _check_refused(lambda env: env.baseline_csv(lambda f: pd.concat([f, f]))),
    "check: a configuration missing fails": _missing_fails,
    "check: --allow-missing passes": _missing_allowed,
    "check: the verdict counts comparisons": _verdict_counts,
    "check: --junit is a folder": _junit_folder,
    "check: manifest of wrong types": _check_refused(_bad_manifest),
    "records: a copy under another name": _extra_copy,
    "records: trustworthiness 5.0 on resume": _record_edit(_trust_five),
    "records: sealed, trustworthiness 5.0 on resume": _record_edit(_resealed(_trust_five)),
    "records: sealed, status banana on resume": _record_edit(_resealed(lambda d: d.update(status="banana"))),
    "records: {} on resume": _record_edit(lambda doc: {}),
    "records: [1, 2] on resume": _record_edit(lambda doc: [1, 2]),
    "records: {} in report": _report_record({}),
    "records: [1, 2] in report": _report_record([1, 2]),
    "records: embedding of 10 rows in report": _report_short_embedding,
}


@pytest.fixture(scope="module")
def shared(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """One run of the suite without cache (the reference), one that fills a cache, one other suite."""
    root = tmp_path_factory.mktemp("integrity")
    (root / "tiny.yaml").write_text(SUITE)
    (root / "other.yaml").write_text(OTHER)
    assert main(["run", str(root / "tiny.yaml"), *QUIET, "--no-cache", "--out", str(root / "ref")]) == 0
    assert (
        main(["run", str(root / "tiny.yaml"), *QUIET, "--cache", str(root / "c"), "--out", str(root / "o")])
        == 0
    )
    assert main(["run", str(root / "other.yaml"), *QUIET, "--no-cache", "--out", str(root / "ref")]) == 0
    return {
        "suite": root / "tiny.yaml",
        "run": next((root / "ref" / "tiny").iterdir()),
        "other": next((root / "ref" / "other").iterdir()),
        "cache": root / "c",
    }


@pytest.mark.parametrize("name", list(CASES))
def test_reused_data_is_verified(name, shared, tmp_path, capsys, caplog):
    env = Env(tmp_path, shared, capsys)
    case = CASES[name]
    outcome = case(env, caplog) if name == "cache: a bad entry is logged once" else case(env)
    assert outcome == "correct", f"{name}: {outcome}"


# ---------------------------------------------------------------- fuzzing: random corruption

JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-3, 3) | st.floats(allow_nan=False) | st.text(max_size=4),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=3), inner, max_size=3),
    max_leaves=6,
)


@st.composite
def corruptions(draw: st.DrawFn) -> tuple[str, object]:
    """One random change: flip a byte, cut the file, set a JSON field, or replace an array's shape."""
    kind = draw(st.sampled_from(["flip", "cut", "json", "shape"]))
    if kind in ("flip", "cut"):
        return kind, (draw(st.floats(0, 1, exclude_max=True)), draw(st.integers(1, 255)))
    if kind == "json":
        return kind, (
            draw(st.lists(st.text("abcdefghijklmnopqrstuvwxyz_@0123456789", max_size=16), max_size=3)),
            draw(JSON_VALUES),
        )
    return kind, (
        draw(st.integers(0, 160)),
        draw(st.integers(0, 3)),
        draw(st.sampled_from(["f8", "f4", "i8"])),
    )


def corrupt(path: Path, change: tuple[str, object]) -> None:
    """Apply a change from :func:`corruptions` to one file."""
    kind, how = change
    data = bytearray(path.read_bytes())
    if kind == "flip":
        where, xor = how  # type: ignore[misc]
        data[int(where * len(data))] ^= xor
        path.write_bytes(bytes(data))
    elif kind == "cut":
        path.write_bytes(bytes(data[: int(how[0] * len(data))]))  # type: ignore[index]
    elif kind == "json" and path.suffix == ".json":
        keys, value = how  # type: ignore[misc]
        doc = json.loads(data)
        node = doc
        for k in keys[:-1]:
            node = node.get(k) if isinstance(node, dict) and isinstance(node.get(k), dict) else node
        if isinstance(node, dict):
            node[(keys[-1] if keys else next(iter(node), "x"))] = value
        path.write_text(json.dumps(doc))
    elif kind == "shape" and path.suffix == ".npy":
        rows, cols, dtype = how  # type: ignore[misc]
        np.save(path, np.ones((rows, cols), dtype=dtype))
    else:
        path.write_bytes(bytes(data[:-1]))


@pytest.fixture(scope="module")
def planned(shared):
    """The cells of the suite, their datasets' sizes and the scoring settings."""
    from harness.run.cells import plan
    from harness.suite import load_datasets, load_suite

    suite = load_suite(shared["suite"])
    datasets = load_datasets(suite)
    cells, _ = plan(suite, datasets)
    return cells, {name: d.n for name, d in datasets.items()}, suite.scoring


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(which=st.integers(0, 7), change=corruptions())
def test_fuzzed_cache_entry_is_served_intact_or_not_at_all(shared, planned, tmp_path_factory, which, change):
    from harness.run.cache import EmbeddingCache, cache_key

    cells, rows, scoring = planned
    root = tmp_path_factory.mktemp("fuzz-cache")
    shutil.copytree(shared["cache"], root / "c")
    cache, pristine = EmbeddingCache(root / "c"), EmbeddingCache(shared["cache"])
    cell = cells[which % len(cells)]
    key = cache_key(cell)
    corrupt(root / "c" / key[:2] / f"{key}{'.json' if which < 4 else '.npy'}", change)
    known, expected = cache.get(cell, rows[cell.dataset]), pristine.get(cell, rows[cell.dataset])
    assert expected is not None
    assert known is None or np.array_equal(known.embedding, expected.embedding)
    served, original = cache.get_result(cell, scoring, rows[cell.dataset]), pristine.get_result(cell, scoring)
    assert original is not None
    if served is not None:  # anything served is exactly what was stored
        assert served.values == original.values and np.array_equal(served.embedding, original.embedding)


def _unclosed_bracket_in_header(path: Path) -> None:
    """A .npy header whose padding holds '[' (NumPy's header parser then raises a TokenError)."""
    data = bytearray(path.read_bytes())
    end = data.index(b"}") + 1
    data[end + 8] = ord("[")
    path.write_bytes(bytes(data))


def test_a_npy_header_that_does_not_parse_is_refused_everywhere(shared, planned, tmp_path_factory):
    # found by the fuzz test above: NumPy reports such a header with tokenize.TokenError, which
    # is neither a ValueError nor an OSError; every reader must still fail closed, in one line
    from harness.npyfile import load_npy
    from harness.run.cache import EmbeddingCache, cache_key

    cells, rows, _ = planned
    root = tmp_path_factory.mktemp("bad-header")
    shutil.copytree(shared["cache"], root / "c")
    key = cache_key(cells[0])
    npy = root / "c" / key[:2] / f"{key}.npy"
    _unclosed_bracket_in_header(npy)
    with pytest.raises(ValueError, match=r"not a readable \.npy array"):
        load_npy(npy)
    assert EmbeddingCache(root / "c").get(cells[0], rows[cells[0].dataset]) is None  # fitted again
    run = root / "run"
    shutil.copytree(shared["run"], run)
    first = sorted((run / "embeddings").iterdir())[0]
    _unclosed_bracket_in_header(first)
    with pytest.raises(InputError, match=r"expected a \.npy array"):
        RunFolder.open(run).embedding(first.stem)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    part=st.sampled_from(["cells", "embeddings", "curves", "manifest.json"]),
    which=st.integers(0, 3),
    change=corruptions(),
)
def test_fuzzed_run_folder_reads_intact_or_refuses(shared, tmp_path_factory, part, which, change):
    run = tmp_path_factory.mktemp("fuzz-run") / "run"
    shutil.copytree(shared["run"], run)
    files = [run / part] if part.endswith(".json") else sorted((run / part).iterdir())
    corrupt(files[which % len(files)], change)
    original = RunFolder(shared["run"])
    try:
        folder = RunFolder.open(run)
        done = folder.finished_keys()
    except InputError:
        return
    for key in done:  # what resume skips is exactly what was stored
        assert json.loads((run / "cells" / f"{key}.json").read_text()) == original._record_of(key)
        assert np.array_equal(folder.embedding(key), original.embedding(key))
    try:
        scores = folder.scores
    except InputError as err:
        assert "\n" not in str(err)
        return
    pd.testing.assert_frame_equal(scores, original.scores)


@pytest.mark.slow
@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    part=st.sampled_from(["cells", "embeddings", "curves", "cache"]),
    which=st.integers(0, 3),
    change=corruptions(),
)
def test_fuzzed_run_recomputes_the_same_numbers_or_refuses(
    shared, tmp_path_factory, capsys, part, which, change
):
    env = Env(tmp_path_factory.mktemp("fuzz-e2e"), shared, capsys)
    if part == "cache":
        files = env.entries() + [e.with_suffix(".npy") for e in env.entries()]
        corrupt(files[which % len(files)], change)
        rc, _out, err, made = env.rerun_cached()
    else:
        files = sorted((env.run / part).iterdir())
        corrupt(files[which % len(files)], change)
        (rc, _out, err), made = _resume(env), env.run
    assert recomputed(rc, err, made, env.reference) == "correct" or refused(rc, err) == "correct"
