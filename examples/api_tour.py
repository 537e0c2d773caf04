"""The Python API end to end: the same chain as `doe run`, step by step, on the demo study.

Everything comes from the public namespace ``doe`` (see ``help(doe)``).

Run from the repository root:  python examples/api_tour.py [output folder]
Every number comes from the built-in low-order model of an INVENTED car (studies/demo_hatch.toml).
"""
from __future__ import annotations

import sys
from pathlib import Path

import doe

ROOT = Path(__file__).resolve().parents[1]


def main(out: Path) -> None:
    study = doe.load_study(ROOT / "studies" / "demo_hatch.toml")
    files = doe.StudyFiles(out)

    # 1. a space-filling plan inside the class box (30 runs instead of the study's 50, to be quick)
    plan = doe.make_plan(study.space, runs=30, seed=study.plan.seed)
    print(plan.quality.summary())
    doe.write_plan(plan.frame, files.plan)

    # 2. evaluate it with the built-in model; each run is stored as it finishes (rerun: it resumes)
    evaluator = doe.make_evaluator(study, workspace=files.cases)
    print(doe.evaluate_plan(plan.frame, evaluator, files.results, study.space.names, progress=False).line(files.results))

    # 3. one Gaussian-process surrogate per response, with leave-one-out accuracy
    results = doe.read_results(files.results, study)
    surrogates = doe.fit_surrogates(study, results, seed=study.plan.seed)
    for name, rec in surrogates.fit_report().items():
        print(f"{name}: q2_loo {rec['q2_loo']:.3f}, rmse_loo {rec['rmse_loo']:.3g} {rec['unit']} -> {rec['verdict']}")

    # 4. which knobs matter for net downforce (Sobol indices with their 95 % half-widths)
    indices = doe.study_sensitivity(study, surrogates=surrogates, base_samples=1024)["cla_total"]
    for name, st, conf in zip(indices.parameters, indices.ST, indices.ST_pm95):
        print(f"  {name}: total Sobol index {st:.3f} +- {conf:.3f}")

    # 5. predictions at a setting of our own, in the study's units
    import numpy as np

    x = np.array([[25.0, 120.0, 8.0, 4.0, 50.0]])  # flap_angle, wing_height, wing_aoa, wing_camber, wing_overhang
    mean, std = surrogates.predict(x)["cla_total"]
    print(f"cla_total at {x[0].tolist()}: {mean[0]:.3f} +- {std[0]:.3f} m^2")

    # 6. robust settings, next runs and the report, reusing what is on disk
    index = doe.analyse_and_report(study, files.results, files)
    print(f"report: {index}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "reports" / "api-tour")
