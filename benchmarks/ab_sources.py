"""A B of two source trees: cold start of the demo and kernel speed, alternated in one run.

Run:  python benchmarks/ab_sources.py OLD_SRC NEW_SRC [--cold N] [--kernel N]

``OLD_SRC`` and ``NEW_SRC`` are ``src`` directories (e.g. a ``git archive`` of main unpacked in
/tmp, and this worktree's ``src``).  Two measurements, each alternating old and new:

* ``--cold N`` pairs: a fresh process with an empty ``EDDYHOP_CACHE_DIR`` runs the demo study
  (256 particles) to its first progress tick (the row of ``bench_time_to_answer.py``); CPU time
  of the process to the tick (``time.process_time``) and of the whole process (which also
  compiles the step check after the tick).
* ``--kernel N`` rounds: one long-lived process per tree (its kernels compiled or loaded
  once, in its own cache directory) runs ``runner.run_ensemble`` of the cellular flow,
  2·10⁴ particles × 500 steps, one thread, for Euler–Maruyama and Strang (4 output times),
  Euler–Maruyama with 500 output times and with ``[hopping]``; CPU time per call.  Printed:
  ns per particle-step (median), the cost of an output time in steps, ``[hopping]`` against a
  step, and the median of the paired ratios new / old (the processes take turns, order
  swapped every round).  Run it two or three times: one process to the next of the *same*
  sources moves by about ±2 % on this machine (code and data placement).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from bench_time_to_answer import FIRST_TICK  # noqa: E402

KERNEL_CHILD = r"""
import dataclasses, json, sys, time
sys.path.insert(0, sys.argv[1])
from common import cellular_study
from eddyhop.engine.runner import run_ensemble
N, STEPS = 20000, 500
def study(integrator, n_times):
    return cellular_study(N, STEPS, n_times=n_times, integrator=integrator, step_check=False,
                          workers=1)
cases = {"em": study("euler_maruyama", 4), "strang": study("strang_rk2", 4),
         "em_outputs": study("euler_maruyama", STEPS)}
cases["em_hopping"] = dataclasses.replace(
    cases["em"], hopping=dataclasses.replace(cases["em"].hopping, enabled=True))
for s in cases.values():
    run_ensemble(s, progress=False)
print("ready", flush=True)
for line in sys.stdin:
    started = time.process_time()
    run_ensemble(cases[line.strip()], progress=False)
    print(json.dumps(time.process_time() - started), flush=True)
"""
PARTICLE_STEPS = 20000 * 500
CASES = ("em", "strang", "em_outputs", "em_hopping")


def cold(trees: dict, pairs: int) -> None:
    samples = {name: [] for name in trees}
    for _ in range(pairs):
        for name, src in trees.items():
            with tempfile.TemporaryDirectory(prefix="eddyhop-ab-") as cache:
                env = dict(os.environ, PYTHONPATH=src, EDDYHOP_CACHE_DIR=cache)
                before = resource.getrusage(resource.RUSAGE_CHILDREN)
                out = subprocess.run([sys.executable, "-c", FIRST_TICK], env=env, check=True,
                                     capture_output=True, text=True)
                after = resource.getrusage(resource.RUSAGE_CHILDREN)
            tick = json.loads(out.stdout.strip().splitlines()[-1])
            whole = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
            samples[name].append((tick["cpu"], whole))
    print(f"## Cold start of the demo, {pairs} pairs A B (CPU s, median)\n")
    for name, values in samples.items():
        print(f"* {name}: first tick {statistics.median(v[0] for v in values):.2f} s "
              f"({', '.join(f'{v[0]:.2f}' for v in values)}); whole process "
              f"{statistics.median(v[1] for v in values):.2f} s")
    print(f"\nLoad average {os.getloadavg()[0]:.2f}.\n")


def kernel(trees: dict, rounds: int) -> None:
    processes = {}
    for name, src in trees.items():
        env = dict(os.environ, PYTHONPATH=src,
                   EDDYHOP_CACHE_DIR=tempfile.mkdtemp(prefix=f"eddyhop-ab-{name}-"))
        process = subprocess.Popen([sys.executable, "-c", KERNEL_CHILD, str(HERE)], env=env,
                                   stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        if process.stdout.readline().strip() != "ready":
            raise RuntimeError(f"the {name} process did not start")
        processes[name] = process
    times = {(name, case): [] for name in trees for case in CASES}
    for r in range(rounds):
        order = list(processes.items())
        for case in CASES:
            for name, process in (order if r % 2 == 0 else order[::-1]):
                process.stdin.write(case + "\n")
                process.stdin.flush()
                times[(name, case)].append(json.loads(process.stdout.readline()))
    for process in processes.values():
        process.stdin.close()
        process.wait()
    print(f"## Kernel, cellular flow, one thread, {rounds} rounds A B (CPU time)\n")
    for name in trees:
        ns = {case: 1e9 * statistics.median(times[(name, case)]) / PARTICLE_STEPS
              for case in CASES}
        per_output = (ns["em_outputs"] - ns["em"]) / ns["em"] * 500 / 496
        print(f"* {name}: Euler–Maruyama {ns['em']:.2f} ns, Strang {ns['strang']:.2f} ns per "
              f"particle-step; an output time {per_output:.2f} steps; [hopping] "
              f"{ns['em_hopping'] / ns['em']:.2f}× a step")
    old, new = trees
    for case in CASES:
        ratios = [b / a for a, b in zip(times[(old, case)], times[(new, case)])]
        print(f"* {case}: {new} / {old}, median of paired ratios {statistics.median(ratios):.3f}")
    print(f"\nLoad average {os.getloadavg()[0]:.2f}.")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("old", help="src directory of the old sources")
    parser.add_argument("new", help="src directory of the new sources")
    parser.add_argument("--cold", type=int, default=3, help="cold-start pairs (0: skip)")
    parser.add_argument("--kernel", type=int, default=8, help="kernel rounds (0: skip)")
    args = parser.parse_args(argv)
    trees = {"old": str(Path(args.old).resolve()), "new": str(Path(args.new).resolve())}
    if args.cold:
        cold(trees, args.cold)
    if args.kernel:
        kernel(trees, args.kernel)


if __name__ == "__main__":
    main()
