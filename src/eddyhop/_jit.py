"""One place that fixes how every kernel of the package is compiled.

Kernels are compiled lazily (never at import) with ``cache=True`` so that a second process —
a test, a joblib or Dask worker, the next ``eddyhop run`` — loads machine code from disk instead
of compiling again.  Numba checks only the timestamp of the file that defines a cached function,
not of the modules it calls, so an edited flow module could silently reuse a stale kernel.  We
therefore key the cache directory by a hash of the kernel sources (``_kernel_sources``: the
modules that define compiled code and what they import at module level): an edit to any of
them gives a fresh cache, an edit to a plot, CLI or analysis module reuses the compiled kernels; a
flow family registered from outside the package (a plugin, a test) switches this process to
in-memory compilation (:func:`add_cache_key`): the dispatch generated for it cannot be
rebuilt from an on-disk cache.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import os
from pathlib import Path

import numba
from numba.core import config as _numba_config

from ._kernel_sources import kernel_sources_digest

_PACKAGE_DIR = Path(__file__).resolve().parent
_EXTRA_KEYS: list[str] = []  # sources outside the package that compiled code depends on
_DISPATCHERS: list = []  # every dispatcher made by :func:`jit`, to re-key their caches


@functools.lru_cache(maxsize=1)
def kernel_cache_dir() -> str:
    """Directory for compiled kernels, unique to this exact version of the kernel sources."""
    digest = kernel_sources_digest(_PACKAGE_DIR)
    if _EXTRA_KEYS:
        extra = hashlib.sha256(digest.encode())
        for text in _EXTRA_KEYS:
            extra.update(text.encode())
        digest = extra.hexdigest()
    root = os.environ.get("EDDYHOP_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(Path.home(), ".cache"), "eddyhop"
    )
    return os.path.join(root, f"numba-{numba.__version__}-{digest[:16]}")


@contextlib.contextmanager
def _cache_dir_for_decoration():
    # Numba reads config.CACHE_DIR when a dispatcher is decorated; setting it only around our
    # own decorations leaves the caching of other libraries in the same process untouched.
    previous = _numba_config.CACHE_DIR
    _numba_config.CACHE_DIR = kernel_cache_dir()
    try:
        yield
    finally:
        _numba_config.CACHE_DIR = previous


def jit(function=None, **options):
    """``numba.njit`` with the package's fixed options (cache, numpy error model, nogil)."""
    settings = {"cache": True, "error_model": "numpy", "nogil": True, "fastmath": False}
    settings.update(options)
    if _EXTRA_KEYS:  # an outside family is registered: in-memory only (see add_cache_key)
        settings["cache"] = False

    def decorate(func):
        with _cache_dir_for_decoration():
            dispatcher = numba.njit(**settings)(func)
        _DISPATCHERS.append(dispatcher)
        return dispatcher

    return decorate if function is None else decorate(function)


def add_cache_key(text: str) -> None:
    """Record the source of a flow family registered from outside the package.

    From then on this process compiles the package's kernels in memory only (no on-disk
    cache, for the dispatchers already decorated and for later ones): the kernels then inline
    a dispatch generated for the outside family, and numba cannot rebuild such code from its
    cache in a new process (it re-imports the module of the compiled code, which a generated
    switch does not have) — a second run would fail instead of reusing the cache.
    """
    from numba.core.caching import NullCache

    _EXTRA_KEYS.append(text)
    kernel_cache_dir.cache_clear()
    for dispatcher in _DISPATCHERS:
        dispatcher._cache = NullCache()


def any_compiled() -> bool:
    """Whether any of the package's kernels has been compiled or loaded in this process."""
    return any(dispatcher.overloads for dispatcher in _DISPATCHERS)
