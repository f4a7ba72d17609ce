"""Sweep throughput: a local `-j 2` sweep (threads, the default; and worker processes) against a
serial one, measured the way the CLI runs it (a fresh `eddyhop sweep` process each time, so
imports, kernel loading and any worker start-up are included) and inside one Python process
(threads; processes with a fresh and a reused worker pool); plus the scheduling overhead per point
(everything a sweep does besides integrating: parsing the point, dispatch, returning the
Dataset, the atomic netCDF write, the sha256, the manifest updates) and the resume check.

Run:  python benchmarks/bench_sweep.py [--points 8] [--particles 6000] [--t-end 60]
                                       [--long-t-end 240] [--repeat 2] [--skip-documented]
Two workloads: the documented one (t_end = 60: 6000 steps per point) and one with 4x longer
points (--long-t-end; 0 skips it), where worker start-up is negligible.  Measured side by side
in one run on this machine; not a timed test.  Other work on the machine lowers every parallel
speed-up: the load average is printed before and after, and the speed-up two plain concurrent
processes get at that moment (the ceiling) is measured too.  The merged numbers of the serial
and parallel sweeps are compared (they must be bit-identical).
"""

from __future__ import annotations

import argparse
import itertools
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

STUDY = """
title = "benchmark: Pe sweep of a cellular flow"
[flow]
family = "cellular"
[noise]
peclet = 10.0
[run]
particles = {particles}
dt = 0.01
t_end = {t_end}
n_times = 40
seed = 1
workers = 1
progress = false
[sweep]
"noise.peclet" = {{ first = 1.0, last = 1000.0, count = {points}, scale = "log" }}
"""


def write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def load() -> str:
    return ", ".join(f"{v:.1f}" for v in os.getloadavg())


def _one_point(study_path: str) -> float:
    """Seconds to simulate the first point of the study in this process (kernels preloaded)."""
    import warnings

    from eddyhop.api import simulate
    from eddyhop.study.spec import load_study

    warnings.simplefilter("ignore")
    sweep = load_study(study_path).sweep
    point = sweep.point_study(sweep.points()[0])
    simulate(point, workers=1, progress=False)
    started = time.perf_counter()
    simulate(point, workers=1, progress=False)
    return time.perf_counter() - started


def machine_capacity(study_path: Path) -> float:
    """Speed-up the machine offers *right now* to two independent processes: the time of one
    point alone over the mean time of the same point run twice concurrently (ideal: 2)."""
    import multiprocessing

    context = multiprocessing.get_context("spawn")
    with context.Pool(1) as pool:
        alone = pool.map(_one_point, [str(study_path)])[0]
    with context.Pool(2) as pool:
        together = pool.map(_one_point, [str(study_path)] * 2)
    return 2 * alone / max(together)


def cli_sweep(study: Path, out: Path, *options: str) -> float:
    """Wall time of `eddyhop sweep` in a new process, exactly as a user runs it (interpreter
    start, imports, kernel cache load, worker pool start-up included)."""
    started = time.perf_counter()
    subprocess.run([sys.executable, "-m", "eddyhop", "sweep", str(study), "--out", str(out),
                    "--no-merge", "--no-progress", *options],
                   check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - started


def same_numbers(a: Path, b: Path) -> bool:
    from eddyhop.sweeps import merge_sweep

    first, second = merge_sweep(a, analyse=False), merge_sweep(b, analyse=False)
    return all(np.array_equal(first[n].values, second[n].values)
               for n in ("msd", "msd_x", "var_y"))


def workload(root: Path, tag: str, particles: int, t_end: float, points: int,
             repeat: int) -> dict:
    """Serial against 2 processes, via the CLI (fresh pool) and in this process (the first
    parallel run starts the pool, later ones reuse it); best of ``repeat`` interleaved runs."""
    from eddyhop.study.spec import load_study
    from eddyhop.sweeps import run_sweep

    path = write(root, f"{tag}.toml", STUDY.format(particles=particles, t_end=t_end,
                                                   points=points))
    times = {"cli serial": [], "cli 2 threads": [], "cli 2 processes": [], "serial": [],
             "threads": [], "fresh pool": [], "reused pool": []}
    integration = []
    for r in range(repeat):
        times["cli serial"].append(cli_sweep(path, root / f"{tag}_cli_serial{r}",
                                             "--backend", "serial", "-w", "1"))
        times["cli 2 threads"].append(cli_sweep(path, root / f"{tag}_cli_thr{r}", "-j", "2"))
        times["cli 2 processes"].append(cli_sweep(path, root / f"{tag}_cli_par{r}",
                                                  "--backend", "processes", "-j", "2"))
        serial = run_sweep(load_study(path), root / f"{tag}_serial{r}", backend="serial",
                           workers=1, progress=False, merge_to=None)
        times["serial"].append(serial.seconds)
        integration.append(sum(serial.point_seconds))
        threads = run_sweep(load_study(path), root / f"{tag}_thr{r}", backend="threads",
                            jobs=2, progress=False, merge_to=None)
        times["threads"].append(threads.seconds)
        parallel = run_sweep(load_study(path), root / f"{tag}_par{r}", backend="processes",
                             jobs=2, progress=False, merge_to=None)
        times["reused pool" if r or times["fresh pool"] else "fresh pool"].append(
            parallel.seconds)
    if not times["reused pool"]:  # --repeat 1: one more parallel run on the started pool
        again = run_sweep(load_study(path), root / f"{tag}_par_again", backend="processes",
                          jobs=2, progress=False, merge_to=None)
        times["reused pool"].append(again.seconds)
    identical = all(same_numbers(root / f"{tag}_serial0", root / d)
                    for d in (f"{tag}_par0", f"{tag}_cli_par0", f"{tag}_cli_serial0",
                              f"{tag}_thr0", f"{tag}_cli_thr0"))
    best = {k: min(v) for k, v in times.items()}
    steps = round(t_end / 0.01)
    print(f"\n{points} points x {particles} particles x {steps} steps "
          f"(best of {repeat} interleaved runs; integration alone {min(integration):.2f} s)")
    rows = (("CLI: eddyhop sweep --backend serial", "cli serial", "cli serial"),
            ("CLI: eddyhop sweep -j 2 (threads)", "cli 2 threads", "cli serial"),
            ("CLI: -j 2 --backend processes", "cli 2 processes", "cli serial"),
            ("in-process: serial", "serial", "serial"),
            ("in-process: 2 threads", "threads", "serial"),
            ("in-process: 2 processes, fresh pool", "fresh pool", "serial"),
            ("in-process: 2 processes, reused pool", "reused pool", "serial"))
    for label, key, reference in rows:
        speedup = best[reference] / best[key]
        efficiency = "" if key == reference else f"  (parallel efficiency {speedup / 2:5.1%})"
        print(f"  {label:<40} {best[key]:7.2f} s  speed-up {speedup:4.2f}x{efficiency}")
    print(f"  merged numbers bit-identical (serial, in-process and CLI parallel): {identical}")
    return {"best": best, "identical": identical, "path": path}


def timeline(root: Path, path: Path, jobs: int = 2) -> None:
    """Where a threads-backend sweep spends its time, in this process (kernels loaded): the
    CPU before the first kernel task starts, how busy the pool's threads are from the first
    task to the last (gaps between tasks: an empty queue, or a thread waiting for the GIL),
    and the CPU after the last task (the last point's Dataset, write and analysis, the merge)."""
    import functools
    import threading

    from eddyhop.engine import runner
    from eddyhop.sweeps import run_sweep

    spans, marks = [], {}
    originals = {name: getattr(runner, name) for name in ("_run_chunk", "_run_check_batch")}

    def timed(function):
        @functools.wraps(function)
        def wrapper(*args):
            started = time.perf_counter()
            marks.setdefault("first", (started, time.process_time()))
            try:
                return function(*args)
            finally:
                ended = time.perf_counter()
                spans.append((threading.current_thread().name, started, ended))
                marks["last"] = (ended, time.process_time())
        return wrapper

    for name, function in originals.items():
        setattr(runner, name, timed(function))
    try:
        begin = (time.perf_counter(), time.process_time())
        run_sweep(path, root / "timeline", backend="threads", jobs=jobs, progress=False)
        end = (time.perf_counter(), time.process_time())
    finally:
        for name, function in originals.items():
            setattr(runner, name, function)
    first, last = marks["first"], marks["last"]
    print(f"\nwhere a -j {jobs} threads sweep spends its time (in this process, kernels loaded; "
          f"load average {load()})")
    print(f"  before the first kernel task: {first[0] - begin[0]:.2f} s wall, "
          f"{first[1] - begin[1]:.2f} s CPU")
    for thread in sorted({t for t, _, _ in spans}):
        mine = sorted((a, b) for t, a, b in spans if t == thread)
        busy = sum(b - a for a, b in mine)
        gaps = [b[0] - a[1] for a, b in itertools.pairwise(mine)]
        print(f"  {thread}: {len(mine)} tasks, busy {busy:.2f} s of the "
              f"{last[0] - first[0]:.2f} s from first to last task; gaps between tasks "
              f"{sum(gaps):.2f} s in all (largest {max(gaps, default=0.0):.3f} s)")
    print(f"  after the last kernel task: {end[0] - last[0]:.2f} s wall, "
          f"{end[1] - last[1]:.2f} s CPU (last point's Dataset, write, analysis; the merge)")
    print(f"  CPU in all {end[1] - begin[1]:.2f} s")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=8)
    parser.add_argument("--particles", type=int, default=6000)
    parser.add_argument("--t-end", type=float, default=60.0)
    parser.add_argument("--long-t-end", type=float, default=240.0)
    parser.add_argument("--tiny-points", type=int, default=40)
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--skip-documented", action="store_true",
                        help="only the long workload (and the overhead section)")
    parser.add_argument("--timeline-only", action="store_true",
                        help="only where a 4-point -j 2 threads sweep spends its time")
    options = parser.parse_args()

    from eddyhop.study.spec import load_study
    from eddyhop.sweeps import run_sweep, warm_kernels

    print(f"cores: {os.cpu_count()}; load average before: {load()} (other work on the "
          "machine lowers the parallel speed-up)")
    with tempfile.TemporaryDirectory() as scratch:
        root = Path(scratch)
        path = write(root, "bench.toml", STUDY.format(particles=options.particles,
                                                      t_end=options.t_end,
                                                      points=options.points))
        study = load_study(path)
        first = study.sweep.points()[0]
        print(f"kernel compile/load in this process: "
              f"{warm_kernels(study.sweep.point_document(first)):.1f} s")
        if options.timeline_only:
            timeline(root, write(root, "timeline.toml", STUDY.format(
                particles=options.particles, t_end=options.t_end, points=4)))
            return
        capacity_before = machine_capacity(path)
        results, names = [], []
        if not options.skip_documented:
            results.append(workload(root, "documented", options.particles, options.t_end,
                                    options.points, options.repeat))
            names.append("documented")
        if options.long_t_end > 0:
            results.append(workload(root, "long", options.particles, options.long_t_end,
                                    options.points, 1))
            names.append("long")
        capacity_after = machine_capacity(path)
        timeline(root, write(root, "timeline.toml", STUDY.format(
            particles=options.particles, t_end=options.t_end, points=4)))
        print(f"\navailable: two plain concurrent processes run {capacity_before:.2f}x "
              f"(before) / {capacity_after:.2f}x (after) as fast as one (2.00x on an idle "
              "2-core machine)")
        for result, name in zip(results, names):
            best = result["best"]
            cli = best["cli serial"] / best["cli 2 threads"]
            ceiling = max(capacity_before, capacity_after)
            print(f"  {name}: CLI -j 2 speed-up {cli:.2f}x, {cli / ceiling:.0%} of the "
                  f"ceiling ({'meets' if cli >= 1.8 else 'misses'} the >= 1.8x target on 2 "
                  f"cores); CLI processes {best['cli serial'] / best['cli 2 processes']:.2f}x; "
                  f"in-process threads {best['serial'] / best['threads']:.2f}x, reused "
                  f"process pool {best['serial'] / best['reused pool']:.2f}x")
        print(f"  load average now: {load()}")

        tiny = write(root, "tiny.toml", STUDY.format(particles=16, t_end=0.05,
                                                     points=options.tiny_points))
        print(f"\nscheduling overhead per point ({options.tiny_points} points of 16 "
              "particles x 5 steps; wall time minus integration time, per point)")
        for backend, jobs in (("serial", None), ("threads", 2), ("processes", 2)):
            report = run_sweep(tiny, root / f"tiny_{backend}", backend=backend, jobs=jobs,
                               workers=1, progress=False, merge_to=None)
            per_point = (report.seconds - report.warm_seconds) / options.tiny_points
            inside = sum(report.point_seconds) / options.tiny_points
            print(f"  {backend:<10} {1e3 * per_point:7.1f} ms per point in total, of which "
                  f"{1e3 * inside:6.1f} ms in the point's own simulate()")
        started = time.perf_counter()
        run_sweep(tiny, root / "tiny_serial", backend="serial", progress=False, merge_to=None)
        resume = (time.perf_counter() - started) / options.tiny_points
        print(f"  resume check of a complete sweep: {1e3 * resume:.2f} ms per point "
              "(manifest + sha256 of each file)")


if __name__ == "__main__":
    main()
