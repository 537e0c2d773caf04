"""The built-in model against the recorded 2-D RANS data set (studies/rans_rear.toml), case by case and trend by trend.

Reads the committed results (no solver runs here); evaluates the built-in model
with the study's ``[low_fidelity]`` settings at the same points. Reported per
response: Spearman's rank correlation of the configurations (scipy.stats),
the trend of each knob (slope of a linear fit on the unit cube, both sources,
the same sign or not), and the record of the runs (settled, oscillating,
iterations, cost). The RANS numbers are 2-D (spread over a width), the
model's are 3-D: levels differ by design, ranks and trend signs are what can
be compared.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from doe.aero.model import RearPackageModel
from doe.runs.evaluators.builtin import read_builtin_settings
from doe.study.reader import load_study

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "studies" / "rans_rear.toml"
RESPONSES = ("cla_total", "cda_total", "cla_front", "cla_rear", "cla_wing", "cla_body")


def model_at(study, frame: pd.DataFrame) -> dict:
    """The built-in model's responses at the rows of ``frame`` (study units in, m^2 out)."""
    settings, conv = read_builtin_settings(study, study.low_fidelity.evaluator)
    points = {p: frame[p].to_numpy(float) * conv[p] for p in study.space.names}
    res = RearPackageModel(settings).evaluate(points)
    return {r: res.values[r] for r in RESPONSES}


def trends(study, frame: pd.DataFrame, values: np.ndarray) -> np.ndarray:
    """Slopes of a linear fit of ``values`` on the unit-cube inputs (change over each knob's range)."""
    x = study.space.to_unit(frame[study.space.names].to_numpy(float))
    a = np.column_stack([np.ones(len(x)), x])
    coef, *_ = np.linalg.lstsq(a, values, rcond=None)
    return coef[1:]


def run(quick: bool) -> list[str]:
    lines = ["## The built-in model against 2-D RANS", ""]
    if not (ROOT / "studies" / "rans_rear_results.csv").exists():
        return lines + ["No recorded RANS data set yet (examples/cfd/make_rans_dataset.py makes it).", ""]
    study = load_study(STUDY)
    frame = pd.read_csv(ROOT / "studies" / "rans_rear_results.csv")
    ok = frame[frame["status"] == "ok"].reset_index(drop=True)
    n_conv = int((ok["converged"] == 1).sum()) if "converged" in ok else 0
    lines += [f"{len(frame)} RANS runs recorded, {len(ok)} ok, {n_conv} with settled forces; "
              f"median {ok['iterations'].median():.0f} iterations, median {ok['solve_s'].median():.0f} s "
              f"of solver wall time, {ok['cells'].median():.0f} cells (2-D RANS of an invented car's "
              "centreline, not a measurement of any real car).", ""]
    if len(ok) < 6:
        return lines + ["Too few runs yet to compare (need 6).", ""]
    model = model_at(study, ok)
    lines += ["| response | Spearman rank correlation | RANS mean (m^2) | model mean (m^2) | RANS window std, median (m^2) |",
              "|---|---|---|---|---|"]
    for r in RESPONSES:
        rho = spearmanr(ok[r], model[r]).statistic
        std = ok.get(f"{r}_std", pd.Series([np.nan])).median()
        lines.append(f"| {r} | {rho:.2f} | {ok[r].mean():.3f} | {np.nanmean(model[r]):.3f} | {std:.3g} |")
    lines += ["", "Trend of each knob: change over its range from a linear fit (m^2), RANS / model; "
              "'!' where the signs differ.", "",
              "| response | " + " | ".join(study.space.names) + " |", "|---|" + "---|" * len(study.space.names)]
    for r in RESPONSES:
        t_cfd = trends(study, ok, ok[r].to_numpy(float))
        t_mod = trends(study, ok, np.asarray(model[r], float))
        cells = [f"{a:+.3f} / {b:+.3f}{' !' if np.sign(a) != np.sign(b) else ''}" for a, b in zip(t_cfd, t_mod)]
        lines.append(f"| {r} | " + " | ".join(cells) + " |")
    return lines + [""]


if __name__ == "__main__":
    print("\n".join(run(quick=False)))
