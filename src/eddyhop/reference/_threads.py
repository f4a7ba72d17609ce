"""Run dense linear algebra single-threaded while a reference solver works.

The Krylov propagator does many small dense products (Gram–Schmidt on a few hundred vectors,
exponentials of ~100 × 100 matrices).  Multi-threaded OpenBLAS gains nothing at these sizes and,
on a machine whose cores are busy, its spinning threads slowed them twenty-fold in our
measurements.  This context manager sets every OpenBLAS library loaded in the process (NumPy's
and SciPy's) to one thread and restores the previous counts afterwards: it finds the shared
libraries already mapped into the process, looks up their get/set-thread-count symbols with
ctypes and calls them (no extra dependency).  Where the libraries or their symbols cannot be
found (other platforms or BLAS vendors) it does nothing.
"""

from __future__ import annotations

import contextlib
import ctypes
import re
import threading

_SYMBOLS = (  # (get, set) pairs, by library build
    ("scipy_openblas_get_num_threads64_", "scipy_openblas_set_num_threads64_"),
    ("scipy_openblas_get_num_threads", "scipy_openblas_set_num_threads"),
    ("openblas_get_num_threads64_", "openblas_set_num_threads64_"),
    ("openblas_get_num_threads", "openblas_set_num_threads"),
)
_LOCK = threading.Lock()
_HANDLES: list | None = None


def _handles():
    global _HANDLES
    if _HANDLES is None:
        found = []
        try:
            with open("/proc/self/maps", encoding="utf-8") as maps:
                paths = sorted(set(re.findall(r"(/\S*openblas\S*\.so\S*)", maps.read())))
        except OSError:
            paths = []
        for path in paths:
            try:
                library = ctypes.CDLL(path)
            except OSError:
                continue
            for get_name, set_name in _SYMBOLS:
                getter = getattr(library, get_name, None)
                setter = getattr(library, set_name, None)
                if getter is not None and setter is not None:
                    getter.restype = ctypes.c_int
                    found.append((getter, setter))
                    break
        _HANDLES = found
    return _HANDLES


@contextlib.contextmanager
def single_threaded_blas():
    """Within the block, loaded OpenBLAS libraries use one thread (restored on exit)."""
    import numpy  # noqa: F401  (make sure NumPy's BLAS is loaded before looking)
    import scipy.linalg  # noqa: F401

    with _LOCK:
        handles = _handles()
        previous = []
        for getter, setter in handles:
            try:
                previous.append(int(getter()))
                setter(ctypes.c_int(1))
            except Exception:  # pragma: no cover - foreign BLAS builds
                previous.append(None)
    try:
        yield
    finally:
        with _LOCK:
            for (_getter, setter), count in zip(handles, previous):
                if count is not None:
                    setter(ctypes.c_int(count))
