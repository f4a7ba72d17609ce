"""Throughput of the ensemble kernel against a plain vectorised NumPy loop, measured side by side.

Run:  python benchmarks/bench_kernel.py [--quick]

Everything is timed in this one process, interleaved round-robin, best of ``--repeats``
wall-clock runs (the machine may be shared).  Rates are particle-steps per second of the
Euler–Maruyama step of the cellular flow ψ = (U/k) sin kx sin ky, U = k = 1, Pe = 10, dt = 0.01.

* ``numpy loop``: per step, sin/cos of the positions and ``Generator.standard_normal`` noise on
  arrays of all N particles (the same update, the same N and dt).
* ``kernel``: ``runner.run_ensemble`` (starts, chunks, the compiled kernel, the batch fold; no
  Dataset), one thread and two threads.
* ``simulate``: ``eddyhop.simulate`` end to end (adds the Dataset assembly).
* ``two raw threads``: the kernel on two halves of the ensemble in two plain threads, to separate
  the machine's scaling from the runner's.
* per-step cost of every integrator relative to Euler–Maruyama (kernel, one thread).
* the Euler–Maruyama step split into its parts (CPU time, same N, steps and tiles as the
  kernel): ``normals`` (``rng.fill_normals``, one Philox block → 2 normals per particle-step;
  itself split into its three passes: the Philox words, the ziggurat's common case with the
  refusal masks, the ≈ 1.5 % refused draws), ``flow`` (``integrators.tile_velocity`` of the
  cellular flow) and ``rest`` (the raw kernel minus both: the update, the blow-up test, the
  step loop, the output times), and the distance
  of the whole to the ≈ 5 ns per particle-step instruction-issue limit the issue quotes.
"""

from __future__ import annotations

import argparse
import math
import threading

import numpy as np
from common import best_times, cellular_study, machine_note, markdown_table

import eddyhop
from eddyhop.engine import runner
from eddyhop.engine.kernel import TILE
from eddyhop.engine.schedule import build_schedule
from eddyhop.starts import sample_starts


def numpy_loop(x0, y0, steps, dt, velocity_scale, k, kappa, seed):
    """Euler–Maruyama in the cellular flow with whole-array NumPy operations."""
    rng = np.random.default_rng(seed)
    x = x0.copy()
    y = y0.copy()
    spread = math.sqrt(2.0 * kappa * dt)
    drift = dt * velocity_scale
    for _ in range(steps):
        sx = np.sin(k * x)
        cx = np.cos(k * x)
        sy = np.sin(k * y)
        cy = np.cos(k * y)
        z = rng.standard_normal((2, x.size))
        x += drift * sx * cy + spread * z[0]
        y += -drift * cx * sy + spread * z[1]
    return x, y


def _two_raw_threads(study):
    schedule = build_schedule(study.run, study.aging, study.run.track_samples)
    ctx, _, _ = runner._make_context(study, schedule)
    family = study.flow.model
    n = study.run.particles
    x0, y0 = sample_starts(study.starts[0], family, study.flow.params, n, study.run.seed, 0)
    half = (n // 2 // ctx.block_size) * ctx.block_size

    def run():
        threads = [threading.Thread(target=runner._run_chunk,
                                    args=(ctx, 0, lo, x0[lo:hi], y0[lo:hi]))
                   for lo, hi in ((0, half), (half, n))]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()

    def run_one():
        runner._run_chunk(ctx, 0, 0, x0, y0)

    return run_one, run


ISSUE_LIMIT_NS = 5.0  # instruction-issue limit per particle-step quoted by issue 18


def step_parts(study):
    """Callables that repeat the kernel's random-number and flow work of an Euler–Maruyama
    ``study`` alone, over the same particles, steps and tiles of ``kernel.TILE``:
    ``{"normals": ..., "normals: Philox": ..., "normals: Philox + common case": ...,
    "flow": ...}`` (each compiled on first use; call once before timing).  The two partial
    normals callables run the first one and two passes of ``rng.fill_normals`` alone."""
    import numba

    from eddyhop.engine.integrators import tile_velocity
    from eddyhop.engine.rng import _candidates, _fill_words, fill_normals, split_seed
    from eddyhop.flows.compiled import CompiledCode

    @numba.njit
    def normals(k0, k1, n, steps, words, z):
        for lo in range(0, n, TILE):
            m = min(TILE, n - lo)
            for step in range(steps):
                fill_normals(k0, k1, lo, m, step, 1, words, z)

    @numba.njit
    def philox(k0, k1, n, steps, words):
        for lo in range(0, n, TILE):
            m = min(TILE, n - lo)
            for step in range(steps):
                _fill_words(np.uint64(k0), np.uint64(k1), lo, m, np.uint64(step), np.uint64(0),
                            0, words)

    @numba.njit
    def common_case(k0, k1, n, steps, words, z):
        refused = np.uint64(0)
        for lo in range(0, n, TILE):
            m = min(TILE, n - lo)
            for step in range(steps):
                _fill_words(np.uint64(k0), np.uint64(k1), lo, m, np.uint64(step), np.uint64(0),
                            0, words)
                for first in range(0, m, 64):
                    last = min(first + 64, m)
                    refused |= _candidates(words, 0, first, last, z)
                    refused |= _candidates(words, 1, first, last, z)
        return refused

    @numba.njit
    def flow(fcode, fp, x0, y0, steps, dt, xs, ys, us, vs):
        n = x0.size
        for lo in range(0, n, TILE):
            m = min(TILE, n - lo)
            for g in range(m):
                xs[g] = x0[lo + g]
                ys[g] = y0[lo + g]
            for step in range(steps):
                tile_velocity(fcode, fp, xs, ys, step * dt, us, vs, m)
                for g in range(m):  # move along a little, as the kernel's positions do
                    xs[g] += dt * us[g]
                    ys[g] += dt * vs[g]

    n = study.run.particles
    steps = round(study.run.t_end / study.run.dt)
    k0, k1 = split_seed(study.run.seed)
    words = np.empty((4, TILE), dtype=np.uint64)
    z = np.empty((4, TILE))
    family = study.flow.model
    fcode = CompiledCode(family.code)
    fp = family.pack(study.flow.params)
    x0, y0 = sample_starts(study.starts[0], family, study.flow.params, n, study.run.seed, 0)
    scratch = [np.empty(TILE) for _ in range(4)]
    return {
        "normals": lambda: normals(k0, k1, n, steps, words, z),
        "normals: Philox": lambda: philox(k0, k1, n, steps, words),
        "normals: Philox + common case": lambda: common_case(k0, k1, n, steps, words, z),
        "flow": lambda: flow(fcode, fp, x0, y0, steps, study.run.dt, *scratch),
    }


def normals_passes(times, work):
    """CPU ns per particle-step of the three passes of ``rng.fill_normals``: (Philox words,
    common case with the refusal masks, refused draws), from the partial callables of
    :func:`step_parts` (differences of CPU times measured in the same run)."""
    normals = times["normals"][1] / work * 1e9
    philox = times["normals: Philox"][1] / work * 1e9
    common = times["normals: Philox + common case"][1] / work * 1e9
    return philox, common - philox, normals - common


def parts_table(times, work, kernel_name="raw kernel, 1 thread") -> str:
    """The step split into normals / flow / rest (CPU ns per particle-step) and the distance
    of the kernel to the issue limit."""
    total = times[kernel_name][1] / work * 1e9
    normals = times["normals"][1] / work * 1e9
    flow = times["flow"][1] / work * 1e9
    philox, common, refused = normals_passes(times, work)
    rows = [["normals (rng.fill_normals)", normals, normals / total],
            ["  pass 1: Philox4x32-10 words", philox, philox / total],
            ["  pass 2: ziggurat common case, refusal masks", common, common / total],
            ["  pass 3: the ≈ 1.5 % refused draws", refused, refused / total],
            ["flow (integrators.tile_velocity, cellular)", flow, flow / total],
            ["rest (update, tests, step loop, outputs)", total - normals - flow,
             (total - normals - flow) / total],
            [f"{kernel_name} (all)", total, 1.0],
            [f"distance to the ≈ {ISSUE_LIMIT_NS:g} ns issue limit", total / ISSUE_LIMIT_NS,
             "×"]]
    return markdown_table(["Euler–Maruyama step, parts (CPU time)", "ns per particle-step",
                           "share"], rows)


def measure(particles, steps, repeats):
    schemes = ("euler_maruyama", "milstein", "strang_rk2", "rk4")
    studies = {scheme: cellular_study(particles, steps, integrator=scheme) for scheme in schemes}
    for scheme in schemes:  # compile (or load from the cache) before timing
        runner.run_ensemble(cellular_study(64, 4, integrator=scheme), workers=1)
    eddyhop.simulate(cellular_study(64, 4), workers=1)
    em = studies["euler_maruyama"]
    x0, y0 = sample_starts(em.starts[0], em.flow.model, em.flow.params, particles, 1, 0)
    raw_one, raw_two = _two_raw_threads(em)
    functions = {
        "numpy loop": lambda: numpy_loop(x0, y0, steps, em.run.dt, 1.0, 1.0, em.noise.kappa, 1),
        "kernel, 1 thread": lambda: runner.run_ensemble(em, workers=1),
        "kernel, 2 threads": lambda: runner.run_ensemble(em, workers=2),
        "simulate, 1 thread": lambda: eddyhop.simulate(em, workers=1),
        "simulate, 2 threads": lambda: eddyhop.simulate(em, workers=2),
        "raw kernel, 1 thread": raw_one,
        "raw kernel, 2 raw threads": raw_two,
    }
    parts = step_parts(em)
    for function in parts.values():  # compile before timing
        function()
    functions.update(parts)
    for scheme in schemes[1:]:
        functions[f"kernel {scheme}, 1 thread"] = (
            lambda s=studies[scheme]: runner.run_ensemble(s, workers=1))
    return best_times(functions, repeats), particles * steps


def report(times, work) -> str:
    """Tables: single-thread figures from CPU time, thread scaling from wall-clock time."""
    def cpu(name):
        return times[name][1]

    def wall(name):
        return times[name][0]

    numpy_cpu = cpu("numpy loop")
    one = cpu("kernel, 1 thread")
    rows = []
    for name in ("numpy loop", "kernel, 1 thread", "simulate, 1 thread",
                 "raw kernel, 1 thread"):
        rows.append([name, work / cpu(name) / 1e6, cpu(name) / work * 1e9, numpy_cpu / cpu(name)])
    table = markdown_table(["Euler–Maruyama, cellular flow, 1 thread (CPU time)",
                            "M particle-steps/s", "ns per particle-step", "× numpy loop"], rows)
    scaling_rows = []
    for single, double in (("kernel, 1 thread", "kernel, 2 threads"),
                           ("simulate, 1 thread", "simulate, 2 threads"),
                           ("raw kernel, 1 thread", "raw kernel, 2 raw threads")):
        scaling_rows.append([double, work / wall(double) / 1e6, wall(single) / wall(double),
                             cpu(single) / cpu(double)])
    scaling = markdown_table(["two threads", "M particle-steps/s (wall)",
                              "wall speed-up vs 1 thread", "CPU-time efficiency"],
                             scaling_rows)
    scheme_rows = [["euler_maruyama", one / work * 1e9, 1.0]]
    for scheme in ("milstein", "strang_rk2", "rk4"):
        t = cpu(f"kernel {scheme}, 1 thread")
        scheme_rows.append([scheme, t / work * 1e9, t / one])
    schemes = markdown_table(["integrator (kernel, 1 thread, CPU time)", "ns per particle-step",
                              "× Euler–Maruyama"], scheme_rows)
    targets = [
        ["kernel 1 thread vs numpy loop (speed-up, CPU time)", numpy_cpu / one, "≥", 3.0],
        ["kernel 2 threads vs 1 thread (speed-up, wall clock)",
         wall("kernel, 1 thread") / wall("kernel, 2 threads"), "≥", 1.8],
    ]
    for scheme in ("milstein", "strang_rk2", "rk4"):
        targets.append([f"{scheme} vs euler_maruyama (cost per step)",
                        cpu(f"kernel {scheme}, 1 thread") / one, "≤", 2.0])
    ratios = markdown_table(["ratio", "measured", "target", "met"], [
        [name, value, f"{relation} {bound:g}",
         "yes" if (value >= bound if relation == "≥" else value <= bound) else "**no**"]
        for name, value, relation, bound in targets
    ])
    note = ("CPU-time efficiency = CPU time of one thread / total CPU time of two threads "
            "(1 = no overhead from threading; the wall speed-up can reach 2 × efficiency only "
            "when two cores are free). " + machine_note() + ".")
    parts = parts_table(times, work)
    return "\n\n".join([table, parts, scaling, schemes, ratios, note])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    parser.add_argument("--particles", type=int, default=None)
    parser.add_argument("--steps", type=int, default=None)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    particles = args.particles or (20_000 if args.quick else 200_000)
    steps = args.steps or (20 if args.quick else 100)
    times, work = measure(particles, steps, args.repeats)
    print(f"## Kernel throughput (N = {particles}, {steps} steps, best of {args.repeats})\n")
    print(report(times, work))


if __name__ == "__main__":
    main()
