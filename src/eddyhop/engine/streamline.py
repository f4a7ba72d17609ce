"""Streamline-preserving integration of steady flows without noise (κ = 0).

The scheme ``projected_rk45`` keeps every tracer on the level set of the stream function it
started on, to round-off, for arbitrarily long runs.  Each kernel step of length ``dt`` is
covered by adaptive substeps, each of them

1. an embedded Runge–Kutta step of Dormand & Prince (1980), *J. Comput. Appl. Math.* 6, 19–26,
   the 5(4) pair with local extrapolation (coefficients as tabulated in Hairer, Nørsett &
   Wanner, *Solving Ordinary Differential Equations I*, 2nd ed., Springer 1993, Table II.5.2);
2. a projection of the 5th-order end point back onto ψ(X) = ψ(X₀) along ∇ψ (standard
   projection by simplified Newton iterations: Hairer, Lubich & Wanner, *Geometric Numerical
   Integration*, 2nd ed., Springer 2006, §IV.4, Algorithm 4.2).  Here ∇ψ = (−v, u) is the
   rotated velocity, so the gradient costs nothing extra: it is the step's last stage.  ψ is
   the family's full stream function, *including* the non-periodic part of a mean drift
   (ψ = … + V_x y − V_y x), so a drifting tracer keeps its exact open streamline.

Error control (per substep of length h, in length units):

* the embedded estimate |X₅ − X₄| must be below ``rate·h`` (error per unit step, so that the
  global position error over a time T stays of order ``rate·T``) or a round-off floor
  16 ε (|X| + ℓ) (ε machine epsilon, ℓ the eddy side); ``rate = tolerance · ℓ · U k`` with the
  study's ``run.tolerance`` (eddy sides per advective time 1/(U k));
* the projection's displacement must be below 10 × that allowance.  Near a stagnation point
  |∇ψ| → 0 and a small level error would need a large correction; such a step is rejected
  and retried with half the step, so the correction never moves a tracer further than the
  step's own error.  A residual |ψ − ψ₀| below the round-off level of ψ itself,
  16 ε |U| (|X| + ℓ), needs no correction (it cannot be improved in floating point).
* After a rejection the step is shrunk by the usual factor 0.9 (allowed/err)^(1/4) (error per
  unit step: err ∝ h⁵ against an allowance ∝ h), bounded to [0.2, 5].  A step below 10⁻¹²·dt
  is accepted as it is (a tracer parked at a stagnation point does not move).

The step size carries over from one kernel step to the next (per particle).  Everything is
per particle and deterministic, so results do not depend on the tiling, chunking or workers.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit
from ..flows.compiled import psi, velocity
from .integrators import tile_velocity

# Entries appended to the noise parameter vector (κ = 0) for this scheme: error rate
# (length/time), eddy side (length), speed scale (velocity).
RATE_SLOT = 3
SIDE_SLOT = 4
SPEED_SLOT = 5

_EPS = 2.220446049250313e-16
_ROUNDOFF = 16.0 * _EPS
_SMALLEST_STEP = 1e-12
_NEWTON_ITERATIONS = 4

# Dormand–Prince 5(4) tableau
_A21 = 1.0 / 5.0
_A31, _A32 = 3.0 / 40.0, 9.0 / 40.0
_A41, _A42, _A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
_A51, _A52, _A53, _A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
_A61, _A62, _A63 = 9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0
_A64, _A65 = 49.0 / 176.0, -5103.0 / 18656.0
_B1, _B3, _B4, _B5, _B6 = 35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0
# b − b̂ (5th minus 4th order weights); the 7th stage is f at the 5th-order point (FSAL)
_E1, _E3, _E4 = 71.0 / 57600.0, -71.0 / 16695.0, 71.0 / 1920.0
_E5, _E6, _E7 = -17253.0 / 339200.0, 22.0 / 525.0, -1.0 / 40.0


def scheme_parameters(nq: np.ndarray, tolerance: float, side: float, speed: float) -> np.ndarray:
    """The noise vector extended with this scheme's (rate, side, speed) (see module doc)."""
    wavenumber = math.pi / side
    rate = tolerance * side * speed * wavenumber
    if not rate > 0.0:  # a flow at rest: every step is exact; any positive rate will do
        rate = tolerance * side
    out = np.zeros(SPEED_SLOT + 1)
    out[:nq.size] = nq
    out[RATE_SLOT] = rate
    out[SIDE_SLOT] = side
    out[SPEED_SLOT] = speed
    return out


@jit
def project_to_level(fcode, fp, x, y, t, psi0, gx, gy, psi_floor):
    """(x, y) moved along the fixed gradient (gx, gy) until |ψ − ψ₀| ≤ psi_floor (simplified
    Newton, at most a few iterations); the gradient is ∇ψ at or near (x, y)."""
    norm2 = gx * gx + gy * gy
    if norm2 == 0.0:
        return x, y
    for _ in range(_NEWTON_ITERATIONS):
        residual = psi0 - psi(fcode, x, y, t, fp)
        if abs(residual) <= psi_floor:
            break
        scale = residual / norm2
        x += scale * gx
        y += scale * gy
    return x, y


# Rows of the tile scratch (the kernel allocates WORK_ROWS).  Rows indexed by the compact
# position j of a still-moving particle: its particle index, position, velocity (first stage),
# time elapsed in the kernel step, trial step, stages 2..7, 5th-order point, a done flag.
# Rows PSI0_ROW and STEP_ROW are indexed by the particle and persist between kernel steps.
_INDEX = 0
_XC, _YC = 1, 2
_U1, _V1 = 3, 4
_ELAPSED = 5
_STEP = 6
_XA, _YA = 7, 8
_STAGES = 9  # rows 9..18 hold stages 2..6 (u, v pairs)
_U7, _V7 = 19, 20
_X5, _Y5 = 21, 22
_DONE = 23
PSI0_ROW = 24
STEP_ROW = 25
WORK_ROWS = 26


@jit
def _stage_positions(work, n, c1, c2, c3, c4, c5, row_x, row_y):
    """work[row_x/row_y, j] = X_j + h_j Σ c_i k_i, with k_1 = (U1, V1) and k_i the stages."""
    for j in range(n):
        h = work[_STEP, j]
        work[row_x, j] = work[_XC, j] + h * (c1 * work[_U1, j] + c2 * work[_STAGES, j]
                                             + c3 * work[_STAGES + 2, j]
                                             + c4 * work[_STAGES + 4, j]
                                             + c5 * work[_STAGES + 6, j])
        work[row_y, j] = work[_YC, j] + h * (c1 * work[_V1, j] + c2 * work[_STAGES + 1, j]
                                             + c3 * work[_STAGES + 3, j]
                                             + c4 * work[_STAGES + 5, j]
                                             + c5 * work[_STAGES + 7, j])


@jit
def _decide(fcode, fp, work, j, t, dt, rate, side, speed, smallest):
    """Accept or reject compact particle j's trial step; True when it has reached t + dt."""
    g = int(work[_INDEX, j])
    h = work[_STEP, j]
    ex = h * (_E1 * work[_U1, j] + _E3 * work[_STAGES + 2, j] + _E4 * work[_STAGES + 4, j]
              + _E5 * work[_STAGES + 6, j] + _E6 * work[_STAGES + 8, j] + _E7 * work[_U7, j])
    ey = h * (_E1 * work[_V1, j] + _E3 * work[_STAGES + 3, j] + _E4 * work[_STAGES + 5, j]
              + _E5 * work[_STAGES + 7, j] + _E6 * work[_STAGES + 9, j] + _E7 * work[_V7, j])
    error = math.hypot(ex, ey)
    if not math.isfinite(error + work[_X5, j] + work[_Y5, j]):
        # a non-finite field: end the step here so that the kernel reports the blow-up
        work[_XC, j] = work[_X5, j]
        work[_YC, j] = work[_Y5, j]
        return True
    size = abs(work[_XC, j]) + abs(work[_YC, j]) + side
    allowed = max(rate * h, _ROUNDOFF * size)
    x5 = work[_X5, j]
    y5 = work[_Y5, j]
    accept = error <= allowed
    moved = 0.0
    if accept:
        # ∇ψ = (∂ψ/∂x, ∂ψ/∂y) = (−v, u) at the 5th-order point
        xp, yp = project_to_level(fcode, fp, x5, y5, t, work[PSI0_ROW, g], -work[_V7, j],
                                  work[_U7, j], _ROUNDOFF * speed * size)
        moved = math.hypot(xp - x5, yp - y5)
        accept = moved <= 10.0 * allowed
        x5 = xp
        y5 = yp
    if error > 0.0:
        factor = min(5.0, max(0.2, 0.9 * math.sqrt(math.sqrt(allowed / error))))
    else:
        factor = 5.0
    if not accept and h <= smallest:
        accept = True  # nothing is gained below this step (a parked tracer)
    if not accept:
        work[STEP_ROW, g] = h * min(factor, 0.5)
        return False
    last = h >= dt - work[_ELAPSED, j]
    work[_XC, j] = x5
    work[_YC, j] = y5
    if moved > 0.0:
        work[_U1, j], work[_V1, j] = velocity(fcode, x5, y5, t, fp)
    else:
        work[_U1, j] = work[_U7, j]
        work[_V1, j] = work[_V7, j]
    if last:
        return True
    work[_ELAPSED, j] += h
    work[STEP_ROW, g] = min(h * factor, dt)
    return False


@jit
def advance_tile_projected(fcode, fp, nq, xs, ys, t, dt, m, x_new, y_new, work):
    """One kernel step of length dt for tile particles g < m (see the module docstring).

    Particles take their own adaptive substeps in rounds; each round evaluates the flow for
    the particles still short of t + dt, packed contiguously (``integrators.tile_velocity``),
    and a particle that arrives leaves the pack.  Per particle the arithmetic does not depend
    on its tile-mates or on its place in the pack.
    """
    rate = nq[RATE_SLOT]
    side = nq[SIDE_SLOT]
    speed = abs(nq[SPEED_SLOT])
    smallest = _SMALLEST_STEP * dt
    for g in range(m):
        work[_INDEX, g] = g
        work[_XC, g] = xs[g]
        work[_YC, g] = ys[g]
        work[_ELAPSED, g] = 0.0
        work[STEP_ROW, g] = min(work[STEP_ROW, g], dt)
        # stage rows enter the first stage sums with weight 0: they must hold finite numbers
        # (0 × inf or 0 × nan of uninitialised scratch would poison the step)
        for row in range(_STAGES, _STAGES + 10):
            work[row, g] = 0.0
    tile_velocity(fcode, fp, work[_XC], work[_YC], t, work[_U1], work[_V1], m)
    n = m
    while n > 0:
        for j in range(n):
            work[_STEP, j] = min(work[STEP_ROW, int(work[_INDEX, j])], dt - work[_ELAPSED, j])
        # Dormand–Prince stages 2..6 (the time argument is irrelevant: steady flows only)
        _stage_positions(work, n, _A21, 0.0, 0.0, 0.0, 0.0, _XA, _YA)
        tile_velocity(fcode, fp, work[_XA], work[_YA], t, work[_STAGES], work[_STAGES + 1], n)
        _stage_positions(work, n, _A31, _A32, 0.0, 0.0, 0.0, _XA, _YA)
        tile_velocity(fcode, fp, work[_XA], work[_YA], t, work[_STAGES + 2],
                      work[_STAGES + 3], n)
        _stage_positions(work, n, _A41, _A42, _A43, 0.0, 0.0, _XA, _YA)
        tile_velocity(fcode, fp, work[_XA], work[_YA], t, work[_STAGES + 4],
                      work[_STAGES + 5], n)
        _stage_positions(work, n, _A51, _A52, _A53, _A54, 0.0, _XA, _YA)
        tile_velocity(fcode, fp, work[_XA], work[_YA], t, work[_STAGES + 6],
                      work[_STAGES + 7], n)
        for j in range(n):
            h = work[_STEP, j]
            work[_XA, j] = work[_XC, j] + h * (_A61 * work[_U1, j] + _A62 * work[_STAGES, j]
                                               + _A63 * work[_STAGES + 2, j]
                                               + _A64 * work[_STAGES + 4, j]
                                               + _A65 * work[_STAGES + 6, j])
            work[_YA, j] = work[_YC, j] + h * (_A61 * work[_V1, j] + _A62 * work[_STAGES + 1, j]
                                               + _A63 * work[_STAGES + 3, j]
                                               + _A64 * work[_STAGES + 5, j]
                                               + _A65 * work[_STAGES + 7, j])
        tile_velocity(fcode, fp, work[_XA], work[_YA], t, work[_STAGES + 8],
                      work[_STAGES + 9], n)
        # 5th-order point (stage 2 has weight 0) and its velocity (the 7th stage)
        for j in range(n):
            h = work[_STEP, j]
            work[_X5, j] = work[_XC, j] + h * (_B1 * work[_U1, j] + _B3 * work[_STAGES + 2, j]
                                               + _B4 * work[_STAGES + 4, j]
                                               + _B5 * work[_STAGES + 6, j]
                                               + _B6 * work[_STAGES + 8, j])
            work[_Y5, j] = work[_YC, j] + h * (_B1 * work[_V1, j] + _B3 * work[_STAGES + 3, j]
                                               + _B4 * work[_STAGES + 5, j]
                                               + _B5 * work[_STAGES + 7, j]
                                               + _B6 * work[_STAGES + 9, j])
        tile_velocity(fcode, fp, work[_X5], work[_Y5], t, work[_U7], work[_V7], n)
        for j in range(n):
            work[_DONE, j] = 1.0 if _decide(fcode, fp, work, j, t, dt, rate, side, speed,
                                            smallest) else 0.0
        # arrivals leave the pack: the last packed particle takes an arrival's place
        j = 0
        while j < n:
            if work[_DONE, j] == 0.0:
                j += 1
                continue
            g = int(work[_INDEX, j])
            x_new[g] = work[_XC, j]
            y_new[g] = work[_YC, j]
            n -= 1
            for row in (_INDEX, _XC, _YC, _U1, _V1, _ELAPSED, _DONE):
                work[row, j] = work[row, n]


@jit
def start_tile(fcode, fp, xs, ys, dt, m, work):
    """Record ψ₀ of tile particles g < m and set their first trial step to dt."""
    for g in range(m):
        work[PSI0_ROW, g] = psi(fcode, xs[g], ys[g], 0.0, fp)
        work[STEP_ROW, g] = dt
