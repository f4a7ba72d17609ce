"""Where sweep points run: in this process, in local worker processes, or on a Dask cluster.

Every backend offers the same small interface to the sweep loop: ``slots`` (points that may run
at once), ``submit(key, function, payload)``, ``next_done() -> (key, outcome)`` and ``close()``.
``function`` catches the errors of a point itself and returns an outcome dict; a backend only
turns the loss of a worker (killed, out of memory) into a failed outcome, so one bad point
never stops the others.  Which backend runs a point never changes its numbers: each point is a
plain study whose results do not depend on workers or chunks.
"""

from __future__ import annotations

import os
import re
import socket
import threading
import time
from urllib.parse import urlsplit

from ..errors import EddyhopError

BACKENDS = ("auto", "serial", "threads", "processes", "dask")
SCHEDULER_ENV = "DASK_SCHEDULER_ADDRESS"


def _lost(exc: BaseException) -> dict:
    return {"ok": False, "error": f"worker lost: {type(exc).__name__}: {exc}", "seconds": None,
            "warnings": []}


class SerialPool:
    """Runs each point in this process when its result is asked for."""

    name = "serial"
    slots = 1

    def __init__(self):
        self._queue = []

    def submit(self, key, function, payload) -> None:
        self._queue.append((key, function, payload))

    def next_done(self):
        key, function, payload = self._queue.pop(0)
        return key, function(payload)

    def cancel(self) -> None:
        self._queue.clear()

    def close(self) -> None:
        self._queue.clear()


def _exit_with_parent(parent: int, interval: float = 0.5) -> None:
    """Watchdog thread of a worker process: end the worker once its parent (the sweep) is gone,
    e.g. killed with SIGKILL, instead of computing a point nobody will record (an orphan is
    re-parented, so its parent id changes)."""

    def watch():
        while True:
            time.sleep(interval)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="eddyhop-parent-watchdog", daemon=True).start()


def _preload(parent: int) -> None:
    """Worker start-up: stop with the parent (see ``_exit_with_parent``), import what a point
    needs and initialise numba's CPU target, so the first point only has to load its kernels.
    Neither compiles nor reads the kernel cache (which the parent may still be filling)."""
    _exit_with_parent(parent)
    import eddyhop.api
    import eddyhop.engine.runner
    import eddyhop.results.dataset
    import eddyhop.study.spec
    import eddyhop.sweeps  # noqa: F401  (its __init__ loads the execute module)

    try:
        from numba.core.registry import cpu_target

        cpu_target.target_context.refresh()
    except Exception:  # pragma: no cover - an internal of numba; only a head start
        pass


def _ready() -> int:
    return os.getpid()


class ProcessPool:
    """Local worker processes through joblib's loky executor (one point per process)."""

    name = "processes"

    def __init__(self, jobs: int):
        self.slots = max(1, jobs)
        self._futures = {}

    def _executor(self):
        from joblib.externals.loky import get_reusable_executor

        # a broken executor (a worker died) is replaced by a fresh one on the next call
        return get_reusable_executor(max_workers=self.slots, timeout=120,
                                     initializer=_preload, initargs=(os.getpid(),))

    def start(self) -> None:
        """Spawn the workers now, so that they start and run ``_preload`` while the parent
        warms the kernel cache instead of after it (loky starts workers on the first
        submission, hence one no-op task per slot)."""
        executor = self._executor()
        for _ in range(self.slots):
            executor.submit(_ready)

    def submit(self, key, function, payload) -> None:
        self._futures[self._executor().submit(function, payload)] = key

    def next_done(self):
        from concurrent.futures import FIRST_COMPLETED, wait

        done, _ = wait(list(self._futures), return_when=FIRST_COMPLETED)
        future = min(done, key=lambda f: self._futures[f])
        key = self._futures.pop(future)
        try:
            return key, future.result()
        except Exception as exc:  # the worker process died
            return key, _lost(exc)

    def cancel(self) -> None:
        for future in self._futures:
            future.cancel()
        self._futures.clear()

    def close(self) -> None:
        self.cancel()


class DaskPool:
    """Points as tasks on a Dask distributed cluster (every worker thread is one slot)."""

    name = "dask"

    def __init__(self, address: str, timeout: float = 10.0):
        """Connect within ``timeout`` seconds in all: probing the address, the client's
        handshake and waiting for a first worker share one deadline."""
        self.address = address
        deadline = time.monotonic() + timeout
        check_reachable(address, timeout, deadline=deadline)
        try:
            from distributed import Client
        except ImportError:  # pragma: no cover - distributed is a declared extra
            raise EddyhopError("the Dask backend needs the 'distributed' package "
                               "(pip install 'eddyhop[dask]')") from None
        try:
            self.client = Client(address, timeout=_left(deadline), set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise EddyhopError(f"could not connect to the Dask scheduler at {address} within "
                               f"{timeout:g} s: {exc}") from None
        try:
            self.client.wait_for_workers(1, timeout=_left(deadline))
        except (OSError, TimeoutError):
            self.client.close()
            raise EddyhopError(f"the Dask scheduler at {address} has no workers (waited "
                               f"{timeout:g} s); start some with `dask worker {address}`") \
                from None
        self.slots = max(1, sum(self.client.nthreads().values()))
        self._futures = {}
        from distributed import as_completed

        # bound to this client's loop: the client is deliberately not the process default
        self._finished = as_completed(loop=self.client.loop)

    def submit(self, key, function, payload) -> None:
        future = self.client.submit(function, payload, pure=False,
                                    key=f"eddyhop-point-{key[1]}-{time.time_ns()}")
        self._futures[future] = key
        self._finished.add(future)

    def next_done(self):
        future = next(self._finished)
        key = self._futures.pop(future)
        try:
            return key, future.result()
        except Exception as exc:  # KilledWorker, lost connection …
            return key, _lost(exc)

    def cancel(self) -> None:
        if self._futures:
            self.client.cancel(list(self._futures))
        self._futures.clear()

    def close(self) -> None:
        self.cancel()
        self.client.close()


def _left(deadline: float) -> float:
    """Seconds until ``deadline`` (a ``time.monotonic()`` value), at least a few ms so that a
    library given it as a timeout still tries once."""
    return max(deadline - time.monotonic(), 0.01)


def check_reachable(address: str, timeout: float, *, deadline: float | None = None) -> None:
    """Fail fast, with a clear message, when nothing answers at a tcp:// scheduler address.

    Connecting and asking for the scheduler's identity share one deadline: ``timeout``
    seconds from now (or ``deadline``, a ``time.monotonic()`` value), so a peer that accepts
    connections and never answers is reported after ``timeout`` seconds, not a multiple."""
    if deadline is None:
        deadline = time.monotonic() + timeout
    if not re.match(r"^[a-z][a-z0-9+]*://", address):
        raise EddyhopError(f"scheduler address {address!r} is not of the form "
                           "tcp://host:port (e.g. tcp://127.0.0.1:8786)")
    parts = urlsplit(address)
    if parts.scheme != "tcp":
        return
    try:
        host, port = parts.hostname, parts.port or 8786
    except ValueError:
        raise EddyhopError(f"scheduler address {address!r} has an invalid port") from None
    if not host:
        raise EddyhopError(f"scheduler address {address!r} names no host")
    hint = ("start one with `dask scheduler` (and `dask worker ADDRESS`), check the address, "
            f"or omit --scheduler and unset {SCHEDULER_ENV} to run on this machine")
    try:
        with socket.create_connection((host, port), timeout=_left(deadline)):
            pass
    except TimeoutError:
        raise EddyhopError(f"no answer from the Dask scheduler at {address} within "
                           f"{timeout:g} s; {hint}") from None
    except OSError as exc:
        raise EddyhopError(f"cannot reach the Dask scheduler at {address} ({exc.strerror or exc}); "
                           f"{hint}") from None
    # Something listens; make sure it speaks the Dask protocol before handing the address to
    # distributed.Client, whose handshake waits forever on a silent peer.
    answer = _identity(address, deadline)
    if not isinstance(answer, dict) or answer.get("type") != "Scheduler":
        what = "did not answer" if answer is None else f"answered as {answer.get('type')!r}"
        raise EddyhopError(f"{address} accepts connections but {what} as a Dask scheduler "
                           f"within {timeout:g} s; {hint}")


def _identity(address: str, deadline: float):
    """The scheduler's identity message, or ``None`` if none arrives by ``deadline``.

    Runs in its own thread and event loop (safe under a running loop, e.g. in a notebook);
    the connection handshake and the reply share the one deadline, and the caller waits for
    the thread no longer than that either (the thread then ends at its own deadline)."""
    import asyncio

    result = {}
    budget = deadline - time.monotonic()
    if budget <= 0:
        return None

    async def ask():
        from distributed.comm import connect

        comm = await connect(address, timeout=budget)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    def run():
        try:
            result["answer"] = asyncio.run(asyncio.wait_for(ask(), budget))
        except Exception:  # timeout, closed connection, garbage: not a scheduler
            result["answer"] = None

    thread = threading.Thread(target=run, name="eddyhop-scheduler-probe", daemon=True)
    thread.start()
    thread.join(max(deadline - time.monotonic(), 0.0))
    return result.get("answer")


def scheduler_address(option: str | None) -> str | None:
    """``--scheduler`` if given, else the ``DASK_SCHEDULER_ADDRESS`` environment variable;
    an address with a scheme Dask does not speak (``http://`` …) is refused at once."""
    address = option or os.environ.get(SCHEDULER_ENV) or None
    if address:
        check_scheduler(address, "--scheduler" if option else SCHEDULER_ENV)
    return address


SCHEDULER_SCHEMES = ("tcp", "tls", "ucx", "inproc")


def check_scheduler(address: str, where: str = "--scheduler") -> None:
    """Refuse a scheduler address whose scheme is not one of ``SCHEDULER_SCHEMES`` (a bare
    ``host:port`` means tcp)."""
    scheme = address.split("://", 1)[0].lower() if "://" in address else "tcp"
    host = address.split("://", 1)[-1]
    if scheme not in SCHEDULER_SCHEMES or not host.strip() or any(c.isspace() for c in address):
        raise EddyhopError(f"{where} = {address!r} is not a Dask scheduler address; give "
                           "tcp://HOST:PORT (schemes: " + ", ".join(SCHEDULER_SCHEMES) + ")")


def check_count(value, option: str, what: str) -> None:
    """Refuse a count of processes/threads other than ``None``, -1 (every core) or ≥ 1, the
    same rule as ``run.workers`` in a study file."""
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, int) or (value < 1 and value != -1):
        raise EddyhopError(f"{option} = {value!r} is not allowed: give -1 for every core or a "
                           f"number of {what} >= 1")


def make_pool(backend: str, *, jobs: int | None, scheduler: str | None, n_todo: int,
              timeout: float = 10.0):
    """The pool for ``backend`` (``auto``: Dask when a scheduler address is known, threads of
    this process when several points and cores are available, else serial).  ``jobs``: points
    at once on this machine (threads or processes), ``None`` or -1 for every core."""
    if backend not in BACKENDS:
        raise EddyhopError(f"backend {backend!r} is not known; choose one of: "
                           + ", ".join(BACKENDS))
    check_count(jobs, "--jobs (-j)", "processes")
    cores = os.cpu_count() or 1
    if jobs is None or jobs == -1:
        jobs = cores
    address = scheduler_address(scheduler)
    if backend == "auto":
        if address:
            backend = "dask"
        elif min(n_todo, jobs) > 1:
            backend = "threads"  # no worker start-up (sweeps/thread_pool.py)
        else:
            backend = "serial"
    if backend == "dask":
        if not address:
            raise EddyhopError(f"the dask backend needs --scheduler tcp://host:port or the "
                               f"{SCHEDULER_ENV} environment variable")
        return DaskPool(address, timeout=timeout)
    if backend == "processes":
        return ProcessPool(min(jobs, max(n_todo, 1)))
    if backend == "threads":
        from .thread_pool import ThreadPool

        return ThreadPool(jobs)  # the chunks of even one point use every thread
    return SerialPool()
