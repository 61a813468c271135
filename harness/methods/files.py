"""Embeddings made elsewhere: a method that reads its output from a file instead of fitting.

``use: embedding_file`` with ``params: {path: ...}`` scores an embedding that a
pipeline already wrote: a ``.npy`` array, a CSV/TSV/Parquet table of
coordinates, or one ``obsm`` entry of an AnnData ``.h5ad`` file (needs the
``anndata`` extra).  Rows are matched to the dataset's rows in order, or by an
id column when both sides have one.  The file's SHA-256 is part of the cache
key, so an edited file is never served from the cache.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..datasets._types import Dataset
from ..errors import InputError
from ..npyfile import load_npy
from ..params import Param
from ._registry import register_method

_TABLE_SEPARATORS = {".csv": ",", ".tsv": "\t", ".tab": "\t"}
_SUFFIXES = (".npy", ".csv", ".tsv", ".tab", ".parquet", ".pq", ".h5ad")
ANNDATA_HINT = "pip install 'foldbench[anndata]'"


#: Written in a path, stands for the cell's seed: one stored embedding per seed.
SEED_FIELD = "{seed}"


def seed_path(path: str, seed: int) -> str:
    """The file of one seed: ``{seed}`` in ``path`` replaced by the seed (paths without it as they are)."""
    return path.replace(SEED_FIELD, str(seed))


def _readable_file(value: Any) -> str | None:
    path = Path(str(value))
    if path.suffix.lower() not in _SUFFIXES:
        return f"a file ending in {', '.join(_SUFFIXES)}"
    if SEED_FIELD not in str(value) and not path.is_file():
        return "an existing file (not found)"
    return None


def file_sha256(path: str) -> str:
    """SHA-256 of a file's bytes, hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def read_embedding(
    path: str, *, columns: list[str] | None = None, id_column: str | None = None, obsm: str | None = None
) -> tuple[np.ndarray, np.ndarray | None]:
    """Read an embedding file.

    Parameters
    ----------
    path : str
        ``.npy``, ``.csv``/``.tsv``/``.parquet`` or ``.h5ad``.
    columns : list of str, optional
        Coordinate columns of a table (default: every numeric column but the id).
    id_column : str, optional
        Column of row ids (tables); for ``.h5ad`` the ids are ``obs_names``.
    obsm : str, optional
        The ``obsm`` key of an ``.h5ad`` file (e.g. ``X_umap``); required there.

    Returns
    -------
    Y : ndarray of shape (n, d), float64
    ids : ndarray of str, or None
    """
    suffix = Path(path).suffix.lower()
    if suffix == ".npy":
        if columns or id_column:
            raise InputError(path, "no 'columns' or 'id_column' for a .npy array (it has no header)")
        try:
            arr = load_npy(path)
        except (OSError, ValueError) as exc:
            raise InputError(path, f"a NumPy .npy array that loads without pickle ({exc})") from None
        return _coordinates(arr, path), None
    if suffix == ".h5ad":
        return _read_h5ad(path, obsm)
    return _read_table(path, columns, id_column)


def _coordinates(arr: Any, where: str) -> np.ndarray:
    arr = np.asarray(arr)
    if np.iscomplexobj(arr) or not (np.issubdtype(arr.dtype, np.number) or arr.dtype == bool):
        raise InputError(where, f"real numbers as coordinates, got dtype {arr.dtype}")
    if arr.ndim == 1:
        arr = arr.reshape(-1, 1)
    if arr.ndim != 2:
        raise InputError(where, f"a 2-D array of coordinates (rows x dimensions), got shape {arr.shape}")
    out = np.ascontiguousarray(arr, dtype=np.float64)
    bad = np.flatnonzero(~np.isfinite(out).all(axis=1))
    if bad.size:
        raise InputError(
            where, f"finite coordinates; {bad.size} rows hold NaN or inf, first at row {int(bad[0]) + 1}"
        )
    return out


def _read_table(path: str, columns: list[str] | None, id_column: str | None) -> tuple[np.ndarray, Any]:
    suffix = Path(path).suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            df = pd.read_parquet(path)
        else:
            df = pd.read_csv(path, sep=_TABLE_SEPARATORS[suffix])
    except (OSError, ValueError, ImportError) as exc:
        raise InputError(path, f"a readable table with a header row ({type(exc).__name__})") from None
    df.columns = [str(c) for c in df.columns]
    for name in [id_column, *(columns or [])]:
        if name is not None and name not in df.columns:
            raise InputError(f"{path}, column '{name}'", f"a column of the header ({', '.join(df.columns)})")
    ids = None
    if id_column is not None:
        ids = df[id_column].astype(str).to_numpy()
        if len(set(ids)) != len(ids):
            raise InputError(f"{path}, column '{id_column}'", "each id once (ids repeat)")
    chosen = columns or [c for c in df.columns if c != id_column and pd.api.types.is_numeric_dtype(df[c])]
    if not chosen:
        raise InputError(path, "at least one numeric coordinate column")
    for c in chosen:
        if not pd.api.types.is_numeric_dtype(df[c]):
            raise InputError(f"{path}, column '{c}'", "numbers as coordinates")
    return _coordinates(df[chosen].to_numpy(dtype=np.float64), path), ids


def _read_h5ad(path: str, obsm: str | None) -> tuple[np.ndarray, np.ndarray]:
    try:
        import anndata
    except ImportError:
        raise InputError(path, f"the anndata package to read .h5ad files: {ANNDATA_HINT}") from None
    if not obsm:
        raise InputError(f"{path}", "the 'obsm' parameter naming the embedding inside (e.g. X_umap)")
    try:
        adata = anndata.read_h5ad(path, backed="r")
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(path, f"a readable AnnData .h5ad file ({type(exc).__name__})") from None
    try:
        if obsm not in adata.obsm:
            keys = ", ".join(adata.obsm.keys()) or "none"
            raise InputError(f"{path}, obsm '{obsm}'", f"an obsm key of the file (it has: {keys})")
        return _coordinates(np.asarray(adata.obsm[obsm]), f"{path}, obsm '{obsm}'"), np.asarray(
            adata.obs_names, dtype=str
        )
    finally:
        if adata.isbacked:
            adata.file.close()


def align_rows(Y: np.ndarray, ids: np.ndarray | None, dataset: Dataset, where: str) -> np.ndarray:
    """Put the file's rows in the dataset's order (by id when both have ids, else as read).

    Raises
    ------
    InputError
        Row counts differ, or an id of the dataset is missing from the file.
    """
    row_ids = dataset.info.get("row_ids")
    if ids is not None and row_ids is not None:
        position = {v: i for i, v in enumerate(ids)}
        missing = [v for v in row_ids if v not in position]
        if missing:
            raise InputError(
                where,
                f"a row for every id of dataset '{dataset.name}'; id {missing[0]!r} is missing"
                + (f" (and {len(missing) - 1} more)" if len(missing) > 1 else ""),
            )
        if len(ids) != len(row_ids):
            known = set(row_ids)
            extra = [v for v in ids if v not in known]
            raise InputError(
                where,
                f"{len(row_ids)} rows, one per id of dataset '{dataset.name}'; got {len(ids)}, "
                f"with ids the dataset does not have, first {extra[0]!r}",
            )
        return Y[[position[v] for v in row_ids]]
    if Y.shape[0] != dataset.n:
        raise InputError(
            where, f"{dataset.n} rows (one per item of dataset '{dataset.name}'), got {Y.shape[0]}"
        )
    return Y


class EmbeddingFile:
    """An "estimator" whose ``fit_transform`` returns the embedding stored in a file.

    :func:`~harness.methods.fit_embedding` gives it the dataset before calling
    ``fit_transform`` (``needs_dataset``), so rows can be matched by id.
    """

    needs_dataset = True

    def __init__(self, path: str, columns: list[str] | None, id_column: str | None, obsm: str | None) -> None:
        self.path, self.columns, self.id_column, self.obsm = path, columns, id_column, obsm
        self.dataset: Dataset | None = None

    def fit_transform(self, X: Any, y: Any = None) -> np.ndarray:
        """The file's coordinates, rows in the dataset's order."""
        Y, ids = read_embedding(self.path, columns=self.columns, id_column=self.id_column, obsm=self.obsm)
        if self.dataset is None:
            if Y.shape[0] != len(X):
                raise InputError(self.path, f"{len(X)} rows, got {Y.shape[0]}")
            return Y
        return align_rows(Y, ids, self.dataset, self.path)


def check_dataset(
    params: dict[str, Any], dataset: Dataset, dimensions: int, seeds: tuple[int, ...] = (0,)
) -> str:
    """Why the file(s) cannot be scored against ``dataset`` ("" when they can); read when planning.

    With ``{seed}`` in the path, the file of every seed is read.
    """
    paths = dict.fromkeys(seed_path(str(params["path"]), s) for s in seeds)
    for path in paths:
        if not Path(path).is_file():
            return f"{path}: expected an existing file (not found)"
        try:
            Y, ids = read_embedding(
                path,
                columns=params.get("columns"),
                id_column=params.get("id_column"),
                obsm=params.get("obsm"),
            )
            align_rows(Y, ids, dataset, path)
        except InputError as err:
            return str(err)
        if Y.shape[1] != dimensions:
            return (
                f"{path} holds {Y.shape[1]} coordinate columns but the suite asks for "
                f"{dimensions} dimensions; set 'dimensions: {Y.shape[1]}' or pick columns with 'columns'"
            )
    return ""


def content_identity(params: dict[str, Any], seed: int) -> str:
    """What the cache key adds for an embedding file: the SHA-256 of the seed's file."""
    return file_sha256(seed_path(str(params["path"]), seed))


@register_method(
    "embedding_file",
    params=(
        Param(
            "path", str, None, "the embedding: .npy, .csv/.tsv/.parquet or .h5ad; required", _readable_file
        ),
        Param("columns", list, None, "coordinate columns of a table (default: every numeric column)"),
        Param("id_column", str, None, "column of row ids matched to the dataset's ids (tables)"),
        Param("obsm", str, None, "the embedding's key inside an .h5ad file's obsm (e.g. X_umap)"),
    ),
    description="an embedding made elsewhere, read from a file and scored as it is",
    family="other",
    accepts_distances=True,
    randomized=False,
    content_identity=content_identity,
    check_dataset=check_dataset,
    # one stored embedding for every seed, unless the path names a file per seed
    seed_free=lambda params, precomputed: SEED_FIELD not in str(params.get("path", "")),
    source="user file",
)
def build_embedding_file(
    n_components: int,
    seed: int,
    precomputed: bool,
    *,
    path: str,
    columns: list[str] | None,
    id_column: str | None,
    obsm: str | None,
) -> EmbeddingFile:
    """Read the file at fit time (the seed's file when the path holds ``{seed}``).

    The suite's ``dimensions`` must equal the file's columns.
    """
    return EmbeddingFile(seed_path(path, seed), columns, id_column, obsm)
