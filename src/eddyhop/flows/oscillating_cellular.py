"""Time-periodic cellular flow: the eddy pattern oscillates laterally.

ψ = (U/k) sin(k (x + B sin ωt)) sin(ky): the cells move rigidly along x with displacement
−B sin ωt (amplitude ``B``, angular frequency ``ω``), which opens chaotic lobes across the
separatrices.  Spatial period 2π/k; time period 2π/ω.
"""

from __future__ import annotations

import math

from .._jit import jit
from ._trig import sincos, sincos2
from .base import VELOCITY, WAVENUMBER, FlowFamily, Parameter
from .cellular import cell_lattice_points


@jit
def psi(x, y, t, p):
    k = p[1]
    sx, _ = sincos(k * (x + p[2] * sincos(p[3] * t)[0]))
    sy, _ = sincos(k * y)
    return p[0] / k * sx * sy


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    k = p[1]
    # the time factor is the same for every particle: always the full sincos (the compiler
    # takes it out of a tile loop), so that large ωt does not send every point to the fallback
    phase = k * (x + p[2] * sincos(p[3] * t)[0])
    sx, cx, sy, cy = sincos2(phase, k * y, fast)
    return p[0] * sx * cy, -p[0] * cx * sy


@jit
def gradient(x, y, t, p):
    k = p[1]
    uk = p[0] * k
    phase = k * (x + p[2] * sincos(p[3] * t)[0])
    sx, cx = sincos(phase)
    sy, cy = sincos(k * y)
    return uk * cx * cy, -uk * sx * sy, uk * sx * sy, -uk * cx * cy


class OscillatingCellular(FlowFamily):
    def stagnation_points(self, values):
        """Instantaneous stagnation points at t = 0 (the geometry's reference time), where the
        pattern is the steady cellular one; at time t they sit at x − B sin ωt."""
        return {"elliptic": cell_lattice_points(values, 0.5),
                "hyperbolic": cell_lattice_points(values, 0.0)}

    def time_period(self, values):
        omega = values["omega"]
        return None if omega == 0.0 else 2.0 * math.pi / omega

    def separatrix_levels(self, values):
        return (0.0,)

    def psi_range(self, values):
        amplitude = values["U"] / values["k"]
        return (-amplitude, amplitude)


FAMILY = OscillatingCellular(
    name="oscillating_cellular",
    code=4,
    summary="cellular flow whose cells oscillate along x, psi = (U/k) sin(k(x + B sin wt)) sin ky",
    steady=False,
    parameters=(
        VELOCITY,
        WAVENUMBER,
        Parameter("B", "lateral oscillation amplitude of the cells", "length", default=0.0,
                  low=0.0),
        Parameter("omega", "angular frequency of the oscillation", "frequency", default=1.0,
                  low=0.0),
    ),
)
