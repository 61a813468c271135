"""Reading a finished run folder back as plain data."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import store
from .suite import Suite, parse_suite


@dataclass
class Run:
    """A run folder read back.

    Attributes
    ----------
    path : Path
        The folder.
    manifest : dict
        ``manifest.json``.
    suite : Suite
        The suite as it was run.
    scores : DataFrame
        A row per cell.
    """

    path: Path
    manifest: dict[str, Any]
    suite: Suite
    scores: pd.DataFrame

    def embedding(self, key: str) -> np.ndarray | None:
        """The embedding of the cell with this key (``scores['key']``)."""
        return store.load_embedding(self.path, key)

    def curve(self, key: str) -> pd.DataFrame | None:
        """The co-ranking curve of the cell with this key."""
        return store.load_curve(self.path, key)


def load_run(run_dir: str | Path) -> Run:
    """Read a run folder written by :func:`harness.run_suite`.

    Parameters
    ----------
    run_dir : str or Path
        The run folder.

    Returns
    -------
    Run
    """
    path = Path(run_dir)
    manifest = store.read_manifest(path)
    suite_file = path / "suite.yaml"
    suite = parse_suite(suite_file.read_text(encoding="utf-8"), str(manifest["suite"]["path"]))
    return Run(path, manifest, suite, store.load_scores(path))
