"""Cost of the step check: the same study with ``run.step_check`` on and off, side by side.

Run:  python benchmarks/run_all.py  (or alone: python benchmarks/bench_stepcheck.py [--quick])

The study is representative of the shipped ones: cellular flow, Pe = 100, the default
integrator (``strang_rk2``) at dt·U·k = 0.05, one start region, several diffusive times
1/(κk²), one worker.  The check integrates the default subsample (``run.step_check_particles``,
a fraction ``spec.STEP_CHECK_FRACTION`` of the particles) once more at 2·dt; its fine path is
the run's own.  Reports best-of-n process CPU times (robust on a shared machine) and their
ratio, which the project requires to stay at or below 1.2 by default.
"""

from __future__ import annotations

import argparse

from common import best_times, cellular_study, machine_note, markdown_table

import eddyhop


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    args = parser.parse_args(argv)
    particles, steps, repeats = (2000, 2000, 2) if args.quick else (8000, 6000, 3)
    studies = {flag: cellular_study(particles, steps, dt=0.05, peclet=100.0,
                                    integrator="strang_rk2", n_times=60, workers=1,
                                    step_check=flag)
               for flag in (False, True)}
    for study in studies.values():  # compile outside the timing
        eddyhop.simulate(cellular_study(64, 20, dt=0.05, peclet=100.0, integrator="strang_rk2",
                                        workers=1, step_check=study.run.step_check))
    times = best_times({flag: (lambda s=study: eddyhop.simulate(s))
                        for flag, study in studies.items()}, repeats)
    on = studies[True].run
    print(f"## Step check cost ({particles} particles × {steps} steps, subsample "
          f"{on.step_check_particles}, best of {repeats})\n")
    rows = [("off", times[False][1], times[False][0], 1.0),
            ("on", times[True][1], times[True][0], times[True][1] / times[False][1])]
    print(markdown_table(("step check", "CPU s", "wall s", "CPU ratio to off"), rows))
    print(f"\n{machine_note()}")


if __name__ == "__main__":
    main()
