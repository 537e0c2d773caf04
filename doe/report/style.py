"""The report's visual style: one palette and one set of matplotlib settings.

Colours are named for what they show, not for a brand: ``ink`` for text and
axes, ``runs`` for recorded runs, ``model`` for surrogate curves, ``band`` for
uncertainty, ``pick`` for recommended settings, ``caution`` for warnings.
"""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")  # reports are made without a screen

import matplotlib.pyplot as plt  # noqa: E402

__all__ = ["PALETTE", "apply", "new_figure", "save"]

PALETTE = {
    "ink": "#23262b",
    "paper": "#fbf8f2",
    "grid": "#ddd6c8",
    "runs": "#1f6f8b",
    "model": "#b5452b",
    "band": "#e9b8a6",
    "pick": "#3c8d4f",
    "nominal": "#8a6fb3",
    "caution": "#c98a12",
    "muted": "#8b8578",
}

_RC = {
    "figure.facecolor": PALETTE["paper"],
    "axes.facecolor": "#ffffff",
    "axes.edgecolor": PALETTE["ink"],
    "axes.labelcolor": PALETTE["ink"],
    "axes.titlesize": 11,
    "axes.titleweight": "bold",
    "axes.labelsize": 9.5,
    "axes.grid": True,
    "grid.color": PALETTE["grid"],
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": PALETTE["ink"],
    "ytick.color": PALETTE["ink"],
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8.5,
    "legend.frameon": False,
    "font.family": "DejaVu Sans",
    "savefig.dpi": 110,
    "savefig.facecolor": PALETTE["paper"],
}


def apply() -> None:
    """Set the report's matplotlib style (idempotent)."""
    plt.rcParams.update(_RC)


def new_figure(width_in: float = 7.0, height_in: float = 4.2, **kw):
    """A new figure and axes in the report style."""
    apply()
    return plt.subplots(figsize=(width_in, height_in), constrained_layout=True, **kw)


def save(fig, path) -> None:
    """Save ``fig`` as PNG at ``path`` and close it."""
    fig.savefig(path)
    plt.close(fig)
