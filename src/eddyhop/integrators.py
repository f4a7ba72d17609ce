"""Step rules for the tracer SDE ``dX = [u(X,t) + ∇κ(X)] dt + sqrt(2κ(X)) dW`` (Itô).

Each scheme is a pure scalar function; :func:`advance` switches on the scheme code.  The scalar
building blocks (:func:`euler_maruyama_increment`, :func:`milstein_increment`) are the same
formulas the 2-D step uses, exposed so that convergence tests exercise the package's rules.

=================  ==========================================  ===========  =========
scheme             rule                                        strong order weak order
=================  ==========================================  ===========  =========
euler_maruyama     X += a dt + b ΔW                            ½ (1 if b    1
                                                               constant)
milstein           X += a dt + b ΔW + ½ b b' (ΔW² − dt)        1 (diagonal/ 1
                   cross terms with the Lévy area dropped      commutative)
strang_rk2         noise ½-step, midpoint-RK2 advection over   1 (additive) 2
                   dt, noise ½-step (Strang 1968 splitting)
rk4                classical Runge–Kutta, deterministic κ = 0  4 (ODE)      –
=================  ==========================================  ===========  =========

References: Kloeden & Platen (1992), *Numerical Solution of Stochastic Differential Equations*,
Springer, §10.2–10.3 (Euler–Maruyama, Milstein); Higham (2001), SIAM Review 43, 525–546;
Strang (1968), SIAM J. Numer. Anal. 5, 506–517 (symmetric splitting); for the weak order 2 of a
symmetric splitting with an exact Gaussian noise step, Leimkuhler & Matthews (2015),
*Molecular Dynamics*, Springer, ch. 7.
"""

from __future__ import annotations

import math

from ._jit import jit
from .flows.compiled import velocity
from .noise import diffusivity

EULER_MARUYAMA = 0
MILSTEIN = 1
STRANG_RK2 = 2
RK4 = 3
SCHEME_CODES = {"euler_maruyama": EULER_MARUYAMA, "milstein": MILSTEIN,
                "strang_rk2": STRANG_RK2, "rk4": RK4}
# (strong order, weak order) under the conditions in the table above.
SCHEME_ORDERS = {"euler_maruyama": (0.5, 1.0), "milstein": (1.0, 1.0),
                 "strang_rk2": (1.0, 2.0), "rk4": (4.0, 4.0)}
# Normal draws a scheme consumes per step (the generator delivers four per call).
NORMALS_PER_STEP = {"euler_maruyama": 2, "milstein": 2, "strang_rk2": 4, "rk4": 0}


@jit
def euler_maruyama_increment(drift, diffusion, dt, dw):
    """Euler–Maruyama increment ``a dt + b ΔW`` of a scalar Itô SDE."""
    return drift * dt + diffusion * dw


@jit
def milstein_increment(drift, diffusion, diffusion_times_slope, dt, dw):
    """Milstein increment ``a dt + b ΔW + ½ b b' (ΔW² − dt)`` of a scalar Itô SDE."""
    return drift * dt + diffusion * dw + 0.5 * diffusion_times_slope * (dw * dw - dt)


@jit
def _rk2_advection(fcode, fp, x, y, t, dt):
    u1, v1 = velocity(fcode, x, y, t, fp)
    half = 0.5 * dt
    u2, v2 = velocity(fcode, x + half * u1, y + half * v1, t + half, fp)
    return x + dt * u2, y + dt * v2


@jit
def _rk4_advection(fcode, fp, x, y, t, dt):
    half = 0.5 * dt
    u1, v1 = velocity(fcode, x, y, t, fp)
    u2, v2 = velocity(fcode, x + half * u1, y + half * v1, t + half, fp)
    u3, v3 = velocity(fcode, x + half * u2, y + half * v2, t + half, fp)
    u4, v4 = velocity(fcode, x + dt * u3, y + dt * v3, t + dt, fp)
    sixth = dt / 6.0
    return (x + sixth * (u1 + 2.0 * u2 + 2.0 * u3 + u4),
            y + sixth * (v1 + 2.0 * v2 + 2.0 * v3 + v4))


@jit
def advance(scheme, fcode, fp, ncode, nq, x, y, t, dt, sqrt_dt, z0, z1, z2, z3):
    """One step of ``scheme`` from (x, y) at time t; z0..z3 are independent N(0,1) draws."""
    if scheme == RK4:
        return _rk4_advection(fcode, fp, x, y, t, dt)
    if scheme == STRANG_RK2:
        # Additive noise only (checked before compiling): σ = sqrt(2κ) is constant and a
        # half-step of pure diffusion is exactly Gaussian with variance 2κ(dt/2) = κ dt.
        spread = math.sqrt(nq[0] * dt)
        x, y = _rk2_advection(fcode, fp, x + spread * z0, y + spread * z1, t, dt)
        return x + spread * z2, y + spread * z3
    u, v = velocity(fcode, x, y, t, fp)
    kappa, dkx, dky = diffusivity(ncode, x, y, nq)
    sigma = math.sqrt(2.0 * kappa)
    dwx = sqrt_dt * z0
    dwy = sqrt_dt * z1
    if scheme == EULER_MARUYAMA:
        return (x + euler_maruyama_increment(u + dkx, sigma, dt, dwx),
                y + euler_maruyama_increment(v + dky, sigma, dt, dwy))
    # Milstein, σ = sqrt(2κ) in both components: σ ∂_j σ = ∂_j κ.  Off-diagonal iterated
    # integrals are replaced by ½ ΔW_x ΔW_y (the Lévy area is dropped), which is exact when
    # the noise commutes (κ depending on one coordinate) and keeps weak order 1 otherwise.
    cross = 0.5 * dwx * dwy
    x_new = x + milstein_increment(u + dkx, sigma, dkx, dt, dwx) + dky * cross
    y_new = y + milstein_increment(v + dky, sigma, dky, dt, dwy) + dkx * cross
    return x_new, y_new
