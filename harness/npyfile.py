"""Reading a ``.npy`` file that may be damaged: every way it can fail to parse is one ``ValueError``.

``numpy.load`` reports a damaged file in many ways: ``ValueError`` and ``EOFError``
for a short body, but ``SyntaxError`` or ``tokenize.TokenError`` for a header
whose dictionary no longer parses.  Readers of files foldbench did not just
write (tables, embedding files, the cache, run folders) go through
:func:`load_npy`, so they catch one kind of error and say one line.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np


def load_npy(path: str | Path) -> np.ndarray:
    """``numpy.load(path, allow_pickle=False)``; a file that does not parse raises ``ValueError``.

    Parameters
    ----------
    path : str or Path
        The file.

    Returns
    -------
    numpy.ndarray
        What the file holds (an ``.npz`` archive comes back as NumPy gives it).

    Raises
    ------
    OSError
        The file cannot be opened or read.
    ValueError
        Its bytes are not a ``.npy`` array that loads without pickle.
    """
    try:
        return np.load(path, allow_pickle=False)
    except OSError:
        raise
    except Exception as exc:  # a damaged header or body, however NumPy reports it
        raise ValueError(f"not a readable .npy array ({type(exc).__name__}: {exc})") from exc
