"""Compile latency of the kernels: first call (empty cache) against a cached call.

Run:  python benchmarks/bench_compile.py [--repeats R]

Each measurement is a fresh subprocess with its own ``EDDYHOP_CACHE_DIR``: the first process
finds the directory empty and compiles; the next ones load the machine code numba cached
there (``cache=True``).  Timed inside the subprocess: ``import eddyhop`` plus the package
modules, and the first ``eddyhop.simulate`` of a tiny study (64 particles, 10 steps) — that is,
the latency a user sees before the first step.  Every integrator shares one compiled kernel
(the scheme is a run-time switch), so one study covers them all.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile

from common import machine_note, markdown_table

CHILD = r"""
import json, sys, time
start = time.perf_counter()
import eddyhop, eddyhop.api, eddyhop.engine.runner, eddyhop.results.dataset
imported = time.perf_counter()
sys.path.insert(0, {bench_dir!r})
from common import cellular_study
eddyhop.simulate(cellular_study(64, 10), progress=False)
done = time.perf_counter()
print(json.dumps({{"import": imported - start, "first_simulate": done - imported}}))
"""


def run_child(cache_dir):
    env = dict(os.environ, EDDYHOP_CACHE_DIR=cache_dir)
    code = CHILD.format(bench_dir=os.path.dirname(os.path.abspath(__file__)))
    out = subprocess.run([sys.executable, "-c", code], env=env, check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="cached runs (best is shown)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="eddyhop-bench-cache-") as cache_dir:
        cold = run_child(cache_dir)
        warm = [run_child(cache_dir) for _ in range(args.repeats)]
    best = min(warm, key=lambda r: r["first_simulate"])
    rows = [["first call, empty cache (compiles)", cold["import"], cold["first_simulate"]],
            [f"cached (best of {args.repeats})", best["import"], best["first_simulate"]]]
    print("## Compile latency (fresh subprocess each)\n")
    print(markdown_table(["process", "import s", "first simulate s"], rows))
    print(f"\nCompile / cached first-call ratio: "
          f"{cold['first_simulate'] / best['first_simulate']:.3g}.  " + machine_note() + ".")


if __name__ == "__main__":
    main()
