"""Where a cold start's compile time goes: self CPU time per compiled function, split by stage.

Run:  python benchmarks/profile_compile.py [--study demo|cellular|cats_eye|...] [--top N]

A fresh subprocess with an empty ``EDDYHOP_CACHE_DIR`` runs the study (the demo study with
256 particles, or one of ``bench_compile.FAMILIES``) up to its first progress tick, with numba's
compile events (``numba.core.event``: ``numba:compile`` per dispatcher compile and
``numba:run_pass`` per compiler pass) and timers around the LLVM stages of numba's code
libraries.  Every second of CPU time is charged to the innermost function being compiled
(*self* time: a callee compiled while its caller is typed is charged to the callee), split into

* typing — numba's type inference (including re-typing the IR of ``inline="always"``
  callees and overload templates inlined at their call sites),
* lowering — Python-level generation of LLVM IR,
* LLVM fn — LLVM's per-function passes on the function's own module,
* LLVM module — LLVM's module passes on the final module, with every linked callee's module
  linked in again (``CPUCodeLibrary.finalize``),
* machine code — emitting the object code (an ``engine.callee`` function has none of its
  own; its module is optimised when a caller links it, and charged to that caller),
* other — numba's remaining passes (IR building, rewrites, inlining, analysis) and the time
  outside any pass (saving to the cache, dispatcher bookkeeping).

Figures are ``time.process_time`` (CPU, user + sys) of one run; the load average is printed.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from bench_compile import FAMILIES  # noqa: E402

CHILD = r"""
import json, sys, time
from collections import defaultdict
clock = time.process_time
t0 = clock()
import numba
from numba.core import codegen, event

STAGES = ("typing", "lowering", "llvm_fn", "llvm_module", "machine", "other")
self_time = defaultdict(lambda: dict.fromkeys(STAGES, 0.0))
count = defaultdict(int)
by_pass = defaultdict(float)
stack = []  # frames: [kind, key, start, child_time]


def charge(stage, seconds):
    # the innermost function being compiled pays
    for frame in reversed(stack):
        if frame[0] == "compile":
            self_time[frame[1]][stage] += seconds
            return
    self_time["(outside any compile)"][stage] += seconds


def push(kind, key):
    stack.append([kind, key, clock(), 0.0])


def pop():
    kind, key, start, children = stack.pop()
    total = clock() - start
    if stack:
        stack[-1][3] += total
    return kind, key, total - children


class Compiles(event.Listener):
    def on_start(self, ev):
        d = ev.data["dispatcher"]
        name = getattr(d, "py_func", None)
        name = f"{name.__module__}.{name.__qualname__}" if name else str(d)
        count[name] += 1
        push("compile", name)

    def on_end(self, ev):
        _, name, own = pop()  # time outside any pass: caching, dispatcher bookkeeping
        self_time[name]["other"] += own


class Passes(event.Listener):
    def on_start(self, ev):
        push("pass", ev.data["name"].split(" [")[0])

    def on_end(self, ev):
        _, name, own = pop()
        by_pass[name] += own
        if name == "nopython_type_inference" or name.startswith("partial_type"):
            charge("typing", own)
        elif name == "native_lowering":
            charge("lowering", own)
        else:
            charge("other", own)


def timed(method, stage):
    original = getattr(codegen.CPUCodeLibrary, method, None) or getattr(
        codegen.JITCodeLibrary, method)

    def wrapper(self, *args, **kwargs):
        push("llvm", stage)
        try:
            return original(self, *args, **kwargs)
        finally:
            _, _, own = pop()
            charge(stage, own)  # pop() took it out of the enclosing pass's own time
    setattr(codegen.JITCodeLibrary, method, wrapper)


timed("_optimize_functions", "llvm_fn")
timed("_optimize_final_module", "llvm_module")
timed("_finalize_specific", "machine")
event.register("numba:compile", Compiles())
event.register("numba:run_pass", Passes())

import eddyhop.engine.runner as runner
from eddyhop.api import simulate
original = runner._run_chunk
tick = []
at_tick = {}
def first_tick(*args):
    out = original(*args)
    if not tick:
        tick.append(clock() - t0)
        at_tick.update(json.loads(json.dumps(self_time)))
        at_tick["__count__"] = dict(count)
        at_tick["__passes__"] = dict(by_pass)
    return out
runner._run_chunk = first_tick
spec = json.loads(sys.argv[1])
if spec == "demo":
    import dataclasses
    from eddyhop.cli.demo import demo_text
    from eddyhop.study.spec import parse_study_text
    study = parse_study_text(demo_text(), "demo.toml")
    study = dataclasses.replace(study, run=dataclasses.replace(
        study.run, particles=256, step_check_particles=256, workers=1))
else:
    from eddyhop.study.spec import parse_study
    flow, noise, integrator = spec
    study = parse_study({"title": "compile profile", "flow": flow, "noise": noise,
                         "run": {"particles": 256, "step_check_particles": 256, "dt": 0.01,
                                 "t_end": 1.0, "n_times": 5, "integrator": integrator,
                                 "seed": 1, "progress": False}})
simulate(study, workers=1, progress=False)
counted = at_tick.pop("__count__")
passes = at_tick.pop("__passes__")
print(json.dumps({"tick": tick[0], "self": at_tick, "count": counted, "passes": passes,
                  "after": {k: sum(v.values()) - sum(at_tick.get(k, {}).values())
                            for k, v in self_time.items()}}))
"""


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--study", default="demo", help="demo or one of " + ", ".join(FAMILIES))
    parser.add_argument("--top", type=int, default=25, help="rows shown")
    args = parser.parse_args(argv)
    spec = "demo" if args.study == "demo" else FAMILIES[args.study]
    with tempfile.TemporaryDirectory(prefix="eddyhop-profile-cache-") as cache:
        env = dict(os.environ, EDDYHOP_CACHE_DIR=cache)
        out = subprocess.run([sys.executable, "-c", CHILD, json.dumps(spec)], env=env,
                             check=True, capture_output=True, text=True)
    result = json.loads(out.stdout.strip().splitlines()[-1])
    stages = ("typing", "lowering", "llvm_fn", "llvm_module", "machine", "other")
    rows = sorted(result["self"].items(), key=lambda kv: -sum(kv[1].values()))
    total = {s: sum(r[s] for _, r in rows) for s in stages}
    print(f"## Compile profile, {args.study}: first tick at {result['tick']:.1f} s CPU, "
          f"{sum(total.values()):.1f} s of it in compile events\n")
    print("| function (self) | compiles | total | " + " | ".join(stages) + " |")
    print("|---" * (len(stages) + 3) + "|")
    for name, r in rows[:args.top]:
        print(f"| {name.replace('eddyhop.', '')} | {result['count'].get(name, 0)} | "
              f"{sum(r.values()):.2f} | " + " | ".join(f"{r[s]:.2f}" for s in stages) + " |")
    print(f"| **all** | {sum(result['count'].values())} | {sum(total.values()):.2f} | "
          + " | ".join(f"{total[s]:.2f}" for s in stages) + " |")
    passes = sorted(result["passes"].items(), key=lambda kv: -kv[1])[:8]
    print("\nnumba passes, own time before the tick (LLVM excluded): "
          + ", ".join(f"{k} {v:.2f}" for k, v in passes))
    after = {k: v for k, v in result["after"].items() if v > 0.01}
    print(f"\nCompiled after the first tick ({sum(after.values()):.2f} s): "
          + ", ".join(f"{k.replace('eddyhop.', '')} {v:.2f}"
                      for k, v in sorted(after.items(), key=lambda kv: -kv[1])))
    print(f"\nLoad average {os.getloadavg()[0]:.2f} (CPU seconds of one run, process_time).")


if __name__ == "__main__":
    main()
