"""The ``doe`` command. Thin: it parses options and calls the modules that do the work.

Bad input ends with one line on standard error and exit code 2; ``--debug``
shows the full traceback instead.
"""
from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path

from .errors import CalibrationError, DoeError, SensitivityError
from .study.reader import load_study

__all__ = ["main", "build_parser"]

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line, exit code 2."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def _say(text: str) -> None:
    print(text, file=sys.stderr)


# ---------------------------------------------------------------------------
def _add_plan(sub):
    p = sub.add_parser("plan", help="make a space-filling plan of runs",
                       description="Make a space-filling plan: an optimised Latin hypercube (default) or scrambled "
                                   "Sobol' points, inside the study's constraints. Writes the plan CSV and, beside "
                                   "it, <name>.quality.json with its space-filling figures.")
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--runs", type=int, help="number of runs (default: the study's [plan] runs, else 10 per parameter)")
    p.add_argument("--seed", type=int, help="random seed (default: the study's [plan] seed); same seed, same plan")
    p.add_argument("--method", choices=("lhs", "sobol"), help="lhs: optimised Latin hypercube; sobol: scrambled Sobol' points")
    p.add_argument("--add-to", type=Path, metavar="PLAN_CSV",
                   help="keep the runs of this plan and add --runs more that keep the whole set space-filling")
    p.add_argument("--out", type=Path, help="plan CSV to write (default: reports/<study name>/plan.csv)")
    p.set_defaults(func=_cmd_plan)


def _cmd_plan(args):
    from .workflow.steps import plan_step

    study = load_study(args.study)
    out = args.out or study.default_output / "plan.csv"
    plan = plan_step(study, out, runs=args.runs, seed=args.seed, method=args.method, add_to=args.add_to)
    for note in plan.quality.notes:
        _say(f"note: {note}")
    _say(f"plan: {plan.quality.summary()}")
    print(f"wrote {out}")


def _add_evaluate(sub):
    p = sub.add_parser("evaluate", help="evaluate a plan's runs (resumes where it stopped)",
                       description="Evaluate every run of a plan with the study's evaluator. Each finished run is "
                                   "written to the results CSV at once; running the same command again resumes "
                                   "and never recomputes a stored run.")
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--plan", type=Path, required=True, help="plan CSV (run_id and one column per parameter)")
    p.add_argument("--out", type=Path, help="results CSV (default: reports/<study name>/results.csv)")
    p.add_argument("--jobs", type=int, default=1, help="runs at once on local processes (default 1)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run on a Dask cluster: its scheduler address (tcp://host:8786), or 'local' for a "
                        "cluster of --jobs local processes (needs pip install 'doe[cluster]')")
    p.add_argument("--retry-failed", action="store_true", help="run again the runs stored as failed")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--cheap", action="store_true",
                   help="run the study's [low_fidelity] cheap model instead (e.g. on next.cheap.csv; default out: "
                        "reports/<study name>/cheap_results.csv)")
    p.set_defaults(func=_cmd_evaluate)


def _cmd_evaluate(args):
    from .runs.results import read_plan
    from .workflow.steps import evaluate_step

    study = load_study(args.study)
    plan = read_plan(args.plan, study)
    out = args.out or study.default_output / ("cheap_results.csv" if args.cheap else "results.csv")
    summary = evaluate_step(study, plan, out, jobs=args.jobs, scheduler=args.scheduler, retry_failed=args.retry_failed,
                            progress=not args.no_progress, cheap=args.cheap)
    _say(summary.line(out))
    if summary.failed:
        _say(f"note: {summary.failed} run(s) failed; their reasons are in the 'message' column; "
             "rerun them with --retry-failed")
    print(f"wrote {out}")


def _add_fidelity_options(p):
    """--fidelity and --cheap-results: how the surrogates lean on the study's cheap model."""
    p.add_argument("--fidelity", choices=("auto", "single", "two"),
                   help="two: lean on the study's [low_fidelity] cheap model (two-fidelity surrogates); single: "
                        "the results alone (default: [fit] fidelity, auto = two when [low_fidelity] exists)")
    p.add_argument("--cheap-results", type=Path, metavar="CSV",
                   help="results file of the cheap model's runs (made or resumed; default: "
                        "<results>.low.csv in the folder that holds --out, else in reports/<study name>/)")


def _add_results_options(p, results_required: bool = True):
    """Options shared by the verbs that fit surrogates to a results CSV."""
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--results", type=Path, required=results_required, help="results CSV")
    p.add_argument("--seed", type=int, help="seed (default: the study's [plan] seed)")
    p.add_argument("--accept-outside", action="store_true", help="keep result rows outside the bounds")
    _add_fidelity_options(p)


def _study_results(args):
    """The study, its results and the seed, for the verbs that start from a results CSV."""
    from .runs.results import read_results

    study = load_study(args.study)
    results = read_results(args.results, study, accept_outside=args.accept_outside)
    return study, results, args.seed if args.seed is not None else study.plan.seed


def _cheap_path(args):
    """``--cheap-results``, else beside the verb's ``--out`` when given (None: the study's output folder)."""
    from .workflow.cheap import default_cheap_path

    if args.cheap_results is not None or getattr(args, "out", None) is None:
        return args.cheap_results
    return default_cheap_path(args.results, Path(args.out).parent)


def _surrogates(args, study, results, seed):
    """Surrogates loaded from ``--surrogate`` when given, else fitted to the results."""
    from .workflow.cheap import study_surrogates
    from .surrogate.set import load_surrogates

    if getattr(args, "surrogate", None):
        return load_surrogates(args.surrogate, study)
    return study_surrogates(study, results, seed=seed, fidelity=args.fidelity, cheap_path=_cheap_path(args),
                            say=_say)


def _add_fit(sub):
    p = sub.add_parser("fit", help="fit a Gaussian-process surrogate per response, with leave-one-out checks",
                       description="Fit one Gaussian-process surrogate per response to the ok runs of a results CSV. "
                                   "Writes the surrogate folder (model.json, data.npz: no code, no pickle) and "
                                   "fit.json with q2_loo, rmse_loo and a verdict per response.")
    _add_results_options(p)
    p.add_argument("--out", type=Path, help="surrogate folder (default: reports/<study name>/surrogate/)")
    p.add_argument("--predict", type=Path, metavar="POINTS_CSV",
                   help="also predict at these points (parameter columns, run_id optional)")
    p.add_argument("--predict-out", type=Path, metavar="CSV",
                   help="predictions CSV (default: <surrogate folder>/predictions.csv)")
    p.set_defaults(func=_cmd_fit)


def _cmd_fit(args):
    from .runs.results import read_points, write_plan
    from .surrogate.set import prediction_frame
    from .workflow.steps import fit_lines, fit_step

    study, results, seed = _study_results(args)
    out = args.out or study.default_output / "surrogate"
    sset = fit_step(study, results, out, seed=seed, fidelity=args.fidelity, cheap_path=_cheap_path(args), say=_say)
    for line in fit_lines(sset.fit_report()):
        _say(line)
    print(f"wrote {out}/fit.json")
    if args.predict is not None:
        target = args.predict_out or out / "predictions.csv"
        write_plan(prediction_frame(sset, read_points(args.predict, study)), target)
        print(f"wrote {target}")


def _add_next(sub):
    p = sub.add_parser("next", help="propose the next runs from the surrogates",
                       description="Fit the surrogates and propose K new runs inside the bounds and constraints. "
                                   "aim 'map': integrated variance reduction averaged over plausible kernel "
                                   "settings (or --criterion ivr, variance, eigf); aim "
                                   "'optimum': expected improvement of a response with a goal. Writes a plan CSV "
                                   "and, beside it, <name>.why.json saying why each run was picked.")
    _add_results_options(p)
    p.add_argument("--runs", type=int, required=True, help="number of runs to propose")
    p.add_argument("--aim", choices=("map", "optimum"), default="map", help="map the space, or seek an optimum")
    p.add_argument("--criterion", choices=("ivr_posterior", "ivr", "variance", "eigf", "ei"),
                   help="criterion (default: ivr_posterior for map, ei for optimum)")
    p.add_argument("--surrogate", type=Path, metavar="FOLDER",
                   help="use the surrogates saved by 'doe fit' in FOLDER instead of fitting again")
    p.add_argument("--response", help="response to optimise with --aim optimum (default: the first with a goal)")
    p.add_argument("--pending", type=Path, metavar="PLAN_CSV", help="runs planned but not evaluated yet")
    p.add_argument("--out", type=Path, help="plan CSV (default: reports/<study name>/next.csv)")
    p.set_defaults(func=_cmd_next)


def _cmd_next(args):
    from .runs.results import read_plan
    from .workflow.steps import next_step

    study, results, seed = _study_results(args)
    pending = read_plan(args.pending, study) if args.pending is not None else None
    sset = _surrogates(args, study, results, seed)
    out = args.out or study.default_output / "next.csv"
    made = next_step(study, sset, results, args.runs, out, seed=seed, aim=args.aim, criterion=args.criterion,
                     response=args.response, pending=pending)
    if made.cheap_path is not None:
        _say(f"note: {made.savings['statement']}")
        _say(f"note: {made.savings['cheap_fit']}")
        print(f"wrote {made.cheap_path} (the cheap runs at the proposed points: a nested plan)")
    for note in made.proposal.notes:
        _say(f"note: {note}")
    for pick in made.proposal.picks:
        _say(f"{pick.run_id}: {pick.reason}")
    print(f"wrote {out}")


def _add_sensitivity(sub):
    p = sub.add_parser("sensitivity", help="which knobs matter: Sobol indices with 95 %% intervals",
                       description="First-order and total Sobol indices per response and parameter, on surrogates "
                                   "fitted to the results (intervals from the estimator and the surrogate), or "
                                   "straight from a cheap evaluator with --direct. --screen runs Morris screening "
                                   "with the evaluator instead. Writes the sensitivity (or screening) JSON and "
                                   "prints a ranked statement per response.")
    _add_results_options(p, results_required=False)
    p.add_argument("--surrogate", type=Path, metavar="FOLDER", help="use surrogates saved by 'doe fit' instead of fitting")
    p.add_argument("--direct", action="store_true", help="call the study's evaluator (cheap ones only), no surrogate")
    p.add_argument("--around", nargs="+", metavar="SETTING",
                   help="scatter (tolerances) around 'nominal' or a setting NAME=VALUE ... instead of the bounds")
    p.add_argument("--second-order", action="store_true", help="also estimate second-order indices")
    p.add_argument("--base-samples", type=int, metavar="N", help="Saltelli base sample, a power of two (default: chosen)")
    p.add_argument("--max-evaluations", type=int, metavar="K",
                   help="--direct: at most K evaluator calls while the base sample grows (default 20000)")
    p.add_argument("--screen", action="store_true", help="Morris screening with the evaluator (many parameters)")
    p.add_argument("--trajectories", type=int, default=20, help="Morris trajectories with --screen (default 20)")
    p.add_argument("--out", type=Path, help="JSON to write (default: reports/<study name>/sensitivity.json "
                                            "or screening.json)")
    p.set_defaults(func=_cmd_sensitivity)


def _cmd_sensitivity(args):
    from .files import write_json
    from .runs.results import read_results
    from .workflow.sensitivity import study_screening
    from .workflow.steps import sensitivity_step

    study = load_study(args.study)
    if args.screen:
        screening = study_screening(study, trajectories=args.trajectories, seed=args.seed)
        out = args.out or study.default_output / "screening.json"
        write_json(screening.to_dict(), out)
        print(f"inert for every response: {', '.join(screening.inert) or 'none'}")
        print(f"wrote {out}")
        return
    results = read_results(args.results, study, accept_outside=args.accept_outside) if args.results else None
    surrogates = None
    if args.surrogate is not None or (results is not None and not args.direct):
        surrogates = _surrogates(args, study, results, args.seed if args.seed is not None else study.plan.seed)
    out = args.out or study.default_output / "sensitivity.json"
    data = sensitivity_step(study, out, results=results, direct=args.direct, around=parse_around(args.around, study),
                            second_order=args.second_order or None, base_samples=args.base_samples, seed=args.seed,
                            surrogates=surrogates, max_evaluations=args.max_evaluations)
    for name, info in data["_meta"]["responses"].items():
        print(f"{name}: {info['statement']}")
    print(f"wrote {out}")


def _add_robust(sub):
    p = sub.add_parser("robust", help="settings that stay good under setup scatter; downforce-drag trade-off",
                       description="Fit the surrogates to the results, then find the nominal optimum of the study's "
                                   "[robust] objective and the robust optimum under setup scatter (each parameter's "
                                   "tolerance as one standard deviation), with limit probabilities, a fragility map "
                                   "and, with [vehicle], what each point is worth on track. Writes the robust JSON "
                                   "and a trade-off CSV of the non-dominated settings.")
    _add_results_options(p)
    p.add_argument("--out", type=Path, help="robust JSON (default: reports/<study name>/robust.json)")
    p.add_argument("--tradeoff-out", type=Path, metavar="CSV",
                   help="trade-off CSV (default: tradeoff.csv beside the robust JSON)")
    p.set_defaults(func=_cmd_robust)


def _cmd_robust(args):
    from .workflow.steps import robust_step

    study, results, seed = _study_results(args)
    sset = _surrogates(args, study, results, seed)
    out = args.out or study.default_output / "robust.json"
    target = args.tradeoff_out or out.with_name("tradeoff.csv")
    result, table = robust_step(study, sset, results, out, target)
    for label, point in (("nominal", result.nominal), ("robust", result.robust)):
        _say(point.summary(label, result.objective, result.unit))
    print(f"wrote {out}")
    if table is not None:
        _say(f"trade-off: {len(table)} non-dominated settings of {', '.join(study.robust.tradeoff)}")
        print(f"wrote {target}")


def _add_calibrate(sub):
    p = sub.add_parser("calibrate", help="fit the builtin model's empirical coefficients to recorded results",
                       description="Fit the builtin model's empirical coefficients (doe.aero.Coefficients) to the ok "
                                   "runs of a results CSV by bounded least squares, with Laplace (linearised) 95 % "
                                   "intervals, correlations, a plain statement of what the data do not determine, "
                                   "and the discrepancy per response before and after. The model's settings come "
                                   "from the study's [evaluator] when it is builtin, else its [low_fidelity] table, "
                                   "else --model-study. Writes the calibration JSON; a builtin study uses it with "
                                   "[evaluator] calibration = \"calibration.json\".")
    _add_results_options(p)
    p.add_argument("--coefficients", metavar="A,B", help="coefficients to fit (default: every one the responses "
                                                         "are sensitive to)")
    p.add_argument("--responses", metavar="A,B", help="responses to match (default: the study's)")
    p.add_argument("--noise", metavar="R=STD,...", help="stated noise (one standard deviation, the response's unit) "
                                                       "per response; default: estimated from the residuals")
    p.add_argument("--model-study", type=Path, metavar="OTHER_TOML", help="a builtin study giving the model's settings")
    p.add_argument("--starts", type=int, default=1, help="optimiser starts: current values, then seeded random (default 1)")
    p.add_argument("--no-progress", action="store_true", help="no progress lines")
    p.add_argument("--out", type=Path, help="calibration JSON (default: reports/<study name>/calibration.json)")
    p.set_defaults(func=_cmd_calibrate)


def _cmd_calibrate(args):
    from .workflow.calibration import calibrate_study

    study, results, seed = _study_results(args)
    model = load_study(args.model_study) if args.model_study is not None else None
    calibration = calibrate_study(study, results, model, coefficients=parse_names(args.coefficients, "--coefficients"),
                                  responses=parse_names(args.responses, "--responses"), noise=parse_noise(args.noise),
                                  starts=args.starts, seed=seed, progress=None if args.no_progress else _say)
    out = calibration.save(args.out or study.default_output / "calibration.json")
    for line in calibration.table():
        print(line)
    for note in calibration.notes:
        _say(f"note: {note}")
    print(f"wrote {out}")


# option values of `doe sensitivity`
def parse_around(tokens, study):
    """``--around`` words as :func:`doe.workflow.sensitivity.study_inputs` takes them: None, ``"nominal"`` or ``{name: value}``.

    Parameters
    ----------
    tokens : list of str or None
        ``["nominal"]`` or ``["flap_angle=12", "wing_aoa=8"]`` (study units).
    study : Study
    """
    if not tokens:
        return None
    if tokens == ["nominal"]:
        return "nominal"
    point = {}
    for token in tokens:
        name, sep, value = token.partition("=")
        if not sep or name not in study.space.names:
            raise SensitivityError(f"--around: {token!r} is not NAME=VALUE with a parameter name "
                                   f"({', '.join(study.space.names)}), nor 'nominal'")
        try:
            point[name] = float(value)
        except ValueError:
            raise SensitivityError(f"--around: {value!r} in {token!r} is not a number") from None
    return point


# option values of `doe calibrate`
def parse_names(text: str | None, option: str) -> list | None:
    """``"a,b"`` -> ``["a", "b"]`` (None stays None); an empty item is an error naming ``option``."""
    if text is None:
        return None
    names = [s.strip() for s in text.split(",")]
    if not all(names):
        raise CalibrationError(f"{option} {text!r}: give names separated by commas, e.g. body_3d_factor,base_pressure")
    return names


def parse_noise(text: str | None) -> dict | None:
    """``"cla_total=0.004,cda_total=0.002"`` -> ``{"cla_total": 0.004, ...}`` (one standard deviation, its unit)."""
    if text is None:
        return None
    out = {}
    for item in text.split(","):
        name, sep, value = item.partition("=")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep or not name.strip():
            raise CalibrationError(f"--noise {item.strip()!r}: write RESPONSE=STD, e.g. cla_total=0.004")
    return out


def _add_section(sub):
    p = sub.add_parser("section", help="lift, moment and pressures of one aerofoil section",
                       description="Potential-flow lift, quarter-chord moment and pressure distribution of an "
                                   "isolated section (a NACA 4-digit section or a coordinate file), in free air "
                                   "or near the ground. Inviscid: real sections have about 10-15 % less lift "
                                   "slope, and stall.")
    what = p.add_mutually_exclusive_group(required=True)
    what.add_argument("--naca", metavar="XXXX", help="NACA 4-digit designation, e.g. 4412")
    what.add_argument("--coords", type=Path, metavar="FILE",
                      help="text file of x y pairs, trailing edge round the leading edge and back")
    p.add_argument("--alpha", type=float, required=True, help="angle of attack, degrees")
    p.add_argument("--ground-height", type=float, help="quarter-chord height above the ground, chords")
    p.add_argument("--inverted", action="store_true", help="turn the section upside down (downforce)")
    p.add_argument("--panels", type=int, default=None, help="panels on the section (default 70)")
    p.add_argument("--open-te", action="store_true", help="NACA: the published finite trailing edge")
    p.add_argument("--json", action="store_true", help="print JSON (with the pressure distribution)")
    p.set_defaults(func=_cmd_section)


def _cmd_section(args):
    from .aero.section_analysis import analyse_section
    from .aero.sections import DEFAULT_SECTION_PANELS, naca4, parse_naca, read_coords

    panels = args.panels or DEFAULT_SECTION_PANELS
    if args.naca is not None:
        section = naca4(*parse_naca(args.naca), n_panels=panels, closed_te=not args.open_te)
    else:
        section = read_coords(args.coords, n_panels=panels)
    result = analyse_section(section, args.alpha, args.ground_height, args.inverted)
    if args.json:
        print(json.dumps(result.to_dict(), indent=2, allow_nan=False))
        return
    where = "free air" if args.ground_height is None else f"{args.ground_height:g} chords above the ground"
    print(f"{result.name}{' (inverted)' if args.inverted else ''} at {args.alpha:g} deg, {where}, "
          f"{section.n_panels} panels (inviscid)")
    print(f"  cl         {result.cl:+.4f}")
    print(f"  cm c/4     {result.cm_quarter:+.4f}")
    print(f"  dCp        {result.dcp:.2f}  (Valarezo-Chin stall near 10-14)")


def _add_report(sub):
    p = sub.add_parser("report", help="fit, analyse and write the study report from results",
                       description="From a results CSV: fit the surrogates, Sobol sensitivity, robust settings, "
                                   "trade-off and next runs (each reused when its file is newer than the results), "
                                   "then the report folder: index.html, PNG figures and the files it was built from.")
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--results", type=Path, required=True, help="results CSV")
    p.add_argument("--out", type=Path, help="study output folder (default: reports/<study name>); "
                                            "the report goes to its report/ subfolder")
    p.add_argument("--next-runs", type=int, default=None, help="runs to propose for the next round (default 4; 0: none)")
    p.add_argument("--accept-outside", action="store_true", help="keep result rows outside the bounds")
    _add_fidelity_options(p)
    p.set_defaults(func=_cmd_report)


def _cmd_report(args):
    from .workflow.pipeline import NEXT_RUNS_DEFAULT, StudyFiles, analyse_and_report

    study = load_study(args.study)
    files = StudyFiles(args.out or study.default_output)
    k = NEXT_RUNS_DEFAULT if args.next_runs is None else args.next_runs
    index = analyse_and_report(study, args.results, files, next_runs=k, accept_outside=args.accept_outside,
                               fidelity=args.fidelity, cheap_path=args.cheap_results)
    print(f"wrote {index}")


def _add_run(sub):
    p = sub.add_parser("run", help="the whole study: plan, evaluate, fit, sensitivity, robust, report",
                       description="Run a whole study into reports/<study name>/: plan, evaluate (resumable), fit "
                                   "the surrogates, Sobol sensitivity, robust settings and trade-off, next runs, "
                                   "report. Steps already done are reused; run it again after an interruption.")
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--out", type=Path, help="output folder (default: reports/<study name>)")
    p.add_argument("--jobs", type=int, default=1, help="evaluations at once on local processes (default 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="evaluate on a Dask cluster (see doe evaluate --help)")
    p.add_argument("--next-runs", type=int, default=None, help="runs to propose for the next round (default 4; 0: none)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_run)


def _cmd_run(args):
    from .workflow.pipeline import NEXT_RUNS_DEFAULT, run_study

    study = load_study(args.study)
    k = NEXT_RUNS_DEFAULT if args.next_runs is None else args.next_runs
    index = run_study(study, args.out, jobs=args.jobs, scheduler=args.scheduler, progress=not args.no_progress,
                      next_runs=k)
    print(f"wrote {index}")
    print(f"open it in a browser: file://{index.resolve()}")


#: Every verb: (name, function adding its parser). Extend here.
VERBS = [
    ("plan", _add_plan),
    ("evaluate", _add_evaluate),
    ("fit", _add_fit),
    ("next", _add_next),
    ("sensitivity", _add_sensitivity),
    ("robust", _add_robust),
    ("calibrate", _add_calibrate),
    ("section", _add_section),
    ("report", _add_report),
    ("run", _add_run),
]


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="doe", description="Plan and analyse aerodynamic experiments: space-filling plans, "
                                             "evaluations, Gaussian-process surrogates, Sobol sensitivity, "
                                             "robust settings and reports.")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", parser_class=_Parser)
    sub.required = True
    for _, add in VERBS:
        add(sub)
    return parser


def _warning_line(message, category, filename, lineno, file=None, line=None):
    _say(f"doe: warning: {message}")


def main(argv=None) -> int:
    """Entry point of the ``doe`` command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    warnings.showwarning = _warning_line
    from .runs.execution import Interrupted

    try:
        args.func(args)
    except Interrupted as exc:
        _say(f"doe: {exc}")
        return EXIT_INTERRUPTED
    except DoeError as exc:
        if args.debug:
            raise
        _say(f"doe: error: {exc}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        _say("doe: stopped by the user")
        return EXIT_INTERRUPTED
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
