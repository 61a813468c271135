"""Regression verdict: a finished run against a baseline run.

Cells are matched by dataset, method and parameters; the seeds of one
configuration are pooled, so a baseline made with seeds 0-4 can judge a run
made with seeds 5-9.  A change counts as a regression only when it is worse
than the measure's tolerance *and* unlikely to be seed noise (one-sided Welch
t-test over seeds at ``alpha``).  With a single seed on either side no noise
test is possible and the tolerance alone decides; the outcome says so.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from xml.etree import ElementTree as ET

import numpy as np
import pandas as pd
import yaml
from scipy import stats

from ..config import CellStatus, is_failure
from ..errors import InputError
from ..metrics import higher_is_better
from ..run.atomic import write_text
from ..run.folder import RunFolder
from ..suite.tolerances import alpha_of, parse_tolerances, resolve_tolerance
from ..text import pvalue_text, seed_range
from .aggregate import CONFIG, measure_columns
from .environment import environment_changes

log = logging.getLogger(__name__)

VERDICTS = ("regression", "improvement", "unchanged", "within noise", "new", "missing")
COLUMNS = [
    "dataset",
    "method",
    "params",
    "measure",
    "baseline_mean",
    "current_mean",
    "difference",
    "tolerance",
    "p_value",
    "verdict",
    "baseline_seeds",
    "current_seeds",
    "gated",
]


# ---------------------------------------------------------------- statistics


@dataclass(frozen=True)
class WelchResult:
    """Welch's unequal-variance t-test, one-sided towards "current is worse".

    Attributes
    ----------
    statistic : float
        ``(mean(current) - mean(baseline)) / sqrt(s_c^2/n_c + s_b^2/n_b)``.
    df : float
        Welch-Satterthwaite degrees of freedom.
    p_worse : float
        Probability of a change at least this far towards worse if the true
        means were equal; near 0 for a real regression, near 1 for a real
        improvement.
    """

    statistic: float
    df: float
    p_worse: float


def welch_test(current: np.ndarray, baseline: np.ndarray, higher_is_better: bool) -> WelchResult:
    """One-sided Welch t-test of ``current`` against ``baseline`` in the bad direction.

    Parameters
    ----------
    current, baseline : array of float
        Values over seeds, at least two each.
    higher_is_better : bool
        Direction of the measure: the bad direction is "current lower" when true.

    Returns
    -------
    WelchResult
        With zero spread on both sides the difference is taken as exact:
        ``p_worse`` is 0 when current is worse, 1 when better, 0.5 when equal
        (the value of a t statistic of 0).
    """
    c = np.asarray(current, dtype=float)
    b = np.asarray(baseline, dtype=float)
    if len(c) < 2 or len(b) < 2:
        raise ValueError("the Welch test needs at least two values on each side")
    vc, vb = c.var(ddof=1) / len(c), b.var(ddof=1) / len(b)
    diff = c.mean() - b.mean()
    worse = -diff if higher_is_better else diff
    se2 = vc + vb
    if se2 == 0:
        if diff == 0:
            return WelchResult(0.0, math.nan, 0.5)
        return WelchResult(math.copysign(math.inf, diff), math.nan, 0.0 if worse > 0 else 1.0)
    t = diff / math.sqrt(se2)
    df = se2**2 / (vc**2 / (len(c) - 1) + vb**2 / (len(b) - 1))
    p = stats.t.cdf(t, df) if higher_is_better else stats.t.sf(t, df)
    return WelchResult(float(t), float(df), float(p))


def _tolerances(folder: RunFolder) -> dict[str, Any]:
    """The ``tolerances`` block of the suite a folder was run from (none when it keeps no suite).

    Only that block is read: a baseline may keep a trimmed ``suite.yaml``.
    """
    if not folder.has_suite:
        return {}
    path = folder.path / "suite.yaml"
    try:
        doc = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:
        raise InputError(
            f"{folder.where}/suite.yaml", f"expected the suite as run ({type(exc).__name__})"
        ) from None
    raw = doc.get("tolerances") if isinstance(doc, Mapping) else None
    try:
        return parse_tolerances(raw, "tolerances")
    except InputError as err:
        raise InputError(f"{folder.where}/suite.yaml: {err.where}", err.expected) from None


# ---------------------------------------------------------------- the verdict


@dataclass
class CheckOutcome:
    """The verdict of a run against a baseline.

    Attributes
    ----------
    table : DataFrame
        One row per comparison: ``dataset, method, params, measure,
        baseline_mean, current_mean, difference`` (current - baseline),
        ``tolerance`` (the allowance towards worse), ``p_value`` (one-sided
        Welch test towards worse; NaN with a single seed), ``verdict`` (one of
        :data:`VERDICTS`), ``baseline_seeds``, ``current_seeds`` and ``gated``
        (whether a regression of this row fails the check).
    passed : bool
        No gated regression.
    environment_changes : list of str
        Differences between the two manifests (``scikit-learn 1.8.0 → 1.9.1``).
    notes : list of str
        Plain sentences about how the verdict was reached.
    current, baseline : Path
        The two run folders.
    alpha : float
        Significance level used.
    one_sided : list of tuple
        Configurations (dataset, method, params) found on one side only.
    allow_missing : bool
        Configurations on one side only do not fail the check.
    """

    table: pd.DataFrame
    passed: bool
    environment_changes: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    current: Path = Path()
    baseline: Path = Path()
    alpha: float = 0.05
    one_sided: list[tuple[str, ...]] = field(default_factory=list)
    allow_missing: bool = False

    @property
    def regressions(self) -> pd.DataFrame:
        """The rows that fail the check."""
        return self.table[(self.table["verdict"] == "regression") & self.table["gated"]]

    def counts(self) -> dict[str, int]:
        """Rows per verdict, in the order of :data:`VERDICTS`."""
        found = self.table["verdict"].value_counts()
        return {v: int(found.get(v, 0)) for v in VERDICTS}


def check_runs(
    current: str | Path,
    baseline: str | Path,
    *,
    tolerances: Mapping[str, Any] | None = None,
    alpha: float | None = None,
    allow_missing: bool = False,
) -> CheckOutcome:
    """Compare a finished run with a baseline run and decide whether it regressed.

    Parameters
    ----------
    current : str or Path
        Run folder to judge.
    baseline : str or Path
        Run folder to judge it against.  It needs ``manifest.json`` and either
        ``cells/`` or ``scores.csv``.
    tolerances : mapping, optional
        Entries in the syntax of the suite's ``tolerances`` block (or from
        :func:`harness.expect.parse_tolerance_flags`); they override the
        current run's suite block key by key.
    alpha : float, optional
        Significance level of the one-sided Welch test (default: the suite's
        ``tolerances.alpha``, else 0.05).
    allow_missing : bool
        Let configurations found in only one of the two runs pass; by default
        they fail the check.

    Returns
    -------
    CheckOutcome

    Raises
    ------
    InputError
        When a folder is missing or is not a readable run folder, its scores
        are not valid (unknown statuses, duplicated cells, values that are not
        numbers in the measure's range), or the two runs share no configuration.
    """
    cur = RunFolder.open(current, "run folder")
    base = RunFolder.open(baseline, "baseline folder")
    entries = _tolerances(cur)
    entries.update(parse_tolerances(tolerances, "tolerances") if tolerances is not None else {})
    level = alpha_of(entries) if alpha is None else float(alpha)
    if not 0 < level < 1:
        raise InputError("alpha", f"expected a significance level between 0 and 1, got {alpha}")
    one_sided = _one_sided(cur, base)
    table, single = _compare(cur.scores, base.scores, entries, level)
    regressed = ((table["verdict"] == "regression") & table["gated"]).any()
    passed = not regressed and (allow_missing or not one_sided)
    outcome = CheckOutcome(
        table,
        bool(passed),
        environment_changes(base.manifest, cur.manifest),
        _notes(cur, base, table, single, level),
        cur.path,
        base.path,
        level,
        one_sided,
        allow_missing,
    )
    log.info("check %s against %s: %s", cur.path, base.path, "passed" if passed else "regressed")
    return outcome


def _one_sided(cur: RunFolder, base: RunFolder) -> list[tuple[str, ...]]:
    """Configurations in only one run; refuses two runs with none in common."""
    configs_c = {tuple(map(str, k)) for k in cur.scores[CONFIG].drop_duplicates().itertuples(index=False)}
    configs_b = {tuple(map(str, k)) for k in base.scores[CONFIG].drop_duplicates().itertuples(index=False)}
    if not configs_c & configs_b:
        raise InputError(
            base.where,
            f"expected a baseline of the same configurations (dataset, method, params); none of its "
            f"{len(configs_b)} is among the {len(configs_c)} of the run",
        )
    return sorted(configs_c ^ configs_b)


def _compare(
    cur: pd.DataFrame, base: pd.DataFrame, entries: Mapping[str, Any], alpha: float
) -> tuple[pd.DataFrame, int]:
    cols_c, cols_b = measure_columns(cur), measure_columns(base)
    columns = list(dict.fromkeys([*cols_b, *cols_c]))
    # iter(): a GroupBy has a .keys attribute, which would make dict() read it as a mapping
    groups_c = dict(iter(cur.groupby(CONFIG, sort=False)))
    groups_b = dict(iter(base.groupby(CONFIG, sort=False)))
    rows = []
    single = 0
    for config in dict.fromkeys([*groups_b, *groups_c]):
        gb, gc = groups_b.get(config), groups_c.get(config)
        for column in columns:
            vb = _values(gb, column)
            vc = _values(gc, column)
            if vb is None and vc is None:
                continue
            tol = resolve_tolerance(column, entries)
            row: dict[str, Any] = dict(
                zip(CONFIG, config),
                measure=column,
                baseline_mean=_mean(vb),
                current_mean=_mean(vc),
                baseline_seeds=0 if vb is None else len(vb),
                current_seeds=0 if vc is None else len(vc),
                gated=bool(tol.gate),
                p_value=math.nan,
                tolerance=math.nan if vb is None else tol.allowance(_mean(vb)),
            )
            row["difference"] = row["current_mean"] - row["baseline_mean"]
            if vb is None:
                row["verdict"] = "new"
            elif vc is None:
                # A configuration still in the run whose seeds all failed is worse, not gone.
                failed = gc is not None and gc["status"].map(is_failure).any()
                row["verdict"] = "regression" if failed else "missing"
            else:
                if len(vb) < 2 or len(vc) < 2:
                    single += 1
                else:
                    row["p_value"] = welch_test(vc, vb, higher_is_better(column)).p_worse
                row["verdict"] = _verdict(
                    row["difference"], row["tolerance"], row["p_value"], higher_is_better(column), alpha
                )
            rows.append(row)
    return pd.DataFrame(rows, columns=COLUMNS), single


def _values(group: pd.DataFrame | None, column: str) -> np.ndarray | None:
    """Finite values of a measure over the seeds that finished, or None when there are none."""
    if group is None or column not in group:
        return None
    ok = pd.to_numeric(group.loc[group["status"] == CellStatus.OK, column], errors="coerce").to_numpy(
        dtype=float
    )
    ok = ok[np.isfinite(ok)]
    return ok if len(ok) else None


def _mean(values: np.ndarray | None) -> float:
    return math.nan if values is None else float(np.mean(values))


def _verdict(difference: float, allowance: float, p_worse: float, higher: bool, alpha: float) -> str:
    worse = -difference if higher else difference
    if abs(worse) <= allowance:
        return "unchanged"
    if worse > 0:
        return "regression" if math.isnan(p_worse) or p_worse < alpha else "within noise"
    return "improvement" if math.isnan(p_worse) or 1 - p_worse < alpha else "within noise"


def _notes(cur: RunFolder, base: RunFolder, table: pd.DataFrame, single: int, alpha: float) -> list[str]:
    notes = []
    seeds_c = cur.manifest.get("seeds") or sorted(cur.scores["seed"].unique().tolist())
    seeds_b = base.manifest.get("seeds") or sorted(base.scores["seed"].unique().tolist())
    if set(seeds_c) != set(seeds_b):
        notes.append(
            f"The runs used different seeds (baseline {seed_range(seeds_b)}, current "
            f"{seed_range(seeds_c)}); each configuration is compared over all its seeds."
        )
    if single:
        notes.append(
            f"{single} comparisons have a single seed on one side: no seed-noise test is "
            "possible, so the tolerance alone decides them (p_value is empty)."
        )
    else:
        notes.append(
            f"A change worse than its tolerance is a regression only when a one-sided Welch "
            f"t-test over seeds finds it at alpha = {alpha:g}; otherwise it is 'within noise'."
        )
    ungated = sorted(set(table.loc[~table["gated"], "measure"]))
    if ungated:
        notes.append(
            f"Listed but not part of the verdict: {', '.join(ungated)} (name them under "
            "'tolerances' or with --tolerance to gate them)."
        )
    failed = cur.scores[cur.scores["status"].map(is_failure)]
    if len(failed):
        notes.append(
            f"{len(failed)} cells of the current run did not finish ok; their seeds are left "
            "out of the means."
        )
    return notes


# ---------------------------------------------------------------- renderers


def _shown(outcome: CheckOutcome, show_unchanged: bool) -> pd.DataFrame:
    order = {v: i for i, v in enumerate(VERDICTS)}
    table = outcome.table if show_unchanged else outcome.table[outcome.table["verdict"] != "unchanged"]
    return table.assign(_o=table["verdict"].map(order)).sort_values("_o", kind="stable").drop(columns="_o")


def _row_cells(row: pd.Series) -> list[str]:
    verdict = row["verdict"] if row["gated"] or row["verdict"] != "regression" else "regression (not gated)"
    p = "-" if pd.isna(row["p_value"]) else pvalue_text(float(row["p_value"])).removeprefix("p = ")
    return [
        row["dataset"],
        row["method"],
        row["params"],
        row["measure"],
        _num(row["baseline_mean"]),
        _num(row["current_mean"]),
        _num(row["difference"], signed=True),
        _num(row["tolerance"]),
        p,
        f"{row['baseline_seeds']}/{row['current_seeds']}",
        verdict,
    ]


_HEADERS = [
    "dataset",
    "method",
    "params",
    "measure",
    "baseline",
    "current",
    "difference",
    "tolerance",
    "p (worse)",
    "seeds b/c",
    "verdict",
]


def _num(value: float, signed: bool = False) -> str:
    if pd.isna(value):
        return "-"
    return f"{value:+.4g}" if signed else f"{value:.4g}"


def _summary_line(outcome: CheckOutcome) -> str:
    counts = ", ".join(f"{n} {v}" for v, n in outcome.counts().items() if n)
    reasons = []
    if len(outcome.regressions):
        reasons.append(f"{len(outcome.regressions)} regressions")
    if outcome.one_sided and not outcome.allow_missing:
        reasons.append(
            f"{len(outcome.one_sided)} configurations in only one of the runs (--allow-missing accepts them)"
        )
    head = "PASSED" if outcome.passed else f"FAILED: {'; '.join(reasons)}"
    compared = f"{len(outcome.table)} comparisons"
    return f"{head} ({compared}{': ' + counts if counts else ''}; alpha {outcome.alpha:g})"


def check_text(outcome: CheckOutcome, *, show_unchanged: bool = False) -> str:
    """The verdict for a terminal: environment differences, then the changes, then one line.

    Parameters
    ----------
    outcome : CheckOutcome
    show_unchanged : bool
        Also list the comparisons found unchanged.

    Returns
    -------
    str
    """
    lines = [f"check {outcome.current} against baseline {outcome.baseline}", ""]
    if outcome.environment_changes:
        lines += ["Environment differences:"] + [f"  {c}" for c in outcome.environment_changes] + [""]
    else:
        lines += ["Environment: no differences recorded in the manifests.", ""]
    shown = _shown(outcome, show_unchanged)
    if len(shown):
        cells = [_HEADERS] + [_row_cells(r) for _, r in shown.iterrows()]
        widths = [max(len(r[i]) for r in cells) for i in range(len(_HEADERS))]
        for j, r in enumerate(cells):
            lines.append("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
            if j == 0:
                lines.append("  ".join("-" * w for w in widths))
        hidden = len(outcome.table) - len(shown)
        if hidden:
            lines.append(f"({hidden} unchanged comparisons not shown)")
        lines.append("")
    lines += [f"Note: {n}" for n in outcome.notes]
    lines += ["", _summary_line(outcome)]
    return "\n".join(lines)


def check_markdown(outcome: CheckOutcome, *, show_unchanged: bool = False) -> str:
    """The verdict as Markdown (for ``check.md`` in the run folder or a pull-request comment).

    Parameters
    ----------
    outcome : CheckOutcome
    show_unchanged : bool
        Also list the comparisons found unchanged.

    Returns
    -------
    str
    """
    lines = [
        f"# Regression check: {'passed' if outcome.passed else 'FAILED'}",
        "",
        f"Run `{outcome.current}` against baseline `{outcome.baseline}`.",
        "",
        _summary_line(outcome),
        "",
        "## Environment differences",
        "",
    ]
    lines += [f"- {_md(c)}" for c in outcome.environment_changes] or ["None recorded in the manifests."]
    lines += ["", "## Comparisons", ""]
    shown = _shown(outcome, show_unchanged)
    if len(shown):
        lines.append("| " + " | ".join(_HEADERS) + " |")
        lines.append(
            "|"
            + "|".join("---" if i < 4 or i == len(_HEADERS) - 1 else "---:" for i in range(len(_HEADERS)))
            + "|"
        )
        for _, r in shown.iterrows():
            cells = _row_cells(r)
            if r["verdict"] == "regression" and r["gated"]:
                cells[-1] = "**regression**"
            lines.append("| " + " | ".join(_md(c) for c in cells) + " |")
    hidden = len(outcome.table) - len(shown)
    if hidden:
        lines += ["", f"{hidden} unchanged comparisons not shown."]
    if outcome.notes:
        lines += ["", "## Notes", ""] + [f"- {_md(n)}" for n in outcome.notes]
    return "\n".join(lines) + "\n"


def _md(text: str) -> str:
    return str(text).replace("|", "\\|")


def junit_xml(outcome: CheckOutcome) -> str:
    """The verdict as JUnit XML: one ``<testcase>`` per comparison.

    Gated regressions are ``<failure>``; comparisons with nothing on one side
    (``new``, ``missing``) are ``<skipped>`` with the reason; everything else
    passes, its verdict and numbers in ``<system-out>``.  Environment
    differences are ``<property>`` elements of the suite.

    Returns
    -------
    str
        An XML document (UTF-8 declaration included).
    """
    table = outcome.table
    failures = int(((table["verdict"] == "regression") & table["gated"]).sum())
    skipped = int(table["verdict"].isin(["new", "missing"]).sum())
    root = ET.Element(
        "testsuites",
        name="foldbench check",
        tests=str(len(table)),
        failures=str(failures),
        errors="0",
        skipped=str(skipped),
    )
    suite = ET.SubElement(
        root,
        "testsuite",
        name=f"foldbench check {outcome.current.name}",
        tests=str(len(table)),
        failures=str(failures),
        errors="0",
        skipped=str(skipped),
    )
    props = ET.SubElement(suite, "properties")
    ET.SubElement(props, "property", name="baseline", value=str(outcome.baseline))
    ET.SubElement(props, "property", name="alpha", value=f"{outcome.alpha:g}")
    for i, change in enumerate(outcome.environment_changes):
        ET.SubElement(props, "property", name=f"environment.{i}", value=change)
    for _, r in table.iterrows():
        case = ET.SubElement(
            suite, "testcase", classname=f"{r['dataset']}.{r['method']}[{r['params']}]", name=r["measure"]
        )
        detail = (
            f"{r['measure']} of {r['method']} [{r['params']}] on {r['dataset']}: baseline "
            f"{_num(r['baseline_mean'])} ({r['baseline_seeds']} seeds), current "
            f"{_num(r['current_mean'])} ({r['current_seeds']} seeds), difference "
            f"{_num(r['difference'], signed=True)}, tolerance {_num(r['tolerance'])}, p (worse) "
            f"{'-' if pd.isna(r['p_value']) else format(r['p_value'], '.3g')}: {r['verdict']}"
        )
        if r["verdict"] == "regression" and r["gated"]:
            ET.SubElement(
                case,
                "failure",
                message=f"regression: {r['measure']} on {r['dataset']} / {r['method']} [{r['params']}]",
                type="regression",
            ).text = detail
        elif r["verdict"] in ("new", "missing"):
            reason = "not in the baseline" if r["verdict"] == "new" else "not in the current run"
            ET.SubElement(case, "skipped", message=reason)
        else:
            ET.SubElement(case, "system-out").text = detail
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def write_check(outcome: CheckOutcome, junit: str | Path | None = None) -> None:
    """Write ``check.md`` into the judged run folder, and JUnit XML to ``junit`` when given."""
    if junit is not None:
        junit_target(junit)
    RunFolder(outcome.current).write_text("check.md", check_markdown(outcome))
    if junit is not None:
        try:
            write_text(Path(junit), junit_xml(outcome))
        except OSError as exc:
            raise InputError("--junit", f"expected a file that can be written ({exc.strerror})") from None


def junit_target(junit: str | Path) -> Path:
    """Check that ``junit`` names a file in an existing folder (not a folder); returns it.

    Raises
    ------
    InputError
        When it names a folder or its folder does not exist; nothing is written.
    """
    path = Path(junit)
    if path.is_dir():
        raise InputError("--junit", f"expected a file name, {path} is a folder")
    if not path.parent.is_dir():
        raise InputError("--junit", f"expected a file in an existing folder; {path.parent} is not one")
    return path
