"""PNG figures of a report (matplotlib Agg), each drawn from an :class:`Analysis`.

Every function writes one file and returns its path, or ``None`` when the run
has nothing to draw for it (say, no curves).
"""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ..datasets import Dataset
from ..metrics import higher_is_better
from ..run.atomic import write_bytes
from . import palette
from .analysis import Analysis
from .pointwise import PointDefects

DPI = 110
#: Pairs drawn in a Shepard diagram panel; enough to see the shape, few enough to stay light.
SHEPARD_PAIRS = 1500


def _save(fig: Figure, path: Path, *, trim: bool = True) -> Path:
    # A bare Figure (no pyplot) renders with the Agg canvas and keeps no global state.  ``trim``
    # crops to the drawn content, which costs a second full draw; a figure laid out by
    # tight_layout with nothing outside its axes passes False.
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, bbox_inches="tight" if trim else None)
    write_bytes(path, buf.getvalue())
    return path


def _grid(
    rows: int, cols: int, *, figsize: tuple[float, float], squeeze: bool = False
) -> tuple[Figure, np.ndarray]:
    """A figure with a rows x cols array of axes."""
    fig = Figure(figsize=figsize)
    return fig, np.asarray(fig.subplots(rows, cols, squeeze=squeeze))


def _methods(analysis: Analysis) -> list[str]:
    return list(dict.fromkeys(m.name for m in analysis.run.suite.methods))


def _datasets(analysis: Analysis) -> list[str]:
    return [d.name for d in analysis.run.suite.datasets]


def _tuned_row(analysis: Analysis, dataset: str, method: str) -> pd.Series | None:
    t = analysis.tuned
    rows = t[(t.dataset == dataset) & (t.method == method)]
    return None if rows.empty else rows.iloc[0]


def embedding_grid(analysis: Analysis, datasets: dict[str, Dataset] | None, path: Path) -> Path | None:
    """Rows datasets, columns methods: the lowest-seed embedding of each (tuned) configuration.

    Points are coloured by label where the dataset has labels, else by its first
    latent coordinate, else in one colour.
    """
    names, methods = _datasets(analysis), _methods(analysis)
    if not names or not methods:
        return None
    size = 2.0
    with rc_context(palette.style()):
        fig, axes = _grid(
            len(names),
            len(methods),
            figsize=(size * len(methods) + 0.6, size * len(names) + 0.4),
            squeeze=False,
        )
        for i, ds_name in enumerate(names):
            ds = (datasets or {}).get(ds_name)
            colour = _point_colours(ds)
            for j, method in enumerate(methods):
                ax = axes[i, j]
                ax.set_xticks([])
                ax.set_yticks([])
                for spine in ax.spines.values():
                    spine.set_color(palette.MIST)
                row = _tuned_row(analysis, ds_name, method)
                key = None if row is None else analysis.first_ok_key(ds_name, method, row["params"])
                emb = None if key is None else analysis.run.embedding(key)
                if emb is None:
                    ax.text(
                        0.5,
                        0.5,
                        "no result",
                        ha="center",
                        va="center",
                        color=palette.SLATE,
                        fontsize=8,
                        transform=ax.transAxes,
                    )
                else:
                    y = emb[:, 1] if emb.shape[1] > 1 else np.zeros(len(emb))
                    ax.scatter(emb[:, 0], y, s=3 if len(emb) > 500 else 6, linewidths=0, alpha=0.8, **colour)
                    ax.set_aspect("equal", adjustable="datalim")
                if i == 0:
                    ax.set_title(analysis.label(method), fontsize=9)
                if j == 0:
                    ax.set_ylabel(ds_name, fontsize=9, color=palette.INK, fontweight="bold")
        fig.suptitle(
            "One seed per embedding; colour = label, else first latent coordinate",
            fontsize=9,
            color=palette.SLATE,
            y=1.0,
        )
        fig.tight_layout()
        return _save(fig, path)


def _point_colours(ds: Dataset | None) -> dict[str, object]:
    if ds is None:
        return {"color": palette.TEAL}
    if ds.labels is not None:
        _, codes = np.unique(np.asarray(ds.labels).astype(str), return_inverse=True)
        colours = np.array(palette.category_colours(int(codes.max()) + 1))
        return {"c": colours[codes]}
    if ds.latent is not None:
        lat = np.asarray(ds.latent, dtype=float)
        return {"c": lat[:, 0] if lat.ndim == 2 else lat, "cmap": palette.LATENT_MAP}
    return {"color": palette.TEAL}


def heatmaps(analysis: Analysis, path: Path) -> Path | None:
    """One heat map per measure: datasets x methods, the tuned mean over seeds.

    Each panel has its own colour scale; darker teal is better in the measure's
    own direction.
    """
    measures = [m for m in analysis.measures if m in analysis.tuned and analysis.tuned[m].notna().any()]
    measures += [c for c in ("fit_seconds",) if c in analysis.tuned]
    if not measures:
        return None
    names, methods = _datasets(analysis), _methods(analysis)
    cols = 3 if len(measures) > 4 else len(measures)
    rows = math.ceil(len(measures) / cols)
    w = max(3.6, 0.62 * len(methods) + 1.6)
    h = max(1.9, 0.42 * len(names) + 1.2)
    with rc_context(palette.style()):
        fig, axes = _grid(rows, cols, figsize=(w * cols, h * rows), squeeze=False)
        for ax, measure in zip(axes.ravel(), measures):
            grid = analysis.tuned.pivot_table(
                index="dataset", columns="method", values=measure, sort=False
            ).reindex(index=names, columns=methods)
            cmap = palette.QUALITY_MAP if higher_is_better(measure) else palette.QUALITY_MAP.reversed()
            shown = grid.to_numpy(float)
            values = np.log10(np.clip(shown, 1e-4, None)) if measure == "fit_seconds" else shown
            _matrix(ax, values, shown, cmap, "{:.2g}" if measure == "fit_seconds" else "{:.2f}")
            ax.set_xticks(range(len(methods)), methods)
            ax.set_yticks(range(len(names)), names)
            arrow = "↑" if higher_is_better(measure) else "↓"
            ax.set_title(
                f"{measure} {arrow}" + (" (s, log colour)" if measure == "fit_seconds" else ""), fontsize=9
            )
            ax.set_xlabel("")
            ax.set_ylabel("")
            ax.tick_params(axis="x", rotation=40, length=0)
            ax.tick_params(axis="y", rotation=0, length=0)
            for label in ax.get_xticklabels():
                label.set_horizontalalignment("right")
        for ax in axes.ravel()[len(measures) :]:
            ax.set_visible(False)
        fig.tight_layout()
        return _save(fig, path, trim=False)


def _matrix(ax: Axes, values: np.ndarray, shown: np.ndarray, cmap, fmt: str) -> None:
    """A heat map with each cell's value written in it (dark cells get light text)."""
    finite = np.isfinite(values)
    lo, hi = (np.nanmin(values), np.nanmax(values)) if finite.any() else (0.0, 1.0)
    if hi <= lo:
        hi = lo + 1.0
    ax.imshow(
        np.ma.masked_invalid(values), cmap=cmap, vmin=lo, vmax=hi, aspect="auto", interpolation="nearest"
    )
    for (i, j), v in np.ndenumerate(shown):
        if not np.isfinite(v):
            continue
        r, g, b, _ = cmap((values[i, j] - lo) / (hi - lo))
        dark = 0.2126 * r + 0.7152 * g + 0.0722 * b < 0.5  # relative luminance (ITU-R BT.709)
        ax.text(
            j,
            i,
            fmt.format(v),
            ha="center",
            va="center",
            fontsize=7,
            color=palette.PAPER if dark else palette.INK,
        ).set_in_layout(False)  # inside its cell: no need to measure it for the layout
    ax.set_xticks(np.arange(-0.5, values.shape[1]), minor=True)
    ax.set_yticks(np.arange(-0.5, values.shape[0]), minor=True)
    ax.grid(which="minor", color=palette.PAPER, linewidth=1.5)
    ax.tick_params(which="minor", length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)


def rnx_curves(analysis: Analysis, path: Path) -> Path | None:
    """R_NX(K) on a log-K axis per dataset, one line per (tuned) method: mean over seeds, ± 1 sd band."""
    names, methods = _datasets(analysis), _methods(analysis)
    colours = dict(zip(methods, palette.category_colours(len(methods))))
    panels: list[tuple[str, dict[str, pd.DataFrame]]] = []
    for ds_name in names:
        lines = {}
        for method in methods:
            curve = _seed_curves(analysis, ds_name, method)
            if curve is not None:
                lines[method] = curve
        if lines:
            panels.append((ds_name, lines))
    if not panels:
        return None
    cols = min(2, len(panels))
    rows = math.ceil(len(panels) / cols)
    with rc_context(palette.style()):
        fig, axes = _grid(rows, cols, figsize=(5.2 * cols, 3.3 * rows), squeeze=False)
        for ax, (ds_name, lines) in zip(axes.ravel(), panels):
            for method, curve in lines.items():
                # mean over seeds with a band of one standard deviation (ddof 1) at each K
                by_k = curve.groupby("K", sort=True)["R_NX"].agg(["mean", "std"])
                k, mean, sd = by_k.index.to_numpy(float), by_k["mean"].to_numpy(), by_k["std"].to_numpy()
                ax.plot(k, mean, color=colours[method], lw=1.6, label=analysis.label(method))
                ax.fill_between(k, mean - sd, mean + sd, color=colours[method], alpha=0.18, linewidth=0)
            ax.set_xscale("log")
            ax.set_xlabel("K (neighbourhood size, log scale)")
            ax.set_ylabel("R_NX(K)")
            ax.set_title(ds_name)
            ax.set_ylim(bottom=min(0.0, ax.get_ylim()[0]), top=1.0)
            ax.grid(True, which="major", color=palette.MIST, lw=0.6)
        for ax in axes.ravel()[len(panels) :]:
            ax.set_visible(False)
        handles, labels = axes.ravel()[0].get_legend_handles_labels()
        fig.legend(
            handles,
            labels,
            loc="upper center",
            ncol=min(len(labels), 8),
            bbox_to_anchor=(0.5, 1.0 + 0.06 / rows),
        )
        fig.tight_layout(rect=(0, 0, 1, 0.95))
        return _save(fig, path)


def _seed_curves(analysis: Analysis, ds_name: str, method: str) -> pd.DataFrame | None:
    row = _tuned_row(analysis, ds_name, method)
    if row is None:
        return None
    s = analysis.run.scores
    keys = s[
        (s.dataset == ds_name) & (s.method == method) & (s.params == row["params"]) & (s.status == "ok")
    ]["key"]
    curves = [c for c in (analysis.run.curve(k) for k in keys) if c is not None and len(c)]
    if not curves:
        return None
    # R_NX is undefined at K = n - 1 (stored as NaN, if at all).
    return pd.concat(curves, ignore_index=True).dropna(subset=["R_NX"])


def shepard(
    analysis: Analysis, datasets: dict[str, Dataset] | None, path: Path, *, top: int = 3, seed: int = 0
) -> Path | None:
    """Shepard diagrams: sampled pairs, data distance vs embedding distance, for the top methods.

    Rows are datasets, columns the ``top`` best (tuned) methods of each dataset.
    Embedding distances are rescaled by the least-squares factor so panels compare.
    """
    if not datasets:
        return None
    names = [n for n in _datasets(analysis) if n in datasets]
    panels = []
    for ds_name in names:
        best = analysis.tuned[analysis.tuned.dataset == ds_name].sort_values("mean_rank").head(top)
        panels.append((ds_name, best.to_dict("records")))
    if not any(p for _, p in panels):
        return None
    with rc_context(palette.style()):
        fig, axes = _grid(len(panels), top, figsize=(2.7 * top, 2.5 * len(panels)), squeeze=False)
        for i, (ds_name, rows) in enumerate(panels):
            ds = datasets[ds_name]
            pairs = _pairs(ds.n, seed)
            d_data = _data_distances(ds, pairs)
            for j in range(top):
                ax = axes[i, j]
                if j >= len(rows):
                    ax.set_visible(False)
                    continue
                r = rows[j]
                key = analysis.first_ok_key(ds_name, r["method"], r["params"])
                emb = None if key is None else analysis.run.embedding(key)
                if emb is None:
                    ax.set_visible(False)
                    continue
                d_emb = np.linalg.norm(emb[pairs[:, 0]] - emb[pairs[:, 1]], axis=1)
                scale = float(d_data @ d_emb / max(d_emb @ d_emb, 1e-300))
                ax.scatter(d_data, scale * d_emb, s=3, linewidths=0, alpha=0.35, color=palette.TEAL)
                top_v = float(max(d_data.max(), (scale * d_emb).max()))
                ax.plot([0, top_v], [0, top_v], color=palette.OCHRE, lw=1.2)
                ax.set_title(f"{ds_name}: {analysis.label(r['method'])}", fontsize=8.5)
                rho = r.get("shepard_spearman", float("nan"))
                if isinstance(rho, float) and not math.isnan(rho):
                    ax.text(
                        0.03,
                        0.95,
                        f"Spearman {rho:.2f}",
                        transform=ax.transAxes,
                        va="top",
                        fontsize=7.5,
                        color=palette.INK,
                    )
                ax.set_xlabel("data distance", fontsize=8)
                if j == 0:
                    ax.set_ylabel("embedding distance (scaled)", fontsize=8)
        fig.tight_layout()
        return _save(fig, path)


def _pairs(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    m = min(SHEPARD_PAIRS, n * (n - 1) // 2)
    i = rng.integers(0, n, size=3 * m)
    j = rng.integers(0, n, size=3 * m)
    keep = i != j
    return np.stack([i[keep], j[keep]], axis=1)[:m]


def _data_distances(ds: Dataset, pairs: np.ndarray) -> np.ndarray:
    if ds.X is not None:
        return np.linalg.norm(ds.X[pairs[:, 0]] - ds.X[pairs[:, 1]], axis=1)
    return np.asarray(ds.distances)[pairs[:, 0], pairs[:, 1]]


def critical_difference_diagram(analysis: Analysis, path: Path) -> Path | None:
    """Mean Friedman ranks on one axis, methods hung from it, bars over indistinct groups."""
    f = analysis.friedman
    if f is None or analysis.cd is None:
        return None
    ranks = np.asarray(f.mean_ranks, dtype=float)
    k = len(ranks)
    n_groups = len(analysis.groups)
    with rc_context(palette.style()):
        fig = Figure(figsize=(7.6, 1.6 + 0.28 * k + 0.22 * n_groups))
        ax = fig.subplots()
        ax.set_ylim(-(k + 1.2) * 0.5 - 0.3, 1.2 + 0.35 * n_groups)
        ax.axis("off")
        _rank_axis(ax, k)
        _cd_ruler(ax, k, analysis.cd, analysis.alpha)
        _hang_methods(ax, analysis, ranks)
        _group_bars(ax, analysis, ranks)
        ax.set_xlim(-0.9 if k <= 4 else -0.6, k + 1.9)
        fig.tight_layout()
        return _save(fig, path)


def _rank_axis(ax: Axes, k: int) -> None:
    ax.hlines(0, 1, k, color=palette.INK, lw=1.4)
    for t in range(1, k + 1):
        ax.vlines(t, -0.08, 0.08, color=palette.INK, lw=1)
        ax.text(t, 0.18, str(t), ha="center", va="bottom", fontsize=8, color=palette.SLATE)
    ax.text(
        (1 + k) / 2,
        0.55,
        "mean rank across datasets (1 = best)",
        ha="center",
        fontsize=8,
        color=palette.SLATE,
    )


def _cd_ruler(ax: Axes, k: int, cd: float, alpha: float) -> None:
    # The critical difference as a ruler at the right, where it does not cover names.
    x0 = max(1.0, k - cd)
    ax.hlines(0.95, x0, x0 + cd, color=palette.OCHRE, lw=3)
    ax.text(
        x0 + cd / 2,
        1.05,
        f"CD = {cd:.2f} (α = {alpha:g})",
        ha="center",
        va="bottom",
        fontsize=8,
        color=palette.OCHRE,
    )


def _hang_methods(ax: Axes, analysis: Analysis, ranks: np.ndarray) -> None:
    # Methods in rank order, each on its own level below the axis, names at the free side.
    names, k = analysis.friedman_methods, len(ranks)
    for level, idx in enumerate(np.argsort(ranks, kind="stable")):
        y, x = -0.5 * (level + 1), ranks[idx]
        ax.vlines(x, y, 0, color=palette.SLATE, lw=0.8)
        ax.plot([x], [0], "o", color=palette.TEAL, ms=5, zorder=3)
        left_side = level < (k + 1) / 2
        end = 0.75 if left_side else k + 0.25
        ax.hlines(y, min(x, end), max(x, end), color=palette.SLATE, lw=0.8)
        name = analysis.label(names[idx])
        ax.text(
            end + (-0.05 if left_side else 0.05),
            y,
            f"{name}  {x:.2f}" if left_side else f"{x:.2f}  {name}",
            ha="right" if left_side else "left",
            va="center",
            fontsize=8.5,
            color=palette.INK,
        )


def _group_bars(ax: Axes, analysis: Analysis, ranks: np.ndarray) -> None:
    # Groups of methods not significantly different: thick bars above the axis.
    names = analysis.friedman_methods
    for g_i, group in enumerate(analysis.groups):
        xs = [ranks[names.index(m)] for m in group]
        ax.hlines(
            1.45 + 0.3 * g_i,
            min(xs) - 0.04,
            max(xs) + 0.04,
            color=palette.TEAL,
            lw=5,
            alpha=0.55,
            capstyle="round",
        )
    if analysis.groups:
        ax.text(
            0.55,
            1.45 + 0.15 * (len(analysis.groups) - 1),
            "not told apart",
            ha="right",
            va="center",
            fontsize=8,
            color=palette.TEAL,
            style="italic",
        )


def quality_vs_time(analysis: Analysis, path: Path) -> Path | None:
    """Quality against fit seconds (log) per dataset, every configuration, Pareto front joined."""
    r = analysis.ranked
    q = analysis.quality
    if q not in r or "fit_seconds" not in r or r[[q, "fit_seconds"]].dropna().empty:
        return None
    names = [n for n in _datasets(analysis) if n in set(r["dataset"])]
    methods = _methods(analysis)
    colours = dict(zip(methods, palette.category_colours(len(methods))))
    cols = min(2, len(names))
    rows = math.ceil(len(names) / cols)
    with rc_context(palette.style()):
        fig, axes = _grid(rows, cols, figsize=(5.0 * cols, 3.4 * rows), squeeze=False)
        for ax, ds_name in zip(axes.ravel(), names):
            _front_panel(ax, r[(r.dataset == ds_name)].dropna(subset=[q, "fit_seconds"]), q, colours)
            ax.set_title(ds_name)
        for ax in axes.ravel()[len(names) :]:
            ax.set_visible(False)
        _shared_legend(fig, axes.ravel()[: len(names)], rows)
        fig.tight_layout(rect=(0, 0, 1, 0.95))
        return _save(fig, path)


def _front_panel(ax: Axes, g: pd.DataFrame, q: str, colours: dict[str, str]) -> None:
    """One dataset's configurations and its Pareto front."""
    for method, colour in colours.items():
        part = g[g.method == method]
        if not part.empty:
            ax.scatter(
                part["fit_seconds"],
                part[q],
                s=36,
                color=colour,
                edgecolors=palette.INK,
                linewidths=0.4,
                zorder=3,
                label=method,
            )
    front = g[g["pareto"]].sort_values("fit_seconds")
    ax.step(front["fit_seconds"], front[q], where="post", color=palette.INK, lw=1.2, ls="--", zorder=2)
    ax.scatter(
        front["fit_seconds"],
        front[q],
        s=120,
        facecolors="none",
        edgecolors=palette.INK,
        linewidths=1.3,
        zorder=4,
    )
    for _, p in front.iterrows():
        ax.annotate(
            p["method"],
            (p["fit_seconds"], p[q]),
            textcoords="offset points",
            xytext=(5, 4),
            fontsize=7.5,
            color=palette.INK,
        )
    ax.set_xscale("log")
    ax.set_xlabel("fit seconds (log scale)")
    ax.set_ylabel("mean rank (1 = best)" if q == "mean_rank" else q)
    if q == "mean_rank" or not higher_is_better(q):
        ax.invert_yaxis()
    ax.grid(True, color=palette.MIST, lw=0.6)


def _shared_legend(fig: Figure, axes: np.ndarray, rows: int) -> None:
    """One legend above the panels with every method any panel shows."""
    seen: dict[str, Any] = {}
    for ax in axes:
        handles, labels = ax.get_legend_handles_labels()
        seen.update({k: v for k, v in zip(labels, handles) if k not in seen})
    fig.legend(
        list(seen.values()),
        list(seen.keys()),
        loc="upper center",
        ncol=min(len(seen), 8),
        bbox_to_anchor=(0.5, 1.0 + 0.06 / rows),
    )


def point_defect_maps(analysis: Analysis, defects: list[PointDefects], path: Path) -> Path | None:
    """One dataset: its embeddings coloured by per-point trustworthiness (top) and continuity defect.

    One column per method (its shown configuration, lowest ok seed); one colour
    scale shared by every panel, capped at the 99th percentile of all defects so
    that a few extreme points do not wash the rest out.
    """
    panels: list[tuple[PointDefects, np.ndarray]] = []
    for p in defects:
        emb = analysis.run.embedding(p.key)
        if emb is not None and len(emb) > p.points.max(initial=-1):
            panels.append((p, emb))
    if not panels:
        return None
    top = float(np.quantile(np.concatenate([np.r_[p.trust, p.cont] for p, _ in panels]), 0.99)) or 1.0
    size = 2.1
    with rc_context(palette.style()):
        fig, axes = _grid(2, len(panels), figsize=(size * len(panels) + 1.2, 2 * size + 0.5))
        for j, (p, emb) in enumerate(panels):
            for i, (values, what) in enumerate(((p.trust, "trustworthiness"), (p.cont, "continuity"))):
                ax = axes[i, j]
                ax.set_xticks([])
                ax.set_yticks([])
                pts = emb[p.points]
                y = pts[:, 1] if pts.shape[1] > 1 else np.zeros(len(pts))
                order = np.argsort(values)  # worst points drawn last, on top
                sc = ax.scatter(
                    pts[order, 0],
                    y[order],
                    c=values[order],
                    cmap=palette.DEFECT_MAP,
                    vmin=0.0,
                    vmax=top,
                    s=3 if len(pts) > 500 else 7,
                    linewidths=0,
                )
                ax.set_aspect("equal", adjustable="datalim")
                if i == 0:
                    ax.set_title(analysis.label(p.method), fontsize=9)
                if j == 0:
                    ax.set_ylabel(f"{what}\ndefect @{p.k}", fontsize=8, color=palette.INK)
        bar = fig.colorbar(sc, ax=axes.ravel().tolist(), shrink=0.8, pad=0.02)
        bar.set_label("defect of the point (0 = kept; shared scale)", fontsize=8)
        return _save(fig, path)
