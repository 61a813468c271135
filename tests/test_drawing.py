"""The report's two drawing processes: plumbing tests of our own (no outside reference applies)."""

from __future__ import annotations

import os
import threading
from pathlib import Path

import pytest

from harness.report import _drawing
from harness.report._drawing import draw_figures

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="fork is POSIX only")


def _writer(path: Path, text: str):
    def draw() -> Path:
        path.write_text(f"{text} by {os.getpid()}")
        return path

    return draw


@pytest.fixture
def two_cores(monkeypatch: pytest.MonkeyPatch) -> None:
    # other tests of the session may leave threads behind; these drawers touch no shared lock
    monkeypatch.setattr(_drawing, "_cores", lambda: 2)
    monkeypatch.setattr(_drawing.threading, "active_count", lambda: 1)


def test_the_child_draws_its_share_and_the_parent_the_rest(tmp_path: Path, two_cores: None) -> None:
    drawers = {n: _writer(tmp_path / f"{n}.txt", n) for n in ("a", "b", "c")}
    drawers["none"] = lambda: None
    drawn = draw_figures(drawers, in_child=("b", "none"))
    assert list(drawn) == ["a", "b", "c", "none"]  # the drawers' order
    assert drawn["none"] is None and drawn["b"] == tmp_path / "b.txt"
    by = {n: (tmp_path / f"{n}.txt").read_text().split(" by ")[1] for n in ("a", "b", "c")}
    assert by["a"] == by["c"] == str(os.getpid()) and by["b"] != str(os.getpid())


def test_a_failed_child_is_not_trusted_and_its_share_is_drawn_here(tmp_path: Path, two_cores: None) -> None:
    parent = os.getpid()
    calls = []

    def flaky() -> Path:
        calls.append(os.getpid())
        if os.getpid() != parent:
            raise RuntimeError("the child fails")
        return _writer(tmp_path / "b.txt", "b")()

    drawn = draw_figures({"a": _writer(tmp_path / "a.txt", "a"), "b": flaky}, in_child=("b",))
    assert drawn["b"] == tmp_path / "b.txt" and calls == [parent]  # the child's call is not seen here
    assert (tmp_path / "b.txt").read_text() == f"b by {parent}"


def test_a_child_whose_file_is_missing_is_redrawn(tmp_path: Path, two_cores: None) -> None:
    parent = os.getpid()

    def lying() -> Path:
        path = tmp_path / "b.txt"
        if os.getpid() == parent:
            path.write_text("here")
        return path  # the child names a file it never wrote

    drawn = draw_figures({"a": _writer(tmp_path / "a.txt", "a"), "b": lying}, in_child=("b",))
    assert (tmp_path / "b.txt").read_text() == "here" and drawn["b"] == tmp_path / "b.txt"


def test_with_one_core_or_other_threads_everything_is_drawn_here(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(_drawing, "_cores", lambda: 1)
    drawers = {"a": _writer(tmp_path / "a.txt", "a"), "b": _writer(tmp_path / "b.txt", "b")}
    drawn = draw_figures(drawers, ("b",))
    assert (tmp_path / "b.txt").read_text() == f"b by {os.getpid()}" and len(drawn) == 2


def test_no_fork_while_another_thread_is_alive(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(_drawing, "_cores", lambda: 2)
    release = threading.Event()
    other = threading.Thread(target=release.wait)
    other.start()
    try:
        assert not _drawing.can_fork()
    finally:
        release.set()
        other.join()
