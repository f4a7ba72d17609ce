"""Cost of the streamed Lagrangian velocity correlation, measured side by side.

Run:  python benchmarks/bench_velocity.py [--quick]

``runner.run_ensemble`` on the cellular flow (strang_rk2, Pe = 10, dt = 0.05, one thread), with
the ``[velocity_correlation]`` table off and on (four reference times, lags every
``--stride`` steps over a quarter of the run each), interleaved round-robin, best of
``--repeats`` process-CPU times.  The feature adds one flow evaluation per particle per
scheduled lag and six sums; with it off the kernel does no extra work (its cost against the
main branch is measured with ``bench_kernel.py``).
"""

from __future__ import annotations

import argparse

from common import best_times, cellular_study, machine_note, markdown_table

from eddyhop.engine import runner
from eddyhop.study.spec import parse_study


def _study(particles, steps, stride, on):
    base = cellular_study(particles, steps, dt=0.05, integrator="strang_rk2", batches=16,
                          step_check=False)
    if not on:
        return base
    document = {
        "flow": {"family": "cellular", "U": 1.0, "k": 1.0}, "noise": {"peclet": 10.0},
        "run": {"particles": particles, "dt": 0.05, "t_end": steps * 0.05, "n_times": 10,
                "spacing": "linear", "integrator": "strang_rk2", "seed": 20260101,
                "progress": False, "batches": 16, "step_check": False},
        "velocity_correlation": {"reference_times": [i * steps * 0.05 / 4 for i in range(4)],
                                 "lag_max": steps * 0.05 / 4, "lag_step": stride * 0.05},
    }
    return parse_study(document)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    parser.add_argument("--stride", type=int, default=5, help="steps between lags")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    particles = 4_000 if args.quick else 20_000
    steps = 400
    studies = {"off": _study(particles, steps, args.stride, False),
               "on": _study(particles, steps, args.stride, True)}
    for study in studies.values():  # compile outside the timing
        runner.run_ensemble(_study(256, 40, 1, study.velocity_correlation.enabled),
                            workers=1, progress=False)
    functions = {name: (lambda s=study: runner.run_ensemble(s, workers=1, progress=False))
                 for name, study in studies.items()}
    times = best_times(functions, args.repeats)
    work = particles * steps
    rows = [[name, times[name][1] / work * 1e9, times[name][1] / times["off"][1]]
            for name in studies]
    lags = steps // 4 // args.stride + 1
    print(f"## Velocity correlation cost (N = {particles}, {steps} steps, 4 reference times × "
          f"{lags} lags every {args.stride} steps; best of {args.repeats})\n")
    print(markdown_table(["velocity_correlation", "ns per particle-step (CPU)", "× off"], rows))
    print()
    print(machine_note())


if __name__ == "__main__":
    main()
