"""Noise-free runs of a steady flow: ψ drift of ``projected_rk45`` against RK4 at equal cost,
and the wall time of 10⁶ period-cell crossings on two cores.

Run:  python benchmarks/bench_streamline.py [--quick]

Flow: cellular with a mean drift at the golden-mean angle, U = k = 1, V = 0.3 (1, g),
g = (√5 − 1)/2: closed eddies, stagnation points and open streamlines that never close on the
torus.  Uniform starts.  A *crossing* is one period 2π/k of net displacement along x or y,
counted per particle as (|Δx| + |Δy|)/(2π/k) at the end of the run.

Part 1 (equal cost): the projected scheme at its default tolerance (1e-8 eddy sides per
advective time) over a horizon T; RK4 at dt = 0.1 over the same T, then RK4 at the dt that
costs what the projected run cost (CPU time ∝ 1/dt, calibrated from the dt = 0.1 run and
checked by timing it).  Reported: max and median over particles and samples of
|ψ(X(t)) − ψ(X(0))| / (ε U (|X| + ℓ)), the drift in units of ψ's round-off at that position.

Part 2 (throughput): the projected scheme on two workers until the ensemble has made at least
10⁶ crossings; wall time, CPU time and crossings per second.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from common import machine_note, markdown_table

import eddyhop
from eddyhop.flows.compiled import evaluate_psi
from eddyhop.study.spec import parse_study

GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0
PERIOD = 2.0 * math.pi


def study(integrator, dt, t_end, particles, workers=1, tracked=True):
    run = {"particles": particles, "dt": dt, "t_end": t_end, "n_times": 4, "spacing": "linear",
           "integrator": integrator, "seed": 20261204, "workers": workers, "chunk": 256,
           "progress": False}
    if tracked:
        run.update(tracked=particles, track_samples=20)
    return parse_study({
        "flow": {"family": "drifting_cellular", "U": 1.0, "k": 1.0, "drift_x": 0.3,
                 "drift_y": 0.3 * GOLDEN},
        "noise": {"kappa": 0.0},
        "run": run,
    })


def timed(spec):
    wall, cpu = time.perf_counter(), time.process_time()
    ds = eddyhop.simulate(spec, progress=False)
    return ds, time.perf_counter() - wall, time.process_time() - cpu


def psi_drift(spec, ds):
    x = ds.track_x.values.reshape(-1, ds.track_x.shape[-1])
    y = ds.track_y.values.reshape(-1, ds.track_y.shape[-1])
    x0 = ds.track_x0.values.ravel()[:, None]
    y0 = ds.track_y0.values.ravel()[:, None]
    model, values = spec.flow.model, spec.flow.params
    drift = np.abs(evaluate_psi(model, values, x, y) - evaluate_psi(model, values, x0, y0))
    roundoff = np.finfo(float).eps * 1.3 * (np.abs(x) + np.abs(y) + math.pi)
    crossings = (np.abs(x[:, -1] - x0[:, 0]) + np.abs(y[:, -1] - y0[:, 0])) / PERIOD
    return drift / roundoff, crossings


def main(quick: bool) -> None:
    particles = 128 if quick else 1000
    horizon = 2000.0 if quick else 20000.0
    eddyhop.simulate(study("projected_rk45", 1.0, 2.0, 8), progress=False)  # compile
    eddyhop.simulate(study("rk4", 0.1, 2.0, 8), progress=False)
    rows = []
    spec = study("projected_rk45", 1.0, horizon, particles)
    ds, _, cpu_p = timed(spec)
    ratio_p, crossings = psi_drift(spec, ds)
    rows.append(["projected_rk45 (tol 1e-8)", "adaptive", cpu_p, np.max(ratio_p),
                 np.median(ratio_p)])
    spec = study("rk4", 0.1, horizon, particles)
    ds, _, cpu_r = timed(spec)
    ratio, _ = psi_drift(spec, ds)
    rows.append(["rk4", 0.1, cpu_r, np.max(ratio), np.median(ratio)])
    dt_equal = 0.1 * cpu_r / cpu_p
    dt_equal = horizon / math.ceil(horizon / dt_equal)
    spec = study("rk4", dt_equal, horizon, particles)
    ds, _, cpu_e = timed(spec)
    ratio, _ = psi_drift(spec, ds)
    rows.append(["rk4 at equal cost", dt_equal, cpu_e, np.max(ratio), np.median(ratio)])
    print(f"Part 1: {particles} particles, T = {horizon:g} (= {horizon:g}/(U k)); mean "
          f"crossings per particle {np.mean(crossings):.3g} (max {np.max(crossings):.3g})")
    print(markdown_table(["scheme", "dt", "CPU s", "max |dpsi|/roundoff",
                          "median |dpsi|/roundoff"], rows))

    # Part 2: at least 1e6 crossings in all, two workers
    per_time = np.sum(crossings) / horizon
    target = 1e5 if quick else 1e6
    t_end = math.ceil(target / per_time * 1.05)
    spec = study("projected_rk45", max(1.0, t_end / 200), t_end, particles, workers=2,
                 tracked=True)
    ds, wall, cpu = timed(spec)
    _, crossings = psi_drift(spec, ds)
    total = float(np.sum(crossings))
    print(f"\nPart 2: {particles} particles to T = {t_end:g} on 2 workers: {total:.3g} "
          f"crossings in all ({np.mean(crossings):.3g} per particle) in {wall:.1f} s wall, "
          f"{cpu:.1f} s CPU; {total / cpu:.3g} crossings per CPU second, so 1e7 crossings take "
          f"about {1e7 / total * cpu / 120:.1f} min on two otherwise idle cores)")
    print(machine_note())


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    main(parser.parse_args().quick)
