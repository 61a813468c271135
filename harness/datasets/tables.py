"""The user's own data: feature tables (CSV, TSV, Parquet, NPY) and distance matrices.

Loaders check everything a benchmark relies on and stop at the first problem
with a one-line :class:`~harness.errors.InputError` naming the file, the
column and what was expected.  Rows and columns in messages count from 1,
not counting a header; for text files the line number is given as well.

Relative paths are opened as given (relative to the working directory); the
suite loader resolves them against the suite file before calling.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError, suggest
from ..npyfile import load_npy
from ..params import Param, at_least
from ..text import is_number_text
from ._common import checked, seed_param, standardise, standardise_param, stratified_rows
from ._registry import register_dataset
from ._types import Dataset

logger = logging.getLogger(__name__)

_EXTENSIONS = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".npy": "npy",
}
_SEPARATORS = {"csv": ",", "tsv": "\t"}
_TEXT_FORMATS = ("csv", "tsv")
# Distances within this fraction of the largest distance count as equal
# (symmetry) or as zero (diagonal): round-off from writing text, not a real difference.
DISTANCE_TOLERANCE = 1e-8


# ---------------------------------------------------------------- reading files


def _existing_file(path: str) -> Path:
    p = Path(path)
    if not p.exists():
        raise InputError(path, "an existing file; file not found")
    if not p.is_file():
        raise InputError(path, "a file; this is a folder")
    return p


def _file_format(path: str, fmt: str, allowed: tuple[str, ...]) -> str:
    """The format named by ``fmt``, or guessed from the extension when ``auto``."""
    if fmt == "auto":
        ext = Path(path).suffix.lower()
        fmt = _EXTENSIONS.get(ext, "")
        if fmt not in allowed:
            raise InputError(
                path,
                f"a file ending in {_extension_list(allowed)}, or the 'format' "
                f"parameter set to one of {', '.join(allowed)}; got '{ext or 'no extension'}'",
            )
    elif fmt not in allowed:
        raise InputError(path, f"format one of {', '.join(allowed)}, got '{fmt}'")
    return fmt


def _extension_list(allowed: tuple[str, ...]) -> str:
    return ", ".join(ext for ext, f in _EXTENSIONS.items() if f in allowed)


def _row(i: int, fmt: str, header_lines: int = 1) -> str:
    """Name 0-based data row ``i`` for a message: counted from 1, with the file line for text."""
    if fmt in _TEXT_FORMATS:
        return f"row {i + 1} (line {i + 1 + header_lines})"
    return f"row {i + 1}"


def _read_npy(path: str) -> np.ndarray:
    with open(path, "rb") as fh:
        if fh.read(6) != b"\x93NUMPY":
            raise InputError(path, "a NumPy .npy file; it does not start with the .npy header")
    arr = checked(lambda: load_npy(path), path, "a NumPy .npy array that loads without pickle")
    if not isinstance(arr, np.ndarray):
        raise InputError(path, "a single array (.npy), not an archive")
    if np.issubdtype(arr.dtype, np.complexfloating):
        raise InputError(path, f"a real-valued array, got complex numbers (dtype {arr.dtype})")
    if not (np.issubdtype(arr.dtype, np.number) or arr.dtype == bool):
        raise InputError(path, f"a numeric array, got dtype {arr.dtype}")
    return arr


def _read_frame(path: str, fmt: str) -> pd.DataFrame:
    if fmt == "parquet":
        df = checked(lambda: pd.read_parquet(path), path, "a readable Parquet file")
    else:
        df = checked(
            lambda: pd.read_csv(path, sep=_SEPARATORS[fmt]),
            path,
            f"a readable {fmt.upper()} file with a header row",
        )
    df.columns = [str(c) for c in df.columns]
    return df


def read_labels(labels_path: str, n: int) -> np.ndarray:
    """Read one label per item from a one-column text file or a 1-D ``.npy`` array.

    A text file may start with a header line: it is recognised by the file
    having exactly ``n + 1`` lines.

    Parameters
    ----------
    labels_path : str
        The file.
    n : int
        Number of items the labels must match.

    Returns
    -------
    ndarray of shape (n,)
        Integer labels when every label is a whole number, text otherwise.
    """
    _existing_file(labels_path)
    fmt = (
        _file_format(labels_path, "auto", ("csv", "tsv", "npy"))
        if Path(labels_path).suffix.lower() in _EXTENSIONS
        else "csv"
    )
    if fmt == "npy":
        arr = _read_npy(labels_path)
        if arr.ndim == 2 and arr.shape[1] == 1:
            arr = arr[:, 0]
        if arr.ndim != 1 or arr.shape[0] != n:
            raise InputError(labels_path, f"a 1-D array of {n} labels (one per item), got shape {arr.shape}")
        return arr
    df = checked(
        lambda: pd.read_csv(labels_path, sep=_SEPARATORS[fmt], header=None, dtype=str, keep_default_na=False),
        labels_path,
        "a readable one-column label file",
    )
    if df.shape[1] != 1:
        raise InputError(labels_path, f"one column of labels, found {df.shape[1]} columns")
    values = [v.strip() for v in df.iloc[:, 0].tolist()]
    header = 0
    if len(values) == n + 1:
        values, header = values[1:], 1
    elif len(values) != n:
        raise InputError(labels_path, f"{n} labels (one per item), found {len(values)} lines")
    empty = [i for i, v in enumerate(values) if v == ""]
    if empty:
        raise InputError(
            labels_path, f"a label on every line; {len(empty)} empty, first at {_row(empty[0], fmt, header)}"
        )
    try:
        return np.array([int(v) for v in values], dtype=np.int64)
    except ValueError:
        return np.array(values, dtype=str)


# ---------------------------------------------------------------- checking columns


def _column_where(path: str, column: Any) -> str:
    return f"{path}, column '{column}'" if isinstance(column, str) else f"{path}, column {column}"


def _first_text_value(series: pd.Series) -> tuple[int, Any] | None:
    """Row and value of the first cell that is present but not a number."""
    parsed = pd.to_numeric(series, errors="coerce")
    bad = np.flatnonzero(parsed.isna().to_numpy() & series.notna().to_numpy())
    return (int(bad[0]), series.iloc[bad[0]]) if bad.size else None


def _numeric_column(df: pd.DataFrame, col: str, path: str, fmt: str) -> np.ndarray:
    series = df[col]
    if not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series)):
        found = _first_text_value(series)
        detail = f"found {found[1]!r} in {_row(found[0], fmt)}" if found else f"found type {series.dtype}"
        raise InputError(_column_where(path, col), f"numbers in a feature column, {detail}")
    return series.to_numpy(dtype=np.float64, na_value=np.nan)


def _check_feature_values(X: np.ndarray, names: list[Any], path: str, fmt: str, *, remedy: str) -> None:
    """Every feature column finite and not constant; ``remedy`` tells how to leave a column out."""
    finite = np.isfinite(X)
    for j in np.flatnonzero(~finite.all(axis=0)):
        rows = np.flatnonzero(~finite[:, j])
        raise InputError(
            _column_where(path, names[j]),
            f"finite numbers; {rows.size} row{'s' * (rows.size != 1)} hold NaN, inf or "
            f"an empty cell, first at {_row(int(rows[0]), fmt)}",
        )
    constant = np.flatnonzero(np.ptp(X, axis=0) == 0) if X.shape[0] else np.array([], dtype=int)
    if constant.size:
        col = int(constant[0])
        raise InputError(
            _column_where(path, names[col]),
            f"a column whose values vary; every row holds {X[0, col]:g} (zero variance), so {remedy}",
        )


def _pick_columns(
    df: pd.DataFrame, features: list[Any] | None, label: str | None, path: str, fmt: str
) -> tuple[list[str], list[str]]:
    """Feature columns to use, and text columns left out by default."""
    columns = list(df.columns)
    for name in ([label] if label is not None else []) + list(features or []):
        if not isinstance(name, str):
            raise InputError(f"{path}, column {name!r}", "a column name as text")
        if name not in columns:
            shown = ", ".join(columns[:12]) + (", ..." if len(columns) > 12 else "")
            raise InputError(
                _column_where(path, name),
                f"a column named in the header; there is none{suggest(name, columns)} (columns: {shown})",
            )
    if features is not None:
        if label is not None and label in features:
            raise InputError(_column_where(path, label), "the label column to be left out of 'features'")
        repeated = sorted({f for f in features if features.count(f) > 1})
        if repeated:
            raise InputError(_column_where(path, repeated[0]), "each feature column named once in 'features'")
        return list(features), []
    chosen, ignored = [], []
    for col in columns:
        if col == label:
            continue
        series = df[col]
        if pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series):
            chosen.append(col)
            continue
        # a column that is mostly numbers with a stray word is a typo, not a text column
        parsed = pd.to_numeric(series, errors="coerce")
        present = int(series.notna().sum())
        if present and parsed.notna().sum() >= 0.5 * present:
            _numeric_column(df, col, path, fmt)
        ignored.append(col)
    if not chosen:
        if df.shape[1] == 1 and fmt in _TEXT_FORMATS:
            # one column means this is probably not a table: its "header" is file content, not shown
            raise InputError(
                path,
                "at least one numeric feature column; found none, and only one column was read: "
                f"is this a table separated by '{_SEPARATORS[fmt]}' with a header row?",
            )
        raise InputError(
            path, f"at least one numeric feature column; found none (columns: {', '.join(columns)})"
        )
    if ignored:
        logger.info("%s: leaving out text columns %s", path, ", ".join(ignored))
    return chosen, ignored


def _label_values(df: pd.DataFrame, label: str, path: str, fmt: str) -> np.ndarray:
    series = df[label]
    missing = np.flatnonzero(series.isna().to_numpy())
    if missing.size:
        raise InputError(
            _column_where(path, label),
            f"a label in every row; {missing.size} empty, first at {_row(int(missing[0]), fmt)}",
        )
    if pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series):
        return series.to_numpy()
    return np.array([str(v) for v in series.tolist()], dtype=str)


# ---------------------------------------------------------------- loaders


@register_dataset(
    "table",
    params=(
        Param("path", str, None, "the table file (.csv, .tsv, .parquet or .npy); required"),
        Param(
            "format",
            str,
            "auto",
            "file format; 'auto' goes by the extension",
            choices=("auto", "csv", "tsv", "parquet", "npy"),
        ),
        Param("features", list, None, "feature column names (default: every numeric column but the label)"),
        Param("label", str, None, "column holding class labels (optional)"),
        Param("labels_path", str, None, "one-column file of labels, one per row (for .npy tables)"),
        standardise_param(False),
        Param(
            "duplicates",
            str,
            "keep",
            "rows with identical features: keep (with a warning) or drop",
            choices=("keep", "drop"),
        ),
        Param("min_rows", int, 10, "fewest rows accepted", check=at_least(2)),
        Param("id_column", str, None, "column of row ids (not a feature); file embeddings are matched by it"),
        Param(
            "n",
            int,
            None,
            "keep a random class-stratified subsample of this many rows (default: all rows)",
            check=at_least(2),
        ),
        seed_param(),
    ),
    description="your own feature table: CSV, TSV, Parquet or a 2-D NumPy array",
    source="user file",
)
def table(
    path: str | None = None,
    format: str = "auto",
    features: list[str] | None = None,
    label: str | None = None,
    labels_path: str | None = None,
    standardise: bool = False,
    duplicates: str = "keep",
    min_rows: int = 10,
    id_column: str | None = None,
    n: int | None = None,
    seed: int = 0,
) -> Dataset:
    """Load a table of numeric features, with optional class labels.

    Parameters
    ----------
    path : str
        The file.  Its extension picks the reader unless ``format`` is given.
    format : {"auto", "csv", "tsv", "parquet", "npy"}
        File format.  CSV and TSV need a header row.
    features : list of str, optional
        Columns to use as features; by default every numeric column except
        ``label`` (text columns are left out and logged).  Not available for
        ``.npy`` files, whose columns are all used.
    label : str, optional
        Column of class labels (not for ``.npy``; use ``labels_path``).
    labels_path : str, optional
        One-column file with one label per row (see :func:`read_labels`).
    standardise : bool
        Scale every feature to mean 0 and standard deviation 1.
    duplicates : {"keep", "drop"}
        Rows whose features repeat an earlier row: kept with a logged warning,
        or dropped (the first one stays).
    min_rows : int
        Fewest rows accepted, after dropping duplicates.
    id_column : str, optional
        Column of row ids: left out of the features, kept as text in
        ``info["row_ids"]`` so that embeddings read from files can be matched
        to rows by id (not for ``.npy``; not with ``duplicates: drop``).
    n : int, optional
        Keep a seeded, class-stratified subsample of ``n`` rows (in file order),
        drawn after duplicates are handled and before standardising; all rows
        by default.
    seed : int
        Seed of the subsample (ignored without ``n``).

    Returns
    -------
    Dataset
        ``X`` (float64), ``labels`` if given; ``info`` has the path, feature
        names, left-out text columns and the number of duplicate rows.

    Raises
    ------
    InputError
        Missing or unreadable file, unknown column, a feature column that is
        not numeric, holds NaN or inf or is constant, no feature column, or
        fewer than ``min_rows`` rows.
    """
    if path is None:
        raise InputError("table.path", "the path of a table file (required)")
    _existing_file(path)
    fmt = _file_format(path, format, ("csv", "tsv", "parquet", "npy"))
    if fmt == "npy":
        if features is not None or label is not None:
            raise InputError(
                path,
                "no 'features' or 'label' for a .npy array, which has no column names "
                "(all columns are features; give labels with 'labels_path')",
            )
        if id_column is not None:
            raise InputError(path, "no 'id_column' for a .npy array, which has no column names")
        X, names = _npy_features(path)
        labels: np.ndarray | None = None
        ignored: list[str] = []
        row_ids = None
    else:
        X, names, labels, ignored, row_ids = _frame_features(path, fmt, features, label, min_rows, id_column)
    if X.shape[0] < min_rows:
        raise InputError(path, f"at least {min_rows} rows (min_rows), found {X.shape[0]}")
    remedy = (
        "remove that column from the array"
        if fmt == "npy"
        else "leave it out of 'features'"
        if features is not None
        else "list the other columns in 'features'"
    )
    _check_feature_values(X, names, path, fmt, remedy=remedy)
    if labels_path is not None:
        if labels is not None:
            raise InputError(labels_path, "labels from either 'label' or 'labels_path', not both")
        labels = read_labels(labels_path, X.shape[0])

    if row_ids is not None and duplicates == "drop":
        raise InputError(path, "either 'id_column' or 'duplicates: drop' (dropping rows would lose ids)")
    X, labels, n_duplicates = _handle_duplicates(X, labels, duplicates, path)
    if X.shape[0] < min_rows:
        after = " after dropping duplicates" if duplicates == "drop" and n_duplicates else ""
        raise InputError(path, f"at least {min_rows} rows (min_rows), found {X.shape[0]}{after}")
    if n is not None:
        rows = stratified_rows(labels, X.shape[0], n, seed, "table.n")
        X = X[rows]
        labels = None if labels is None else labels[rows]
        row_ids = None if row_ids is None else row_ids[rows]
    if standardise:
        X = _standardise_checked(X, names, path)
    return Dataset(
        name="table",
        X=X,
        labels=labels,
        info={
            "source": str(path),
            "format": fmt,
            "feature_names": [str(c) for c in names],
            "label": label,
            "ignored_columns": ignored,
            "duplicate_rows": n_duplicates,
            "duplicates": duplicates,
            "standardised": bool(standardise),
            "subsample": None if n is None else int(n),
        }
        | ({"row_ids": row_ids, "id_column": id_column} if row_ids is not None else {}),
    )


def _npy_features(path: str) -> tuple[np.ndarray, list[Any]]:
    """Features of a 2-D ``.npy`` array; its columns are named by number."""
    X = _read_npy(path)
    if X.ndim != 2:
        raise InputError(path, f"a 2-D array (rows x features), got shape {X.shape}")
    if X.shape[1] == 0:
        raise InputError(path, "at least one feature column; the array has 0 columns")
    return X.astype(np.float64), list(range(X.shape[1]))


def _frame_features(
    path: str, fmt: str, features: list[str] | None, label: str | None, min_rows: int, id_column: str | None
) -> tuple[np.ndarray, list[Any], np.ndarray | None, list[str], np.ndarray | None]:
    """Features, their names, labels, text columns left out and row ids, of a CSV, TSV or Parquet table."""
    df = _read_frame(path, fmt)
    if df.shape[0] == 0:
        raise InputError(path, f"at least {min_rows} rows (min_rows), found 0")
    row_ids = None
    if id_column is not None:
        if id_column not in df.columns:
            raise InputError(
                _column_where(path, id_column),
                f"a column named in the header{suggest(id_column, list(df.columns))}",
            )
        if id_column == label or id_column in (features or []):
            raise InputError(
                _column_where(path, id_column), "an id column that is neither the label nor a feature"
            )
        row_ids = df[id_column].astype(str).to_numpy()
        if len(set(row_ids)) != len(row_ids):
            raise InputError(_column_where(path, id_column), "each id once; ids repeat")
        df = df.drop(columns=[id_column])
    names, ignored = _pick_columns(df, features, label, path, fmt)
    if not names:
        raise InputError(path, "at least one feature column; 'features' is empty")
    X = np.column_stack([_numeric_column(df, c, path, fmt) for c in names])
    labels = _label_values(df, label, path, fmt) if label is not None else None
    return X, list(names), labels, ignored, row_ids


def _handle_duplicates(
    X: np.ndarray, labels: np.ndarray | None, duplicates: str, path: str
) -> tuple[np.ndarray, np.ndarray | None, int]:
    _, first = np.unique(X, axis=0, return_index=True)
    n_dup = X.shape[0] - first.size
    if n_dup == 0:
        return X, labels, 0
    if duplicates == "drop":
        keep = np.sort(first)
        logger.info("%s: dropped %d rows that repeat an earlier row's features", path, n_dup)
        return X[keep], None if labels is None else labels[keep], n_dup
    # identical points tie in every neighbour ranking, which bends rank-based measures
    logger.warning(
        "%s: %d rows repeat an earlier row's features; kept (set duplicates: drop to remove them)",
        path,
        n_dup,
    )
    return X, labels, n_dup


def _standardise_checked(X: np.ndarray, names: list[Any], path: str) -> np.ndarray:
    """Standardise, re-checking constancy (dropping duplicates can leave a column constant)."""
    constant = np.flatnonzero(np.ptp(X, axis=0) == 0)
    if constant.size:
        raise InputError(
            _column_where(path, names[int(constant[0])]),
            "a column whose values vary after dropping duplicate rows",
        )
    return standardise(X)


# ---------------------------------------------------------------- distance matrices


def _read_distance_text(path: str, fmt: str) -> tuple[np.ndarray, int]:
    """Numbers of a text distance matrix, skipping a header row and a row-name column if present.

    Returns the matrix and the number of header lines.
    """
    df = checked(
        lambda: pd.read_csv(path, sep=_SEPARATORS[fmt], header=None, dtype=str, keep_default_na=False),
        path,
        f"a readable {fmt.upper()} distance matrix",
    )
    cells = df.to_numpy(dtype=object)
    cells = np.vectorize(lambda c: str(c).strip(), otypes=[object])(cells)
    # the first cell may be an empty corner above row names, so it does not decide
    header = int(cells.shape[0] > 0 and not all(is_number_text(c) for c in cells[0, 1:]))
    cells = cells[header:]
    row_names = int(cells.shape[1] > 0 and not all(is_number_text(c) for c in cells[:, 0]))
    cells = cells[:, row_names:]
    if cells.size == 0:
        raise InputError(path, "a square matrix of numbers; no cell of numbers was found")
    D = np.empty(cells.shape, dtype=np.float64)
    for (i, j), c in np.ndenumerate(cells):
        try:
            D[i, j] = float(c)
        except ValueError:
            raise InputError(
                path, f"a number in every cell; found {c!r} at {_row(i, fmt, header)}, column {j + 1}"
            ) from None
    return D, header


@register_dataset(
    "distance_matrix",
    params=(
        Param("path", str, None, "square distance matrix (.csv, .tsv or .npy); required"),
        Param(
            "format",
            str,
            "auto",
            "file format; 'auto' goes by the extension",
            choices=("auto", "csv", "tsv", "npy"),
        ),
        Param("labels_path", str, None, "one-column file of labels, one per item (optional)"),
    ),
    description="your own precomputed distances between items: a square symmetric matrix",
    source="user file",
)
def distance_matrix(path: str | None = None, format: str = "auto", labels_path: str | None = None) -> Dataset:
    """Load a precomputed square matrix of distances between items.

    A text file may have a header row and a column of row names; each is
    recognised by holding something that is not a number.

    Parameters
    ----------
    path : str
        The file (.csv, .tsv or .npy).
    format : {"auto", "csv", "tsv", "npy"}
        File format; ``auto`` goes by the extension.
    labels_path : str, optional
        One-column file with one label per item (see :func:`read_labels`).

    Returns
    -------
    Dataset
        ``distances`` of shape (n, n), exactly symmetric with a zero diagonal,
        and ``labels`` when given.

    Raises
    ------
    InputError
        Not square, a missing or non-finite or negative value, a non-zero
        diagonal, or not symmetric within ``1e-8`` of the largest distance
        (naming the first offending cell).
    """
    if path is None:
        raise InputError("distance_matrix.path", "the path of a distance matrix file (required)")
    _existing_file(path)
    fmt = _file_format(path, format, ("csv", "tsv", "npy"))
    header = 0
    if fmt == "npy":
        D = _read_npy(path).astype(np.float64)
    else:
        D, header = _read_distance_text(path, fmt)
    D = _checked_distances(D, path, fmt, header)
    labels = read_labels(labels_path, D.shape[0]) if labels_path is not None else None
    return Dataset(
        name="distance_matrix",
        distances=D,
        labels=labels,
        info={"source": str(path), "format": fmt, "labels_path": labels_path},
    )


def _is_distance_matrix(D: np.ndarray) -> bool:
    """Square, finite, non-negative, symmetric with a zero diagonal (within the tolerance)."""
    if D.ndim != 2 or D.shape[0] != D.shape[1] or not np.isfinite(D).all():
        return False
    tol = DISTANCE_TOLERANCE * float(np.abs(D).max(initial=0.0))
    return bool((-tol <= D).all() and (np.abs(np.diag(D)) <= tol).all() and (np.abs(D - D.T) <= tol).all())


def _checked_distances(D: np.ndarray, path: str, fmt: str, header: int) -> np.ndarray:
    def cell(i: int, j: int) -> str:
        return f"{_row(i, fmt, header)}, column {j + 1}"

    if D.ndim != 2 or D.shape[0] != D.shape[1]:
        shape = " x ".join(map(str, D.shape))
        hint = (
            " (the first row looks like a header of numbers: the rows below it form a distance matrix)"
            if D.ndim == 2 and D.shape[0] == D.shape[1] + 1 and _is_distance_matrix(D[1:])
            else ""
        )
        raise InputError(path, f"a square matrix (n rows x n columns), got {shape}{hint}")
    if D.shape[0] < 3:
        raise InputError(path, f"distances between at least 3 items, got {D.shape[0]}")
    bad = np.argwhere(~np.isfinite(D))
    if bad.size:
        raise InputError(
            path, f"finite distances; {len(bad)} cells hold NaN or inf, first at {cell(*bad[0])}"
        )
    tol = DISTANCE_TOLERANCE * float(np.abs(D).max())
    bad = np.argwhere(-tol > D)
    if bad.size:
        i, j = bad[0]
        raise InputError(path, f"non-negative distances; {cell(i, j)} holds {D[i, j]:g}")
    D = np.maximum(D, 0.0)
    off = np.flatnonzero(np.abs(np.diag(D)) > tol)
    if off.size:
        i = int(off[0])
        raise InputError(path, f"zeros on the diagonal; {cell(i, i)} holds {D[i, i]:g}")
    bad = np.argwhere(np.abs(D - D.T) > tol)
    if bad.size:
        i, j = bad[0]
        raise InputError(
            path, f"a symmetric matrix; {cell(i, j)} holds {D[i, j]:g} but {cell(j, i)} holds {D[j, i]:g}"
        )
    D = (D + D.T) / 2.0
    np.fill_diagonal(D, 0.0)
    n_zero = int((np.count_nonzero(D == 0) - D.shape[0]) // 2)
    if n_zero:
        logger.warning("%s: %d pairs of different items are at distance 0", path, n_zero)
    return D
