"""The benchmark scripts under bench/ still import against the package (they are never run by tests)."""

from __future__ import annotations

import runpy
from pathlib import Path

import pytest

BENCH = sorted((Path(__file__).resolve().parent.parent / "bench").glob("bench_*.py"))


@pytest.mark.parametrize("script", BENCH, ids=[p.name for p in BENCH])
def test_a_bench_script_imports_and_defines_main(script):
    namespace = runpy.run_path(str(script), run_name="bench_import_only")  # top level only, no main()
    assert callable(namespace.get("main"))
