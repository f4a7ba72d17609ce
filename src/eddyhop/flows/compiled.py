"""Compiled dispatch from a family code to its field functions, plus array evaluators.

Kernels call :func:`velocity` (and ``psi``, ``gradient``, ``confine``, ``has_walls``,
:func:`fast_tile_velocity`) with the family's integer code.  The switches are not written by hand:
they are generated from the registry (``registry.py``) the first time numba compiles one of
them, and inlined into the caller, so a new family is one new module and no edit here.  An
unregistered code yields NaN (which the runner reports as a blow-up), never another family's
field.  ``tests/test_flows.py`` checks every registered family against its own module, and
``tests/test_family_plugin.py`` runs a family defined only in a test.
"""

from __future__ import annotations

import numpy as np
from numba.extending import overload

from .._jit import jit
from . import registry

# The generated switches are inlined into their callers (numba IR inlining) and compiled with
# the callers' options, i.e. the package's (see ``_jit.jit``).
_OVERLOAD = {"inline": "always", "jit_options": {"error_model": "numpy", "fastmath": False}}


def _generate(kind: str):
    """Python source of one switch over the registered families, compiled by numba."""
    registry._dispatch_built = True  # families registered from now on would be missed
    namespace = {"nan": np.nan}
    lines = []
    for code, module in registry.registered_modules():
        name = f"family_{code}"
        if kind == "velocity":
            namespace[name] = module.velocity
            lines += [f"    if code == {code}:", f"        return {name}(x, y, t, p)"]
        elif kind == "psi":
            namespace[name] = module.psi
            lines += [f"    if code == {code}:", f"        return {name}(x, y, t, p)"]
        elif kind == "gradient":
            namespace[name] = module.gradient
            lines += [f"    if code == {code}:", f"        return {name}(x, y, t, p)"]
        elif kind == "confine" and registry.has_walls(module):
            namespace[name] = module.confine
            lines += [f"    if code == {code}:",
                      f"        return {name}(x_old, y_old, x, y, p)"]
        elif kind == "walls" and registry.has_walls(module):
            lines += [f"    if code == {code}:", "        return True"]
        elif kind == "tile" and registry.has_fast_velocity(module):
            # the family's own velocity in the particle loop, fast=True: inlined, vectorised
            namespace[name] = module.velocity
            lines += [f"    if code == {code}:",
                      "        for g in range(m):",
                      f"            us[g], vs[g] = {name}(xs[g], ys[g], t, fp, True)",
                      "        return True"]
    signature, fallback = {
        "velocity": ("code, x, y, t, p", "nan, nan"),
        "psi": ("code, x, y, t, p", "nan"),
        "gradient": ("code, x, y, t, p", "nan, nan, nan, nan"),
        "confine": ("code, x_old, y_old, x, y, p", "x, y"),
        "walls": ("code", "False"),
        "tile": ("code, fp, xs, ys, t, us, vs, m", "False"),
    }[kind]
    source = "\n".join([f"def switch({signature}):", *lines, f"    return {fallback}", ""])
    exec(compile(source, f"<eddyhop.flows.compiled: {kind} switch>", "exec"), namespace)
    return namespace["switch"]


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
    return _generate("velocity")


@overload(_switch_psi, **_OVERLOAD)
def _overload_psi(code, x, y, t, p):
    return _generate("psi")


@overload(_switch_gradient, **_OVERLOAD)
def _overload_gradient(code, x, y, t, p):
    return _generate("gradient")


@overload(_switch_confine, **_OVERLOAD)
def _overload_confine(code, x_old, y_old, x, y, p):
    return _generate("confine")


@overload(_switch_walls, **_OVERLOAD)
def _overload_walls(code):
    return _generate("walls")


@overload(_switch_tile, **_OVERLOAD)
def _overload_tile(code, fp, xs, ys, t, us, vs, m):
    return _generate("tile")


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
    _psi_array(family.code, fx, fy, float(t), family.pack(values), out)
    return out.reshape(shape)


def evaluate_velocity(family, values, x, y, t=0.0):
    """(u, v) at points (x, y) and time t, each with the broadcast shape of x and y."""
    fx, fy, shape = _flat(x, y)
    out = np.empty((2, fx.size))
    _velocity_array(family.code, fx, fy, float(t), family.pack(values), out)
    return out[0].reshape(shape), out[1].reshape(shape)


def evaluate_gradient(family, values, x, y, t=0.0):
    """(∂u/∂x, ∂u/∂y, ∂v/∂x, ∂v/∂y) at points (x, y) and time t."""
    fx, fy, shape = _flat(x, y)
    out = np.empty((4, fx.size))
    _gradient_array(family.code, fx, fy, float(t), family.pack(values), out)
    return tuple(row.reshape(shape) for row in out)
