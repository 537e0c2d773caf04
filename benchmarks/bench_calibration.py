"""Calibration of the builtin model: recovery of a known truth and wall time against runs and coefficients."""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from doe.aero.model import COEFFICIENT_RANGES
from doe.calibration.settings import builtin_settings_for
from doe.calibration.solver import calibrate
from doe.testing.synthetic import synthetic_results
from doe.study.reader import read_study_text

ROOT = Path(__file__).resolve().parents[1]
#: The builtin model behind the invented CFD example (default panels), with cla_front as a third response.
STUDY = (ROOT / "studies" / "recorded_cfd_model.toml").read_text().replace(
    "\n[evaluator]\n", '[[responses]]\nname = "cla_front"\nunit = "m^2"\n\n[evaluator]\n')
#: The invented truth (defaults 0.12, -0.15, 0.88, 0.18) and the stated noise, m^2.
TRUTH = {"body_3d_factor": 0.16, "base_pressure": -0.20, "viscous_lift_factor": 0.82, "forebody_cd": 0.21}
NOISE = {"cla_total": 0.004, "cda_total": 0.002, "cla_front": 0.003}


def run(quick: bool) -> list[str]:
    study = read_study_text(STUDY, ROOT / "studies" / "bench.toml")
    settings, conversion = builtin_settings_for(study)
    lines = ["## Calibration of the builtin model", "",
             "Invented results of the builtin model (default panels) with the coefficients of the first column "
             "changed, at a maximin Latin hypercube, plus Gaussian noise (0.004, 0.002, 0.003 m^2 on cla_total, "
             "cda_total, cla_front). Errors are |fitted - truth|, the largest over the fitted coefficients, as a "
             "share of the coefficient's range and in Laplace standard errors; 'covered' counts truths inside "
             "their 95 % intervals; 'rms left / noise' is the RMS the fit leaves over the RMS of the noise actually "
             "drawn, worst response (about 1: the fit leaves the noise and nothing else).", "",
             "| coefficients | runs | time (s) | model evaluations | max error / range | max error / std error | "
             "covered | rms left / noise | not determined |", "|---|---|---|---|---|---|---|---|---|"]
    sets = (2, 3) if quick else (2, 3, 4)
    sizes = (12, 24) if quick else (12, 24, 48)
    for k in sets:
        truth = dict(list(TRUTH.items())[:k])
        for runs in sizes:
            data = synthetic_results(study, truth, NOISE, runs=runs, seed=3)
            clean = synthetic_results(study, truth, None, runs=runs, seed=3).frame
            t0 = time.perf_counter()
            cal = calibrate(settings, conversion, data, coefficients=list(truth), seed=0)
            dt = time.perf_counter() - t0
            err = [abs(e.value - truth[e.name]) for e in cal.estimates]
            rel = max(d / (COEFFICIENT_RANGES[e.name][1] - COEFFICIENT_RANGES[e.name][0])
                      for d, e in zip(err, cal.estimates))
            z = max(d / e.std_error for d, e in zip(err, cal.estimates))
            covered = sum(e.interval[0] <= truth[e.name] <= e.interval[1] for e in cal.estimates)
            drawn = {r: float(np.sqrt(np.mean((data.frame[r] - clean[r]) ** 2))) for r in NOISE}
            rms = max(cal.discrepancy_after[r].rms / drawn[r] for r in NOISE)
            undetermined = ", ".join(e.name for e in cal.estimates if not e.determined) or "-"
            lines.append(f"| {', '.join(truth)} | {runs} | {dt:.1f} | {cal.evaluations} | {rel:.2e} | {z:.2f} | "
                         f"{covered}/{k} | {rms:.2f} | {undetermined} |")
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick=True)))
