"""What each measure is: direction, scope, needs, definition and source.

The ranker reads directions from here; ``foldbench list measures`` prints it.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class MeasureInfo:
    """Facts about one measure.

    Parameters
    ----------
    name : str
        Column name stem (k-dependent measures get ``@k`` appended in tables,
        e.g. ``trustworthiness@10``).
    higher_is_better : bool
        Direction used for ranking.
    scope : str
        ``local``, ``global``, ``labels``, ``latent``, ``heldout`` or ``cost``.
    per_k : bool
        Computed at each neighbourhood size k of the suite.
    needs : str or None
        ``"labels"`` or ``"latent"`` when the dataset must provide them.
    definition : str
        One-line definition.
    source : str
        Publication the definition follows.
    at_k_too : bool
        The bare name is a measure of its own and ``name@k`` is a second one,
        the same quantity restricted to neighbourhood sizes up to k
        (``rnx_auc`` and ``rnx_auc@10``).
    """

    name: str
    higher_is_better: bool
    scope: str
    per_k: bool
    needs: str | None
    definition: str
    source: str
    at_k_too: bool = False


MEASURES: dict[str, MeasureInfo] = {
    m.name: m
    for m in (
        MeasureInfo(
            "trustworthiness",
            True,
            "local",
            True,
            None,
            "1 - 2/(nk(2n-3k-1)) * sum of (rank in data - k) over embedding neighbours "
            "that are not data neighbours",
            "Venna & Kaski 2001",
        ),
        MeasureInfo(
            "continuity",
            True,
            "local",
            True,
            None,
            "trustworthiness with data and embedding swapped: penalises data neighbours "
            "missing from the embedding",
            "Venna & Kaski 2001",
        ),
        MeasureInfo(
            "knn_recall",
            True,
            "local",
            True,
            None,
            "mean over points of |kNN in data ∩ kNN in embedding| / k",
            "neighbourhood preservation, common practice",
        ),
        MeasureInfo(
            "mrre_data",
            False,
            "local",
            True,
            None,
            "mean relative rank error of data neighbours, sum |rho-r|/rho normalised to [0, 1]",
            "Lee & Verleysen 2009",
        ),
        MeasureInfo(
            "mrre_embedding",
            False,
            "local",
            True,
            None,
            "mean relative rank error of embedding neighbours, sum |rho-r|/r normalised to [0, 1]",
            "Lee & Verleysen 2009",
        ),
        MeasureInfo(
            "lcmc",
            True,
            "local",
            True,
            None,
            "local continuity meta-criterion: Q_NX(k) - k/(n-1)",
            "Chen & Buja 2009",
        ),
        MeasureInfo(
            "rnx_auc",
            True,
            "local",
            False,
            None,
            "area under R_NX(K) on a log-K scale (weights 1/K) over the whole range K = 1..n-2; "
            "rnx_auc@k: the same area over K = 1..k only",
            "Lee, Peluffo-Ordonez & Verleysen 2015",
            at_k_too=True,
        ),
        MeasureInfo(
            "stress",
            False,
            "global",
            False,
            None,
            "Kruskal stress-1 after the best uniform scaling s: sqrt(sum (d - s e)^2 / sum d^2)",
            "Kruskal 1964",
        ),
        MeasureInfo(
            "sammon_stress",
            False,
            "global",
            False,
            None,
            "(1 / sum d) * sum (d - s e)^2 / d with the best uniform scaling s",
            "Sammon 1969",
        ),
        MeasureInfo(
            "shepard_spearman",
            True,
            "global",
            False,
            None,
            "Spearman correlation of all pairwise distances, data vs embedding (Shepard diagram)",
            "Shepard 1962; Spearman 1904",
        ),
        MeasureInfo(
            "knn_accuracy",
            True,
            "labels",
            True,
            "labels",
            "k-NN classifier accuracy in the embedding, stratified 5-fold cross-validation",
            "common practice",
        ),
        MeasureInfo(
            "silhouette",
            True,
            "labels",
            False,
            "labels",
            "mean silhouette width of the labels in the embedding",
            "Rousseeuw 1987",
        ),
        MeasureInfo(
            "latent_spearman",
            True,
            "latent",
            False,
            "latent",
            "Spearman correlation of pairwise distances, true latent coordinates vs embedding",
            "recovery of known coordinates, common practice",
        ),
        MeasureInfo(
            "fit_seconds", False, "cost", False, None, "wall-clock seconds of fit_transform", "measured"
        ),
        MeasureInfo(
            "fit_peak_mb",
            False,
            "cost",
            False,
            None,
            "peak resident memory added during fit_transform, MiB",
            "measured",
        ),
    )
}


#: In-sample measures that are also measured among the held-out points (prefix ``heldout_``).
HELDOUT_OF = (
    "trustworthiness",
    "continuity",
    "knn_recall",
    "mrre_data",
    "mrre_embedding",
    "lcmc",
    "rnx_auc",
    "stress",
    "sammon_stress",
    "shepard_spearman",
    "latent_spearman",
)


def _heldout_entries() -> dict[str, MeasureInfo]:
    out = {}
    for name in HELDOUT_OF:
        m = MEASURES[name]
        out["heldout_" + name] = MeasureInfo(
            "heldout_" + name,
            m.higher_is_better,
            "heldout",
            m.per_k,
            m.needs,
            f"{name} among the held-out points only, their data vs where the fitted map put them",
            m.source,
            at_k_too=m.at_k_too,
        )
    out["heldout_placement"] = MeasureInfo(
        "heldout_placement",
        True,
        "heldout",
        True,
        None,
        "mean over held-out points of |k nearest training points in data ∩ in embedding| / k",
        "neighbourhood preservation of new points, common practice",
    )
    out["heldout_knn_accuracy"] = MeasureInfo(
        "heldout_knn_accuracy",
        True,
        "heldout",
        True,
        "labels",
        "share of held-out points a k-NN classifier on the training points' embedding and labels gets right",
        "van der Maaten 2009 (held-out 1-NN error of a parametric embedding)",
    )
    return out


MEASURES.update(_heldout_entries())


def measure_stem(column: str) -> str:
    """``trustworthiness@10`` -> ``trustworthiness``."""
    return column.split("@", 1)[0]


def higher_is_better(column: str) -> bool:
    """Direction of a measure column (``trustworthiness@10``, ``stress``, ``fit_seconds``)."""
    return MEASURES[measure_stem(column)].higher_is_better
