"""The report's figures, each a PNG with a title, a caption and axis labels with units.

Every function takes plain data (the study, tables and the JSON records the
report is built from, or a predictor) and returns a :class:`Figure` record. No
function computes an analysis result of its own beyond evaluating a surrogate
along a line or a grid for drawing.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
from matplotlib.patches import Rectangle

from .style import PALETTE, new_figure, save

__all__ = ["Figure", "plan_pairs", "loo_scatter", "sobol_bars", "main_effects", "response_map", "tradeoff_plot",
           "vehicle_bars", "difference_bars", "balance_lines", "grid_points", "format_with_interval",
           "markers_outside", "non_dominated_2d"]


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


def _round_half_up(value: float, decimals: int) -> Decimal:
    """``value`` rounded half away from zero at ``decimals`` places (negative: tens, hundreds...)."""
    return Decimal(repr(float(value))).quantize(Decimal(1).scaleb(-decimals), rounding=ROUND_HALF_UP)


def format_with_interval(value, interval, digits: int = 1, unit: str = "") -> str:
    """``value ± interval`` with the interval rounded to ``digits`` significant digits and the value
    rounded to the same decimal place.

    E.g. ``format_with_interval(0.6525, 0.02363)`` gives ``"0.65 ± 0.02"`` and
    ``format_with_interval(1234.5, 56)`` gives ``"1230 ± 60"``. Rounding is half
    away from zero on the decimal digits as written. Without a usable interval
    (None, not finite, or <= 0) the value alone is given to 4 significant
    digits; without a usable value, ``"–"``.

    Parameters
    ----------
    value, interval : float or None
        Same unit; ``interval`` is a half-width (e.g. one standard deviation).
    digits : int
        Significant digits of the interval (1 or 2; the GUM asks for at most two).
    unit : str
        Appended after a space when given.

    References
    ----------
    JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
    uncertainty in measurement (GUM), 7.2.6 (memory of the paragraph): quote the
    uncertainty to at most two significant digits and round the estimate to match.
    """
    tail = f" {unit}" if unit else ""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "–"
    if not math.isfinite(v):
        return "–"
    try:
        u = float(interval)
    except (TypeError, ValueError):
        u = float("nan")
    if not (math.isfinite(u) and u > 0):
        return f"{v:.4g}{tail}"
    decimals = digits - 1 - math.floor(math.log10(u))
    r = _round_half_up(u, decimals)
    if r >= Decimal(10) ** (digits - decimals):        # rounding carried into the next digit (0.0096 -> 0.01)
        decimals -= 1
        r = _round_half_up(u, decimals)
    x = _round_half_up(v, decimals)
    if x == 0:
        x = abs(x)                                     # no "-0.00"
    places = max(decimals, 0)
    return f"{x:.{places}f} ± {r:.{places}f}{tail}"


def markers_outside(fig) -> list:
    """Markers of scatter plots and marked lines that do not lie wholly inside their axes.

    Returns
    -------
    list of str
        One ``"'<axes title>': marker at (x, y)"`` per marker whose disc
        (its size as drawn) crosses or leaves the axes box; empty when all lie inside.
    """
    fig.canvas.draw()
    bad = []
    scale = fig.dpi / 72.0
    for ax in fig.get_axes():
        if ax.get_label() == "<colorbar>" or not ax.axison:
            continue
        box = ax.get_window_extent()
        pts = []
        for coll in ax.collections:
            if not hasattr(coll, "get_sizes"):
                continue                               # contours, fills: no markers
            offsets = np.asarray(coll.get_offsets(), dtype=float)
            sizes = np.asarray(coll.get_sizes(), dtype=float)
            if not len(offsets) or not len(sizes) or coll.get_offset_transform() != ax.transData:
                continue
            radii = 0.5 * np.sqrt(np.resize(sizes, len(offsets))) * scale
            pts += list(zip(offsets, radii))
        for line in ax.lines:
            if line.get_marker() in (None, "None", "", " "):
                continue
            xy = np.column_stack([line.get_xdata(), line.get_ydata()]).astype(float)
            pts += [(p, 0.5 * line.get_markersize() * scale) for p in xy]
        for (x, y), r in pts:
            if not (np.isfinite(x) and np.isfinite(y)):
                continue
            px, py = ax.transData.transform((x, y))
            if px - r < box.x0 - 0.5 or px + r > box.x1 + 0.5 or py - r < box.y0 - 0.5 or py + r > box.y1 + 0.5:
                bad.append(f"'{ax.get_title() or ax.get_label()}': marker at ({x:.4g}, {y:.4g})")
    return bad


def _pad_limits(ax, fraction: float = 0.04) -> None:
    """Widen the axes by ``fraction`` of their span on each side, so markers at the edge stay inside."""
    for get, set_ in ((ax.get_xlim, ax.set_xlim), (ax.get_ylim, ax.set_ylim)):
        lo, hi = get()
        pad = fraction * (hi - lo)
        set_(lo - pad, hi + pad)


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
            ax.add_patch(Rectangle((px.low, py.low), px.high - px.low, py.high - py.low, fill=False, lw=0.6,
                                   ls=":", color=PALETTE["muted"]))
            ax.set_xlim(px.low, px.high)
            ax.set_ylim(py.low, py.high)
            _pad_limits(ax)                                    # runs on a bound stay whole inside the axes
            if i == d - 1:
                ax.set_xlabel(px.label())
            if j == 0:
                ax.set_ylabel(py.label())
    save(fig, folder / "plan_pairs.png")
    failed = int((~ok).sum())
    return Figure("plan_pairs.png", "Where the runs are",
                  f"Each dot is a run, seen on every pair of parameters ({len(frame)} runs"
                  + (f", {failed} failed, marked ×" if failed else "") + "; the dotted box is the bounds). Even coverage with no clusters or "
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
    c1 = np.array([record[n].get("S1_pm95") or 0.0 for n in names])
    ct = np.array([record[n].get("ST_pm95") or 0.0 for n in names])
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
                   label="recommended", zorder=5)
    # a grey margin outside the studied box keeps a marker on a bound wholly inside the axes
    ax.set_xlim(a.low, a.high)
    ax.set_ylim(b.low, b.high)
    _pad_limits(ax)
    ax.set_facecolor(PALETTE["grid"])
    ax.grid(False)
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
                  "other settings lie; the grey margin lies outside the studied ranges.")


def non_dominated_2d(x, y, senses=("minimize", "minimize")) -> np.ndarray:
    """Which points no other point beats in both coordinates (ties kept), as a boolean mask.

    ``senses`` gives the goal of each coordinate. A point is dominated when
    another is at least as good in both and better in one (Deb 2001, def. 2.5).
    """
    sign = np.array([1.0 if s == "minimize" else -1.0 for s in senses])
    F = np.column_stack([np.asarray(x, dtype=float), np.asarray(y, dtype=float)]) * sign
    order = np.lexsort((F[:, 1], F[:, 0]))
    keep = np.zeros(len(F), dtype=bool)
    best_y = np.inf
    last = None
    for i in order:
        if last is not None and np.array_equal(F[i], F[last]) and keep[last]:
            keep[i] = True                             # an equal point shares its twin's fate
        elif F[i, 1] < best_y:
            keep[i] = True
            best_y = F[i, 1]
        last = i
    return keep


def tradeoff_plot(frame, rx: str, ux: str, ry: str, uy: str, folder: Path, points=None, include=None,
                  senses=("minimize", "minimize")) -> Figure:
    """The non-dominated set of two responses, with marked points (e.g. the nominal and robust picks).

    Parameters
    ----------
    frame : pandas.DataFrame
        The trade-off set (columns ``rx`` and ``ry``, surrogate means).
    rx, ux, ry, uy : str
        The two responses and their units.
    folder : Path
    points : sequence of (label, colour, (x, y)), optional
        Points to mark with a star; the axes always contain them.
    include : sequence of (x, y), optional
        Further candidates for the line (e.g. the picks and each response's
        extreme, from a refined search): merged with ``frame`` and filtered
        again, so the line is the best trade-off of all of them.
    senses : (str, str)
        ``"minimize"`` or ``"maximize"`` for ``rx`` and ``ry``.

    Returns
    -------
    Figure
        Its caption says which marked points lie on the line and which are
        beaten in both responses by a point on it.
    """
    fig, ax = new_figure(5.4, 4.0)
    xs = np.asarray(frame[rx], dtype=float)
    ys = np.asarray(frame[ry], dtype=float)
    if include is not None and len(include):
        extra = np.asarray(include, dtype=float).reshape(-1, 2)
        xs, ys = np.concatenate([xs, extra[:, 0]]), np.concatenate([ys, extra[:, 1]])
    keep = non_dominated_2d(xs, ys, senses)
    order = np.argsort(xs[keep], kind="stable")
    line_x, line_y = xs[keep][order], ys[keep][order]
    ax.plot(line_x, line_y, "-o", ms=3, color=PALETTE["runs"], lw=1.2, label="best trade-offs")
    off = []
    for label, colour, p in points or []:
        ax.scatter([p[0]], [p[1]], s=80, marker="*", color=colour, zorder=5, label=label)
        mask = non_dominated_2d(np.append(line_x, p[0]), np.append(line_y, p[1]), senses)
        if not mask[-1]:
            off.append(label)
    ax.margins(0.06)
    ax.set_xlabel(_label(rx, ux))
    ax.set_ylabel(_label(ry, uy))
    ax.legend()
    file = f"tradeoff_{rx}_{ry}.png"
    save(fig, folder / file)
    caption = (f"Settings for which no other setting is better in both {rx} and {ry} (surrogate means). "
               "Moving along the line buys one at the price of the other. The points are settings polished onto "
               "the line (each end, even steps of the first response, and more where the line is steep) and the "
               "best of a sample between them; a small step between two points is the sample's resolution, "
               "not a feature of the car.")
    if off:
        caption += (f" Off the line: {', '.join(off)}; settings on the line beat "
                    f"{'it' if len(off) == 1 else 'them'} in both, so {'it was' if len(off) == 1 else 'they were'} "
                    "chosen for something else (another objective, a limit, or setup scatter).")
    return Figure(file, f"Trade-off between {rx} and {ry}", caption)


def _bar_numbers(ax, values, err, sign: bool) -> None:
    """Write each bar's value (± its interval) just beyond the bar's end and whisker."""
    for i, v in enumerate(values):
        e = 0.0 if err is None else float(err[i])
        text = format_with_interval(v, None if err is None else e)
        if sign and v > 0 and not text.startswith("-"):
            text = "+" + text
        end = v + e if v >= 0 else v - e
        ax.annotate(text, (i, end), xytext=(0, 3 if v >= 0 else -3), textcoords="offset points", ha="center",
                    va="bottom" if v >= 0 else "top", fontsize=8.5)


def vehicle_bars(labels, values, unit: str, title: str, file: str, folder: Path, caption: str,
                 intervals=None) -> Figure:
    """Side-by-side bars of one vehicle figure for a few configurations, from zero.

    ``intervals`` (same unit, optional) are drawn as whiskers and set the
    rounding of the numbers on the bars (:func:`format_with_interval`). For
    figures whose differences are small against their size (lap time), show
    :func:`difference_bars` instead: a bar from zero shows the size honestly but
    hides the difference.
    """
    values = np.asarray(values, dtype=float)
    err = None if intervals is None else np.asarray(intervals, dtype=float)
    fig, ax = new_figure(4.6, 3.0)
    colours = [PALETTE["muted"], PALETTE["nominal"], PALETTE["pick"]][-len(labels):]
    x = np.arange(len(labels))
    ax.bar(x, values, color=colours, yerr=err, ecolor=PALETTE["ink"], capsize=4)
    ax.set_xticks(x, labels)
    top = float(np.max(values + (err if err is not None else 0.0), initial=0.0))
    bottom = float(np.min(values - (err if err is not None else 0.0), initial=0.0))
    ax.set_ylim(min(bottom * 1.15, 0.0), max(top * 1.15, 0.0) or 1.0)
    ax.axhline(0.0, color=PALETTE["ink"], lw=0.8)
    _bar_numbers(ax, values, err, sign=False)
    ax.set_ylabel(f"{title} [{unit}]")
    ax.set_xlabel("configuration")
    save(fig, folder / file)
    return Figure(file, title, caption)


def difference_bars(labels, values, unit: str, title: str, file: str, folder: Path, caption: str,
                    reference: int = 0, intervals=None) -> Figure:
    """Bars of each configuration's difference from a reference one (e.g. the car as it runs now).

    Parameters
    ----------
    labels : sequence of str
        Names of the configurations.
    values : sequence of float
        The figure for each, ``unit``.
    unit, title, file, folder, caption
        As :func:`vehicle_bars`; the axis reads ``<title> minus <reference label> [unit]``.
    reference : int
        Index of the configuration the others are compared with (not drawn).
    intervals : sequence of float, optional
        Half-widths of each difference (e.g. one standard deviation), ``unit``:
        whiskers, and the rounding of the numbers on the bars.

    Returns
    -------
    Figure
    """
    values = np.asarray(values, dtype=float)
    others = [i for i in range(len(values)) if i != reference]
    diff = values[others] - values[reference]
    err = None if intervals is None else np.asarray(intervals, dtype=float)[others]
    fig, ax = new_figure(4.6, 3.0)
    colours = [PALETTE["nominal"], PALETTE["pick"]][-len(others):] if len(others) <= 2 else PALETTE["pick"]
    x = np.arange(len(others))
    ax.bar(x, diff, color=colours, yerr=err, ecolor=PALETTE["ink"], capsize=4, width=0.55)
    ax.set_xticks(x, [labels[i] for i in others])
    ax.axhline(0.0, color=PALETTE["ink"], lw=0.8)
    reach = np.abs(diff) + (err if err is not None else 0.0)
    span = float(np.max(reach, initial=0.0)) or 1.0
    ax.set_ylim(min(float(np.min(diff - (err if err is not None else 0.0))), 0.0) - 0.25 * span,
                max(float(np.max(diff + (err if err is not None else 0.0))), 0.0) + 0.25 * span)
    _bar_numbers(ax, diff, err, sign=True)
    ax.set_ylabel(f"{title} minus {labels[reference]} [{unit}]")
    ax.set_xlabel("configuration")
    save(fig, folder / file)
    return Figure(file, title, caption)


def balance_lines(labels, speeds_kph, front_shares, static_share: float, folder: Path,
                  file: str = "balance.png") -> Figure:
    """The front axle's share of the car's load against speed, one line per configuration.

    Parameters
    ----------
    labels : sequence of str
        Names of the configurations (e.g. as the car runs now, the pick).
    speeds_kph : sequence of float
        Speeds, km/h.
    front_shares : sequence of sequence of float
        Front axle's share of the whole vertical load at each speed, per
        configuration, - (``VehicleFigures.front_load_share``).
    static_share : float
        The share at rest, -.
    folder : Path
    file : str

    Returns
    -------
    Figure
        The caption says which way each configuration moves the balance at the
        highest speed (below the share at rest: towards understeer).
    """
    speeds = np.asarray(speeds_kph, dtype=float)
    fig, ax = new_figure(5.4, 3.6)
    colours = {1: [PALETTE["pick"]], 2: [PALETTE["muted"], PALETTE["pick"]],
               3: [PALETTE["muted"], PALETTE["nominal"], PALETTE["pick"]]}.get(len(labels))
    ax.axhline(100.0 * static_share, color=PALETTE["ink"], lw=1.0, ls="--", label="at rest")
    ax.annotate("below: towards understeer", (1.0, 100.0 * static_share), xycoords=("axes fraction", "data"),
                xytext=(-4, -4), textcoords="offset points", ha="right", va="top", fontsize=8,
                color=PALETTE["ink"])
    words = []
    for i, (label, share) in enumerate(zip(labels, front_shares)):
        share = 100.0 * np.asarray(share, dtype=float)
        ax.plot(speeds, share, "-o", ms=4, lw=1.6, color=None if colours is None else colours[i], label=label)
        shift = share[-1] - 100.0 * static_share
        words.append(f"{label} {abs(shift):.1f} points {'below' if shift < 0 else 'above'}")
    ax.margins(x=0.06, y=0.25)
    ax.set_xlabel("speed [km/h]")
    ax.set_ylabel("front axle share of the load [%]")
    ax.legend(loc="best")
    save(fig, folder / file)
    return Figure(file, "Handling balance at speed",
                  "The front axle's share of the car's whole vertical load (weight plus aero load) as speed rises. "
                  "Below the share at rest the aero load favours the rear: the car moves towards understeer at "
                  "speed; above it, towards oversteer (same tyres front and rear assumed). At "
                  f"{speeds[-1]:.0f} km/h: " + "; ".join(words) + ".")
