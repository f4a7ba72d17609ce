"""Steady cellular flow: a checkerboard of counter-rotating eddies.

ψ = (U/k) sin(kx) sin(ky),  u = ∂ψ/∂y = U sin(kx) cos(ky),  v = -∂ψ/∂x = -U cos(kx) sin(ky).
Eddy centres (elliptic points, |ψ| = U/k) at ((n+½)π/k, (m+½)π/k); hyperbolic corners at
(nπ/k, mπ/k); the separatrix network is ψ = 0 (the lines x = nπ/k and y = mπ/k).
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit
from ._trig import sincos, sincos2
from .base import FlowFamily


@jit
def psi(x, y, t, p):
    sx, _ = sincos(p[1] * x)
    sy, _ = sincos(p[1] * y)
    return p[0] / p[1] * sx * sy


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    """(u, v); ``fast`` is passed to ``_trig.sincos`` (nan beyond its range, for tile loops)."""
    sx, cx, sy, cy = sincos2(p[1] * x, p[1] * y, fast)
    return p[0] * sx * cy, -p[0] * cx * sy


@jit
def gradient(x, y, t, p):
    """(∂u/∂x, ∂u/∂y, ∂v/∂x, ∂v/∂y)."""
    k = p[1]
    uk = p[0] * k
    sx, cx = sincos(k * x)
    sy, cy = sincos(k * y)
    return uk * cx * cy, -uk * sx * sy, uk * sx * sy, -uk * cx * cy


def cell_lattice_points(values: dict, offset: float) -> np.ndarray:
    """Points ((i + offset)π/k, (j + offset)π/k), i, j ∈ {0, 1}: one period cell's worth."""
    side = math.pi / values["k"]
    return np.array([[(i + offset) * side, (j + offset) * side] for i in (0, 1) for j in (0, 1)])


class Cellular(FlowFamily):
    def stagnation_points(self, values):
        return {"elliptic": cell_lattice_points(values, 0.5),
                "hyperbolic": cell_lattice_points(values, 0.0)}

    def separatrix_levels(self, values):
        return (0.0,)

    def psi_range(self, values):
        amplitude = values["U"] / values["k"]
        return (-amplitude, amplitude)


FAMILY = Cellular(
    name="cellular",
    code=0,
    summary="steady array of counter-rotating eddies, psi = (U/k) sin kx sin ky",
)
