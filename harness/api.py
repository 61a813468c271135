"""The Python entry points that chain the stages: run a suite and rank it, re-run a finished run.

Each function here only calls the layers below (``run`` executes and stores,
``compare`` ranks and compares); the command line calls these.
"""

from __future__ import annotations

import dataclasses
import logging
from contextlib import ExitStack
from pathlib import Path

from .compare import RerunOutcome, RunSummary, compare_cells, summarise
from .compare.environment import environment_changes
from .errors import InputError
from .run import EmbeddingCache, ProgressHook, RunFolder, RunInterrupted, execute_suite
from .suite import Suite

log = logging.getLogger(__name__)


def run_suite(
    suite: Suite | str | Path,
    out: str | Path = "results",
    *,
    jobs: int | None = None,
    time_limit: float | None = None,
    quadratic_limit: int | None = None,
    resume: str | Path | None = None,
    cache: EmbeddingCache | str | Path | None = None,
    backend: str | None = None,
    scheduler: str | None = None,
    isolate: bool = True,
    progress: ProgressHook | None = None,
    hold: ExitStack | None = None,
) -> RunSummary:
    """Fit every method on every dataset for every seed, score, rank and write the run folder.

    Parameters
    ----------
    suite : Suite or path
        A suite value or the path of a suite file.
    out : path
        Root folder of runs; the run lands in ``<out>/<suite name>/<run id>/``.
    jobs : int, optional
        Cells computed at once (default: the suite's ``run.jobs``, else all cores).
    time_limit : float, optional
        Seconds per cell (default: the suite's ``run.time_limit``, else none).
    quadratic_limit : int, optional
        Largest n for methods whose memory grows as n squared (default: the suite's).
    resume : path, optional
        A run folder of the same suite to continue: its finished cells are kept.
    cache : EmbeddingCache or path, optional
        Embedding cache to read and fill (``None``: no cache).
    backend : {"local", "dask"}, optional
        Where cells run (default: the suite's ``run.backend``, else local).
    scheduler : str, optional
        Address of a Dask scheduler (with the dask backend; none starts a local cluster).
    isolate : bool
        Run each cell in its own child process (time limits and crash isolation).
    progress : callable, optional
        ``progress(result, done, total)`` after each stored cell.
    hold : ExitStack, optional
        Keep the run folder's lock in this stack after returning (for more
        work on the folder, such as its report); by default it is released.

    Returns
    -------
    RunSummary

    Raises
    ------
    RunInterrupted
        On Ctrl-C or SIGTERM, after storing every finished cell and the tables so far.
    FolderBusy
        When another process is working on the folder to resume.
    """
    executed = execute_suite(
        suite,
        out,
        jobs=jobs,
        time_limit=time_limit,
        quadratic_limit=quadratic_limit,
        resume=resume,
        cache=cache,
        backend=backend,
        scheduler=scheduler,
        isolate=isolate,
        progress=progress,
        hold=hold,
    )
    if executed.interrupted:  # before ranking: a run stopped before its first cell has nothing to rank
        raise RunInterrupted(executed.folder.path, executed.done, executed.total, executed.signum)
    summary = summarise(executed.folder, executed.suite)
    summary.seconds = executed.seconds
    return summary


def load_run(run_dir: str | Path) -> RunFolder:
    """Open a run folder written by :func:`run_suite` (``.manifest``, ``.suite``, ``.scores``, ...).

    Parameters
    ----------
    run_dir : str or Path
        The run folder.

    Returns
    -------
    RunFolder
    """
    return RunFolder.open(run_dir)


def rerun(
    run_dir: str | Path, out: str | Path | None = None, *, jobs: int | None = None, isolate: bool = True
) -> RerunOutcome:
    """Run a finished run again from its folder and compare every cell.

    The suite is read from the run's own ``suite.yaml`` and the seeds from its
    ``manifest.json``; the new run lands in a fresh folder.

    Parameters
    ----------
    run_dir : str or Path
        The finished run folder (``suite.yaml``, ``manifest.json``, ``cells/``).
    out : str or Path, optional
        Root folder for the new run (default: the root the original run is in,
        so the re-run lands next to it under ``<root>/<suite>/``).
    jobs : int, optional
        Cells computed at once (default: the suite's ``run.jobs``).
    isolate : bool
        Run each cell in its own child process, as :func:`run_suite` does.

    Returns
    -------
    RerunOutcome

    Raises
    ------
    InputError
        When the folder is not a finished run folder or its suite no longer loads.
    """
    from .suite import parse_suite

    original = RunFolder.open(run_dir)
    if not original.has_suite:
        raise InputError(original.where, "no suite.yaml; expected a run folder made by 'foldbench run'")
    recorded = original.manifest.get("suite") or {}
    text = (original.path / "suite.yaml").read_text(encoding="utf-8")
    suite = parse_suite(text, str(recorded.get("path") or original.path / "suite.yaml"))
    seeds = tuple(int(s) for s in original.manifest.get("seeds") or suite.seeds)
    suite = dataclasses.replace(suite, seeds=seeds)
    root = Path(out) if out is not None else original.path.parent.parent
    log.info("re-running %s into %s", original.path, root)
    new = run_suite(suite, root, jobs=jobs, isolate=isolate).folder
    notes = ["Fit time and peak memory are not compared: they measure the machine, not the method."]
    if suite.digest != recorded.get("hash"):
        notes.append(
            "The suite text hashes differently from the manifest's record; the re-run used "
            "the folder's suite.yaml."
        )
    return RerunOutcome(
        original.path,
        new.path,
        compare_cells(original, new),
        environment_changes(original.manifest, new.manifest),
        notes,
    )
