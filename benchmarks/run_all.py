"""Run the kernel benchmarks and print their tables (Markdown).

Run:  python benchmarks/run_all.py [--quick] [--output FILE]

The time-to-answer rows first (``bench_time_to_answer``: cold start, the kernel cache key,
tiny run/validate, plot, sweep -j 2 and resume, output-time and hopping cost, kernel ns per
particle-step; each with its goal and met / not met), then the kernel set: throughput against
a NumPy loop and thread scaling (``bench_kernel``), accuracy per cost (``bench_accuracy``),
memory (``bench_memory``), the step check's cost (``bench_stepcheck``) and compile latency
(``bench_compile``).  Not included, run them on their own: ``bench_sweep.py`` (sweep
backends in detail), ``bench_cell_problem.py`` (the reference cell-problem solver; the
time-to-answer row covers its Pe = 10⁴ case) and ``bench_gridded_obstacles.py``.

Full sizes take 20–25 minutes on two free cores, most of it the memory case (10⁶
particles × 10⁴ output steps, run twice); ``--quick`` takes a few minutes (one cold compile of
the kernels is part of it).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import sys
import time

import bench_accuracy
import bench_compile
import bench_kernel
import bench_memory
import bench_stepcheck
import bench_time_to_answer
import numba
import numpy as np

import eddyhop


class _Tee(io.TextIOBase):
    def __init__(self, *streams):
        self.streams = streams

    def write(self, text):
        for stream in self.streams:
            stream.write(text)
            stream.flush()
        return len(text)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    parser.add_argument("--output", help="also write the tables to this Markdown file")
    args = parser.parse_args(argv)
    quick = ["--quick"] if args.quick else []
    sink = open(args.output, "w", encoding="utf-8") if args.output else None
    streams = [sys.stdout] + ([sink] if sink else [])
    try:
        with contextlib.redirect_stdout(_Tee(*streams)):
            print(f"# eddyhop benchmarks ({time.strftime('%Y-%m-%d %H:%M')}; eddyhop "
                  f"{eddyhop.__version__}, numba {numba.__version__}, numpy {np.__version__}, "
                  f"Python {sys.version.split()[0]}{', quick sizes' if quick else ''})\n")
            for module, options in ((bench_time_to_answer, quick),
                                    (bench_kernel, quick), (bench_accuracy, quick),
                                    (bench_memory, quick), (bench_stepcheck, quick),
                                    (bench_compile, ["--repeats", "1"] if quick else [])):
                start = time.perf_counter()
                module.main(options)
                print(f"\n_({module.__name__}: {time.perf_counter() - start:.0f} s)_\n")
    finally:
        if sink:
            sink.close()


if __name__ == "__main__":
    main()
