"""Cost of the deterministic reference solvers versus Péclet number (time and memory).

Run:  python benchmarks/bench_cell_problem.py [--quick] [--peclets 10 100 1000 ...]
                                              [--before OLD/src] [--no-moments]

Table 1, homogenized diffusivity of the cellular flow (U = k = 1, Pe = U/(κk)) at the tolerance
``rtol`` given per row, with automatic refinement (default max_modes): final Fourier modes per
direction, unknowns of the largest linear system at the final resolution (one per corrector
after the symmetry reduction), wall and CPU seconds of the whole refinement, peak resident
memory of the process and above an idle interpreter, D/κ and D/(κ Pe^½) (→ 2ν = 1.0654 at
large Pe, Soward 1987, J. Fluid Mech. 180, 267; value from memory).  The last row is the
drifting cellular flow, whose uniform drift breaks the reflections: the unreduced solver.
With ``--before`` each case also runs with another source tree first on ``PYTHONPATH``
(e.g. an export of the commit before a change), right after the current one, and the table
shows both and the relative change of D.
Table 2, moment evolution of a uniform and a point start over t = 0.01 … 1000 at the default
resolution plus its check run.

Each case runs in a fresh subprocess so that its peak memory (``ru_maxrss``) is its own; the
baseline is a subprocess that imports the same modules and solves nothing.  Ratios to the first
row are measured in the same run, after a warm-up case that fills the compiled-kernel cache.
Not a timed test: numbers depend on the machine and its load.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

from common import machine_note, markdown_table

_CHILD = r"""
import json, resource, sys, time
import numpy as np
from eddyhop.reference import effective_diffusivity, moment_evolution
from eddyhop.study.spec import parse_study
job = json.loads(sys.argv[1])
out = {}
wall, cpu = time.perf_counter(), time.process_time()
if job["kind"] == "cell":
    params = {"U": 1.0, "k": 1.0}
    if job.get("family", "cellular") == "drifting_cellular":
        params.update(drift_x=0.3, drift_y=0.1)
    r = effective_diffusivity(job.get("family", "cellular"), params, peclet=job["pe"],
                              rtol=job["rtol"])
    out.update(modes=r.modes, unknowns=r.unknowns, ratio=r.d_xx / r.kappa,
               error=r.relative_error)
elif job["kind"] == "moments":
    study = parse_study({"title": "bench", "flow": {"family": "cellular", "U": 1.0, "k": 1.0},
                         "noise": {"peclet": job["pe"]},
                         "start": [{"kind": "uniform"}, {"kind": "point", "x": 0.3, "y": 0.7}],
                         "run": {"particles": 1, "dt": 0.01, "t_end": 1000.0, "n_times": 50,
                                 "t_first": 0.01, "progress": False}})
    ds = moment_evolution(study, homogenized=False)
    out.update(modes=int(ds["modes"].values[0]),
               error=float(ds["msd_resolution_error"].max()))
out["wall"] = time.perf_counter() - wall
out["cpu"] = time.process_time() - cpu
out["rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
print(json.dumps(out))
"""


def _run(job: dict, source: str | None = None) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS=os.environ.get("OPENBLAS_NUM_THREADS", "1"))
    if source:
        env["PYTHONPATH"] = os.pathsep.join([source, env.get("PYTHONPATH", "")])
    done = subprocess.run([sys.executable, "-c", _CHILD, json.dumps(job)], env=env,
                          capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"benchmark case {job} failed:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small Péclet numbers only")
    parser.add_argument("--peclets", type=float, nargs="*", default=None,
                        help="cell-problem Péclet numbers (rtol 1e-6)")
    parser.add_argument("--before", metavar="SRC", default=None,
                        help="also run each cell-problem case with this source tree first on "
                             "PYTHONPATH (the 'before' of an A/B comparison)")
    parser.add_argument("--no-moments", action="store_true",
                        help="skip the moment-evolution table")
    args = parser.parse_args(argv)
    if args.peclets:
        cases = [("cellular", pe, 1e-6) for pe in args.peclets]
    elif args.quick:
        cases = [("cellular", pe, 1e-6) for pe in (10.0, 100.0, 300.0)]
    else:
        cases = [("cellular", 10.0, 1e-6), ("cellular", 100.0, 1e-6),
                 ("cellular", 1000.0, 1e-3), ("cellular", 1000.0, 1e-6),
                 ("cellular", 3000.0, 1e-6), ("cellular", 10000.0, 1e-4),
                 ("cellular", 10000.0, 1e-6), ("drifting_cellular", 1000.0, 1e-6)]
    moment_peclets = [10.0, 50.0] if args.quick else [10.0, 50.0, 200.0]
    started = time.perf_counter()
    _run({"kind": "cell", "pe": 1.0, "rtol": 1e-3})  # warm-up: fills the compiled-kernel cache
    baseline = _run({"kind": "idle"})["rss_mb"]
    if args.before:
        _run({"kind": "cell", "pe": 1.0, "rtol": 1e-3}, args.before)
        baseline_before = _run({"kind": "idle"}, args.before)["rss_mb"]

    rows, first = [], None
    for family, pe, rtol in cases:
        job = {"kind": "cell", "family": family, "pe": pe, "rtol": rtol}
        r = _run(job)
        first = first or r
        name = f"{pe:g}" + ("" if family == "cellular" else f" ({family})")
        row = [name, f"{rtol:g}", r["modes"], r["unknowns"], r["wall"], r["cpu"],
               r["cpu"] / first["cpu"], r["rss_mb"], r["rss_mb"] - baseline,
               f"{r['ratio']:.10g}", f"{r['ratio'] / pe**0.5:.5f}", f"{r['error']:.1e}"]
        if args.before:
            b = _run(job, args.before)
            row += [b["unknowns"], b["wall"], b["cpu"], b["rss_mb"],
                    b["rss_mb"] - baseline_before, b["cpu"] / r["cpu"],
                    f"{abs(r['ratio'] - b['ratio']) / b['ratio']:.1e}"]
        rows.append(tuple(row))
    header = ["Pe", "rtol", "modes", "unknowns", "wall s", "CPU s", "CPU / first",
              "peak RSS MB", "MB above idle", "D/kappa", "D/(kappa Pe^1/2)", "est. rel. error"]
    if args.before:
        header += ["before: unknowns", "before: wall s", "before: CPU s", "before: peak RSS MB",
                   "before: MB above idle", "CPU before/now", "D: rel. change"]
    print("## Cell problem (homogenized diffusivity), cellular flow\n")
    print(markdown_table(header, rows))
    if args.before:
        print(f"\nbefore = {args.before}, run right after each current case")

    if not args.no_moments:
        rows, first = [], None
        for pe in moment_peclets:
            r = _run({"kind": "moments", "pe": pe})
            first = first or r
            rows.append((f"{pe:g}", r["modes"], r["wall"], r["cpu"], r["cpu"] / first["cpu"],
                         r["rss_mb"] - baseline, f"{r['error']:.1e}"))
        print("\n## Moment evolution, uniform + point start, t = 0.01 ... 1000 (50 times), "
              "with the resolution check\n")
        print(markdown_table(("Pe", "modes", "wall s", "CPU s", "CPU / first",
                              "peak MB above idle", "est. rel. error of MSD"), rows))
    print(f"\nidle interpreter with the modules imported: {baseline:.0f} MB; "
          f"{machine_note()}; total {time.perf_counter() - started:.0f} s")


if __name__ == "__main__":
    main()
