"""Keep xarray from importing the optional dask stack when this process holds no dask object.

When dask is installed, xarray imports ``dask.array`` (≈ 0.3 s of CPU) the first time it
builds any Variable, only to ask whether the data is a dask array, and imports
``distributed`` (≈ 0.1–0.3 s) on every netCDF write, only to ask whether a distributed
client is active.  eddyhop itself never makes dask arrays, and a small ``eddyhop run`` or
``plot`` spent a fifth of its start-up on these two questions.  Both answers are known
without the imports: no object can be a dask array before ``dask.array`` is imported, and no
distributed client can be active before ``distributed`` is imported.  So:

* :func:`spare_unused_dask` puts a stand-in for xarray's cached record of the dask module
  that answers "no dask array type" while ``dask.array`` is not imported and, from the moment
  anyone imports it, hands over to xarray's real record (the answers stay exact whatever
  happens later in the process: a user may still open a chunked dataset);
* the same function gives xarray's ``is_dask_collection`` (asked of every array that becomes
  an index, ≈ 0.06 s to import ``dask`` for the answer) dask's own answer for an object with
  no callable ``__dask_graph__`` — "not a collection" — without importing dask, while nothing
  has imported it; any other object, or any object once dask is loaded, goes to dask;
* :func:`no_distributed_probe` (around one netCDF write): while nothing has imported dask, it
  gives xarray's writers a scheduler probe that answers "no dask scheduler is active" without
  importing dask; once dask is loaded, it blocks the import of ``distributed`` for the write
  if, and only if, nothing imported it before — exactly the answer the probe would get.

Both rely on xarray internals (``xarray.namedarray.pycompat``); if those change they do
nothing and xarray imports dask as before (``tests/test_startup_imports.py`` notices).
"""

from __future__ import annotations

import contextlib
import sys
import threading

_LOCK = threading.Lock()
_BLOCKED_WRITES = 0  # writes in progress that hold the ``distributed`` block


class _DaskRecordStandIn:
    """xarray's ``DuckArrayModule("dask")``, without importing ``dask.array`` until someone has."""

    def __init__(self, cache: dict, real_record):
        self._cache = cache
        self._real_record = real_record

    def _real(self):
        if "dask.array" not in sys.modules:
            return None
        record = self._real_record("dask")  # cheap now: dask.array is already imported
        if self._cache.get("dask") is self:
            self._cache["dask"] = record
        return record

    @property
    def type(self):
        real = self._real()
        return () if real is None else real.type

    @property
    def module(self):
        real = self._real()
        return None if real is None else real.module

    @property
    def available(self):
        real = self._real()
        return False if real is None else real.available

    @property
    def version(self):
        real = self._real()
        if real is None:  # asked for a version: the caller means to use dask; import it
            import dask.array  # noqa: F401

            real = self._real()
        return real.version


def spare_unused_dask() -> None:
    """Install the stand-in for xarray's dask record (once; nothing if dask.array is loaded)."""
    if "dask.array" in sys.modules:
        return
    try:
        from xarray.namedarray import pycompat
    except ImportError:  # pragma: no cover - an xarray without the duck-array registry
        return
    cache = getattr(pycompat, "_cached_duck_array_modules", None)
    real_record = getattr(pycompat, "DuckArrayModule", None)
    if not isinstance(cache, dict) or real_record is None:  # pragma: no cover
        return
    with _LOCK:
        if "dask" not in cache:
            cache["dask"] = _DaskRecordStandIn(cache, real_record)
    _spare_collection_probe()


def _spare_collection_probe() -> None:
    """Answer xarray's ``is_dask_collection(x)`` for plain objects without importing dask."""
    try:
        from xarray.namedarray import utils
    except ImportError:  # pragma: no cover - an xarray without namedarray
        return
    real = getattr(utils, "is_dask_collection", None)
    if real is None or getattr(real, "spares_dask", False):
        return

    def is_dask_collection(x) -> bool:
        # dask.base.is_dask_collection: a class, or an object without a callable
        # __dask_graph__, is not a collection; that part needs no dask
        if "dask" not in sys.modules and (
                isinstance(x, type) or not callable(getattr(x, "__dask_graph__", None))):
            return False
        return real(x)

    is_dask_collection.spares_dask = True
    is_dask_collection.__wrapped__ = real
    with _LOCK:
        utils.is_dask_collection = is_dask_collection


@contextlib.contextmanager
def no_distributed_probe():
    """Within: ``import distributed`` fails if nothing in this process imported it before.

    xarray asks dask for the active scheduler on each netCDF write, and dask answers by
    importing ``distributed`` to look for a client.  Without a prior import there is no
    client, and the blocked import gives dask that same answer at once.  Writes from several
    threads share the block; the last one out lifts it.
    """
    global _BLOCKED_WRITES
    if "dask" not in sys.modules and _spare_scheduler_probe():
        # no dask object can exist yet, so no dask scheduler is active: the stand-in says so
        # without importing dask (nor, through it, distributed)
        yield
        return
    with _LOCK:
        blocking = ("distributed" not in sys.modules or (
            _BLOCKED_WRITES > 0 and sys.modules.get("distributed") is None)) and (
            not _scheduler_configured())
        if blocking:
            sys.modules["distributed"] = None
            _BLOCKED_WRITES += 1
    try:
        yield
    finally:
        if blocking:
            with _LOCK:
                _BLOCKED_WRITES -= 1
                if _BLOCKED_WRITES == 0 and sys.modules.get("distributed", 0) is None:
                    del sys.modules["distributed"]


def _spare_scheduler_probe() -> bool:
    """Give xarray's writers a ``get_dask_scheduler`` that answers "no dask scheduler is active"
    (``None``, as when dask is not installed) while nothing has imported dask.

    The answer only chooses the lock and the auto-closing of a write that computes dask
    chunks; without dask imported no array can be chunked, and the lock is then the threads'
    lock whatever dask's configuration names (the same lock the real probe picks for its
    "threaded" answer).  Once dask is imported the real probe answers.  Returns whether the
    stand-in is in place (False for an xarray without these internals)."""
    try:
        from xarray.backends import locks, writers
    except ImportError:  # pragma: no cover - an xarray without these modules
        return False
    real = getattr(locks, "get_dask_scheduler", None)
    if real is None:  # pragma: no cover
        return False
    if getattr(real, "spares_dask", False):
        return getattr(writers, "get_dask_scheduler", None) is real
    real_writers = getattr(writers, "get_dask_scheduler", None)
    if real_writers is not real:  # pragma: no cover - xarray rearranged: leave it alone
        return False

    def get_dask_scheduler(get=None, collection=None):
        if "dask" not in sys.modules and get is None and collection is None:
            return None
        return real(get, collection)

    get_dask_scheduler.spares_dask = True
    get_dask_scheduler.__wrapped__ = real
    with _LOCK:
        locks.get_dask_scheduler = get_dask_scheduler
        writers.get_dask_scheduler = get_dask_scheduler
    return True


def _scheduler_configured() -> bool:
    """Whether dask's configuration names a scheduler: dask then asks ``distributed`` once and
    remembers the answer for the process, so that import must not be blocked."""
    dask = sys.modules.get("dask")
    if dask is None:
        try:
            import dask
        except ImportError:
            return False
    try:
        return bool(dask.config.get("scheduler", None) or dask.config.get("get", None))
    except Exception:  # pragma: no cover - a dask without this configuration API
        return True
