"""Peak memory of a large run against the size of its state and output arrays.

Run:  python benchmarks/bench_memory.py [--quick] [--particles N] [--times T]

Each case runs in a fresh subprocess: imports, a small warm-up run (so compiled kernels are
loaded), then ``eddyhop.simulate`` of N particles with T linearly spaced output times (one per
step, T steps, Euler–Maruyama, cellular flow, default moment orders, two workers).  Reported:
the growth of the peak resident set (``ru_maxrss``) over the warmed-up process, against

* state: the start positions (2 N float64), and
* outputs: the batch sums the engine returns (moments, aged sums, tracks) plus the Dataset's
  variables.

Chunking never changes the numbers, so each case is also run with a memory-aware chunk size
(``--chunk-budget`` MB of block sums per chunk) to show what the runner's default costs.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

from common import machine_note, markdown_table

CHILD = r"""
import json, resource, sys, warnings
sys.path.insert(0, {bench_dir!r})
from common import cellular_study
import eddyhop
from eddyhop.engine.runner import run_ensemble

particles, times, chunk = {particles}, {times}, {chunk}
eddyhop.simulate(cellular_study(64, 8, n_times=4, workers=2), progress=False)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
study = cellular_study(particles, times, n_times=times, workers=2)
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    ds = eddyhop.simulate(study, chunk=chunk, progress=False)
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
state = 2 * 8 * particles
small = cellular_study(64, times, n_times=times, workers=1)
result = run_ensemble(small)
per_start = result.starts[0]
# batch sums do not grow with N: measured on a small run with the same times
engine = sum(a.nbytes for a in (per_start.moments, per_start.aged, per_start.tracks))
dataset = sum(v.nbytes for v in ds.variables.values())
print(json.dumps({{"before": before, "after": after, "state": state, "engine": engine,
                  "dataset": dataset, "chunk": chunk}}))
"""


def measure(particles, times, chunk):
    bench_dir = os.path.dirname(os.path.abspath(__file__))
    code = CHILD.format(bench_dir=bench_dir, particles=particles, times=times,
                        chunk=repr(chunk))
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def budget_chunk(particles, times, budget_mb, batches=32, columns=28):
    """Particles per chunk so that its block sums (blocks × times × columns × 8 B) stay within
    ``budget_mb``: the rule proposed for the runner."""
    block = max(1, min(256, particles // (4 * batches)))
    blocks = max(1, int(budget_mb * 2**20 // (times * columns * 8)))
    return blocks * block


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    parser.add_argument("--particles", type=int, default=None)
    parser.add_argument("--times", type=int, default=None)
    parser.add_argument("--chunk-budget", type=float, default=8.0)
    args = parser.parse_args(argv)
    particles = args.particles or (20_000 if args.quick else 1_000_000)
    times = args.times or (2_000 if args.quick else 10_000)
    mb = 2.0**20
    rows = []
    for label, chunk in (("runner default", None),
                         (f"chunk for {args.chunk_budget:g} MB of block sums",
                          budget_chunk(particles, times, args.chunk_budget))):
        r = measure(particles, times, chunk)
        growth = r["after"] - r["before"]
        arrays = r["state"] + r["engine"] + r["dataset"]
        rows.append([label, r["chunk"] or "default", r["state"] / mb, r["engine"] / mb,
                     r["dataset"] / mb, growth / mb, growth / arrays])
    print(f"## Peak memory (N = {particles}, {times} output times = steps, 2 workers)\n")
    print(markdown_table(["chunking", "chunk", "state MB", "engine sums MB", "Dataset MB",
                          "peak RSS growth MB", "growth / (state + outputs)"], rows))
    print("\nTarget: growth / (state + outputs) ≤ 2.  " + machine_note() + ".")


if __name__ == "__main__":
    main()
