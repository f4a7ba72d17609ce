"""Shared helpers of the benchmarks: studies, timing and Markdown tables (no package logic)."""

from __future__ import annotations

import os
import time

from eddyhop.study.spec import parse_study


def cellular_study(particles, steps, dt=0.01, peclet=10.0, integrator="euler_maruyama",
                   n_times=10, seed=20260101, **run):
    """Cellular flow U = k = 1 at Pe = U/(κk) = ``peclet``, uniform starts, ``steps`` steps
    (noise-free, κ = 0, for the deterministic ``rk4``)."""
    noise = {"kappa": 0.0} if integrator == "rk4" else {"peclet": peclet}
    document = {
        "title": "benchmark",
        "flow": {"family": "cellular", "U": 1.0, "k": 1.0},
        "noise": noise,
        "run": {"particles": particles, "dt": dt, "t_end": steps * dt, "n_times": n_times,
                "spacing": "linear", "integrator": integrator, "seed": seed,
                "progress": False, **run},
    }
    return parse_study(document)


def best_times(functions: dict, repeats: int) -> dict:
    """Best (wall-clock, process CPU) times of each callable, the callables interleaved
    round-robin so that a change in machine load affects all of them alike.

    Process CPU time sums all threads of this process; for single-threaded work it does not
    count time lost to other programs, which makes it the robust measure on a shared machine.
    """
    best = {name: [float("inf"), float("inf")] for name in functions}
    for _ in range(repeats):
        for name, function in functions.items():
            wall = time.perf_counter()
            cpu = time.process_time()
            function()
            best[name][1] = min(best[name][1], time.process_time() - cpu)
            best[name][0] = min(best[name][0], time.perf_counter() - wall)
    return {name: tuple(value) for name, value in best.items()}


def machine_note() -> str:
    """CPU count and load average, to judge wall-clock figures on a shared machine."""
    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    return (f"{os.cpu_count()} CPUs; load average {load[0]:.2f} (1 min) at the end of the "
            "measurement")


def markdown_table(header, rows) -> str:
    """A Markdown table; floats are printed with 3 significant digits."""
    def cell(value):
        if isinstance(value, float):
            return f"{value:.3g}"
        return str(value)

    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(cell(v) for v in row) + " |" for row in rows]
    return "\n".join(lines)
