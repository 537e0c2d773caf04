"""The report's visual style: one palette and one set of matplotlib settings.

Colours are named for what they show, not for a brand: ``ink`` for text and
axes, ``runs`` for recorded runs, ``model`` for surrogate curves, ``band`` for
uncertainty, ``pick`` for recommended settings, ``caution`` for warnings.
"""
from __future__ import annotations

import re
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # reports are made without a screen

import matplotlib.pyplot as plt  # noqa: E402

from ..errors import DoeError  # noqa: E402

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


def _unlabelled(fig) -> list:
    """Axis labels that are missing or carry no ``[unit]``, as ``"x of 'title'"`` strings.

    An axes without its own x (y) label is accepted when another axes in the same
    column (row) of the figure carries one, as in a grid of panels sharing axes.
    """
    axes = [ax for ax in fig.get_axes() if ax.axison and ax.get_visible()]
    has_unit = re.compile(r"\[[^\]]+\]")
    bad = []
    for ax in axes:
        box = ax.get_position()
        for which, get, same in (("x", "get_xlabel", lambda b: abs(b.x0 - box.x0) < 1e-3),
                                 ("y", "get_ylabel", lambda b: abs(b.y0 - box.y0) < 1e-3)):
            if ax.get_label() == "<colorbar>" and which == "x":
                continue
            labels = [getattr(o, get)() for o in axes if same(o.get_position())]
            if any(has_unit.search(lbl) for lbl in labels if lbl):
                continue
            # (tick labels are only formatted, at some cost, for an axis that has no unit)
            if _categorical(ax, which) and getattr(ax, get)():
                continue  # an axis of names (knobs, settings) has a label but no unit
            bad.append(f"{which} axis of '{ax.get_title() or ax.get_label()}'")
    return bad


def _categorical(ax, which: str) -> bool:
    """Whether the axis shows names rather than numbers (its tick labels are words)."""
    texts = [t.get_text() for t in (ax.get_xticklabels() if which == "x" else ax.get_yticklabels())]
    words = [t for t in texts if t and not re.fullmatch(r"[\u2212+\-]?[\d.,]+(e[\u2212+\-]?\d+)?%?", t)]
    return bool(words)


def save(fig, path) -> None:
    """Save ``fig`` as PNG at ``path`` and close it.

    Raises
    ------
    DoeError
        When an axis has no label with a unit in brackets (every figure of a
        report must say what it shows and in which unit).
    """
    bad = _unlabelled(fig)
    if bad:
        plt.close(fig)
        raise DoeError(f"figure {Path(path).name}: axis label without a [unit]: {', '.join(bad)}")
    fig.savefig(path)
    plt.close(fig)
