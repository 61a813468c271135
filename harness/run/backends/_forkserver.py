"""Imported by the local backend's fork server, and only there: it ends when foldbench does.

The fork server is started by the thread that runs the backend; on Linux this
module asks the kernel to kill the server when that thread ends.  It also
imports the backend once, so each cell starts in milliseconds.
"""

from __future__ import annotations

from . import local  # noqa: F401  (imported once here, then shared by every forked cell)
from ._orphans import die_with_parent

die_with_parent()
