"""Reports of a run folder: tables, figures and one self-contained page.

:func:`write_report` is the entry point; the pieces live in small modules:
``analysis`` (the numbers), ``figures`` (PNG), ``verdict`` (sentences),
``paper`` (``tables.md`` / ``tables.tex``), ``page`` (``report.html`` from
``templates/``) and ``tables`` (Markdown and LaTeX measure tables).  A report
reads a run folder; it never runs anything.
"""

from __future__ import annotations

import functools
import logging
from pathlib import Path

from ..config import foldbench_version
from ..datasets import Dataset
from ..errors import InputError
from ..run.folder import RunFolder
from ..suite import load_datasets
from ._drawing import Drawer, draw_figures

log = logging.getLogger(__name__)

#: Figure files of a report, under ``<run>/figures/``.
FIGURES = {
    "embeddings": "embeddings.png",
    "heatmaps": "heatmaps.png",
    "rnx": "rnx_curves.png",
    "shepard": "shepard.png",
    "cd": "critical_difference.png",
    "pareto": "quality_vs_time.png",
}


def write_report(run_dir: str | Path | RunFolder, *, quality: str = "mean_rank", alpha: float = 0.05) -> Path:
    """Write the report of a run folder and return the path of ``report.html``.

    Writes into the run folder ``report.html`` (self-contained: images embedded),
    ``tables.md``, ``tables.tex`` (booktabs) and ``figures/*.png``.

    Parameters
    ----------
    run_dir : str, Path or RunFolder
        A run folder written by ``foldbench run``.
    quality : str
        Quality axis of the Pareto front: ``mean_rank`` or a measure column
        (``trustworthiness@10``).
    alpha : float
        Level of the Nemenyi critical difference.

    Returns
    -------
    Path
        ``<run_dir>/report.html``.
    """
    from . import figures as fig
    from .analysis import analyse
    from .page import render
    from .paper import tables_latex, tables_markdown
    from .pointwise import point_defects
    from .verdict import verdict

    folder = run_dir if isinstance(run_dir, RunFolder) else RunFolder.open(run_dir)
    analysis = analyse(folder, quality=quality, alpha=alpha)
    datasets = _datasets(folder, analysis.notes)
    out = folder.path / "figures"
    defects = point_defects(analysis)
    drawers: dict[str, Drawer] = {
        "embeddings": lambda: fig.embedding_grid(analysis, datasets, out / FIGURES["embeddings"]),
        "heatmaps": lambda: fig.heatmaps(analysis, out / FIGURES["heatmaps"]),
        "rnx": lambda: fig.rnx_curves(analysis, out / FIGURES["rnx"]),
        "shepard": lambda: fig.shepard(analysis, datasets, out / FIGURES["shepard"]),
        "cd": lambda: fig.critical_difference_diagram(analysis, out / FIGURES["cd"]),
        "pareto": lambda: fig.quality_vs_time(analysis, out / FIGURES["pareto"]),
    }
    for name, per_method in defects.items():
        drawers[f"points:{name}"] = functools.partial(
            fig.point_defect_maps, analysis, per_method, out / f"points_{_file_name(name)}.png"
        )
    # about half the drawing time each way on the quickstart suite (bench/bench_quickstart.py)
    drawn = draw_figures(drawers, in_child=("heatmaps", "cd", "pareto"))
    folder.write_text("tables.md", tables_markdown(analysis))
    folder.write_text("tables.tex", tables_latex(analysis))
    page = folder.write_text(
        "report.html", render(analysis, verdict(analysis), drawn, foldbench_version(), defects, datasets)
    )
    log.info("report written to %s", page)
    return page


def _file_name(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


def _datasets(folder: RunFolder, notes: list[str]) -> dict[str, Dataset]:
    """The run's datasets reloaded for colours and Shepard diagrams; ``{}`` when they cannot be.

    A dataset whose fingerprint differs from the one recorded at run time is left
    out (its rows would not match the stored embeddings), with a note.
    """
    try:
        loaded = load_datasets(folder.suite)
    except (InputError, OSError) as exc:
        notes.append(f"The data could not be loaded again ({exc}); figures that need it are left out.")
        return {}
    recorded = folder.manifest.get("datasets", {})
    keep = {}
    for name, ds in loaded.items():
        fp = recorded.get(name, {}).get("fingerprint")
        if fp is not None and fp != ds.fingerprint():
            notes.append(
                f"Dataset {name} has changed since the run (fingerprint differs); it is left out of the "
                "figures that need the data."
            )
            continue
        keep[name] = ds
    return keep


__all__ = ["FIGURES", "write_report"]
