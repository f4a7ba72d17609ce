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

BACKENDS = ("auto", "serial", "processes", "dask")
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


def _preload() -> None:
    """Worker start-up: import what a point needs (imports never compile kernels)."""
    import eddyhop.api
    import eddyhop.dataset
    import eddyhop.runner  # noqa: F401


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
                                     initializer=_preload)

    def start(self) -> None:
        """Spawn the workers now: they import the package while the parent warms the kernel
        cache, instead of after it."""
        self._executor()

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
        self.address = address
        check_reachable(address, timeout)
        try:
            from distributed import Client
        except ImportError:  # pragma: no cover - distributed is a declared extra
            raise EddyhopError("the Dask backend needs the 'distributed' package "
                               "(pip install 'eddyhop[dask]')") from None
        try:
            self.client = Client(address, timeout=timeout, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise EddyhopError(f"could not connect to the Dask scheduler at {address} within "
                               f"{timeout:g} s: {exc}") from None
        try:
            self.client.wait_for_workers(1, timeout=timeout)
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


def check_reachable(address: str, timeout: float) -> None:
    """Fail fast, with a clear message, when nothing answers at a tcp:// scheduler address."""
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
        with socket.create_connection((host, port), timeout=timeout):
            pass
    except TimeoutError:
        raise EddyhopError(f"no answer from the Dask scheduler at {address} within "
                           f"{timeout:g} s; {hint}") from None
    except OSError as exc:
        raise EddyhopError(f"cannot reach the Dask scheduler at {address} ({exc.strerror or exc}); "
                           f"{hint}") from None
    # Something listens; make sure it speaks the Dask protocol before handing the address to
    # distributed.Client, whose handshake waits forever on a silent peer.
    answer = _identity(address, timeout)
    if not isinstance(answer, dict) or answer.get("type") != "Scheduler":
        what = "did not answer" if answer is None else f"answered as {answer.get('type')!r}"
        raise EddyhopError(f"{address} accepts connections but {what} as a Dask scheduler "
                           f"within {timeout:g} s; {hint}")


def _identity(address: str, timeout: float):
    """The scheduler's identity message, or ``None`` if none arrives within ``timeout``.

    Runs in its own thread and event loop (safe under a running loop, e.g. in a notebook)."""
    import asyncio

    result = {}

    async def ask():
        from distributed.comm import connect

        comm = await asyncio.wait_for(connect(address, timeout=timeout), timeout)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await asyncio.wait_for(comm.read(), timeout)
        finally:
            comm.abort()

    def run():
        try:
            result["answer"] = asyncio.run(ask())
        except Exception:  # timeout, closed connection, garbage: not a scheduler
            result["answer"] = None

    thread = threading.Thread(target=run, name="eddyhop-scheduler-probe", daemon=True)
    thread.start()
    thread.join(3 * timeout + 1)
    return result.get("answer")


def scheduler_address(option: str | None) -> str | None:
    """``--scheduler`` if given, else the ``DASK_SCHEDULER_ADDRESS`` environment variable."""
    return option or os.environ.get(SCHEDULER_ENV) or None


def make_pool(backend: str, *, jobs: int | None, scheduler: str | None, n_todo: int,
              timeout: float = 10.0):
    """The pool for ``backend`` (``auto``: Dask when a scheduler address is known, local
    processes when several points and cores are available, else serial)."""
    if backend not in BACKENDS:
        raise EddyhopError(f"backend {backend!r} is not known; choose one of: "
                           + ", ".join(BACKENDS))
    address = scheduler_address(scheduler)
    if backend == "auto":
        cores = os.cpu_count() or 1
        if address:
            backend = "dask"
        elif min(n_todo, jobs or cores) > 1:
            backend = "processes"
        else:
            backend = "serial"
    if backend == "dask":
        if not address:
            raise EddyhopError(f"the dask backend needs --scheduler tcp://host:port or the "
                               f"{SCHEDULER_ENV} environment variable")
        return DaskPool(address, timeout=timeout)
    if backend == "processes":
        jobs = jobs or os.cpu_count() or 1
        if jobs < 1:
            raise EddyhopError(f"--jobs = {jobs}: give a positive number of processes")
        return ProcessPool(min(jobs, max(n_todo, 1)))
    return SerialPool()
