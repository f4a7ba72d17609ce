"""Compile latency of the kernels, per flow family: empty cache against cached, fresh processes.

Run:  python benchmarks/bench_compile.py [--repeats R] [--families cellular,cats_eye,...]

Kernels are specialised per study (family, scheme and noise model are compile-time constants,
``flows.compiled.CompiledCode``), so a cold run compiles only what its study uses and each
family has its own cold start.  For every family study below, a fresh subprocess with an empty
``EDDYHOP_CACHE_DIR`` imports the package and runs the study up to its first finished chunk
(the first progress tick; the start samplers and the ensemble kernel are compiled on the way,
the step check's kernel after it, when its tasks run); then ``--repeats`` more subprocesses do
the same with that cache and must load machine code (numba cache hits, no compile).  Figures
are the subprocess's CPU time (user + sys of its main thread, ``time.process_time``) and wall
time; the load average is printed because the machine may be shared.  Where the compile time
goes, per function and stage: ``benchmarks/profile_compile.py``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

from common import machine_note, markdown_table

ROOT = Path(__file__).resolve().parent.parent
# (flow table, noise table, integrator): the families' shipped defaults, 256 particles, with the
# step check on (it is a kernel of its own); gridded reads the field of a shipped study
FAMILIES = {
    "cellular": ({"family": "cellular"}, {"peclet": 10.0}, "euler_maruyama"),
    "cats_eye": ({"family": "cats_eye"}, {"peclet": 10.0}, "strang_rk2"),
    "obstacles": ({"family": "obstacles", "lattice": "hexagonal", "solid_fraction": 0.3},
                  {"peclet": 10.0}, "euler_maruyama"),
    "gridded": ({"family": "gridded",
                 "file": str(ROOT / "studies" / "convection_tank_piv.nc"),
                 "interpolation": "bicubic"}, {"kappa": 1.4e-7}, "euler_maruyama"),
}

CHILD = r"""
import json, sys, time
t0 = time.perf_counter()
import eddyhop.engine.runner as runner
from eddyhop.api import simulate
from eddyhop.study.spec import parse_study
flow, noise, integrator = json.loads(sys.argv[1])
original = runner._run_chunk
tick = []
def timed(*args):
    out = original(*args)
    if not tick:
        tick.append((time.perf_counter() - t0, time.process_time()))
    return out
runner._run_chunk = timed
study = parse_study({"title": "compile latency", "flow": flow, "noise": noise,
                     "run": {"particles": 256, "step_check_particles": 256, "dt": 0.01,
                             "t_end": 1.0, "n_times": 5, "integrator": integrator,
                             "seed": 1, "progress": False}})
simulate(study, workers=1, progress=False)
from eddyhop.engine.kernel import run_particles
stats = run_particles.stats
print(json.dumps({"wall": tick[0][0], "cpu": tick[0][1],
                  "hits": sum(stats.cache_hits.values()),
                  "misses": sum(stats.cache_misses.values())}))
"""


def run_child(cache_dir, family):
    env = dict(os.environ, EDDYHOP_CACHE_DIR=cache_dir)
    out = subprocess.run([sys.executable, "-c", CHILD, json.dumps(FAMILIES[family])], env=env,
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=2, help="cached runs (median shown)")
    parser.add_argument("--families", default=",".join(FAMILIES),
                        help="comma-separated, from: " + ", ".join(FAMILIES))
    args = parser.parse_args(argv)
    rows = []
    for family in args.families.split(","):
        with tempfile.TemporaryDirectory(prefix="eddyhop-bench-cache-") as cache_dir:
            cold = run_child(cache_dir, family)
            warm = sorted((run_child(cache_dir, family) for _ in range(args.repeats)),
                          key=lambda r: r["cpu"])
        mid = warm[len(warm) // 2]
        loaded = all(r["misses"] == 0 and r["hits"] > 0 for r in warm)
        rows.append([family, FAMILIES[family][2], cold["cpu"], cold["wall"], mid["cpu"],
                     mid["wall"], "yes" if loaded else "**no (recompiled)**",
                     "met" if cold["cpu"] <= 8.0 else "**not met**"])
    print("## Cold start per family (fresh subprocess each, to the first finished chunk)\n")
    print(markdown_table(["family", "integrator", "cold CPU s", "cold wall s", "cached CPU s",
                          "cached wall s", "cached process loads the kernel", "≤ 8 s CPU"],
                         rows))
    print(f"\nLoad average {os.getloadavg()[0]:.2f}.  " + machine_note() + ".")


if __name__ == "__main__":
    main()
