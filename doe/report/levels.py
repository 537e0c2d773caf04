"""The report's parts for a study with choice knobs: which level, at what setting, and what it is worth.

Built from the files of the study (``robust.json``'s ``per_level`` and
``level_comparison``, ``sensitivity.json``'s ``_meta.levels``) and the
fitted surrogates (the per-level effect curves), so every number on the page
is one of those files' numbers, formatted by the report's own ``fmt`` (passed in by
:mod:`doe.report.build`, which imports this module).
"""
from __future__ import annotations

import numpy as np

from ..vehicle import figure_words
from . import figures as F
from .style import new_figure

__all__ = ["level_block", "level_glance", "level_effect_figures"]


def _combo(levels: dict) -> str:
    return ", ".join(f"{k} {v}" for k, v in levels.items())


def level_glance(study, rob: dict | None, fmt) -> list:
    """"At a glance" lines: which level combination, at what setting, by how much, and against the car now.

    Differences are rounded to what their 95 % interval supports; the lap-time words are added only when
    the objective is not the lap time itself.
    """
    if not rob or "level_comparison" not in rob:
        return []
    obj = rob["objective"]
    unit = obj.get("unit", "")
    name = figure_words(obj["response"])
    on_lap = obj["response"] != "lap_time_s"
    rows = rob["level_comparison"]
    best = next(r for r in rows if r["levels"] == rob["choices"]["best"])
    line = (f"Which {', '.join(rob['choices']['knobs'])}, and at what setting: {_combo(best['levels'])}, at "
            f"{_where(study, best, fmt)}; there the {name} is "
            f"{F.format_with_interval(best['mean'], best['std'], unit=unit)} under setup scatter.")
    others = sorted((r for r in rows if r is not best), key=lambda r: abs(r["mean_minus_best"]))
    if others:
        nxt = others[0]
        d = nxt["mean_minus_best"]
        worse = d > 0 if obj.get("goal") == "minimize" else d < 0
        line += (f" The next best, {_combo(nxt['levels'])}, is {'worse' if worse else 'better on paper'} by "
                 f"{_difference(abs(d), nxt['mean_minus_best_pm95'], unit)} in the {name} at its own best setting "
                 "(95 %, the surrogate's uncertainty"
                 + ("; not resolved: within its interval)" if abs(d) <= nxt["mean_minus_best_pm95"] else ")"))
        lap = (nxt.get("figures") or {}).get("lap_time_s")
        if lap is not None and on_lap:
            line += "; on the lap it is " + _lap_words(lap["minus_best"], lap["minus_best_pm95"])
        line += "."
    lines = [line]
    if "mean_minus_baseline" in best and rob.get("baseline"):
        base_levels = rob["baseline"].get("levels", {})
        d = best["mean_minus_baseline"]
        better = d < 0 if obj.get("goal") == "minimize" else d > 0
        text = (f"Against the car as it runs now ({_combo(base_levels)}): "
                f"{'better' if better else 'worse'} by {_difference(abs(d), best['mean_minus_baseline_pm95'], unit)}"
                f" in the {name} (95 %)")
        lap = (best.get("figures") or {}).get("lap_time_s")
        if lap is not None and "minus_baseline" in lap and on_lap:
            text += ", per lap " + _lap_words(lap["minus_baseline"], lap["minus_baseline_pm95"])
        lines.append(text + ".")
    return lines


def _difference(d: float, pm95: float, unit: str) -> str:
    """``"0.012 ± 0.010 s"``: the difference rounded to what its 95 % interval supports (two digits of it)."""
    return F.format_with_interval(d, pm95, digits=2, unit=unit)


def _lap_words(d: float, pm95: float) -> str:
    """``"0.21 ± 0.01 s quicker"``; a difference inside its own interval is said to be unresolved."""
    words = f"{_difference(abs(d), pm95, 's')} {'slower' if d > 0 else 'quicker'}"
    return words + (" (not resolved: within its 95 % interval)" if abs(d) <= pm95 else "")


def _where(study, row: dict, fmt) -> str:
    """The settable knobs of a comparison row, those that do not apply left out."""
    skip = set(row.get("not_applying", []))
    return ", ".join(f"{p.name} {fmt(row['point'][p.name], 3)} {p.unit}" for p in study.space.parameters
                     if not p.levels and p.name not in skip)


def level_block(study, rob: dict | None, sensitivity: dict | None, fmt) -> dict | None:
    """Tables of the best setting per level combination and of what one level is worth over another."""
    if not study.space.choices:
        return None
    out = {"best": None, "average": None}
    if rob and "level_comparison" in rob:
        out["best"] = _best_table(study, rob, fmt)
    levels = (sensitivity or {}).get("_meta", {}).get("levels")
    if levels:
        rows = []
        for r, per in levels.items():
            unit = study.response(r).unit
            for name, rec in per.items():
                for d in rec["differences"]:
                    rows.append([r, name, f"{d['level']} instead of {d['over']}",
                                 f"{fmt(d['difference'])} ± {fmt(d['difference_pm95'])} {unit}"])
        out["average"] = {"rows": rows, "text": (
            "What choosing one level over another is worth on average: the difference of the response's mean over "
            "the continuous knobs (uniform over their ranges) and the other choices (levels equally likely), with "
            "its 95 % interval from the sampling and the surrogate's uncertainty (sensitivity.json, _meta.levels).")}
    return out


def _best_table(study, rob: dict, fmt) -> dict:
    obj = rob["objective"]
    unit = obj.get("unit", "")
    rows = rob["level_comparison"]
    responses = list(rows[0]["responses"])
    figures = list(rows[0].get("figures") or {})
    baseline = "mean_minus_baseline" in rows[0]
    settable = [p for p in study.space.parameters if not p.levels]
    header = ([p.name for p in study.space.choices] + [p.label() for p in settable]
              + [f"{obj['response']} under scatter, mean ± std [{unit}]"]
              + ([f"{obj['response']}, change from the car as it runs now ± 95 % [{unit}]"] if baseline else [])
              + [f"{r} at the setting, change from the best ± 95 % [{study.response(r).unit}]" for r in responses]
              + [f"{figure_words(f)} at the setting, change from the best ± 95 % [{rows[0]['figures'][f]['unit']}]"
                 for f in figures])
    lap = not figures and all(r.get("lap_time_s") is not None for r in rows)
    if lap:
        header.append("lap time, change from the best [s]")
    body = []
    for row in rows:
        skip = set(row.get("not_applying", []))
        cells = [row["levels"][p.name] for p in study.space.choices]
        cells += ["-" if p.name in skip else fmt(row["point"][p.name]) for p in settable]
        cells.append(F.format_with_interval(row["mean"], row["std"]))
        if baseline:
            cells.append(f"{fmt(row['mean_minus_baseline'], 3)} ± {fmt(row['mean_minus_baseline_pm95'], 2)}")
        for r in responses:
            rec = row["responses"][r]
            cells.append(f"{fmt(rec['mean'])} ({fmt(rec['minus_best'], 3)} ± {fmt(rec['minus_best_pm95'], 2)})")
        for f in figures:
            rec = row["figures"][f]
            cells.append(f"{fmt(rec['value'], 5)} ({fmt(rec['minus_best'], 3)} ± {fmt(rec['minus_best_pm95'], 2)})")
        if lap:
            cells.append(f"{fmt(row['lap_time_s'], 5)} ({fmt(row['lap_time_minus_best_s'], 3)})")
        body.append(cells)
    text = ("The best setting of the other knobs within each level combination (a choice is not scattered: each "
            "combination is searched on its own), and what each response"
            + (" and vehicle figure" if figures else "") + " is there; in brackets the change from "
            "the best combination's value with its 95 % interval from the surrogate's uncertainty at the two "
            "settings (robust.json, level_comparison). A knob marked - has nothing to act on in that combination "
            "(its part is switched off). " + rob["choices"]["method"].capitalize() + ".")
    return {"header": header, "rows": body, "text": text}


def level_effect_figures(study, sset, blocks, pick, runs_frame, folder, n_grid: int = 25, n_avg: int = 64,
                         seed: int = 0) -> list:
    """Per response: effect curves per level combination, and a map at the recommended combination."""
    groups = []
    space = study.space
    fixed = (np.array([pick[n] for n in space.names]) if pick else
             np.array([0.0 if p.levels else 0.5 * (p.low + p.high) for p in space.parameters]))
    settable = [p.name for p in space.parameters if not p.levels]
    for r in study.responses:
        if r.name not in sset.responses:
            continue
        figs = [_curves(r.name, r.unit, sset.predict, space, folder, n_grid, n_avg, seed)]
        ranked = next((b["rows"] for b in blocks if b["response"] == r.name), [])
        strong = [row["name"] for row in ranked if row["name"] in settable] + settable
        strong = list(dict.fromkeys(strong))
        if len(strong) >= 2:
            figs.append(F.response_map(r.name, r.unit, sset.predict, space, strong[0], strong[1], fixed,
                                       runs_frame, folder, pick=pick))
        groups.append({"response": r.name, "unit": r.unit, "open": False, "figures": figs})
    return groups


def _curves(name, unit, predict, space, folder, n_grid, n_avg, seed):
    """One panel per continuous or stepped knob, one curve per level combination (averaged over the others)."""
    from ..robust.levels import LevelSpace

    levels = LevelSpace(space)
    sub = levels.settable
    rng = np.random.default_rng(seed)
    base = sub.from_unit(rng.random((n_avg, sub.dim)))
    d = sub.dim
    cols = min(d, 3)
    rows = int(np.ceil(d / cols))
    fig, axes = new_figure(2.8 * cols + 0.4, 2.4 * rows + 0.9, nrows=rows, ncols=cols, squeeze=False, sharey=True)
    for k, p in enumerate(sub.parameters):
        ax = axes[k // cols][k % cols]
        xs = np.linspace(p.low, p.high, n_grid)
        X = np.repeat(base, n_grid, axis=0)
        X[:, k] = np.tile(xs, n_avg)
        for combo in levels.combinations():
            mean, std = predict(levels.full(X, combo))[name]
            m = mean.reshape(n_avg, n_grid).mean(axis=0)
            s = std.reshape(n_avg, n_grid).mean(axis=0)
            line, = ax.plot(xs, m, lw=1.6, label=_combo(levels.names(combo)))
            ax.fill_between(xs, m - 2 * s, m + 2 * s, color=line.get_color(), alpha=0.15, lw=0)
        ax.set_xlabel(p.label())
        if k % cols == 0:
            ax.set_ylabel(F._label(name, unit))
    for k in range(d, rows * cols):
        axes[k // cols][k % cols].axis("off")
    handles, labels = axes[0][0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncol=2, fontsize=7.5)
    file = f"effects_levels_{name}.png"
    F.save(fig, folder / file)
    return F.Figure(file, f"How {name} moves with each knob, per level combination",
                    "Each curve moves one knob across its range with the choices held at one level combination, "
                    "and averages the surrogate over the other knobs; the gap between the curves is what the "
                    "choice is worth there. Bands are ±2 standard deviations of the surrogate.")
