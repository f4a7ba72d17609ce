"""Loading the package's kernels from numba's on-disk cache without numba's full start-up.

Before numba loads any cached function it "refreshes" its CPU target: it imports every module
that implements a Python or NumPy feature for *compiling* (linear algebra — which imports
``scipy.linalg`` to find a BLAS —, CFFI support — which imports ``pycparser`` —, typed
containers, random generators, polynomials, jitclasses, …) and installs their registries.
That took ≈ 0.35 s of CPU on the reference machine, a quarter of a tiny ``eddyhop run``, while
loading the three cached kernels that run needs took ≈ 0.04 s.

Machine code loaded from the cache compiles nothing: it needs the symbols it was linked
against and nothing else.  Those come from

* numba's C helpers, the ``PyExc_*`` exception objects and ``_Py_NoneStruct`` (installed when
  the target context is created), and the C math functions (installed by ``CPUContext.init``);
* the NRT memory-management runtime (``rtsys.initialize``);
* the hash secrets that ``numba.cpython.hashing`` installs when it is imported;
* the parallel back-end's symbols, which numba's cache itself re-installs through the
  ``reload_init`` hooks of a parallel function (the package has none).

:class:`KernelCache` is numba's ``FunctionCache`` with a ``load_overload`` that prepares those
and skips the refresh.  A cache miss still compiles through numba's own pipeline, which
refreshes the target in full before compiling (``CompilerBase.__init__``), so compiling is
unchanged; only a hit is cheaper.  The loaded code is the same machine code either way
(``tests/test_kernel_loading.py`` compares a light load with a fully refreshed one).
"""

from __future__ import annotations

from numba.core.caching import FunctionCache


def _prepare_for_cached_code(target_context) -> None:
    """Install everything that cached machine code may link against (idempotent)."""
    import numba.cpython.hashing  # noqa: F401  (its import installs the hash-secret symbols)
    from numba.core.runtime import rtsys

    rtsys.initialize(target_context)


class KernelCache(FunctionCache):
    """numba's per-function disk cache, loading hits without refreshing the whole CPU target."""

    def load_overload(self, sig, target_context):
        try:
            _prepare_for_cached_code(target_context)
            load, guard = self._load_overload, self._guard_against_spurious_io_errors
        except (ImportError, AttributeError):  # a numba whose internals differ: its own path
            return super().load_overload(sig, target_context)
        with guard():
            return load(sig, target_context)


def use_light_loading(dispatcher) -> None:
    """Give a dispatcher made with ``cache=True`` a :class:`KernelCache`.

    Call where numba's ``config.CACHE_DIR`` is what the dispatcher was decorated with: the
    cache's locator reads it when made."""
    if type(getattr(dispatcher, "_cache", None)) is FunctionCache:
        dispatcher._cache = KernelCache(dispatcher.py_func)
