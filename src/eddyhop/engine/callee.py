"""Functions compiled only into the machine code of the kernels that call them.

A ``_jit.jit`` function called from another compiled function is a numba dispatcher of its
own: numba compiles it completely — its LLVM module optimised, machine code emitted, a CPython
wrapper, an entry in the on-disk cache — and then links its LLVM IR into the caller, whose
module is optimised and turned into machine code again with it.  For the kernels' helpers
(event recording, moment sums, hop bookkeeping, tile lengths) that first machine code is
never run: only the kernel is called from Python, and a kernel loaded from the cache carries
its callees inside its own machine code.  Emitting it, with the wrappers and the cache entry,
was ≈ 40 % of the helpers' compile time on a cold start (1.2–2 s of the demo's).

:func:`callee` compiles a function the way numba compiles the bodies of its own library
functions (``BaseContext.compile_subroutine``): typed and lowered once per argument types,
without a CPython wrapper, into a code library that LLVM optimises with the same passes as a
dispatcher's (same arithmetic, no contraction: every number is the same; the callers' machine
code may differ in inlining order and stack layout) but that emits no machine code of its own
(:class:`LinkedLibrary`); each caller links it in.  Called from Python
(tests), the same function runs through an ordinary ``_jit.jit`` dispatcher.

Options are the package's (``_jit.jit``: numpy error model, no fast-math); compile-time
values travel as ``flows.compiled.CompiledCode`` exactly as for ``jit`` functions, and
literal arguments are typed as their plain types (one compilation per ordinary signature,
as ``_jit._compile_without_literals`` does for dispatchers).
"""

from __future__ import annotations

import inspect
import threading

from numba.core import codegen, compiler, event, types
from numba.core.typing import signature
from numba.core.typing.templates import make_intrinsic_template
from numba.extending import _Intrinsic, typeof_impl

from .._jit import jit

# the targetoptions of a ``_jit.jit`` dispatcher (``cache`` is the dispatcher's, not a flag)
_OPTIONS = {"nopython": True, "error_model": "numpy", "nogil": True, "fastmath": False}
_COMPILING = threading.RLock()


class LinkedLibrary(codegen.JITCodeLibrary):
    """A code library that is optimised like any other but never made into machine code:
    it exists to be linked into callers (``add_linking_library``), whose machine code holds
    it."""

    def _finalize_final_module(self):
        self._finalize_dynamic_globals()
        self._verify_declare_only_symbols()
        self._finalized = True

    def get_pointer_to_function(self, name):
        raise RuntimeError(f"{self.name} is compiled only into its callers")


class Callee(_Intrinsic):
    """A function compiled into its callers (see the module docstring); call it from
    compiled code, or from Python through an ordinary dispatcher."""

    def __init__(self, function):
        self.py_func = function
        self._python_dispatcher = None
        self._compiled = {}  # plain argument types -> CompileResult
        parameters = list(inspect.signature(function).parameters)
        names = ", ".join(parameters)
        # the typer takes the function's own parameters, so that numba folds calls alike
        source = (f"def typer(typingctx, {names}):\n"
                  f"    return callee._typed(({names}{',' if len(parameters) == 1 else ''}))\n")
        scope = {"callee": self}
        exec(source, scope)
        typer = scope["typer"]
        typer.__name__ = function.__name__
        typer.__qualname__ = function.__qualname__
        typer.__module__ = function.__module__
        super().__init__(function.__name__, typer)
        self.__wrapped__ = function
        self._function_type = None  # made when numba first types a call (_typeof_callee)

    def _typed(self, args):
        plain = tuple(types.unliteral(a) for a in args)
        cres = self.compile(plain)
        library, fndesc, compiled = cres.library, cres.fndesc, cres.signature

        def codegen(context, builder, sig, values):
            context.add_linking_libs([library])
            return context.call_internal(builder, fndesc, compiled, values)

        return signature(compiled.return_type, *plain), codegen

    def compile(self, args):
        """The compile result for the plain argument types ``args`` (compiled once)."""
        with _COMPILING:
            cres = self._compiled.get(args)
            if cres is None:
                from numba.core.registry import cpu_target

                flags = compiler.Flags()
                cpu_target.options.parse_as_flags(flags, dict(_OPTIONS))
                flags.no_compile = True
                flags.no_cpython_wrapper = True
                flags.no_cfunc_wrapper = True
                target = cpu_target.target_context
                library = LinkedLibrary(target.codegen(), self.py_func.__qualname__)
                # the event numba sends for a dispatcher's compile (compile profiles read it)
                with event.trigger_event("numba:compile", data={
                        "dispatcher": self, "args": args, "return_type": None}):
                    cres = compiler.compile_extra(cpu_target.typing_context, target,
                                                  self.py_func, args=args, return_type=None,
                                                  flags=flags, locals={}, library=library)
                self._compiled[args] = cres
        return cres

    def __call__(self, *args):
        if self._python_dispatcher is None:
            self._python_dispatcher = jit(self.py_func)
        return self._python_dispatcher(*args)

    def __reduce__(self):
        from .._jit import _module_attribute

        return _module_attribute, (self.__module__, self.__qualname__)

    def __repr__(self):
        return f"<eddyhop callee {self.__module__}.{self.__qualname__}>"


@typeof_impl.register(Callee)
def _typeof_callee(value, context):
    # the call template is made on first use, not at import: importing the kernels stays as
    # cheap as before for a run that loads them from the cache
    if value._function_type is None:
        template = make_intrinsic_template(value, value._defn, value._name,
                                           prefer_literal=False, kwargs={})
        value._function_type = types.Function(template)
    return value._function_type


def callee(function):
    """Decorate a helper of the kernels: compiled only into its callers' machine code."""
    return Callee(function)
