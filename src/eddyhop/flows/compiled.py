"""Compiled dispatch from a family code to its field functions, plus array evaluators.

Kernels call :func:`velocity` with the family's integer code; numba compiles the switch once
and caches it.  Adding a family means one new module and one branch in each switch below; an
unregistered code yields NaN (which the runner reports as a blow-up), never another family's
field.  ``tests/test_flows.py`` checks every registered family against its own module.
"""

from __future__ import annotations

import numpy as np

from .._jit import jit
from . import (
    cats_eye,
    cellular,
    drifting_cellular,
    fourier,
    gridded,
    obstacles,
    oscillating_cellular,
    shear,
)


@jit
def velocity(code, x, y, t, p):
    if code == 0:
        return cellular.velocity(x, y, t, p)
    if code == 1:
        return cats_eye.velocity(x, y, t, p)
    if code == 2:
        return shear.velocity(x, y, t, p)
    if code == 3:
        return drifting_cellular.velocity(x, y, t, p)
    if code == 4:
        return oscillating_cellular.velocity(x, y, t, p)
    if code == 6:
        return gridded.velocity(x, y, t, p)
    if code == 7:
        return obstacles.velocity(x, y, t, p)
    if code == 5:
        return fourier.velocity(x, y, t, p)
    return np.nan, np.nan


@jit
def psi(code, x, y, t, p):
    if code == 0:
        return cellular.psi(x, y, t, p)
    if code == 1:
        return cats_eye.psi(x, y, t, p)
    if code == 2:
        return shear.psi(x, y, t, p)
    if code == 3:
        return drifting_cellular.psi(x, y, t, p)
    if code == 4:
        return oscillating_cellular.psi(x, y, t, p)
    if code == 6:
        return gridded.psi(x, y, t, p)
    if code == 7:
        return obstacles.psi(x, y, t, p)
    if code == 5:
        return fourier.psi(x, y, t, p)
    return np.nan


@jit
def gradient(code, x, y, t, p):
    if code == 0:
        return cellular.gradient(x, y, t, p)
    if code == 1:
        return cats_eye.gradient(x, y, t, p)
    if code == 2:
        return shear.gradient(x, y, t, p)
    if code == 3:
        return drifting_cellular.gradient(x, y, t, p)
    if code == 4:
        return oscillating_cellular.gradient(x, y, t, p)
    if code == 6:
        return gridded.gradient(x, y, t, p)
    if code == 7:
        return obstacles.gradient(x, y, t, p)
    if code == 5:
        return fourier.gradient(x, y, t, p)
    return np.nan, np.nan, np.nan, np.nan


@jit
def has_walls(code):
    """Whether :func:`confine` can move an end point for family ``code`` (else identity)."""
    return code == 7


@jit
def confine(code, x_old, y_old, x, y, p):
    """End point of a step from (x_old, y_old) to (x, y) after the family's solid walls.

    Identity for families without walls (one predictable branch); obstacle lattices mirror an
    end point that entered a cylinder back into the fluid (see ``obstacles.confine``).
    """
    if code == 7:
        return obstacles.confine(x_old, y_old, x, y, p)
    return x, y


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
