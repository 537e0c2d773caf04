"""The report's figures, each a PNG with a title, a caption and axis labels with units.

Every function takes plain data (the study, tables and the JSON records the
report is built from, or a predictor) and returns a :class:`Figure` record. No
function computes an analysis result of its own beyond evaluating a surrogate
along a line or a grid for drawing.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .style import PALETTE, new_figure, save

__all__ = ["Figure", "plan_pairs", "loo_scatter", "sobol_bars", "main_effects", "response_map", "tradeoff_plot",
           "vehicle_bars", "grid_points"]


@dataclass
class Figure:
    """One saved figure.

    Attributes
    ----------
    file : str
        File name inside the report folder.
    title, caption : str
    """

    file: str
    title: str
    caption: str


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]"


def plan_pairs(study, frame, folder: Path) -> Figure:
    """Pairwise projections of the runs (ok and failed) on every pair of parameters."""
    params = study.space.parameters
    d = len(params)
    size = min(2.1 * max(d - 1, 1), 9.0)
    fig, axes = new_figure(size + 0.6, size, nrows=max(d - 1, 1), ncols=max(d - 1, 1), squeeze=False)
    ok = frame["status"] == "ok"
    for i in range(1, max(d, 2)):
        for j in range(max(d - 1, 1)):
            ax = axes[i - 1][j]
            if d == 1:
                ax.scatter(frame[params[0].name][ok], np.zeros(ok.sum()), s=14, color=PALETTE["runs"])
                ax.set_xlabel(params[0].label())
                continue
            if j >= i:
                ax.axis("off")
                continue
            px, py = params[j], params[i]
            ax.scatter(frame[px.name][ok], frame[py.name][ok], s=12, color=PALETTE["runs"], label="run")
            if (~ok).any():
                ax.scatter(frame[px.name][~ok], frame[py.name][~ok], s=22, marker="x", color=PALETTE["caution"],
                           label="failed run")
            ax.set_xlim(px.low, px.high)
            ax.set_ylim(py.low, py.high)
            if i == d - 1:
                ax.set_xlabel(px.label())
            if j == 0:
                ax.set_ylabel(py.label())
    save(fig, folder / "plan_pairs.png")
    failed = int((~ok).sum())
    return Figure("plan_pairs.png", "Where the runs are",
                  f"Each dot is a run, seen on every pair of parameters ({len(frame)} runs"
                  + (f", {failed} failed, marked ×" if failed else "") + "). Even coverage with no clusters or "
                  "empty corners is what a space-filling plan is for.")


def loo_scatter(name: str, record: dict, folder: Path) -> Figure:
    """Leave-one-out prediction against the recorded value, with ±2 standard deviations."""
    pts = record.get("loo", [])
    obs = np.array([p["observed"] for p in pts], dtype=float)
    pred = np.array([p["predicted"] for p in pts], dtype=float)
    std = np.array([p["std"] for p in pts], dtype=float)
    unit = record.get("unit", "")
    fig, ax = new_figure(4.4, 4.0)
    if len(obs):
        lo, hi = float(min(obs.min(), pred.min())), float(max(obs.max(), pred.max()))
        pad = 0.05 * (hi - lo or 1.0)
        ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color=PALETTE["muted"], lw=1, label="perfect prediction")
        ax.errorbar(obs, pred, yerr=2 * std, fmt="o", ms=4, color=PALETTE["runs"], ecolor=PALETTE["band"],
                    elinewidth=1.2, label="run left out, ±2 std")
    ax.set_xlabel(_label(f"recorded {name}", unit))
    ax.set_ylabel(_label(f"predicted without that run", unit))
    ax.set_title(name)
    ax.legend(loc="upper left")
    file = f"loo_{name}.png"
    save(fig, folder / file)
    return Figure(file, f"{name}: predicted with each run left out",
                  f"Each run is predicted by the surrogate fitted to all the other runs. Points on the diagonal "
                  f"mean the map predicts runs it has not seen; q² = {record.get('q2_loo', float('nan')):.3f}, "
                  f"error {record.get('rmse_loo', float('nan')):.3g} {unit} (root mean square).")


def sobol_bars(name: str, unit: str, record: dict, parameters, folder: Path) -> Figure:
    """First-order and total Sobol indices of one response with their 95 % intervals."""
    names = [p.name for p in parameters if p.name in record]
    s1 = np.array([record[n]["S1"] for n in names])
    st = np.array([record[n]["ST"] for n in names])
    c1 = np.array([record[n].get("S1_conf", 0.0) for n in names])
    ct = np.array([record[n].get("ST_conf", 0.0) for n in names])
    order = np.argsort(-st)
    y = np.arange(len(names))
    fig, ax = new_figure(6.4, 0.55 * len(names) + 1.4)
    ax.barh(y + 0.18, st[order], height=0.34, color=PALETTE["model"], xerr=ct[order], ecolor=PALETTE["ink"],
            capsize=3, label="total (alone and through interactions)")
    ax.barh(y - 0.18, s1[order], height=0.34, color=PALETTE["runs"], xerr=c1[order], ecolor=PALETTE["ink"],
            capsize=3, label="first order (alone)")
    ax.set_yticks(y, [names[i] for i in order])
    ax.set_ylabel("knob")
    ax.invert_yaxis()
    ax.set_xlim(0, max(1.0, float(np.max(st + ct, initial=0)) * 1.05))
    ax.set_xlabel("share of the variance of " + _label(name, unit) + " [-]")
    ax.set_title(f"What drives {name}")
    ax.legend(loc="lower right")
    file = f"sobol_{name}.png"
    save(fig, folder / file)
    return Figure(file, f"What drives {name}",
                  "Sobol indices: the share of the variation of the response that each knob explains alone "
                  "(first order) and together with the others (total). Whiskers are 95 % intervals from both "
                  "the sampling and the surrogate's own uncertainty.")


def grid_points(space, fixed: np.ndarray, name_x: str, values_x, name_y: str | None = None, values_y=None):
    """Points varying one or two parameters with the others held at ``fixed`` (study units)."""
    names = space.names
    if name_y is None:
        X = np.repeat(fixed[None, :], len(values_x), axis=0)
        X[:, names.index(name_x)] = values_x
        return X
    gx, gy = np.meshgrid(values_x, values_y)
    X = np.repeat(fixed[None, :], gx.size, axis=0)
    X[:, names.index(name_x)] = gx.ravel()
    X[:, names.index(name_y)] = gy.ravel()
    return X


def main_effects(name: str, unit: str, predict, space, folder: Path, n_grid: int = 33, n_avg: int = 96,
                 seed: int = 0) -> Figure:
    """Main-effect curves: the response averaged over the other knobs, as one knob moves.

    The band is the mean of the surrogate's ±2 standard deviations along the
    curve (an upper bound on the uncertainty of the averaged curve).
    """
    rng = np.random.default_rng(seed)
    d = space.dim
    cols = min(d, 3)
    rows = int(np.ceil(d / cols))
    fig, axes = new_figure(2.6 * cols + 0.4, 2.3 * rows + 0.3, nrows=rows, ncols=cols, squeeze=False, sharey=True)
    base = space.from_unit(rng.random((n_avg, d)))
    for k, p in enumerate(space.parameters):
        ax = axes[k // cols][k % cols]
        xs = np.linspace(p.low, p.high, n_grid)
        X = np.repeat(base, n_grid, axis=0)
        X[:, k] = np.tile(xs, n_avg)
        mean, std = predict(X)[name]
        m = mean.reshape(n_avg, n_grid).mean(axis=0)
        s = std.reshape(n_avg, n_grid).mean(axis=0)
        ax.fill_between(xs, m - 2 * s, m + 2 * s, color=PALETTE["band"], alpha=0.7, lw=0)
        ax.plot(xs, m, color=PALETTE["model"], lw=1.8)
        ax.set_xlabel(p.label())
        if k % cols == 0:
            ax.set_ylabel(_label(name, unit))
    for k in range(d, rows * cols):
        axes[k // cols][k % cols].axis("off")
    file = f"effects_{name}.png"
    save(fig, folder / file)
    return Figure(file, f"How {name} moves with each knob",
                  "Each curve moves one knob across its range and averages the surrogate over all settings of the "
                  "others; a flat curve is a knob that does not matter on its own. The band is ±2 standard "
                  "deviations of the surrogate.")


def response_map(name: str, unit: str, predict, space, px: str, py: str, fixed, runs_frame, folder: Path,
                 pick=None, n_grid: int = 60) -> Figure:
    """A map of the response over two parameters, the others at ``fixed``; runs and the pick marked."""
    a, b = space.parameter(px), space.parameter(py)
    xs, ys = np.linspace(a.low, a.high, n_grid), np.linspace(b.low, b.high, n_grid)
    X = grid_points(space, np.asarray(fixed, dtype=float), px, xs, py, ys)
    mean, std = predict(X)[name]
    fig, ax = new_figure(5.6, 4.4)
    cs = ax.contourf(xs, ys, mean.reshape(n_grid, n_grid), levels=14, cmap="viridis")
    ax.contour(xs, ys, std.reshape(n_grid, n_grid), levels=4, colors=PALETTE["ink"], linewidths=0.5, alpha=0.5)
    cb = fig.colorbar(cs, ax=ax)
    cb.set_label(_label(name, unit))
    ok = runs_frame["status"] == "ok"
    ax.scatter(runs_frame[px][ok], runs_frame[py][ok], s=14, facecolor="white", edgecolor=PALETTE["ink"],
               label="runs (all settings)")
    if pick is not None:
        ax.scatter([pick[px]], [pick[py]], s=90, marker="*", color=PALETTE["pick"], edgecolor="white",
                   label="recommended")
    ax.set_xlabel(a.label())
    ax.set_ylabel(b.label())
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=2, fontsize=7.5)
    file = f"map_{name}_{px}_{py}.png"
    save(fig, folder / file)
    others = [p.name for p in space.parameters if p.name not in (px, py)]
    return Figure(file, f"{name} over {px} and {py}",
                  f"Surrogate mean of {name} over its two strongest knobs"
                  + (f", with {', '.join(others)} held at the recommended setting" if others else "")
                  + ". Thin lines are contours of the surrogate's uncertainty; runs are marked wherever their "
                  "other settings lie.")


def tradeoff_plot(frame, rx: str, ux: str, ry: str, uy: str, folder: Path, points=None) -> Figure:
    """The non-dominated set of two responses, with the nominal and robust points."""
    fig, ax = new_figure(5.4, 4.0)
    f = frame.sort_values(rx)
    ax.plot(f[rx], f[ry], "-o", ms=3, color=PALETTE["runs"], lw=1.2, label="best trade-offs")
    for label, colour, p in points or []:
        ax.scatter([p[0]], [p[1]], s=80, marker="*", color=colour, zorder=5, label=label)
    ax.set_xlabel(_label(rx, ux))
    ax.set_ylabel(_label(ry, uy))
    ax.legend()
    file = f"tradeoff_{rx}_{ry}.png"
    save(fig, folder / file)
    return Figure(file, f"Trade-off between {rx} and {ry}",
                  f"Settings for which no other setting is better in both {rx} and {ry} (surrogate means). "
                  "Moving along the line buys one at the price of the other.")


def vehicle_bars(labels, values, unit: str, title: str, file: str, folder: Path, caption: str) -> Figure:
    """Side-by-side bars of one vehicle figure for a few configurations."""
    fig, ax = new_figure(4.6, 3.0)
    colours = [PALETTE["muted"], PALETTE["nominal"], PALETTE["pick"]][-len(labels):]
    ax.bar(labels, values, color=colours)
    lo = min(values)
    hi = max(values)
    ax.set_ylim(lo - 0.3 * (hi - lo or abs(hi) * 0.05 or 1), hi + 0.3 * (hi - lo or abs(hi) * 0.05 or 1))
    for i, v in enumerate(values):
        ax.annotate(f"{v:.2f}", (i, v), ha="center", va="bottom", fontsize=8.5)
    ax.set_ylabel(f"{title} [{unit}]")
    ax.set_xlabel("configuration")
    save(fig, folder / file)
    return Figure(file, title, caption)
