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

from .errors import DoeError

__all__ = ["main", "build_parser"]

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line, exit code 2."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def _say(text: str) -> None:
    print(text, file=sys.stderr)


def _write_json(data, path: Path) -> None:
    import os

    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n")
    os.replace(tmp, path)


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
    from .plans import augment_plan, make_plan
    from .results import read_plan, write_plan
    from .study import load_study

    study = load_study(args.study)
    seed = args.seed if args.seed is not None else study.plan.seed
    out = args.out or study.default_output / "plan.csv"
    if args.add_to is not None:
        if args.runs is None:
            raise DoeError("--add-to needs --runs (how many runs to add)")
        plan = augment_plan(study.space, read_plan(args.add_to, study), args.runs, seed)
    else:
        runs = args.runs if args.runs is not None else study.plan.runs
        plan = make_plan(study.space, runs, seed, args.method or study.plan.method)
    write_plan(plan.frame, out)
    _write_json(plan.record(), out.with_suffix(".quality.json"))
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
    p.add_argument("--retry-failed", action="store_true", help="run again the runs stored as failed")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_evaluate)


def _cmd_evaluate(args):
    from .evaluators import make_evaluator
    from .execution import evaluate_plan
    from .results import read_plan
    from .study import load_study

    study = load_study(args.study)
    plan = read_plan(args.plan, study)
    out = args.out or study.default_output / "results.csv"
    evaluator = make_evaluator(study, workspace=out.parent / "cases")
    summary = evaluate_plan(plan, evaluator, out, study.space.names, jobs=args.jobs,
                            retry_failed=args.retry_failed, progress=not args.no_progress)
    _say(summary.line(out))
    if summary.failed:
        _say(f"note: {summary.failed} run(s) failed; their reasons are in the 'message' column; "
             "rerun them with --retry-failed")
    print(f"wrote {out}")


def _add_robust(sub):
    p = sub.add_parser("robust", help="settings that stay good under setup scatter; downforce-drag trade-off",
                       description="Fit the surrogates to the results, then find the nominal optimum of the study's "
                                   "[robust] objective and the robust optimum under setup scatter (each parameter's "
                                   "tolerance as one standard deviation), with limit probabilities, a fragility map "
                                   "and, with [vehicle], what each point is worth on track. Writes the robust JSON "
                                   "and a trade-off CSV of the non-dominated settings.")
    p.add_argument("study", type=Path, help="study file (TOML)")
    p.add_argument("--results", type=Path, required=True, help="results CSV")
    p.add_argument("--out", type=Path, help="robust JSON (default: reports/<study name>/robust.json)")
    p.add_argument("--tradeoff-out", type=Path, metavar="CSV",
                   help="trade-off CSV (default: tradeoff.csv beside the robust JSON)")
    p.add_argument("--seed", type=int, help="seed of the surrogate fit (default: the study's [plan] seed)")
    p.add_argument("--accept-outside", action="store_true", help="keep result rows outside the bounds")
    p.set_defaults(func=_cmd_robust)


def _cmd_robust(args):
    from .results import read_results
    from .robust import only_responses, study_responses, study_robust, study_tradeoff, write_tradeoff
    from .study import load_study
    from .surrogate import fit_surrogates

    study = load_study(args.study)
    results = read_results(args.results, study, accept_outside=args.accept_outside)
    sset = fit_surrogates(study, results, seed=args.seed if args.seed is not None else study.plan.seed)
    sset = only_responses(sset, study_responses(study))
    result = study_robust(study, sset.predict, runs_X=results.X())
    out = args.out or study.default_output / "robust.json"
    _write_json(result.to_dict(), out)
    for label, point in (("nominal", result.nominal), ("robust", result.robust)):
        _say(point.summary(label, result.objective, result.unit))
    print(f"wrote {out}")
    if len(study.robust.tradeoff) >= 2:
        target = args.tradeoff_out or out.with_name("tradeoff.csv")
        table = study_tradeoff(study, sset.predict)
        write_tradeoff(table, target)
        _say(f"trade-off: {len(table)} non-dominated settings of {', '.join(study.robust.tradeoff)}")
        print(f"wrote {target}")


#: Every verb: (name, function adding its parser). Extend here.
VERBS = [
    ("plan", _add_plan),
    ("evaluate", _add_evaluate),
    ("robust", _add_robust),
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
    from .execution import Interrupted

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
