"""Wall and CPU time of `make demo` (after the install) and `make test`, with the machine's load when measured.

Targets (issue 19): the demo under 45 s and the test suite under 3 minutes on the 2-core machine of
this file's header. The machine is shared, so each row also gives the CPU time of the measured
processes (their own work, which load does not inflate much) and the one-minute load average at the
start (0 is an idle machine; 2 keeps both cores busy already).
"""
from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "studies" / "demo_hatch.toml"
DEMO_TARGET_S, TEST_TARGET_S = 45.0, 180.0


def _children_cpu() -> float:
    use = resource.getrusage(resource.RUSAGE_CHILDREN)
    return use.ru_utime + use.ru_stime


def measure(cmd, cwd, env=None) -> dict:
    """Run ``cmd``; its wall time (s), CPU time of it and its children (s), load average at the start, exit code."""
    load, cpu0, t0 = os.getloadavg()[0], _children_cpu(), time.perf_counter()
    done = subprocess.run(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    return {"wall": time.perf_counter() - t0, "cpu": _children_cpu() - cpu0, "load": load,
            "ok": done.returncode == 0, "tail": done.stdout.strip().splitlines()[-1:] or [""]}


def _demo() -> dict:
    """``doe run studies/demo_hatch.toml`` into a fresh folder: what `make demo` does after the install."""
    with tempfile.TemporaryDirectory() as tmp:
        out = measure([sys.executable, "-m", "doe.cli", "run", str(DEMO), "--out", str(Path(tmp) / "demo"),
                       "--no-progress"], tmp)
        out["ok"] = out["ok"] and (Path(tmp) / "demo" / "report" / "index.html").exists()
    return out


def _tests() -> dict:
    """`make test` itself (the install is already done, so it only runs pytest)."""
    return measure(["make", "-s", "test"], ROOT)


def _row(what: str, command: str, m: dict, target: float) -> str:
    verdict = "yes" if m["ok"] and m["wall"] < target else "no"
    return (f"| {what} | `{command}` | {m['wall']:.0f} | {m['cpu']:.0f} | {m['load']:.1f} | {target:.0f} | "
            f"{verdict if m['ok'] else 'FAILED: ' + m['tail'][0][:60]} |")


def run(quick: bool) -> list[str]:
    lines = ["## Time of `make demo` and `make test`", "",
             "Each command runs once, from nothing (a fresh output folder for the demo). CPU time is that of the "
             "command and its children; the load is the one-minute load average when it started (other "
             "programs on the shared machine). Quick mode times the demo only.", "",
             "| what | command | wall time (s) | CPU time (s) | load at start | target (s) | under target |",
             "|---|---|---|---|---|---|---|"]
    lines.append(_row("demo", "doe run studies/demo_hatch.toml", _demo(), DEMO_TARGET_S))
    if not quick:
        lines.append(_row("test suite", "make test", _tests(), TEST_TARGET_S))
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv)))
