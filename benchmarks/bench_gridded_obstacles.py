"""Throughput of gridded and obstacle flows against the closed-form cellular flow, side by side.

Runs the same small study (Euler–Maruyama, same particles, steps and seed) on:
the analytic cellular flow; the same flow read back from a 64² grid (bicubic, then spectral on
a 16² grid); a square obstacle lattice with flow (bicubic field + wall reflection) and without
flow (wall reflection only).  Prints particle-steps per second and the ratio to the cellular
flow measured in this run.  Each case runs once untimed first (compilation, Stokes solve).

    python benchmarks/bench_gridded_obstacles.py [particles] [steps]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import eddyhop
from eddyhop.flows import get_family
from eddyhop.flows.grid_file import grid_dataset
from eddyhop.results.io import write_netcdf
from eddyhop.study.spec import parse_study


def study(flow, particles, steps):
    return parse_study({
        "flow": flow,
        "noise": {"kappa": 0.1},
        "run": {"particles": particles, "dt": 0.01, "t_end": 0.01 * steps, "n_times": 4,
                "seed": 1, "progress": False, "workers": 1},
    })


def main(particles=4000, steps=2000):
    cellular = get_family("cellular")
    with tempfile.TemporaryDirectory() as tmp:
        fine = Path(tmp) / "cellular64.nc"
        coarse = Path(tmp) / "cellular16.nc"
        write_netcdf(grid_dataset(cellular, {"U": 1.0, "k": 1.0}, 64), fine)
        write_netcdf(grid_dataset(cellular, {"U": 1.0, "k": 1.0}, 16), coarse)
        cases = {
            "cellular (closed form)": {"family": "cellular", "U": 1.0, "k": 1.0},
            "gridded bicubic 64^2": {"family": "gridded", "file": str(fine)},
            "gridded spectral 16^2": {"family": "gridded", "file": str(coarse),
                                      "interpolation": "spectral"},
            "obstacles square, U = 1": {"family": "obstacles", "solid_fraction": 0.3,
                                        "U": 1.0, "k": 1.0},
            "obstacles square, U = 0": {"family": "obstacles", "solid_fraction": 0.3,
                                        "U": 0.0, "k": 1.0},
        }
        rates = {}
        for name, flow in cases.items():
            small = study(flow, 64, 10)
            eddyhop.simulate(small)  # compile and solve outside the timing
            full = study(flow, particles, steps)
            start = time.perf_counter()
            eddyhop.simulate(full)
            rates[name] = particles * steps / (time.perf_counter() - start)
    base = rates["cellular (closed form)"]
    print(f"{particles} particles x {steps} steps, Euler-Maruyama, one worker")
    for name, rate in rates.items():
        print(f"  {name:<26} {rate / 1e6:8.2f} M particle-steps/s   ratio {rate / base:5.2f}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
