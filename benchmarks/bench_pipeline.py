"""Evaluations at scale: throughput per worker count and peak memory (the demo's time is in bench_timing.py).

Each measurement runs ``doe`` as a separate process, so its peak memory (maximum
resident set size of that process and its workers) is measured on its own.
"""
from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "studies" / "demo_hatch.toml"
SEED = 11


#: Runs a command and prints the peak resident set (KiB) of its process tree: a fresh parent per
#: measurement, so one measurement's peak never leaks into the next.
_MEASURE = ("import resource, subprocess, sys; "
            "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL); "
            "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")


def _doe(args, cwd) -> tuple[float, float]:
    """Run ``doe ARGS`` in a child process: (wall time s, peak RSS of its largest process MiB)."""
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", _MEASURE, sys.executable, "-m", "doe.cli", *args], cwd=cwd,
                         check=True, capture_output=True, text=True).stdout
    wall = time.perf_counter() - t0
    return wall, int(out.split()[-1]) / 1024.0


def _streaming(quick: bool) -> list[str]:
    sizes = [(500, 1), (500, 2)] if quick else [(2000, 1), (2000, 2), (10000, 2)]
    lines = ["### Big plans through the results store (built-in model, demo study)", "",
             f"A plan of N runs (`doe plan --runs N --method sobol --seed {SEED}`) evaluated by `doe evaluate "
             "--jobs J` into a fresh results file. Peak memory is the largest resident set of any one process "
             "of the run (ru_maxrss of the children).", "",
             "| runs | workers | wall time (s) | runs per second | peak memory (MiB) |", "|---|---|---|---|---|"]
    for n, jobs in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            plan = Path(tmp) / "plan.csv"
            subprocess.run([sys.executable, "-m", "doe.cli", "plan", str(DEMO), "--runs", str(n), "--method", "sobol",
                            "--seed", str(SEED), "--out", str(plan)], check=True, stdout=subprocess.DEVNULL,
                           stderr=subprocess.DEVNULL)
            wall, peak = _doe(["evaluate", str(DEMO), "--plan", str(plan), "--out", str(Path(tmp) / "r.csv"),
                               "--jobs", str(jobs), "--no-progress"], tmp)
            rows = sum(1 for _ in open(Path(tmp) / "r.csv")) - 1
        lines.append(f"| {rows} | {jobs} | {wall:.1f} | {rows / wall:.0f} | {peak:.0f} |")
    return lines


def run(quick: bool) -> list[str]:
    lines = ["## Evaluations at scale and the demo pipeline", ""]
    lines += _streaming(quick)
    lines += ["", "The demo end to end (`make demo` minus the install) is timed in the timing section."]
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv)))
