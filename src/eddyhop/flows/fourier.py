"""User flow given as a finite sum of Fourier modes of the stream function.

ψ = (U/k) Σ_j [c_j cos θ_j + s_j sin θ_j],  θ_j = k (m_j x + n_j y),
with integer mode numbers (m_j, n_j) ≠ (0, 0) and dimensionless amplitudes c_j, s_j.  Then
u = U Σ n_j (s_j cos θ_j − c_j sin θ_j) and v = −U Σ m_j (s_j cos θ_j − c_j sin θ_j).
Study files give ``modes = [[m, n, c, s], ...]``.  The cellular flow is
``[[1, -1, 0.5, 0], [1, 1, -0.5, 0]]``.  Spatial period 2π/k.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit
from ..errors import StudyError
from ._trig import sincos
from .base import FlowFamily

_HEADER = 3  # U, k, number of modes; then 4 numbers per mode


@jit
def psi(x, y, t, p):
    k = p[1]
    total = 0.0
    for j in range(int(p[2])):
        base = _HEADER + 4 * j
        s, c = sincos(k * (p[base] * x + p[base + 1] * y))
        total += p[base + 2] * c + p[base + 3] * s
    return p[0] / k * total


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    k = p[1]
    u = 0.0
    v = 0.0
    for j in range(int(p[2])):
        base = _HEADER + 4 * j
        s, c = sincos(k * (p[base] * x + p[base + 1] * y), fast)
        slope = p[base + 3] * c - p[base + 2] * s
        u += p[base + 1] * slope
        v -= p[base] * slope
    return p[0] * u, p[0] * v


@jit
def gradient(x, y, t, p):
    k = p[1]
    dudx = 0.0
    dudy = 0.0
    dvdx = 0.0
    for j in range(int(p[2])):
        base = _HEADER + 4 * j
        m = p[base]
        n = p[base + 1]
        s, c = sincos(k * (m * x + n * y))
        curvature = -(p[base + 3] * s + p[base + 2] * c)
        dudx += n * m * curvature
        dudy += n * n * curvature
        dvdx -= m * m * curvature
    uk = p[0] * k
    return uk * dudx, uk * dudy, uk * dvdx, -uk * dudx


class FourierModes(FlowFamily):
    def validate(self, values, where="flow"):
        values = dict(values)
        modes = values.pop("modes", None)
        checked = super().validate(values, where)
        if not isinstance(modes, list) or not modes:
            raise StudyError(f"{where}.modes is required: a non-empty list of [m, n, c, s]")
        clean = []
        for i, mode in enumerate(modes):
            label = f"{where}.modes[{i}]"
            if not isinstance(mode, list) or len(mode) != 4:
                raise StudyError(f"{label} = {mode!r}: expected [m, n, c, s]")
            m, n, c, s = mode
            if not all(isinstance(v, (int, float)) and not isinstance(v, bool)
                       and float(v).is_integer() for v in (m, n)):
                raise StudyError(f"{label}: mode numbers m, n must be integers, got {m!r}, {n!r}")
            m, n = int(m), int(n)
            if m == 0 and n == 0:
                raise StudyError(f"{label}: the mode (0, 0) is a constant and carries no flow")
            if not all(isinstance(v, (int, float)) and math.isfinite(v) for v in (c, s)):
                raise StudyError(f"{label}: amplitudes c, s must be finite numbers")
            clean.append([m, n, float(c), float(s)])
        checked["modes"] = clean
        return checked

    def speed_bound(self, values):
        """|u| ≤ U Σ |n_j| (|c_j| + |s_j|) and |v| ≤ U Σ |m_j| (|c_j| + |s_j|)."""
        total = sum((abs(m) + abs(n)) * (abs(c) + abs(s)) for m, n, c, s in values["modes"])
        return abs(values["U"]) * total, "modes"

    def pack(self, values):
        modes = values["modes"]
        head = [values["U"], values["k"], float(len(modes))]
        return np.array(head + [float(v) for mode in modes for v in mode], dtype=np.float64)


FAMILY = FourierModes(
    name="fourier",
    code=5,
    summary="user flow: finite sum of Fourier modes of psi, modes = [[m, n, c, s], ...]",
)
