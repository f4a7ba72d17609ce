"""Sweep points as kernel chunks on one pool of threads of this process.

A local process pool pays, per worker and per ``eddyhop sweep`` command, for a new interpreter,
the package's imports and loading every kernel from the cache (about 2 s of CPU each), and it
ships every point's Dataset back through a pipe.  The kernels release the GIL, so threads of
the sweep process itself run them just as well.  This backend starts ``jobs`` threads once
for the whole sweep (``engine.runner.ChunkPool``) and feeds them, in a fixed order, the
chunks of every point: all chunks of the first point, then of the next …
(``api.simulate_each`` → ``engine.runner.run_plans``).  So

* the chunks of one point are spread over every thread, and the last point of a sweep does
  not run alone on one core while the others idle;
* while the sweep's own thread folds a finished point, builds its Dataset, writes its file
  and analyses it for the merge, the threads already run the next point's chunks;
* nothing starts per point (no process, no pool), and the kernels are loaded once.

Each point's outputs are folded in chunk order, so its numbers are bit-identical to a serial
run (the runner's reproducibility contract).  Only kernel calls run on the pool's threads; all
Python code of the package (study parsing, folding, Datasets, warnings, netCDF, analysis)
runs on the sweep's own thread, so process-wide warning filters and warning capture stay
well defined.  The pool ignores ``StepSizeWarning`` for its lifetime (the sweep records each
point's step-size warnings itself) and restores the caller's filters when it closes.  Its
threads are daemons: Ctrl-C ends the sweep at once, the points in progress are recorded as
pending and computed again on resume.
"""

from __future__ import annotations

import warnings


class ThreadPool:
    """The ``threads`` backend: one ``ChunkPool`` of ``jobs`` threads for the whole sweep.

    Unlike the other backends it is not fed one point at a time: ``execute`` hands it every
    point to run through ``api.simulate_each`` (``chunked = True``)."""

    name = "threads"
    chunked = True

    def __init__(self, jobs: int):
        self.slots = max(1, jobs)
        self.chunks = None
        self._filters = None

    def start(self) -> None:
        from ..engine.runner import ChunkPool, StepSizeWarning

        self._filters = list(warnings.filters)
        warnings.filterwarnings("ignore", category=StepSizeWarning)
        self.chunks = ChunkPool(self.slots)

    def cancel(self) -> None:
        """Queued chunks are cancelled by ``run_plans`` when its generator is closed."""

    def close(self) -> None:
        if self.chunks is not None:
            self.chunks.close()
            self.chunks = None
        if self._filters is not None:
            warnings.filters[:] = self._filters
            mutated = getattr(warnings, "_filters_mutated", None)  # what catch_warnings calls
            if mutated is not None:
                mutated()
            self._filters = None
