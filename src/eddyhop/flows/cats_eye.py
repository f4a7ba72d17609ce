"""Cat's-eye family: from closed cells (ε = 0) to diagonal jets (ε = 1).

ψ = (U/k) [sin(kx) sin(ky) + ε cos(kx) cos(ky)]
  = (U/2k) [(1+ε) cos k(x−y) − (1−ε) cos k(x+y)],
u = U [sin kx cos ky − ε cos kx sin ky],  v = −U [cos kx sin ky − ε sin kx cos ky].
Elliptic points at ((n+½)π/k, (m+½)π/k) with |ψ| = U/k; hyperbolic points at (nπ/k, mπ/k) with
ψ = ±εU/k.  For 0 < ε < 1 the separatrices ψ = ±εU/k bound the eddies (|ψ| > εU/k) and the open
diagonal jets between them (|ψ| < εU/k).  At ε = 1 the flow is the diagonal shear
ψ = (U/k) cos k(x − y).
"""

from __future__ import annotations

import numpy as np

from .._jit import jit
from ._trig import sincos, sincos2
from .base import VELOCITY, WAVENUMBER, FlowFamily, Parameter
from .cellular import cell_lattice_points


@jit
def psi(x, y, t, p):
    k = p[1]
    sx, cx = sincos(k * x)
    sy, cy = sincos(k * y)
    return p[0] / k * (sx * sy + p[2] * cx * cy)


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    k = p[1]
    sx, cx, sy, cy = sincos2(k * x, k * y, fast)
    return p[0] * (sx * cy - p[2] * cx * sy), -p[0] * (cx * sy - p[2] * sx * cy)


@jit
def gradient(x, y, t, p):
    k = p[1]
    uk = p[0] * k
    eps = p[2]
    sx, cx = sincos(k * x)
    sy, cy = sincos(k * y)
    dudx = uk * (cx * cy + eps * sx * sy)
    dudy = uk * (-sx * sy - eps * cx * cy)
    dvdx = uk * (sx * sy + eps * cx * cy)
    return dudx, dudy, dvdx, -dudx


class CatsEye(FlowFamily):
    def stagnation_points(self, values):
        if values["epsilon"] == 1.0:
            # the diagonal shear stagnates on whole lines x − y = nπ/k: no isolated points
            empty = np.zeros((0, 2))
            return {"elliptic": empty, "hyperbolic": empty}
        return {"elliptic": cell_lattice_points(values, 0.5),
                "hyperbolic": cell_lattice_points(values, 0.0)}

    def separatrix_levels(self, values):
        level = values["epsilon"] * values["U"] / values["k"]
        return (0.0,) if level == 0.0 else (-level, level)

    def psi_range(self, values):
        amplitude = values["U"] / values["k"]
        return (-amplitude, amplitude)

    empty_jet_hint = "cats_eye needs epsilon > 0"


FAMILY = CatsEye(
    name="cats_eye",
    code=1,
    summary="cells (epsilon=0) opening into diagonal jets (epsilon=1), "
    "psi = (U/k)(sin kx sin ky + epsilon cos kx cos ky)",
    parameters=(
        VELOCITY,
        WAVENUMBER,
        Parameter("epsilon", "jet parameter: 0 closed cells, 1 diagonal shear", "1",
                  default=0.5, low=0.0, high=1.0),
    ),
)
