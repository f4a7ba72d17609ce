"""Cost of the deterministic reference solvers versus Péclet number (time and memory).

Run:  python benchmarks/bench_cell_problem.py [--quick] [--peclets 10 100 1000 ...]

Table 1, homogenized diffusivity of the cellular flow (U = k = 1, Pe = U/(κk)) at the tolerance
``rtol`` given per row, with automatic refinement (default max_modes): final Fourier modes per
direction, unknowns of the final sparse system, wall and CPU seconds of the whole refinement,
peak resident memory above an idle interpreter, D/κ and D/(κ Pe^½) (→ 2ν = 1.0654 at large Pe).
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
    r = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=job["pe"],
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


def _run(job: dict) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS=os.environ.get("OPENBLAS_NUM_THREADS", "1"))
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
    args = parser.parse_args(argv)
    if args.peclets:
        cases = [(pe, 1e-6) for pe in args.peclets]
    elif args.quick:
        cases = [(10.0, 1e-6), (100.0, 1e-6), (300.0, 1e-6)]
    else:
        cases = [(10.0, 1e-6), (100.0, 1e-6), (1000.0, 1e-3), (1000.0, 1e-6),
                 (3000.0, 1e-6), (10000.0, 1e-4)]
    moment_peclets = [10.0, 50.0] if args.quick else [10.0, 50.0, 200.0]
    started = time.perf_counter()
    _run({"kind": "cell", "pe": 1.0, "rtol": 1e-3})  # warm-up: fills the compiled-kernel cache
    baseline = _run({"kind": "idle"})["rss_mb"]

    rows, first = [], None
    for pe, rtol in cases:
        r = _run({"kind": "cell", "pe": pe, "rtol": rtol})
        first = first or r
        rows.append((f"{pe:g}", f"{rtol:g}", r["modes"], r["unknowns"], r["wall"], r["cpu"],
                     r["cpu"] / first["cpu"], r["rss_mb"] - baseline, f"{r['ratio']:.6g}",
                     f"{r['ratio'] / pe**0.5:.5f}", f"{r['error']:.1e}"))
    print("## Cell problem (homogenized diffusivity), cellular flow\n")
    print(markdown_table(("Pe", "rtol", "modes", "unknowns", "wall s", "CPU s", "CPU / first",
                          "peak MB above idle", "D/kappa", "D/(kappa Pe^1/2)",
                          "est. rel. error"), rows))

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
