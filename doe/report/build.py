"""Assembling the study report: numbers from the study's files, figures, plain words, HTML.

The report reads what the earlier steps wrote (plan quality, results, fit,
sensitivity, robust and trade-off files, proposed runs) and writes a
self-contained folder::

    <folder>/index.html     the report (opens offline)
    <folder>/*.png          its figures
    <folder>/data/          copies of the files every number came from

Every number in the page is taken from those files (or, for curves and maps,
from the saved surrogate), so a reader can check any figure against its source.
"""
from __future__ import annotations

import math
import shutil
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
from jinja2 import Environment, FileSystemLoader, select_autoescape
from markupsafe import Markup, escape

from ..vehicle import figure_words
from ..version import __version__
from . import figures as F
from .style import PALETTE

__all__ = ["ReportInputs", "build_report", "CAUTIONS", "MODEL_LIMITS", "fmt"]

#: The cautions every report carries (README carries the same).
CAUTIONS = (
    "Aero changes alter high-speed handling: more rear downforce moves the balance. Try any new setting "
    "progressively, at a safe venue, with the driver told what changed.",
    "Wing mounts, flaps and the bodywork they fix to must carry the loads (the forces in this report, plus "
    "vibration and kerb strikes, with a margin): have them designed and checked by someone qualified.",
    "The class's technical regulations and its scrutineers decide what is legal, not this report; the rules "
    "in the study are only as good as their reading of the regulations.",
    "A low-order model and a surrogate are no substitute for validated testing and licensed engineering "
    "judgement; use this report to rank and plan, not to certify loads.",
)

#: The built-in model's limits, listed when its numbers are used.
MODEL_LIMITS = (
    "The built-in model is two-dimensional potential flow with separation fixed at the body's trailing edge, "
    "corrected to three dimensions by lifting-line theory: no yaw, no cooling flow, no rotating wheels, no "
    "underbody detail; stall is estimated, not computed.",
    "Held against 32 two-dimensional RANS runs of the same geometry (docs/cfd.md), the built-in model ranked "
    "the configurations' total lift no better than chance (rank correlation 0.03) and gave the wrong sign for "
    "four of the five knobs' effects on it (only the wing angle agreed; the wing's height, the largest effect "
    "in RANS, it hardly sees); it followed drag and the wing's own lift better (0.41, 0.45). Treat its body "
    "and total-lift trends as a hypothesis for CFD or testing to confirm, not as an answer.",
)

GOAL_WORDS = {"minimize": "as low as possible", "maximize": "as high as possible", "none": "watched, no goal"}


def fmt(value, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; '–' for missing values."""
    if value is None:
        return "–"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(v):
        return "–"
    return f"{v:.{digits}g}"


@dataclass
class ReportInputs:
    """What a report is built from; every part but the study and results is optional.

    Attributes
    ----------
    study : Study
    results : ResultsTable
    plan_quality : dict, optional
        The plan's ``.quality.json`` record.
    surrogates : SurrogateSet, optional
        For main-effect curves and maps.
    fit : dict, optional
        ``fit.json``.
    sensitivity : dict, optional
        Sensitivity JSON.
    robust : dict, optional
        Robust JSON.
    tradeoff : DataFrame, optional
        The trade-off CSV.
    next_plan : DataFrame, optional
        Proposed runs (``run_id`` and parameters).
    next_reasons : dict, optional
        ``{run_id: why}`` for the proposed runs.
    next_note : str
        Why runs were or were not proposed (the stopping rule's sentence).
    files : dict of str to Path
        Files to copy into ``data/`` with a one-line description each: ``{name: (path, description)}``.
    """

    study: object
    results: object
    plan_quality: dict | None = None
    surrogates: object = None
    fit: dict | None = None
    sensitivity: dict | None = None
    robust: dict | None = None
    tradeoff: object = None
    next_plan: object = None
    next_reasons: dict | None = None
    next_note: str = ""
    files: dict = field(default_factory=dict)


def _figure_html(fig) -> Markup:
    if fig is None:
        return Markup("")
    return Markup(f'<figure><img src="{escape(fig.file)}" alt="{escape(fig.title)}">'
                  f'<figcaption><b>{escape(fig.title)}.</b> {escape(fig.caption)}</figcaption></figure>')


def _verdict_class(verdict: str) -> str:
    v = (verdict or "").lower()
    if v.startswith("ready"):
        return "verdict-ready"
    if "run" in v:
        return "verdict-more"
    return "verdict-check"


def _objective(study, inputs) -> str | None:
    if inputs.robust:
        return inputs.robust.get("objective", {}).get("response")
    for r in study.responses:
        if r.goal != "none":
            return r.name
    return study.responses[0].name


# ---------------------------------------------------------------------------
def _sensitivity_blocks(study, data: dict, folder: Path) -> list:
    blocks = []
    meta = (data.get("_meta") or {}).get("responses", {})
    for r in study.responses:
        rec = data.get(r.name)
        if not isinstance(rec, dict):
            continue
        params = [p for p in study.space.parameters if isinstance(rec.get(p.name), dict)]
        rows = [{"name": p.name, **{k: rec[p.name].get(k) for k in ("S1", "S1_pm95", "ST", "ST_pm95")}}
                for p in params]
        rows.sort(key=lambda row: -(row["ST"] or 0.0))
        about = meta.get(r.name, {})
        unresolved = about.get("unresolved") or []
        words = about.get("statement") or _rank_words(r.name, rows)
        blocks.append({"response": r.name, "unit": r.unit, "rows": rows, "words": words, "open": False,
                       "unresolved": "; ".join(" vs ".join(pair) if isinstance(pair, (list, tuple)) else str(pair)
                                               for pair in unresolved),
                       "figure": F.sobol_bars(r.name, r.unit, {p.name: rec[p.name] for p in params}, params,
                                              folder)})
    return blocks


def _rank_words(response: str, rows: list) -> str:
    """A short ranked sentence from Sobol rows (used when the sensitivity file has no statement)."""
    parts = []
    for row in rows[:3]:
        st = row["ST"] or 0.0
        parts.append(f"{row['name']} takes part in about {100 * st:.0f} % (± {100 * (row['ST_pm95'] or 0):.0f})")
    return f"Of the variation in {response}, " + "; ".join(parts) + "."


def _settings_compared(rob: dict) -> list:
    """``[(column label, record)]``: the car as it runs now (when given), the nominal and the robust setting."""
    out = []
    if rob.get("baseline"):
        out.append(("as the car runs now", rob["baseline"]))
    out.append(("best on paper (nominal)", rob.get("nominal", {})))
    out.append(("best under setup scatter (robust)", rob.get("robust", {})))
    return out


def _robust_block(study, rob: dict) -> dict:
    obj = rob.get("objective", {})
    name, unit = obj.get("response", "?"), obj.get("unit", "")
    words = figure_words(name)
    cols = _settings_compared(rob)
    recs = [rec for _, rec in cols]
    rows = [[p.label(), *(fmt(rec.get("point", {}).get(p.name)) for rec in recs)] for p in study.space.parameters]
    rows.append([f"{words} at the setting [{unit}]", *(fmt(rec.get("value_at_point")) for rec in recs)])
    rows.append([f"{words} under scatter, mean ± std [{unit}]",
                 *(F.format_with_interval(rec.get("mean"), rec.get("std")) for rec in recs)])
    rows.append([f"surrogate uncertainty at the setting [{unit}]", *(fmt(rec.get("model_std"), 2) for rec in recs)])
    for lim in rob.get("limits", []):
        label = lim["response"]
        probs = []
        for rec in recs:
            hit = [x for x in rec.get("limits", []) if x.get("response") == label]
            probs.append(fmt(hit[0].get("probability"), 3) if hit else "–")
        bound = _bound_words(label, lim.get("min"), lim.get("max"))
        unit_word = lim.get("unit", "") if lim.get("unit", "") not in ("", "-") else ""
        rows.append([f"chance that {bound} {unit_word} holds [-]".replace("  ", " "), *probs])
    flags = [(f"The car as it runs now: {rec.get('flag_reason', '')} (judged like the robust setting)."
              if label == "as the car runs now" else
              f"Check the {label} setting before trusting it: {rec.get('flag_reason', '')} "
              f"({len(rec.get('confirm_runs', []))} confirming runs are listed in robust.json).")
             for label, rec in cols if rec.get("flag")]
    frag = []
    robust = rob.get("robust", {})
    for pname, fr in sorted(robust.get("fragility", {}).items(), key=lambda kv: kv[1].get("rank", 99)):
        frag.append([pname, f"{fmt(fr.get('drop_per_unit'), 3)} {fr.get('per_unit', '')}",
                     f"{fmt(fr.get('drop'), 3)} {unit} over ±{fmt(fr.get('step'), 3)} {fr.get('unit', '')}"])
    sign = "+" if obj.get("goal") == "minimize" else "−"
    text = (f"The robust setting is the one whose {words} stays best when every knob is off by its setup scatter "
            f"(the study's tolerances, one standard deviation): it optimises the mean {sign} {fmt(obj.get('k', 1), 3)} "
            "standard deviations under that scatter. The nominal setting is the best on paper, with every knob "
            "exactly where it should be.")
    text += " " + _coincide(rob)
    if rob.get("limits"):
        text += " " + _limits_judged(rob)
    return {"columns": [label for label, _ in cols], "rows": rows, "flags": flags, "fragility": frag, "text": text,
            "name": name, "unit": unit}


def _limits_judged(rob: dict) -> str:
    """One sentence on how the limits are judged for each pick (the chance rows of the table)."""
    target = (rob.get("method") or {}).get("probability_target")
    return ("The limits are judged differently for the two picks: the nominal one only has to keep them at its "
            "exact setting (on the surrogate mean), so on the edge of a limit its chance under setup scatter "
            "reads about 0.5; the robust one must keep each with a chance of at least "
            f"{fmt(target, 3)} under setup scatter and the surrogates' uncertainty.")


def _coincide(rob: dict) -> str:
    """One sentence on how far the robust setting moved from the nominal one, and why."""
    nom, rb = rob.get("nominal", {}), rob.get("robust", {})
    if not nom or not rb:
        return ""
    gap = rb.get("robust_value", 0.0) - nom.get("robust_value", 0.0)
    same = all(abs(rb["point"][k] - v) <= 1e-3 * max(1.0, abs(v)) for k, v in nom.get("point", {}).items())
    if same or abs(gap) < 1e-12:
        return ("The two settings coincide: near the best point on paper the objective is flat against the "
                "setup scatter, and no limit is close enough for the scatter to break it, so nothing is gained "
                "by moving away.")
    return ("The robust setting moves away from the nominal one because there the setup scatter costs less "
            "(a flatter objective, or more room from a limit), at the price of a little on paper.")


def _vehicle_rows(vs: list) -> list:
    """Rows of the vehicle table for a list of VehicleFigures records, with the last-minus-first change."""
    def row(label, values, digits=4):
        change = (values[-1] - values[0]) if None not in (values[0], values[-1]) else None
        return [label, *(fmt(v, digits) for v in values), fmt(change, 3)]

    first = vs[0]
    rows = [row("CLA (negative = downforce) [m^2]", [v["cla_m2"] for v in vs]),
            row("CDA [m^2]", [v["cda_m2"] for v in vs])]
    for i, speed in enumerate(first["speeds_kph"]):
        rows.append(row(f"front axle share of the car's load at {fmt(speed, 3)} km/h [-]",
                        [v["front_load_share"][i] for v in vs], 3))
    if all(v.get("balance_shift") for v in vs):
        for i, speed in enumerate(first["speeds_kph"]):
            rows.append(row(f"balance shift at {fmt(speed, 3)} km/h (negative: towards understeer) [-]",
                            [v["balance_shift"][i] for v in vs], 3))
    for i, speed in enumerate(first["speeds_kph"]):
        rows.append(row(f"downforce at {fmt(speed, 3)} km/h [N]", [v["downforce_n"][i] for v in vs]))
        rows.append(row(f"drag at {fmt(speed, 3)} km/h [N]", [v["drag_n"][i] for v in vs]))
    for i, radius in enumerate(first["radii_m"]):
        rows.append(row(f"corner speed, {fmt(radius, 3)} m radius [km/h]", [v["corner_speed_kph"][i] for v in vs]))
    rows.append(row("top speed [km/h]", [v["top_speed_kph"] for v in vs]))
    if all(v.get("lap_time_s") is not None for v in vs):
        rows.append(row("lap time at the surrogate means [s]", [v["lap_time_s"] for v in vs], 5))
    return rows


#: Short names of the compared settings, for figure axes.
SHORT_LABELS = {"as the car runs now": "car now", "best on paper (nominal)": "best on paper",
                "best under setup scatter (robust)": "best under scatter"}


def _lap(rec: dict) -> tuple:
    """Lap time of a point record and its surrogate std (None when the JSON has no lap-time figure), s."""
    fig = (rec.get("figures") or {}).get("lap_time_s")
    if fig:
        return fig["mean"], fig["std"]
    return (rec.get("vehicle") or {}).get("lap_time_s"), None


def _vehicle_block(rob: dict, folder: Path):
    recs = [(label, rec) for label, rec in _settings_compared(rob) if rec.get("vehicle")]
    cols = [(label, rec["vehicle"]) for label, rec in recs]
    if len(cols) < 2:
        return None, []
    vs = [v for _, v in cols]
    figs = []
    short = [SHORT_LABELS.get(label, label.split(" (")[0]) for label, _ in cols]
    laps = [_lap(rec) for _, rec in recs]
    if all(t is not None for t, _ in laps):
        stds = [s for _, s in laps]
        known = all(s is not None for s in stds)
        half = ([float(np.hypot(s, stds[0])) for s in stds] if known else None)
        figs.append(F.difference_bars(
            short, [t for t, _ in laps], "s", "lap time", "lap_time.png", folder,
            f"Estimated lap time of each setting minus that of {short[0]} on the study's track (quasi-steady point "
            "mass with braking and traction limits; below zero is faster). "
            + ("Whiskers: one standard deviation of the difference from the surrogates' uncertainty in CLA front, "
               "CLA rear and CDA, taken as independent between the settings (an overstatement when they are "
               "close)." if known else "No uncertainty is drawn: the robust file carries none for the lap time."),
            intervals=half))
    if all(v.get("front_load_share") for v in vs) and vs[0].get("static_front_share") is not None:
        figs.append(F.balance_lines(short, vs[0]["speeds_kph"], [v["front_load_share"] for v in vs],
                                    vs[0]["static_front_share"], folder))
    text = ("What the settings mean on this car: forces at a few speeds, corner speeds, top speed and lap time, "
            "from the vehicle and track data in the study (quasi-steady estimates, for comparing settings). The "
            "last column is the robust setting minus the " + ("car as it runs now." if len(cols) == 3 else
                                                              "nominal one."))
    rows = _vehicle_rows(vs)
    if all(s is not None for _, s in laps):
        rows.append(["lap time ± surrogate std [s]", *(F.format_with_interval(t, s) for t, s in laps), ""])
    balance = rob.get("balance_change")
    if balance:
        text += " " + balance["sentence"]
    return {"columns": [label for label, _ in cols] + ["change"], "rows": rows, "text": text}, figs


def settable(value, tolerance) -> str:
    """A knob's value rounded to the step a crew can set, judged from its setup scatter (one std).

    To the decimal place of half the tolerance (0.5 deg -> 0.1 deg, 2 mm -> 1 mm): finer digits are
    lost in the scatter. Without a tolerance, 3 significant digits.
    """
    if value is None or not math.isfinite(float(value)):
        return "–"
    if not tolerance or tolerance <= 0:
        return fmt(value, 3)
    places = max(0, -math.floor(math.log10(tolerance / 2.0)))
    text = f"{round(float(value), places):.{places}f}"
    return "0" if float(text) == 0 else text


def _glance(study, inputs, blocks, robust, vehicle) -> list:
    res = inputs.results
    lines = [f"Studied: {study.space.dim} knobs ({', '.join(p.name for p in study.space.parameters)}) with "
             f"{len(res.ok)} runs that worked" + (f" ({len(res.failed)} failed)" if len(res.failed) else "") + "."]
    obj = _objective(study, inputs)
    for b in blocks:
        if b["response"] == obj or len(blocks) <= 2:
            lines.append(f"What drives {b['response']}: {b['words']}")
    if robust:
        rb = inputs.robust["robust"]
        where = ", ".join(f"{p.name} {settable(rb['point'].get(p.name), p.tolerance)} {p.unit}"
                          for p in study.space.parameters)
        lines.append(f"What to set: {where} (each to the step its setup scatter allows). There the "
                     f"{figure_words(robust['name'])} is "
                     f"{F.format_with_interval(rb.get('mean'), rb.get('std'), unit=robust['unit'])} under setup "
                     "scatter.")
    if inputs.fit:
        ready = [n for n, r in inputs.fit.items() if str(r.get("verdict", "")).lower().startswith("ready")]
        other = [n for n in inputs.fit if n not in ready]
        text = f"How sure: the maps of {', '.join(ready) or 'no response'} are ready"
        if other:
            text += f"; {', '.join(other)} need{'s' if len(other) == 1 else ''} more runs or a check of the data"
        lines.append(text + ".")
    if vehicle:
        lines += _worth_lines(inputs.robust)
    if inputs.next_plan is not None and len(inputs.next_plan):
        lines.append(f"Next: {len(inputs.next_plan)} more runs are proposed below to sharpen the maps.")
    return lines


def _chance(p) -> str:
    """A probability in words a driver reads at once: "of 0.48", "under 0.01", "over 0.99"."""
    if p is None:
        return "not known"
    return "under 0.01" if p < 0.005 else "over 0.99" if p > 0.995 else f"of {p:.2f}"


def _gap(diff: float, std_a, std_b) -> str:
    """``|diff| ± hypot(std_a, std_b) s`` (the stds of two lap times taken as independent), or ``|diff| s``."""
    half = math.hypot(std_a, std_b) if std_a is not None and std_b is not None else None
    return F.format_with_interval(abs(diff), half, unit="s")


def _worth_lines(rob: dict) -> list:
    """"What it is worth" (lap time with its uncertainty) and how the balance moves, for "At a glance"."""
    (rt, rs), (nt, ns) = _lap(rob["robust"]), _lap(rob["nominal"])
    lines = []
    if rt is not None and nt is not None:
        d = rt - nt
        than = ("the same as the nominal best on paper" if abs(d) < 0.0005 else
                f"{_gap(d, rs, ns)} {'slower' if d > 0 else 'faster'} than the nominal best on paper"
                + (" (the price of holding the limits under setup scatter)" if d > 0 else ""))
        text = f"What it is worth: the robust setting laps in {F.format_with_interval(rt, rs, unit='s')}, {than}"
        base = rob.get("baseline")
        if base:
            bt, bs = _lap(base)
            if bt is not None:
                gain = bt - rt
                text += (f", and {_gap(gain, rs, bs)} {'quicker' if gain > 0 else 'slower'} per lap than the car "
                         f"as it runs now ({F.format_with_interval(bt, bs, unit='s')})")
        if rs is not None:
            text += ("; ± is one standard deviation from the surrogates' uncertainty (for a difference, the two "
                     "taken as independent: an overstatement when the settings are close)")
        lines.append(text + ".")
        base = rob.get("baseline")
        bounds = {lim["response"]: _bound_words(lim["response"], lim.get("min"), lim.get("max")) + (
            f" {lim['unit']}" if lim.get("unit") not in (None, "", "-") else "") for lim in rob.get("limits", [])}
        broken = [lim for lim in (base or {}).get("limits", []) if not lim.get("met_with_probability", True)]
        if broken:
            lines.append("The car as it runs now does not keep every limit: " + "; ".join(
                f"{bounds.get(lim['response'], lim['response'])} holds with a chance {_chance(lim.get('probability'))}"
                for lim in broken) + ".")
    if rob.get("balance_change"):
        lines.append("How the balance moves: " + rob["balance_change"]["sentence"])
    return lines


def build_report(inputs: ReportInputs, folder) -> Path:
    """Write the report folder and return the path of ``index.html``.

    Parameters
    ----------
    inputs : ReportInputs
    folder : str or Path
        Created when missing; its figures and ``index.html`` are replaced.
    """
    study = inputs.study
    folder = Path(folder)
    (folder / "data").mkdir(parents=True, exist_ok=True)
    frame = inputs.results.frame
    figs = {"plan": F.plan_pairs(study, frame, folder), "loo": [], "effects": [], "tradeoff": [], "vehicle": []}
    if inputs.fit:
        figs["loo"] = [F.loo_scatter(n, r, folder) for n, r in inputs.fit.items()]
    blocks = _sensitivity_blocks(study, inputs.sensitivity, folder) if inputs.sensitivity else []
    for b in blocks:
        b["open"] = b["response"] == _objective(study, inputs)
    robust = _robust_block(study, inputs.robust) if inputs.robust else None
    vehicle, figs["vehicle"] = _vehicle_block(inputs.robust, folder) if inputs.robust else (None, [])
    pick = inputs.robust["robust"]["point"] if inputs.robust else None
    if inputs.surrogates is not None:
        figs["effects"] = _effect_figures(study, inputs, blocks, pick, folder)
    if inputs.tradeoff is not None and robust is not None:
        figs["tradeoff"] = _tradeoff_figures(study, inputs, folder)
    failed = [(row["run_id"], row.get("message", "") or "no value") for _, row in inputs.results.failed.iterrows()]
    data_files = []
    for name, (path, description) in inputs.files.items():
        if path is not None and Path(path).exists():
            shutil.copyfile(path, folder / "data" / name)
            data_files.append((name, description))
    pq = inputs.plan_quality or {}
    env = Environment(loader=FileSystemLoader(Path(__file__).parent / "templates"),
                      autoescape=select_autoescape(["html", "j2"]))
    sections = [("question", "The question"), ("runs", "The runs"), ("trust", "How far to trust the maps"),
                ("knobs", "Which knobs matter"), ("moves", "How the responses move"),
                ("setting", "The recommended setting"), ("worth", "What it is worth"), ("next", "What to run next"),
                ("limits", "Limits and cautions"), ("files", "Files")]
    html = env.get_template("report.html.j2").render(
        study=study, made=f"{datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC", version=__version__,
        results={"summary": inputs.results.summary()}, sections=sections,
        glance=_glance(study, inputs, blocks, robust, vehicle), cautions=CAUTIONS,
        limits=MODEL_LIMITS if study.evaluator.kind == "builtin" else (),
        question=_question(study), goal_words=GOAL_WORDS, runs_text=_runs_text(inputs),
        plan_quality=pq.get("quality"), plan_quality_method=_plan_method(pq), figs=figs, failed_runs=failed,
        fit=inputs.fit, target_q2=next(iter(inputs.fit.values())).get("target_q2") if inputs.fit else None,
        sensitivity=blocks, robust=robust, vehicle=vehicle, next_runs=_next_block(study, inputs),
        data_files=data_files, fmt=fmt, figure=_figure_html, verdict_class=_verdict_class)
    out = folder / "index.html"
    tmp = folder / "index.html.tmp"
    tmp.write_text(html, encoding="utf-8")
    tmp.replace(out)
    return out


def _question(study) -> str:
    goals = [f"{r.name} {GOAL_WORDS[r.goal]}" for r in study.responses if r.goal != "none"]
    text = (f"{study.description or study.name}. The study varies {study.space.dim} knobs within the ranges below"
            + (f" and wants {', '.join(goals)}" if goals else "") + ".")
    r = study.robust
    if r is None:
        return text
    track = getattr(study, "track", None)
    where = f" on {track.name}" if r.objective == "lap_time_s" and track is not None and track.name else ""
    bounds = [_bound_words(lim.response, lim.min, lim.max) for lim in r.limits]
    bounds += [_bound_words(lim.figure, lim.min, lim.max) for lim in r.vehicle_limits]
    return (text + f" The recommended setting makes the {figure_words(r.objective)}{where} "
            f"{GOAL_WORDS.get(r.goal, r.goal)}" + (f", keeping {', '.join(bounds)}" if bounds else "") + ".")


def _bound_words(name: str, low, high) -> str:
    """``"-0.045 <= balance shift"`` in plain words."""
    return " ≤ ".join(x for x in (fmt(low) if low is not None else "", figure_words(name),
                                  fmt(high) if high is not None else "") if x)


def _runs_text(inputs) -> str:
    res = inputs.results
    sources = sorted(set(res.frame.get("source", []))) if "source" in res.frame else []
    return (f"{len(res.frame)} runs were recorded ({len(res.ok)} ok, {len(res.failed)} failed)"
            + (f", from: {', '.join(s for s in sources if s)}" if sources else "") + ". Failed runs are listed, "
            "never used in a fit.")


def _plan_method(pq: dict) -> str:
    m = pq.get("method", "")
    return {"lhs": "Latin hypercube optimised for space filling", "sobol": "scrambled Sobol' points",
            "augment": "an earlier plan with runs added"}.get(m, m)


def _strongest_two(study, blocks, response):
    for b in blocks:
        if b["response"] == response and len(b["rows"]) >= 2:
            return b["rows"][0]["name"], b["rows"][1]["name"]
    names = study.space.names
    return (names[0], names[1]) if len(names) >= 2 else (None, None)


def _effect_figures(study, inputs, blocks, pick, folder) -> list:
    """One ``{"response", "unit", "open", "figures"}`` group per response (the objective's group open)."""
    sset = inputs.surrogates
    groups = []
    fixed = np.array([pick[n] for n in study.space.names]) if pick else (study.space.lower + study.space.upper) / 2
    for r in study.responses:
        if r.name not in sset.responses:
            continue
        predict = replace(sset, models={r.name: sset.models[r.name]}).predict   # only the response drawn
        figs = [F.main_effects(r.name, r.unit, predict, study.space, folder)]
        px, py = _strongest_two(study, blocks, r.name)
        if px and py:
            figs.append(F.response_map(r.name, r.unit, predict, study.space, px, py, fixed,
                                       inputs.results.frame, folder, pick=pick))
        groups.append({"response": r.name, "unit": r.unit, "open": r.name == _objective(study, inputs),
                       "figures": figs})
    return groups


def _tradeoff_figures(study, inputs, folder) -> list:
    frame = inputs.tradeoff
    resp = [r for r in study.response_names if r in frame.columns]
    if len(resp) < 2:
        return []
    rx, ry = resp[0], resp[1]
    points = []
    if inputs.surrogates is not None:
        for label, colour, key in (("nominal", PALETTE["nominal"], "nominal"), ("robust", PALETTE["pick"], "robust")):
            x = np.array([[inputs.robust[key]["point"][n] for n in study.space.names]])
            pred = inputs.surrogates.predict(x)
            points.append((label, colour, (float(pred[rx][0][0]), float(pred[ry][0][0]))))
    senses = tuple(g if g in ("minimize", "maximize") else "minimize"
                   for g in (study.response(rx).goal, study.response(ry).goal))
    return [F.tradeoff_plot(frame, rx, study.response(rx).unit, ry, study.response(ry).unit, folder, points,
                            include=[p for _, _, p in points], senses=senses)]


def _next_block(study, inputs):
    plan = inputs.next_plan
    if plan is None or not len(plan):
        return {"rows": [], "text": inputs.next_note or "No further runs were proposed."}
    reasons = inputs.next_reasons or {}
    rows = [[row["run_id"], *(fmt(row[n]) for n in study.space.names), reasons.get(row["run_id"], "")]
            for _, row in plan.iterrows()]
    return {"rows": rows, "text": f"{inputs.next_note.capitalize()}. " if inputs.next_note else ""
            f"{len(rows)} runs that would sharpen the maps most, inside the bounds and rules (doe next); add them to "
            "the plan and evaluate them."}
