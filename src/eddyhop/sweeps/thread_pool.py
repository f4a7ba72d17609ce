"""Sweep points on threads of this process: no worker start-up, kernels loaded once.

A local process pool pays, per worker and per ``eddyhop sweep`` command, for a new interpreter,
the package's imports and loading every kernel from the cache (about 2 s of CPU each), and it
ships every point's Dataset back through a pipe.  The kernels release the GIL, so threads of
the sweep process itself run points side by side just as well, and the Python parts of one
point (building its Dataset, the step-check analysis, writing its file) overlap the kernel of
another.  Each point also splits its particles over ``slots`` chunk threads (the runner's own
chunking, which never changes a number), so the last point of a sweep still uses every core
instead of leaving the others idle.

Threads are daemons: Ctrl-C ends the sweep at once (the running points are recorded as
pending and computed again on resume), as with the other backends.  Points that fail raise
inside ``compute_point``, which returns the error as an outcome; nothing here can take other
points down.  The warning filters are process-wide, so the pool ignores ``StepSizeWarning``
for its lifetime (the sweep records each point's step-size warnings itself) and restores the
caller's filters when it closes.
"""

from __future__ import annotations

import queue
import threading
import warnings


class ThreadPool:
    """Points as tasks on ``jobs`` daemon threads of this process."""

    name = "threads"

    def __init__(self, jobs: int):
        self.slots = max(1, jobs)
        self._tasks: queue.Queue = queue.Queue()
        self._done: queue.Queue = queue.Queue()
        self._pending: dict = {}  # key -> index of submission, to cancel queued tasks
        self._cancelled: set = set()
        self._lock = threading.Lock()
        self._threads = []
        self._filters = None

    def start(self) -> None:
        from ..engine.runner import StepSizeWarning

        self._filters = list(warnings.filters)
        warnings.filterwarnings("ignore", category=StepSizeWarning)
        for number in range(self.slots):
            thread = threading.Thread(target=self._work, name=f"eddyhop-point-{number}",
                                      daemon=True)
            thread.start()
            self._threads.append(thread)

    def point_threads(self, requested: int | None) -> int:
        """Chunk threads for each point: ``requested`` (``--workers``), else every slot."""
        return requested if requested is not None else self.slots

    def _work(self) -> None:
        while True:
            item = self._tasks.get()
            if item is None:
                return
            key, function, payload = item
            with self._lock:
                skip = key in self._cancelled
            if skip:
                continue
            try:
                outcome = function(payload)
            except BaseException as exc:  # compute_point returns its errors; belt and braces
                outcome = {"ok": False, "error": f"{type(exc).__name__}: {exc}",
                           "seconds": None}
            self._done.put((key, outcome))

    def submit(self, key, function, payload) -> None:
        if not self._threads:
            self.start()
        with self._lock:
            self._pending[key] = True
        self._tasks.put((key, function, payload))

    def next_done(self):
        key, outcome = self._done.get()
        with self._lock:
            self._pending.pop(key, None)
        return key, outcome

    def cancel(self) -> None:
        with self._lock:
            self._cancelled.update(self._pending)
            self._pending.clear()

    def close(self) -> None:
        self.cancel()
        for _ in self._threads:
            self._tasks.put(None)
        self._threads = []
        if self._filters is not None:
            warnings.filters[:] = self._filters
            mutated = getattr(warnings, "_filters_mutated", None)  # what catch_warnings calls
            if mutated is not None:
                mutated()
            self._filters = None
