"""Accuracy per cost: error of the long-time effective diffusivity against CPU time, for each
integrator over a range of dt.

Run:  python benchmarks/bench_accuracy.py [--quick]

Flows (U = k = 1, κ = 0.1, so Pe = U/(κk) = 10; uniform starts over the period cell):

* periodic shear u = U sin ky: exact D_xx = κ + U²/(2κk²) (Majda & Kramer 1999, Phys. Rep.
  314, 237–574).  The transverse motion is pure diffusion, which every scheme reproduces
  exactly, so the time-stepping errors here are second order and small: this flow checks the
  estimator, not the schemes.
* cellular ψ = (U/k) sin kx sin ky: reference D from the homogenization cell problem, solved
  spectrally (``eddyhop.reference``; checked here against the shear formula).  Here the schemes
  differ: Euler-type steps do not preserve the area of the closed orbits.

Estimator: D = [var(T) − var(T/2)] / (2 (T − T/2)) per batch of particles (var of x, and of y
for the isotropic cellular flow), averaged over the run's batches; the standard error is the
batch spread / √(batches).  T is 10 cell diffusion times 1/(κk²); the slowest transient of the
shear flow, ∝ exp(−κk²t), then biases the estimate by −0.13 % (−6 % at T = 4 in ``--quick``).
Cost = CPU time of ``eddyhop.simulate`` (all threads).  Milstein equals Euler–Maruyama here
(constant κ: its extra terms vanish), so it is run at fewer dt.  The summary gives the cheapest
run within 1 % and, for a scheme whose runs all miss 1 %, the cost at which a first-order law
error = c·dt fitted to its runs (weights 1/SE²) predicts 1 % (an extrapolation, so labelled).
"""

from __future__ import annotations

import argparse
import math
import time
import warnings

import numpy as np
from common import machine_note, markdown_table

import eddyhop
from eddyhop.reference import effective_diffusivity
from eddyhop.study.spec import parse_study

KAPPA = 0.1
INTEGRATORS = ("euler_maruyama", "milstein", "strang_rk2")


def study_for(family, integrator, dt, t_end, particles, seed=20260314):
    return parse_study({
        "flow": {"family": family, "U": 1.0, "k": 1.0},
        "noise": {"kappa": KAPPA},
        "run": {"particles": particles, "dt": dt, "t_end": t_end, "n_times": 2,
                "spacing": "linear", "integrator": integrator, "seed": seed, "workers": -1,
                "progress": False},
        "moments": {"orders": []},
    })


def deff_estimate(ds, components):
    """(D, standard error) from the batch variances at the two output times."""
    t = ds["time"].values
    estimates = []
    for c in components:
        var = ds[f"batch_msd_{c}"].values - ds[f"batch_mean_d{c}"].values ** 2
        estimates.append((var[:, -1] - var[:, 0]) / (2.0 * (t[-1] - t[0])))
    per_batch = np.mean(estimates, axis=0)
    return per_batch.mean(), per_batch.std(ddof=1) / math.sqrt(per_batch.size)


def run_case(family, integrator, dt, t_end, particles, components):
    study = study_for(family, integrator, dt, t_end, particles)
    cpu = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = eddyhop.simulate(study)
    cost = time.process_time() - cpu
    d, se = deff_estimate(ds, components)
    return cost, d, se


def sweep(family, reference, rates, t_end, particles, components):
    """Runs for each integrator at its rates (steps per unit time, U k dt = 1/rate).

    Returns the table rows and, per integrator, the (dt, error, SE, CPU s) of each run.
    """
    rows = []
    runs = {}
    for integrator in INTEGRATORS:
        run_case(family, integrator, 0.5, 1.0, 64, components)  # compile before timing
        runs[integrator] = []
        for rate in rates[integrator]:
            dt = 1.0 / rate
            cost, d, se = run_case(family, integrator, dt, t_end, particles, components)
            error = d / reference - 1.0
            rows.append([integrator, dt, round(t_end / dt), cost, d, 100 * error,
                         100 * se / reference])
            runs[integrator].append((dt, error, se / reference, cost))
    return rows, runs


def cost_for_one_percent(runs):
    """Cheapest measured run within 1 %, and the cost a first-order error law e = c·dt fitted
    to the runs (weights 1/SE²) predicts for 1 % (cost ∝ 1/dt); None where not applicable."""
    within = [cost for dt, error, se, cost in runs if abs(error) <= 0.01]
    measured = min(within) if within else None
    dts = np.array([r[0] for r in runs])
    errors = np.array([r[1] for r in runs])
    weights = 1.0 / np.array([r[2] for r in runs]) ** 2
    slope = np.sum(weights * errors * dts) / np.sum(weights * dts**2)
    finest = min(runs)
    predicted = None
    if slope > 0 and abs(finest[1]) > 0.01:
        predicted = (0.01 / slope, finest[3] * finest[0] / (0.01 / slope))
    return measured, predicted


def _summary(runs):
    rows = []
    for integrator in INTEGRATORS:
        measured, predicted = cost_for_one_percent(runs[integrator])
        rows.append([integrator, "–" if measured is None else measured,
                     "–" if predicted is None else f"{predicted[1]:.3g} (dt ≈ {predicted[0]:.2g})"])
    return markdown_table(["integrator", "cheapest run within 1 %: CPU s",
                           "first-order fit: CPU s for 1 %"], rows)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    args = parser.parse_args(argv)
    particles = {"shear": 10_000, "cellular": 10_000} if args.quick else {
        "shear": 100_000, "cellular": 300_000}
    cell_time = 1.0 / KAPPA  # 1/(κ k²) with k = 1
    t_end = (4 if args.quick else 10) * cell_time
    if args.quick:
        rates = dict.fromkeys(INTEGRATORS, (5, 10))
    else:  # milstein equals euler_maruyama for constant κ (its extra terms vanish): fewer runs
        rates = {"euler_maruyama": (5, 10, 20, 40, 80), "milstein": (5, 10, 20),
                 "strang_rk2": (5, 10, 20, 40)}

    shear = eddyhop.get_family("shear")
    cellular = eddyhop.get_family("cellular")
    exact_shear = KAPPA + 1.0 / (2.0 * KAPPA)
    solver_shear = effective_diffusivity(shear, shear.validate({}), KAPPA).d_xx
    cell = effective_diffusivity(cellular, cellular.validate({}), KAPPA, rtol=1e-9)
    reference = cell.d_xx
    print(f"## Accuracy per cost (T = {t_end:g} = {t_end / cell_time:g} cell diffusion "
          f"times, Pe = {1.0 / KAPPA:g})\n")
    print(f"Cell-problem reference: shear D_xx = {solver_shear:.12g} (exact {exact_shear:.12g});"
          f" cellular D = {reference:.10g} (estimated relative error {cell.relative_error:.1e}).\n")
    header = ["integrator", "dt", "steps", "CPU s", "D estimate", "error %", "SE %"]
    shear_rates = {name: values[:2] for name, values in rates.items()}
    for name, family, ref, comps, family_rates in (
            ("shear (exact)", "shear", exact_shear, ("x",), shear_rates),
            ("cellular (cell problem)", "cellular", reference, ("x", "y"), rates)):
        rows, runs = sweep(family, ref, family_rates, t_end, particles[family], comps)
        print(f"### {name}: D_ref = {ref:.6g}, N = {particles[family]}\n")
        print(markdown_table(header, rows))
        print()
        print(_summary(runs))
        print()
    print(machine_note() + ".")


if __name__ == "__main__":
    main()
