"""Vehicle figures of many aero configurations at once: cost per configuration and agreement with the
step-by-step lap model, on the demo car and track (studies/demo_hatch.toml, invented)."""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from doe.study.reader import load_study
from doe.vehicle import Aero, VehicleObjective, lap_time, lap_times

DEMO = Path(__file__).resolve().parents[1] / "studies" / "demo_hatch.toml"


def _configs(n: int, seed: int = 0):
    """n configurations spread over the demo's range of CLA front, CLA rear and CDA (m^2)."""
    rng = np.random.default_rng(seed)
    return rng.uniform(-0.3, 0.5, n), rng.uniform(-0.8, 0.1, n), rng.uniform(0.6, 0.8, n)


def _best_of(f, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


def run(quick: bool) -> list[str]:
    study = load_study(DEMO)
    car, track = study.vehicle.car, study.track
    sizes = (1, 64, 1024, 4096) if quick else (1, 64, 1024, 4096, 16384)
    lines = ["## Lap time of many configurations (doe.vehicle.lap_times)", "",
             f"Demo car and track ({track.length_m:.0f} m, {len(track.segments)} segments, invented). Best of "
             "3 runs; the step model (`lap_time`, 1 m steps) is timed on one configuration.", "",
             "| configurations | time (s) | per configuration (µs) |", "|---|---|---|"]
    for n in sizes:
        cf, cr, cd = _configs(n)
        t = _best_of(lambda: lap_times(car, track, cf, cr, cd), 3)
        lines.append(f"| {n} | {t:.3f} | {1e6 * t / n:.0f} |")
    t_slow = _best_of(lambda: lap_time(car, Aero(0.3, -0.4, 0.7), track), 1)
    lines += ["", f"Step model, one configuration: {t_slow:.2f} s.", ""]
    obj = VehicleObjective(car, track)
    cf, cr, cd = _configs(1024, seed=1)
    t_normal = _best_of(lambda: obj.normal((cf, cr, cd), (0.02, 0.03, 0.01), names=["lap_time_s"]), 3)
    lines += [f"`VehicleObjective.normal` (6 configurations per point), 1024 points: {t_normal:.2f} s.", ""]
    n_check = 3 if quick else 8
    cf, cr, cd = _configs(n_check, seed=2)
    fast = lap_times(car, track, cf, cr, cd)
    slow = np.array([lap_time(car, Aero(*c), track, step_m=0.25).time_s for c in zip(cf, cr, cd)])
    lines += [f"Largest difference from the step model at 0.25 m steps over {n_check} configurations: "
              f"{np.max(np.abs(fast - slow)):.1e} s (lap about {slow.mean():.1f} s).", ""]
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick=True)))
