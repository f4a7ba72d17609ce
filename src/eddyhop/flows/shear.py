"""Periodic parallel shear flow u = U sin(ky), v = 0 (ψ = −(U/k) cos ky).

Streamlines are straight lines; there are no closed eddies and no separatrices.  The flow is
periodic in y with period 2π/k and uniform in x (``period`` reports ``None`` for x).
"""

from __future__ import annotations

import math

from .._jit import jit
from ._trig import sincos
from .base import FlowFamily


@jit
def psi(x, y, t, p):
    return -p[0] / p[1] * sincos(p[1] * y)[1]


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    return p[0] * sincos(p[1] * y, fast)[0], 0.0


@jit
def gradient(x, y, t, p):
    return 0.0, p[0] * p[1] * sincos(p[1] * y)[1], 0.0, 0.0


class Shear(FlowFamily):
    def period(self, values):
        return (None, 2.0 * math.pi / values["k"])

    def psi_range(self, values):
        amplitude = values["U"] / values["k"]
        return (-amplitude, amplitude)


FAMILY = Shear(name="shear", code=2, summary="periodic parallel shear, u = U sin(ky), v = 0")
