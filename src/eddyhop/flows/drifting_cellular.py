"""Cellular flow with a uniform mean drift (V_x, V_y) superposed.

ψ = (U/k) sin kx sin ky + V_x y − V_y x,  u = U sin kx cos ky + V_x,  v = −U cos kx sin ky + V_y.
The drift may point in any direction, so an irrational ratio V_y/V_x is possible.  The velocity is
2π/k-periodic; ψ itself is not (its linear part), so ``psi_range`` refers to the cellular part.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit
from . import cellular
from ._trig import sincos
from .base import VELOCITY, WAVENUMBER, FlowFamily, Parameter
from .drift_direction import drift_record, resolve_drift


@jit
def psi(x, y, t, p):
    sx, _ = sincos(p[1] * x)
    sy, _ = sincos(p[1] * y)
    return p[0] / p[1] * sx * sy + p[2] * y - p[3] * x


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    u, v = cellular.velocity(x, y, t, p, fast)
    return u + p[2], v + p[3]


# A uniform drift has no gradient: the cellular part's gradient is the whole of it.
gradient = cellular.gradient


class DriftingCellular(FlowFamily):
    def validate(self, values, where="flow"):
        """The drift as components, angle and speed, or rotation number
        (``drift_direction.py``); the result records all forms."""
        values = resolve_drift(values, where)
        checked = super().validate(values, where)
        checked.update(drift_record(checked["drift_x"], checked["drift_y"]))
        return checked

    def stagnation_points(self, values):
        """u = 0 and v = 0 give sin k(x+y) = (V_y − V_x)/U and sin k(x−y) = −(V_x + V_y)/U
        (sum and difference of the two equations), so stagnation points exist only while
        |V_x ± V_y| ≤ U; each pair of arcsine branches gives two points per period cell (shifted
        by (π/k, π/k)).  Their type follows from det ∇u: > 0 elliptic, < 0 hyperbolic; points on
        the boundary |V_x ± V_y| = U are degenerate and listed under neither."""
        u_scale, k = values["U"], values["k"]
        empty = np.zeros((0, 2))
        if u_scale == 0.0:
            return {"elliptic": empty, "hyperbolic": empty}
        a = (values["drift_y"] - values["drift_x"]) / u_scale
        b = -(values["drift_x"] + values["drift_y"]) / u_scale
        if abs(a) >= 1.0 or abs(b) >= 1.0:
            return {"elliptic": empty, "hyperbolic": empty}
        sums = (math.asin(a), math.pi - math.asin(a))
        differences = (math.asin(b), math.pi - math.asin(b))
        period = 2 * math.pi
        points = np.array([[((s + d) / 2 + shift) % period, ((s - d) / 2 + shift) % period]
                           for s in sums for d in differences for shift in (0.0, math.pi)]) / k
        p = self.pack(values)
        det = np.array([ux * vy - uy * vx for ux, uy, vx, vy in
                        (gradient(x, y, 0.0, p) for x, y in points)])
        return {"elliptic": points[det > 0], "hyperbolic": points[det < 0]}

    def psi_range(self, values):
        amplitude = values["U"] / values["k"]
        return (-amplitude, amplitude)

    def separatrix_levels(self, values):
        # Without drift the separatrix is psi = 0; a drift reconnects it, and no closed form
        # level exists, so the cellular part's level is the useful reference.
        return (0.0,) if values["drift_x"] == 0.0 and values["drift_y"] == 0.0 else ()


FAMILY = DriftingCellular(
    name="drifting_cellular",
    code=3,
    summary="cellular flow plus a uniform drift (drift_x, drift_y) in any direction",
    parameters=(
        VELOCITY,
        WAVENUMBER,
        Parameter("drift_x", "mean drift velocity along x", "velocity", default=0.0),
        Parameter("drift_y", "mean drift velocity along y", "velocity", default=0.0),
    ),
)
