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

Decoration is lazy (:class:`LazyDispatcher`): ``jit`` records the function and its options and
the numba dispatcher is made on first use, so importing a module of kernels imports no numba
(``eddyhop validate`` reads the flow families' descriptions without it).
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import os
import threading
from pathlib import Path

from ._kernel_sources import kernel_sources_digest

_PACKAGE_DIR = Path(__file__).resolve().parent
_EXTRA_KEYS: list[str] = []  # sources outside the package that compiled code depends on
_DISPATCHERS: list = []  # every dispatcher made by :func:`jit` so far, to re-key their caches
_MAKING = threading.RLock()


@functools.lru_cache(maxsize=1)
def kernel_cache_dir() -> str:
    """Directory for compiled kernels, unique to this exact version of the kernel sources."""
    import numba

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
    from numba.core import config as _numba_config

    previous = _numba_config.CACHE_DIR
    _numba_config.CACHE_DIR = kernel_cache_dir()
    try:
        yield
    finally:
        _numba_config.CACHE_DIR = previous


class LazyDispatcher:
    """A function decorated by :func:`jit`; the numba dispatcher is made on first use.

    Calling it, or reading any dispatcher attribute (``overloads``, ``targetoptions``,
    ``_numba_type_``, …), makes the dispatcher once and forwards to it.  Numba therefore
    sees the real dispatcher when it compiles a caller that names this object as a global:
    its typing reads ``_numba_type_`` (a ``types.Dispatcher`` of the real dispatcher) and its
    inlining pass reads ``targetoptions`` and ``py_func``.  ``py_func`` is the plain Python
    function and needs no numba.
    """

    def __init__(self, function, settings: dict, before_first_use=None, loop_interleave=None):
        self.py_func = function
        self._settings = settings
        self._before_first_use = before_first_use
        self._loop_interleave = loop_interleave
        self._dispatcher = None
        functools.update_wrapper(self, function)

    def get_dispatcher(self):
        """The numba dispatcher (made, with the package's cache directory, on first call)."""
        if self._dispatcher is None:
            # one dispatcher per function even if worker threads reach it together; reentrant
            # because numba makes the dispatchers of callees while it compiles a caller
            with _MAKING:
                if self._dispatcher is None:
                    import numba

                    _plain_numba_messages()
                    _type_inline_overloads_without_compiling()
                    if self._before_first_use is not None:
                        self._before_first_use()  # e.g. make the intrinsics it calls

                    settings = dict(self._settings)
                    if _EXTRA_KEYS:  # an outside family is registered: in memory only
                        settings["cache"] = False
                    from ._kernel_loading import use_light_loading

                    with _cache_dir_for_decoration():
                        dispatcher = numba.njit(**settings)(self.py_func)
                        use_light_loading(dispatcher)  # cache hits skip numba's full start-up
                    _compile_without_literals(dispatcher)
                    _compile_with_rare_full_collections(dispatcher)
                    _hold_interrupts_while_llvm_emits()
                    if _LLVM_INLINING_KERNELS:
                        _install_llvm_inlining()
                    if self._loop_interleave:
                        _compile_with_loop_interleave(dispatcher, self._loop_interleave)
                    _DISPATCHERS.append(dispatcher)
                    self._dispatcher = dispatcher
        return self._dispatcher

    def __call__(self, *args, **kwargs):
        dispatcher = self._dispatcher
        if dispatcher is None:
            dispatcher = self.get_dispatcher()
        return dispatcher(*args, **kwargs)

    def __getattr__(self, name):
        # only for names not set on the wrapper itself: those of the dispatcher
        if name.startswith("__") or name in ("_settings", "_dispatcher", "_before_first_use",
                                             "_loop_interleave"):
            raise AttributeError(name)
        return getattr(self.get_dispatcher(), name)

    def __reduce__(self):
        # by reference, like a module-level function (the instance stands in its module)
        return _module_attribute, (self.__module__, self.__qualname__)

    def __repr__(self):
        state = "compiled" if self._dispatcher is not None else "not yet made"
        return f"<eddyhop jit function {self.__module__}.{self.__qualname__} ({state})>"


def _plain_numba_messages() -> None:
    """Let numba build its internal error messages without terminal markup.

    Typing a kernel tries many templates that do not match; numba formats a message for each
    (≈ 6500 on the demo's cold start) and, with its default scheme ("no_color": bold only),
    wraps the process's stdout and stderr for every piece of markup (``colorama.init`` and
    ``deinit``): ≈ 0.08 s of CPU.  The plain scheme returns the text unchanged.  Done only
    under numba's default scheme, so a chosen colour scheme (``NUMBA_COLOR_SCHEME``) is kept;
    the messages lose only their bold face.
    """
    from numba.core import config, errors

    if config.COLOR_SCHEME != "no_color" or not hasattr(errors, "_DummyColorScheme"):
        return

    class PlainMessages(errors._DummyColorScheme):
        def code(self, msg):
            return msg

        errmsg = filename = indicate = highlight = reset = code

    errors._termcolor_inst = PlainMessages()


def inline_only(function):
    """Mark ``function``, the implementation an ``inline="always"`` overload returns, as
    typed and inlined only: numba need not compile it on its own.

    For such an overload numba types the implementation's IR and inlines it into the caller,
    but first compiles it as a function of its own — typed, lowered, optimised, made into
    machine code with a CPython wrapper — only to detect a ``literally`` request, and never
    calls it.  The kernels' selectors (scheme, flow family, moment plan) never ask for
    literals; skipping that compile saved ≈ 0.5 s of the demo's cold start.  See
    :func:`_type_inline_overloads_without_compiling`.
    """
    function._eddyhop_inline_only = True
    return function


def _type_inline_overloads_without_compiling() -> None:
    """Make numba's dispatchers of :func:`inline_only` functions answer a call-template
    request without compiling (once per process).

    numba's overload template asks the dispatcher of an inline implementation for its call
    template twice while typing a caller (to check that it compiles, and to fold the
    arguments); the dispatcher compiles on that request.  For a marked function this returns
    the folded argument types and a template of no signatures (numba does not use it for an
    inline implementation: it types the inlined IR itself), and compiles nothing.  Every
    other dispatcher behaves as before.
    """
    from numba.core import typing
    from numba.core.dispatcher import Dispatcher

    original = Dispatcher.get_call_template
    if getattr(original, "_eddyhop_inline_only", False):
        return

    def get_call_template(self, args, kws):
        if not getattr(self.py_func, "_eddyhop_inline_only", False):
            return original(self, args, kws)
        pysig, args = self._compiler.fold_argument_types(args, kws)
        name = self.py_func.__name__
        template = typing.make_concrete_template(f"CallTemplate({name})", key=name,
                                                 signatures=self.nopython_signatures)
        return template, pysig, args, {}

    get_call_template._eddyhop_inline_only = True
    Dispatcher.get_call_template = get_call_template


def _compile_without_literals(dispatcher) -> None:
    """Make a call from compiled code compile (or reuse) the callee for the argument types
    with their constant values dropped.

    Numba types a constant argument (``_add_row(..., 3, ...)``) as a
    literal and first tries a specialisation of the callee for that value: every distinct
    constant then compiles the whole callee again (ten copies of one moment-sum helper, 3 s
    of a cold start).  The kernels never need a callee specialised on a plain constant —
    compile-time codes are ``flows.compiled.CompiledCode`` values, whose type is not a
    literal, and ``inline="always"`` callees are inlined before typing — so each callee is
    compiled once per non-literal signature.  LLVM still sees the constant when it inlines
    the call.
    """
    from numba.core import types

    resolve = dispatcher.get_call_template

    def get_call_template(args, kws):
        return resolve(tuple(types.unliteral(a) for a in args),
                       {name: types.unliteral(value) for name, value in kws.items()})

    dispatcher.get_call_template = get_call_template


def _compile_with_loop_interleave(dispatcher, count: int) -> None:
    """Compile ``dispatcher``'s code with LLVM's loop vectoriser interleaving ``count`` vector
    bodies per iteration (``-force-vector-interleave``), then restore the default (0: LLVM
    chooses).

    For a loop whose body is a long dependency chain (the tile loop's sin/cos polynomials)
    the vectoriser's own choice, one vector body, leaves the processor waiting on the chain;
    two interleaved bodies give it independent work.  Each lane computes the same operations
    as before, so the numbers do not change.  The option is global to LLVM, so it is set
    only around this dispatcher's compilation (numba compiles under one global lock; the
    callees compiled meanwhile get it too, harmlessly) and the library is optimised then:
    numba finalises a function's machine code at the end of its own compilation.
    """
    import llvmlite.binding as llvm

    compile_default = dispatcher.compile

    def compile_interleaved(sig):
        llvm.set_option("", f"-force-vector-interleave={int(count)}")
        try:
            return compile_default(sig)
        finally:
            llvm.set_option("", "-force-vector-interleave=0")

    dispatcher.compile = compile_interleaved


# While numba compiles, Python's full (oldest-generation) garbage collections are postponed
# to at most one per this many young-generation collections (Python's default is 10).
FULL_COLLECTION_SPACING = 1000
_COLLECTIONS_LOCK = threading.Lock()
_compiles_running = 0
_thresholds_before: tuple = ()


@contextlib.contextmanager
def rare_full_collections():
    """Postpone Python's full garbage collections while the body runs (nesting allowed).

    Numba's compiler builds large graphs of IR and type objects that die in reference cycles
    after a few young-generation collections; a full collection meanwhile walks every
    tracked object of the process (numba's, pandas', xarray's: ≈ 10⁵ after the imports, more
    with every compiled function) to find little: ten full collections cost ≈ 0.85 s of CPU
    in a cold ``eddyhop demo`` (gc callbacks, measured).  Young generations are still
    collected as usual, so most of a compile's garbage is freed as before; what survives into
    the oldest generation waits for the next full collection (peak memory of a cold
    ``eddyhop demo``: 334 → 363 MB).  The collector is never disabled, and the previous
    thresholds come back when the outermost body ends.
    """
    import gc

    global _compiles_running, _thresholds_before
    with _COLLECTIONS_LOCK:
        if _compiles_running == 0:
            _thresholds_before = gc.get_threshold()
            young, middle = _thresholds_before[:2]
            gc.set_threshold(young, middle, max(FULL_COLLECTION_SPACING,
                                                *_thresholds_before[2:3]))
        _compiles_running += 1
    try:
        yield
    finally:
        with _COLLECTIONS_LOCK:
            _compiles_running -= 1
            if _compiles_running == 0:
                gc.set_threshold(*_thresholds_before)


def _compile_with_rare_full_collections(dispatcher) -> None:
    """Compile (or load from the cache) ``dispatcher``'s code with full garbage collections
    postponed (:func:`rare_full_collections`)."""
    compile_default = dispatcher.compile

    def compile_collecting_rarely(sig):
        with rare_full_collections():
            return compile_default(sig)

    dispatcher.compile = compile_collecting_rarely


def _hold_interrupts_while_llvm_emits() -> None:
    """Hold Ctrl-C while LLVM emits a module's machine code or loads it from the cache
    (numba's ``JITCodeLibrary._finalize_specific``; installed once per process).

    LLVM calls back into Python when it has emitted a module or looks for one in the cache
    (llvmlite's object-cache hooks), and that callback is the first Python code to run after
    the C call: a Ctrl-C that came during the call is raised inside it, where ctypes prints
    "Exception ignored on calling ctypes callback function" and drops it, and the command
    then runs on to the end as if never interrupted.  Held here
    (:func:`eddyhop.atomic.interrupts_deferred`), it is raised as soon as the call returns —
    no later than before, since Python code cannot run during the call anyway.
    """
    from numba.core import codegen

    from .atomic import interrupts_deferred

    library_class = codegen.JITCodeLibrary
    if getattr(library_class, "_eddyhop_interrupt_hold", False):
        return
    finalize_specific = library_class._finalize_specific

    def _finalize_specific(self):
        with interrupts_deferred():
            finalize_specific(self)

    library_class._finalize_specific = _finalize_specific
    library_class._eddyhop_interrupt_hold = True


def _module_attribute(module: str, qualname: str):
    import importlib

    target = importlib.import_module(module)
    for part in qualname.split("."):
        target = getattr(target, part)
    return target


# Functions (``module.qualname``) that LLVM inlines into the kernels that ask for it
# (``jit(inline_in_llvm=True)``), and those kernels (``jit(llvm_inlines=True)``); see
# :func:`_install_llvm_inlining`.
_LLVM_INLINED: set[str] = set()
_LLVM_INLINING_KERNELS: set[str] = set()


@functools.cache
def _mangled_prefix(dotted_name: str) -> str:
    """The start of numba's mangled symbol of the function ``module.qualname`` (the part
    before its ABI tags): ``_ZN7eddyhop6engine3rng12fill_normalsB``."""
    from numba.core.itanium_mangler import mangle_identifier

    return "_Z" + mangle_identifier(dotted_name)[:-1] + "B"


def _install_llvm_inlining() -> None:
    """Before numba optimises the module of a ``llvm_inlines`` kernel (its callees' modules
    linked in), mark the linked copies of the ``inline_in_llvm`` functions ``alwaysinline``
    (installed once per process).

    A numba function called from another is compiled on its own and its optimised IR linked
    into the caller, where LLVM's inliner judges the tile loops too long to inline: each call
    then passes every array as seven words on the stack and tests the reference count of
    each array argument (≈ 45 ns per call of a tile stepper on an empty tile, ≈ 0.35 ns
    per particle-step on a tile of 128).  Inlined, the argument structures dissolve, numba's
    reference-count pruning removes the pairs, and LLVM sees the whole step.  Inlining moves
    no floating-point operation across another (no fast-math, no contraction): the numbers
    are the same.  Only the kernel's module is concerned — the functions' own dispatchers
    and intermediate callers compile as before (inlining there too cost a cold start ≈ 1 s
    of LLVM work on machine code that never runs) — and numba does no typing or lowering
    again: the inlining happens in LLVM's module passes.
    """
    from llvmlite import binding as llvm
    from numba.core import codegen

    library_class = codegen.JITCodeLibrary
    if getattr(library_class, "_eddyhop_llvm_inlining", False):
        return
    optimize_final_module = library_class._optimize_final_module

    def _optimize_final_module(self):
        # the library is named after the function's qualname; its own (external) definition
        # tells the module apart from another function of that qualname
        if any(name.endswith("." + self.name) for name in _LLVM_INLINING_KERNELS):
            kernels = tuple(_mangled_prefix(name) for name in _LLVM_INLINING_KERNELS)
            inlined = tuple(_mangled_prefix(name) for name in _LLVM_INLINED)
            functions = list(self._final_module.functions)
            if any(f.linkage == llvm.Linkage.external and not f.is_declaration
                   and f.name.startswith(kernels) for f in functions):
                for function in functions:
                    if (function.linkage == llvm.Linkage.linkonce_odr
                            and not function.is_declaration
                            and function.name.startswith(inlined)):
                        function.add_function_attribute("alwaysinline")
        optimize_final_module(self)

    library_class._optimize_final_module = _optimize_final_module
    library_class._eddyhop_llvm_inlining = True


def jit(function=None, *, before_first_use=None, loop_interleave=None, inline_in_llvm=False,
        llvm_inlines=False, **options):
    """``numba.njit`` with the package's fixed options (cache, numpy error model, nogil).

    Returns a :class:`LazyDispatcher`: numba is imported and the dispatcher made on first use.
    ``before_first_use``: a callable run once just before that (it may import numba), e.g. to
    make the numba intrinsics the function's body names as globals.  ``loop_interleave``: see
    :func:`_compile_with_loop_interleave` (same numbers, different instruction schedule).
    ``inline_in_llvm``: LLVM inlines the function into the ``llvm_inlines`` kernels that
    call it, directly or not (see :func:`_install_llvm_inlining`; numba's own
    ``inline="always"`` re-types the body in each caller, which costs compile time).
    ``llvm_inlines``: the function is such a kernel (its module is the only place the
    ``inline_in_llvm`` functions are inlined).
    """
    settings = {"cache": True, "error_model": "numpy", "nogil": True, "fastmath": False}
    settings.update(options)

    def decorate(func):
        if inline_in_llvm:
            _LLVM_INLINED.add(f"{func.__module__}.{func.__qualname__}")
        if llvm_inlines:
            _LLVM_INLINING_KERNELS.add(f"{func.__module__}.{func.__qualname__}")
        return LazyDispatcher(func, settings, before_first_use, loop_interleave)

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
