"""Compiled dispatch from a family code to its field functions, plus array evaluators.

Kernels call :func:`velocity` (and ``psi``, ``gradient``, ``confine``, ``has_walls``,
:func:`fast_tile_velocity`) with the family's integer code.  The switches are not written by hand:
they are generated from the registry (``registry.py``) when numba compiles one of them, and
inlined into the caller, so a new family is one new module and no edit here.

Specialisation: the kernels' entry points (``kernel.run_particles``,
``stepcheck.run_step_check``, ``passage._passage_kernel`` and the array evaluators below) ask
numba for the family code as a compile-time constant (a :class:`CompiledCode`, whose numba type
``CodeType(n)`` carries the value), and every function they call is compiled for that constant
too. A switch that sees a constant code is generated with that one family's call and no test, so
a study compiles only its own family and its kernel has no run-time family dispatch; a switch
called with a run-time code (a test calling ``velocity`` from Python) is generated over every
registered family. An unregistered code yields NaN (which the runner reports as a blow-up),
never another family's field. ``tests/test_flows.py`` checks every registered family against its
own module, and ``tests/test_family_plugin.py`` runs a family defined only in a test."""

from __future__ import annotations

import operator

import numpy as np
from numba import types
from numba.core import cgutils
from numba.extending import NativeValue, models, overload, register_model, typeof_impl, unbox

from .._jit import inline_only, jit
from . import registry

# The generated switches are inlined into their callers (numba IR inlining) and compiled with
# the callers' options, i.e. the package's (see ``_jit.jit``).  ``prefer_literal``: a caller
# specialised on its family code hands the code in as a constant (``types.IntegerLiteral``).
_OVERLOAD = {"inline": "always", "prefer_literal": True,
             "jit_options": {"error_model": "numpy", "fastmath": False}}


class CompiledCode:
    """A code (family, scheme, noise model) handed to a kernel as a compile-time constant.

    Its numba type, :class:`CodeType`, carries the value, so every function it reaches is
    compiled (and cached) once per value, and a switch on it keeps one branch.  It holds no
    run-time data: passing it costs nothing.
    """

    __slots__ = ("value",)

    def __init__(self, value: int):
        self.value = int(value)

    def __repr__(self):
        return f"CompiledCode({self.value})"


class CodeType(types.Dummy):
    """numba type of a :class:`CompiledCode`: one type per value."""

    def __init__(self, value: int):
        self.value = value
        super().__init__(name=f"CompiledCode({value})")

    @property
    def key(self):
        return self.value


register_model(CodeType)(models.OpaqueModel)  # no data: a null pointer if ever passed


@typeof_impl.register(CompiledCode)
def _typeof_compiled_code(value, context):
    return CodeType(value.value)


@unbox(CodeType)
def _unbox_compiled_code(typ, obj, c):
    return NativeValue(cgutils.get_null_value(c.context.get_value_type(typ)))


@overload(operator.eq, prefer_literal=True)
def _code_equals(a, b):
    # ``scheme == RK4`` and the like in kernels: a constant the compiler folds
    if isinstance(a, CodeType) and isinstance(b, (types.Integer, CodeType)):
        value = a.value
        if isinstance(b, CodeType):
            equal = value == b.value
            return lambda a, b: equal
        return lambda a, b: b == value
    if isinstance(b, CodeType) and isinstance(a, types.Integer):
        value = b.value
        return lambda a, b: a == value
    return None


def specialised_code(code_type):
    """The code a switch is compiled for, or None when the code is a run-time integer."""
    if isinstance(code_type, CodeType):
        return code_type.value
    if isinstance(code_type, types.IntegerLiteral):
        return code_type.literal_value
    return None


def _generate(kind: str, code_type=None):
    """Python source of one switch, compiled by numba: a test per registered family, or — when
    ``code_type`` is a compile-time constant — that one family's body without a test."""
    registry._dispatch_built = True  # families registered from now on would be missed
    namespace = {"nan": np.nan}
    only = specialised_code(code_type)
    branches = []  # (code, body lines at function level)
    for code, module in registry.registered_modules():
        if only is not None and code != only:
            continue
        name = f"family_{code}"
        if kind in ("velocity", "psi", "gradient"):
            namespace[name] = getattr(module, kind)
            branches.append((code, [f"return {name}(x, y, t, p)"]))
        elif kind == "confine" and registry.has_walls(module):
            namespace[name] = module.confine
            branches.append((code, [f"return {name}(x_old, y_old, x, y, p)"]))
        elif kind == "walls" and registry.has_walls(module):
            branches.append((code, ["return True"]))
        elif kind == "tile" and registry.has_fast_velocity(module):
            # the family's own velocity in the particle loop, fast=True: inlined, vectorised
            namespace[name] = module.velocity
            branches.append((code, ["for g in range(m):",
                                    f"    us[g], vs[g] = {name}(xs[g], ys[g], t, fp, True)",
                                    "return True"]))
    signature, fallback = {
        "velocity": ("code, x, y, t, p", "nan, nan"),
        "psi": ("code, x, y, t, p", "nan"),
        "gradient": ("code, x, y, t, p", "nan, nan, nan, nan"),
        "confine": ("code, x_old, y_old, x, y, p", "x, y"),
        "walls": ("code", "False"),
        "tile": ("code, fp, xs, ys, t, us, vs, m", "False"),
    }[kind]
    lines = [f"def switch({signature}):"]
    for code, body in branches:
        if only is None:
            lines += [f"    if code == {code}:", *("        " + line for line in body)]
        else:
            lines += ["    " + line for line in body]
    if only is None or not branches:
        lines.append(f"    return {fallback}")
    source = "\n".join([*lines, ""])
    exec(compile(source, f"<eddyhop.flows.compiled: {kind} switch>", "exec"), namespace)
    return inline_only(namespace["switch"])  # typed and inlined, never compiled on its own


def _switch_velocity(code, x, y, t, p):
    raise NotImplementedError("compiled only")


def _switch_psi(code, x, y, t, p):
    raise NotImplementedError("compiled only")


def _switch_gradient(code, x, y, t, p):
    raise NotImplementedError("compiled only")


def _switch_confine(code, x_old, y_old, x, y, p):
    raise NotImplementedError("compiled only")


def _switch_walls(code):
    raise NotImplementedError("compiled only")


def _switch_tile(code, fp, xs, ys, t, us, vs, m):
    raise NotImplementedError("compiled only")


@overload(_switch_velocity, **_OVERLOAD)
def _overload_velocity(code, x, y, t, p):
    return _generate("velocity", code)


@overload(_switch_psi, **_OVERLOAD)
def _overload_psi(code, x, y, t, p):
    return _generate("psi", code)


@overload(_switch_gradient, **_OVERLOAD)
def _overload_gradient(code, x, y, t, p):
    return _generate("gradient", code)


@overload(_switch_confine, **_OVERLOAD)
def _overload_confine(code, x_old, y_old, x, y, p):
    return _generate("confine", code)


@overload(_switch_walls, **_OVERLOAD)
def _overload_walls(code):
    return _generate("walls", code)


@overload(_switch_tile, **_OVERLOAD)
def _overload_tile(code, fp, xs, ys, t, us, vs, m):
    return _generate("tile", code)


@jit
def velocity(code, x, y, t, p):
    return _switch_velocity(code, x, y, t, p)


@jit
def psi(code, x, y, t, p):
    return _switch_psi(code, x, y, t, p)


@jit
def gradient(code, x, y, t, p):
    return _switch_gradient(code, x, y, t, p)


@jit
def has_walls(code):
    """Whether :func:`confine` can move an end point for family ``code`` (else identity)."""
    return _switch_walls(code)


@jit
def confine(code, x_old, y_old, x, y, p):
    """End point of a step from (x_old, y_old) to (x, y) after the family's solid walls.

    Identity for families without walls (one predictable branch); obstacle lattices mirror an
    end point that entered a cylinder back into the fluid (see ``obstacles.confine``).
    """
    return _switch_confine(code, x_old, y_old, x, y, p)


@jit(inline="always")
def fast_tile_velocity(fcode, fp, xs, ys, t, us, vs, m):
    """For a family whose ``velocity`` takes ``fast``: (us[g], vs[g]) for g < m from the
    family's own function with ``fast=True`` (the compiler inlines and vectorises it), and
    True; False (nothing written) for any other family.  See ``integrators.tile_velocity``."""
    return _switch_tile(fcode, fp, xs, ys, t, us, vs, m)


# The array evaluators are entry points called from Python: a CompiledCode argument compiles
# (and caches) one specialisation per family code, like the kernels.
@jit
def _psi_array(code, x, y, t, p, out):
    for i in range(x.size):
        out[i] = psi(code, x[i], y[i], t, p)


@jit
def _velocity_array(code, x, y, t, p, out):
    for i in range(x.size):
        u, v = velocity(code, x[i], y[i], t, p)
        out[0, i] = u
        out[1, i] = v


@jit
def _gradient_array(code, x, y, t, p, out):
    for i in range(x.size):
        a, b, c, d = gradient(code, x[i], y[i], t, p)
        out[0, i] = a
        out[1, i] = b
        out[2, i] = c
        out[3, i] = d


def _flat(x, y):
    x = np.ascontiguousarray(x, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    x, y = np.broadcast_arrays(x, y)
    return np.ascontiguousarray(x).ravel(), np.ascontiguousarray(y).ravel(), x.shape


def evaluate_psi(family, values, x, y, t=0.0):
    """ψ at points (x, y) and time t; arrays broadcast, result has their shape."""
    fx, fy, shape = _flat(x, y)
    out = np.empty(fx.size)
    _psi_array(CompiledCode(family.code), fx, fy, float(t), family.pack(values), out)
    return out.reshape(shape)


def evaluate_velocity(family, values, x, y, t=0.0):
    """(u, v) at points (x, y) and time t, each with the broadcast shape of x and y."""
    fx, fy, shape = _flat(x, y)
    out = np.empty((2, fx.size))
    _velocity_array(CompiledCode(family.code), fx, fy, float(t), family.pack(values), out)
    return out[0].reshape(shape), out[1].reshape(shape)


def evaluate_gradient(family, values, x, y, t=0.0):
    """(∂u/∂x, ∂u/∂y, ∂v/∂x, ∂v/∂y) at points (x, y) and time t."""
    fx, fy, shape = _flat(x, y)
    out = np.empty((4, fx.size))
    _gradient_array(CompiledCode(family.code), fx, fy, float(t), family.pack(values), out)
    return tuple(row.reshape(shape) for row in out)
