"""Write the fleet demo as a table and three embeddings of it made "elsewhere" (own_embeddings.yaml).

The fleet is our invented scenario of sensor-laden machine tools (``machine_fleet``).  The three
embedding files stand for what other pipelines export: a PCA as ``.npy``, a t-SNE as a CSV with
shuffled rows and a machine id column, and a random projection as Parquet (if pyarrow is installed,
else CSV).  Run: ``python suites/data/make_fleet_embeddings.py [FOLDER]`` (default: next to this
script).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.decomposition import PCA
from sklearn.manifold import TSNE
from sklearn.random_projection import GaussianRandomProjection

from harness.datasets import load_dataset

HERE = Path(__file__).resolve().parent


def main(out: Path = HERE) -> None:
    """Write ``fleet.csv`` and the three embedding files into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    fleet = load_dataset("machine_fleet", {"n": 600})
    assert fleet.X is not None
    ids = [f"machine-{i:04d}" for i in range(fleet.n)]
    table = pd.DataFrame(fleet.X, columns=fleet.info.get("feature_names") or None)
    table.columns = [str(c) for c in table.columns]
    table.insert(0, "machine", ids)
    table["regime"] = fleet.labels
    table.to_csv(out / "fleet.csv", index=False)

    np.save(out / "fleet_pca.npy", PCA(2).fit_transform(fleet.X))

    tsne = TSNE(2, perplexity=30, random_state=0).fit_transform(fleet.X)
    order = np.random.default_rng(0).permutation(fleet.n)  # exported in another row order
    pd.DataFrame({"machine": np.array(ids)[order], "x": tsne[order, 0], "y": tsne[order, 1]}).to_csv(
        out / "fleet_tsne.csv", index=False
    )

    projection = GaussianRandomProjection(2, random_state=0).fit_transform(fleet.X)
    frame = pd.DataFrame({"machine": ids, "x": projection[:, 0], "y": projection[:, 1]})
    try:
        frame.to_parquet(out / "fleet_projection.parquet", index=False)
    except ImportError:
        frame.to_csv(out / "fleet_projection.csv", index=False)
    print(f"wrote the fleet table and three embeddings to {out}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
