"""Imported by the local backend's fork server, and only there: it ends when foldbench does.

The fork server is started by the thread that runs the backend; on Linux this
module asks the kernel to kill the server when that thread ends.  It also
imports the backend once and scores one tiny embedding (lazy imports and first-call
set-up paid once), so each cell starts in milliseconds.
"""

from __future__ import annotations

import logging

from . import local  # imported once here, then shared by every forked cell
from ._orphans import die_with_parent

die_with_parent()


def _warm_up() -> None:
    """Score one tiny embedding, so that first-call costs are paid once here and not in every cell."""
    import numpy as np

    from ...metrics import score

    rng = np.random.default_rng(0)
    x = rng.normal(size=(40, 4))
    score(x, x[:, :2], ks=[5], labels=np.arange(40) % 2, latent=x[:, :1])
    local.thread_pools()  # the library scan, once here (keyed by the modules loaded by now)


try:
    _warm_up()
except Exception:  # a warm-up is an optimisation only; every cell still scores on its own
    logging.getLogger(__name__).debug("fork server warm-up failed", exc_info=True)
