"""``choose`` against the exhaustive grid on each bundled dataset: time and the rank of the pick.

For every dataset, at its default size, one ``harness.choose(..., audit=True)``: successive
halving over the default pool (its own fresh embedding cache, so nothing is reused from
earlier runs), then the audit, which fits every candidate of the same pool on all the data
with every seed, without a cache.  Both are measured in the same process, one after the
other, so the ratio holds on a shared machine.

Columns: exhaustive seconds, choose seconds (wall), choose / exhaustive; the same for cell
seconds (fit + score seconds of the cells actually computed: copies of seed-free fits and
cache hits cost nothing and are not counted; this is the compute the two spent, less
sensitive to other jobs on the machine than wall time, but without choose's per-rung
start-up); the rank of choose's pick in the exhaustive ranking (1 = the exhaustive best),
the exhaustive best.

Usage::

    python bench/bench_choose.py                 # rolled sheet, fleet demo, digits, iris
    python bench/bench_choose.py --quick         # iris and the fleet demo only
    python bench/bench_choose.py --care global
    python bench/bench_choose.py --big           # 20,000 invented rows, --budget 3m: wall vs budget
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from harness.api import run_suite  # noqa: E402
from harness.choose import choose  # noqa: E402
from harness.run import RunFolder  # noqa: E402

DATASETS = ("rolled_sheet", "machine_fleet", "digits", "iris")


def band_table(path: Path, n: int, seed: int = 0) -> Path:
    """An invented table: a rolled band in 3 of 8 columns, five noise columns, label ``grp``."""
    rng = np.random.default_rng(seed)
    t = rng.uniform(0, 3 * np.pi, n)
    h = rng.uniform(0, 10, n)
    X = np.c_[t * np.cos(t), h, t * np.sin(t), rng.normal(size=(n, 5)) * 0.3]
    lines = ["a,b,c,d,e,f,g,h,grp"] + [
        ",".join(f"{v:.5f}" for v in row) + f",{int(g)}" for row, g in zip(X, t // np.pi)
    ]
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def big(budget: str, n: int) -> None:
    """One choose on ``n`` invented rows within ``budget``: its wall time against the budget."""
    with tempfile.TemporaryDirectory(prefix="bench-choose-big-") as tmp:
        table = band_table(Path(tmp) / "band.csv", n)
        t0 = time.perf_counter()
        rec = choose(table, label="grp", budget=budget, out=Path(tmp) / "c")
        wall = time.perf_counter() - t0
    print(f"\n{n} rows, --budget {budget} ({rec.budget:.0f} s), default pool\n")
    print("| wall s | budget s | wall / budget | winner | complete | dropped for budget |")
    print("|---|---|---|---|---|---|")
    dropped = ", ".join(name for name, _ in rec.budget_dropped) or "none"
    ratio = wall / rec.budget
    print(f"| {wall:.1f} | {rec.budget:.0f} | {ratio:.2f} | {rec.winner} | {rec.complete} | {dropped} |")
    for name, why in rec.budget_dropped:
        print(f"- {name}: {why}")


def cell_seconds(run_dirs: list[str]) -> float:
    """Fit + score seconds of the cells that were computed (not copies, not cache hits)."""
    total = 0.0
    for run_dir in run_dirs:
        s = RunFolder.open(run_dir).scores
        done = (s["copy_of"].fillna("") == "") & ~s["from_cache"].fillna(False).astype(bool)
        total += float((s["fit_seconds"].fillna(0) + s["score_seconds"].fillna(0))[done].sum())
    return total


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="iris and the fleet demo only")
    parser.add_argument("--care", default="balanced")
    parser.add_argument("--budget", default="1h", help="choose's budget (default 1h: not the limit here)")
    parser.add_argument("--jobs", type=int, default=None)
    parser.add_argument("--big", action="store_true", help="20,000 invented rows with --budget 3m instead")
    args = parser.parse_args()
    if args.big:
        big("3m" if args.budget == "1h" else args.budget, 20_000)
        return
    names = ("machine_fleet", "iris") if args.quick else DATASETS
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench-choose-") as tmp:
        # A warm-up run first: the cell processes' fork server starts (and warms up) once per
        # process, so without this the first choose would pay it and the audits after it not.
        warm = Path(tmp) / "warm.yaml"
        warm.write_text("name: warm\nseeds: 1\ndatasets: [{use: iris}]\nmethods: [{use: pca}]\n")
        run_suite(warm, Path(tmp) / "warm", cache=None)
        for name in names:
            rec = choose(
                name, budget=args.budget, care=args.care, out=Path(tmp) / name, jobs=args.jobs, audit=True
            )
            audit = rec.audit or {}
            rows.append(
                (
                    name,
                    len(rec.candidates),
                    audit.get("seconds", float("nan")),
                    rec.seconds,
                    rec.winner,
                    audit.get("winner_rank"),
                    audit.get("best"),
                    cell_seconds([audit["run_dir"]]) if "run_dir" in audit else float("nan"),
                    cell_seconds([r.run_dir for r in rec.rungs]),
                )
            )
            print(f"{name}: done", file=sys.stderr, flush=True)
    print(f"\ncare={args.care}, default pool, eta=3, 3 seeds at full size\n")
    print(
        "| dataset | candidates | exhaustive s | choose s | ratio | exhaustive cell s | choose cell s "
        "| cell ratio | pick | rank of pick | exhaustive best |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for name, count, full, mine, pick, rank, best, full_cells, my_cells in rows:
        print(
            f"| {name} | {count} | {full:.1f} | {mine:.1f} | {mine / full:.2f} | {full_cells:.1f} "
            f"| {my_cells:.1f} | {my_cells / full_cells:.2f} | {pick} | {rank} | {best} |"
        )
    top2 = sum(1 for r in rows if r[5] is not None and r[5] <= 2)
    third = sum(1 for r in rows if r[3] <= r[2] / 3)
    both = sum(1 for r in rows if r[5] is not None and r[5] <= 2 and r[3] <= r[2] / 3)
    third_cells = sum(1 for r in rows if r[8] <= r[7] / 3)
    both_cells = sum(1 for r in rows if r[5] is not None and r[5] <= 2 and r[8] <= r[7] / 3)
    print(
        f"\npick in the exhaustive top 2: {top2} of {len(rows)}; "
        f"choose within a third of the wall time: {third} of {len(rows)}; both: {both} of {len(rows)}; "
        f"within a third of the cell seconds: {third_cells} of {len(rows)}; both: {both_cells} of {len(rows)}"
    )


if __name__ == "__main__":
    main()
