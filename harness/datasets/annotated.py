"""Cells (or any observations) stored in an AnnData ``.h5ad`` file: the ``anndata`` extra.

The data space is the file's ``X`` matrix, or one of its ``obsm`` arrays (for
example a PCA already computed by the analysis); labels come from an ``obs``
column; ``obs_names`` are the row ids that file embeddings are matched by.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InputError
from ..params import Param
from ._registry import register_dataset
from ._types import Dataset

INSTALL_HINT = "pip install 'foldbench[anndata]'"


def _dense(matrix: Any) -> np.ndarray:
    if hasattr(matrix, "toarray"):
        matrix = matrix.toarray()
    return np.asarray(matrix)


@register_dataset(
    "anndata",
    params=(
        Param("path", str, None, "the AnnData .h5ad file"),
        Param("label", str, None, "obs column holding class labels (optional)"),
        Param("layer", str, None, "a layer to use as the data instead of X"),
        Param("use_rep", str, None, "an obsm key to use as the data instead of X (e.g. X_pca)"),
    ),
    description="observations of an AnnData .h5ad file (needs the anndata extra)",
    source="user file",
)
def anndata_file(
    path: str | None = None, label: str | None = None, layer: str | None = None, use_rep: str | None = None
) -> Dataset:
    """Load the data matrix, labels and row ids of an ``.h5ad`` file.

    Parameters
    ----------
    path : str
        The file.
    label : str, optional
        An ``obs`` column of class labels.
    layer : str, optional
        A ``layers`` entry whose matrix is the data space (default: ``X``).
    use_rep : str, optional
        An ``obsm`` key whose array is the data space (default: ``X``).

    Returns
    -------
    Dataset
        ``X`` (float64), ``labels`` if asked; ``info["row_ids"]`` holds ``obs_names``.
    """
    if path is None:
        raise InputError("anndata.path", "the path of an .h5ad file (required)")
    try:
        import anndata
    except ImportError:
        raise InputError(path, f"the anndata package to read .h5ad files: {INSTALL_HINT}") from None
    try:
        adata = anndata.read_h5ad(path)
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(path, f"a readable AnnData .h5ad file ({type(exc).__name__})") from None
    if layer is not None and use_rep is not None:
        raise InputError(f"{path}", "either 'layer' or 'use_rep' as the data, not both")
    if layer is not None:
        if layer not in adata.layers:
            keys = ", ".join(adata.layers.keys()) or "none"
            raise InputError(f"{path}, layer '{layer}'", f"a layer of the file (it has: {keys})")
        raw = _dense(adata.layers[layer])
    elif use_rep is not None:
        if use_rep not in adata.obsm:
            keys = ", ".join(adata.obsm.keys()) or "none"
            raise InputError(f"{path}, obsm '{use_rep}'", f"an obsm key of the file (it has: {keys})")
        raw = _dense(adata.obsm[use_rep])
    else:
        raw = _dense(adata.X)
    if np.iscomplexobj(raw) or not np.issubdtype(raw.dtype, np.number) or raw.ndim != 2:
        raise InputError(path, f"a real 2-D numeric data matrix, got {raw.dtype} of shape {raw.shape}")
    X = raw.astype(np.float64)
    if not np.isfinite(X).all():
        raise InputError(path, "finite numbers in the data matrix (NaN or inf found)")
    labels = None
    if label is not None:
        if label not in adata.obs.columns:
            raise InputError(
                f"{path}, obs column '{label}'", f"an obs column (it has: {', '.join(adata.obs.columns)})"
            )
        labels = np.asarray(adata.obs[label].astype(str), dtype=str)
    return Dataset(
        name="anndata",
        X=X,
        labels=labels,
        info={
            "source": str(path),
            "format": "h5ad",
            "row_ids": np.asarray(adata.obs_names, dtype=str),
            "representation": use_rep or (f"layer {layer}" if layer else "X"),
            "label": label,
        },
    )
