"""foldbench's own colours: deep teal, ochre and slate on warm paper."""

from __future__ import annotations

from typing import Any

from matplotlib.colors import LinearSegmentedColormap

TEAL = "#0e5e63"
OCHRE = "#c98f1c"
SLATE = "#56677a"
BRICK = "#a4472b"
MOSS = "#5f7a37"
PLUM = "#6c4b73"
INK = "#1d2730"
PAPER = "#faf7f0"
SAND = "#e9dfc6"
MIST = "#d5dde3"

#: Categorical colours (labels, methods), in order of use.
CATEGORICAL = (
    TEAL,
    OCHRE,
    SLATE,
    BRICK,
    MOSS,
    PLUM,
    "#3f9aa3",
    "#e0b95a",
    "#93a3b5",
    "#c97e5c",
    "#9bb06a",
    "#a5809f",
)

#: Sequential map for "better is darker teal"; reversed for measures where lower is better.
QUALITY_MAP = LinearSegmentedColormap.from_list("foldbench_quality", ["#fbf5e6", "#e3cf9a", "#7fb0a8", TEAL])

#: Map for continuous colouring of points (a latent coordinate).
LATENT_MAP = LinearSegmentedColormap.from_list("foldbench_latent", [SLATE, "#b8c2b0", OCHRE])
#: Per-point defect: pale when a point keeps its neighbourhood, deep brick where it fails.
DEFECT_MAP = LinearSegmentedColormap.from_list("foldbench_defect", [MIST, "#e7c48a", BRICK, "#4a1d12"])


def category_colours(n: int) -> list[str]:
    """``n`` categorical colours; cycles past the end of :data:`CATEGORICAL`."""
    return [CATEGORICAL[i % len(CATEGORICAL)] for i in range(n)]


def style() -> dict[Any, Any]:
    """Matplotlib settings of every foldbench figure."""
    return {
        "figure.facecolor": PAPER,
        "axes.facecolor": PAPER,
        "savefig.facecolor": PAPER,
        "axes.edgecolor": SLATE,
        "axes.labelcolor": INK,
        "axes.titlecolor": INK,
        "axes.titleweight": "bold",
        "axes.titlesize": 10,
        "axes.labelsize": 9,
        "xtick.color": SLATE,
        "ytick.color": SLATE,
        "xtick.labelsize": 8,
        "ytick.labelsize": 8,
        "axes.grid": False,
        "font.family": "DejaVu Sans",
        "legend.frameon": False,
        "legend.fontsize": 8,
    }
