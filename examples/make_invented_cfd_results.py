"""Make the INVENTED "CFD" results of studies/recorded_cfd_results.csv.

Stands in for a real CFD campaign so that the recorded-results example has data: the built-in model
with two of its empirical coefficients changed (a stronger body, a lower base pressure), plus
Gaussian noise of 0.004 m^2 on CLA and 0.002 m^2 on CDA, at a 24-run plan of the study. Nothing here
is measured. Run from the repository root:  python examples/make_invented_cfd_results.py
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from doe.runs.evaluators.builtin import BuiltinEvaluator
from doe.design.plans import make_plan
from doe.study.reader import load_study, read_study_text

ROOT = Path(__file__).resolve().parents[1]
RUNS, SEED = 24, 5

# The same knobs with the built-in model behind them, coefficients changed (the "truth" of the invention).
MODEL_STUDY = """
[study]
name = "invented-cfd-source"
[[parameters]]
name = "flap_angle"
unit = "deg"
low = 10.0
high = 40.0
[[parameters]]
name = "wing_aoa"
unit = "deg"
low = 0.0
high = 16.0
[[parameters]]
name = "wing_height"
unit = "mm"
low = 60.0
high = 200.0
[[responses]]
name = "cla_total"
unit = "m^2"
[[responses]]
name = "cda_total"
unit = "m^2"
[evaluator]
kind = "builtin"
chord = 0.24
span = 1.30
endplate_height = 0.15
speed = 44.0
flap_chord = 60.0
[evaluator.coefficients]
body_3d_factor = 0.15
base_pressure = -0.18
"""


def main() -> None:
    study = load_study(ROOT / "studies" / "recorded_cfd.toml")
    source = read_study_text(MODEL_STUDY, ROOT / "studies" / "invented.toml")
    plan = make_plan(study.space, RUNS, SEED).frame
    model = BuiltinEvaluator.from_study(source)
    outcomes = model.evaluate_many(list(plan["run_id"]), plan[study.space.names].to_dict("records"))
    rng = np.random.default_rng(SEED)
    frame = plan.copy()
    frame["cla_total"] = [o.values["cla_total"] + rng.normal(0, 0.004) for o in outcomes]
    frame["cda_total"] = [o.values["cda_total"] + rng.normal(0, 0.002) for o in outcomes]
    frame["status"] = ["ok" if o.status == "ok" else "failed" for o in outcomes]
    frame["source"] = "cfd"
    frame["mesh"] = "invented"
    out = ROOT / "studies" / "recorded_cfd_results.csv"
    frame.to_csv(out, index=False, float_format="%.6g")
    print(f"wrote {out} ({len(frame)} invented runs)")


if __name__ == "__main__":
    main()
