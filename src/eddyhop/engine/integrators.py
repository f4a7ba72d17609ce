"""Step rules for the tracer SDE ``dX = [u(X,t) + ∇κ(X)] dt + sqrt(2κ(X)) dW`` (Itô).

Each scheme is a pure scalar function; :func:`advance` switches on the scheme code.  The scalar
building blocks (:func:`euler_maruyama_increment`, :func:`milstein_increment`) are the same
formulas the 2-D step uses, exposed so that convergence tests exercise the package's rules.
:func:`advance_tile` takes the same step for a tile of particles at once, with the same
floating-point operations in the same order (bit-identical to :func:`advance` per particle);
the kernel uses it because it evaluates the flow once per stage for the whole tile
(:func:`tile_velocity`), with the family switch outside the particle loop.

=================  ==========================================  ===========  =========
scheme             rule                                        strong order weak order
=================  ==========================================  ===========  =========
euler_maruyama     X += a dt + b ΔW                            ½ (1 if b    1
                                                               constant)
milstein           X += a dt + b ΔW + ½ b b' (ΔW² − dt)        1 if the     1
                   cross terms with the Lévy area dropped      noise
                                                               commutes,
                                                               else ½
strang_rk2         noise ½-step, midpoint-RK2 advection over   1 (additive) 2
                   dt, noise ½-step (Strang 1968 splitting)
rk4                classical Runge–Kutta, deterministic κ = 0  4 (ODE)      –
projected_rk45     adaptive Dormand–Prince 5(4) substeps, each 5 (ODE)      –
                   projected onto the start's ψ level set;
                   steady flows, κ = 0 (``streamline.py``; the
                   kernel calls it instead of advance_tile)
=================  ==========================================  ===========  =========

The noise ``sqrt(2κ(X)) dW`` is commutative only when κ is constant (Milstein then equals
Euler–Maruyama) or in one dimension.  For the 2-D ``modulated`` model the commutativity
condition ``σ ∂_x σ e_y = σ ∂_y σ e_x`` fails wherever ∇κ ≠ 0, even when κ depends on one
coordinate, so without sampling the Lévy area Milstein keeps strong order ½ there; its weak
order (the order that matters for MSD and D_eff) stays 1.  The GBM test in
``tests/test_integrators.py`` measures strong order 1 in the commutative (1-D) case.

References: Kloeden & Platen (1992), *Numerical Solution of Stochastic Differential Equations*,
Springer, §10.2–10.3 (Euler–Maruyama, Milstein); Higham (2001), SIAM Review 43, 525–546;
Strang (1968), SIAM J. Numer. Anal. 5, 506–517 (symmetric splitting); for the weak order 2 of a
symmetric splitting with an exact Gaussian noise step, Leimkuhler & Matthews (2015),
*Molecular Dynamics*, Springer, ch. 7.
"""

from __future__ import annotations

import math

from numba.extending import overload

from .._jit import jit
from ..flows.compiled import fast_tile_velocity, specialised_code, velocity
from .noise import CONSTANT, diffusivity

EULER_MARUYAMA = 0
MILSTEIN = 1
STRANG_RK2 = 2
RK4 = 3
PROJECTED_RK45 = 4  # stepped by streamline.advance_tile_projected, not by this module
SCHEME_CODES = {"euler_maruyama": EULER_MARUYAMA, "milstein": MILSTEIN,
                "strang_rk2": STRANG_RK2, "rk4": RK4, "projected_rk45": PROJECTED_RK45}
# (strong order, weak order) under the conditions in the table above (Milstein's strong order 1
# holds for commuting noise only; see the module docstring).
SCHEME_ORDERS = {"euler_maruyama": (0.5, 1.0), "milstein": (1.0, 1.0),
                 "strang_rk2": (1.0, 2.0), "rk4": (4.0, 4.0), "projected_rk45": (5.0, 5.0)}
# When the orders above hold (shown by ``eddyhop families``).
SCHEME_CONDITIONS = {
    "euler_maruyama": "strong 1 for additive noise (constant kappa)",
    "milstein": "strong 1 for commuting noise only; 1/2 with noise.model = 'modulated' in 2-D",
    "strang_rk2": "additive noise only (constant kappa)",
    "rk4": "deterministic runs (kappa = 0)",
    "projected_rk45": "deterministic runs (kappa = 0) of steady flows; adaptive, keeps psi",
}
# Normal draws a scheme consumes per step (slots of ``rng.normals4``).
NORMALS_PER_STEP = {"euler_maruyama": 2, "milstein": 2, "strang_rk2": 4, "rk4": 0,
                    "projected_rk45": 0}
# Rows of the scratch array ``work`` that :func:`advance_tile` needs (tile width columns).
TILE_WORK_ROWS = 12


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
    """One step of ``scheme`` from (x, y) at time t; z0..z3 are independent N(0,1) draws.

    Not for ``projected_rk45``, which keeps per-particle state (ψ₀, step size) between steps
    (``streamline.advance_tile_projected``): that code returns nan here, never a wrong step.
    """
    if scheme == PROJECTED_RK45:
        return math.nan, math.nan
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
    # integrals are replaced by ½ ΔW_x ΔW_y (the Lévy area is dropped): exact only for
    # commuting noise, so strong order ½ for 2-D modulated κ, weak order 1 in every case.
    cross = 0.5 * dwx * dwy
    x_new = x + milstein_increment(u + dkx, sigma, dkx, dt, dwx) + dky * cross
    y_new = y + milstein_increment(v + dky, sigma, dky, dt, dwy) + dkx * cross
    return x_new, y_new


# ---- tiles: the same rules for many particles at once ----------------------------------------
# Not ``inline_in_llvm``: inlined into the kernel besides the steppers and the random-number
# passes it gained nothing measurable (Euler–Maruyama, cellular, raw kernel 8.74 against
# 8.62 ns) and cost ≈ 0.25 s more of the kernel's LLVM time on the demo's cold start (one
# copy per call site: two for strang_rk2, one in the velocity recording).
@jit(loop_interleave=2)
def tile_velocity(fcode, fp, xs, ys, t, us, vs, m):
    """(us[g], vs[g]) = velocity at (xs[g], ys[g], t) for g < m, family ``fcode``.

    The same values as ``flows.compiled.velocity``; for the families whose ``velocity`` takes
    ``fast`` (the closed-form ones) the switch is taken once per tile and the family's own
    function is called in the loop with ``fast=True``, where the compiler inlines and
    vectorises it (``flows.compiled.fast_tile_velocity``, generated from the registry).
    ``fast`` marks the points whose trigonometric arguments are beyond the branch-free range of
    ``flows._trig.sincos`` with nan; a second pass evaluates those (and only those) through the
    compiled dispatch.
    """
    if not fast_tile_velocity(fcode, fp, xs, ys, t, us, vs, m):
        for g in range(m):
            us[g], vs[g] = velocity(fcode, xs[g], ys[g], t, fp)
        return
    marked = False
    for g in range(m):  # a vectorised test first; the marked case is rare
        marked |= math.isnan(us[g]) | math.isnan(vs[g])
    if marked:
        for g in range(m):
            if math.isnan(us[g]) or math.isnan(vs[g]):
                us[g], vs[g] = velocity(fcode, xs[g], ys[g], t, fp)


def _scheme_tile_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                      work):
    raise NotImplementedError("compiled only")


# Scheme selection at compile time: called with a constant scheme code (a CompiledCode, as the
# kernels pass it) only that scheme's tile step is typed and compiled — typing the unused
# steppers was a third of advance_tile's compile time.  A run-time code (a test calling
# advance_tile from Python) gets every stepper and a branch.  Inlined (a one-call body), so
# no call with array arguments is added per tile; the kernels' own selection
# (``kernel._step_tile``) calls the scheme's stepper directly (inlining this selection there
# compiled one more overload body: 0.2–0.4 s of a cold start).
@overload(_scheme_tile_step, inline="always", prefer_literal=True,
          jit_options={"error_model": "numpy", "fastmath": False})
def _overload_scheme_tile_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m,
                               x_new, y_new, work):
    code = specialised_code(scheme)
    if code == EULER_MARUYAMA or code == MILSTEIN:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_noise_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m,
                             x_new, y_new, work)
    elif code == STRANG_RK2:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_strang_step(fcode, fp, nq, xs, ys, t, dt, z, m, x_new, y_new, work)
    elif code == RK4:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_rk4_step(fcode, fp, xs, ys, t, dt, m, x_new, y_new, work)
    elif code is not None:  # projected_rk45 or unknown: not stepped here (see advance)
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            for g in range(m):
                x_new[g] = math.nan
                y_new[g] = math.nan
    else:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            if scheme == EULER_MARUYAMA or scheme == MILSTEIN:
                tile_noise_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m,
                                 x_new, y_new, work)
            elif scheme == STRANG_RK2:
                tile_strang_step(fcode, fp, nq, xs, ys, t, dt, z, m, x_new, y_new, work)
            elif scheme == RK4:
                tile_rk4_step(fcode, fp, xs, ys, t, dt, m, x_new, y_new, work)
            else:
                for g in range(m):
                    x_new[g] = math.nan
                    y_new[g] = math.nan
    return step


@jit
def advance_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
    """One step of ``scheme`` for tile particles g < m from (xs[g], ys[g]) at time t.

    ``z[slot, g]`` are the particles' N(0,1) draws (slots as in :func:`advance`'s z0..z3); the
    end points go to ``x_new``, ``y_new``; ``work`` is scratch of ``TILE_WORK_ROWS`` rows.
    Not for ``projected_rk45`` (nan end points, as :func:`advance`).
    """
    _scheme_tile_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                      work)


@jit(inline_in_llvm=True)
def tile_noise_step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                     work):
    """Euler–Maruyama or Milstein step of a tile (see :func:`advance_tile`)."""
    us = work[0]
    vs = work[1]
    tile_velocity(fcode, fp, xs, ys, t, us, vs, m)
    constant = ncode == CONSTANT
    # constant κ: diffusivity() would return (κ, 0.0, 0.0) for every particle
    sigma_constant = math.sqrt(2.0 * nq[0]) if constant else 0.0
    for g in range(m):
        x = xs[g]
        y = ys[g]
        if constant:
            sigma = sigma_constant
            dkx = 0.0
            dky = 0.0
        else:
            kappa, dkx, dky = diffusivity(ncode, x, y, nq)
            sigma = math.sqrt(2.0 * kappa)
        dwx = sqrt_dt * z[0, g]
        dwy = sqrt_dt * z[1, g]
        if scheme == EULER_MARUYAMA:
            x_new[g] = x + euler_maruyama_increment(us[g] + dkx, sigma, dt, dwx)
            y_new[g] = y + euler_maruyama_increment(vs[g] + dky, sigma, dt, dwy)
        else:
            cross = 0.5 * dwx * dwy
            x_new[g] = x + milstein_increment(us[g] + dkx, sigma, dkx, dt, dwx) + dky * cross
            y_new[g] = y + milstein_increment(vs[g] + dky, sigma, dky, dt, dwy) + dkx * cross


@jit(inline_in_llvm=True)
def tile_strang_step(fcode, fp, nq, xs, ys, t, dt, z, m, x_new, y_new, work):
    """strang_rk2 step of a tile (see :func:`advance_tile`)."""
    us = work[0]
    vs = work[1]
    half = 0.5 * dt
    xa = work[2]
    ya = work[3]
    spread = math.sqrt(nq[0] * dt)
    for g in range(m):
        xa[g] = xs[g] + spread * z[0, g]
        ya[g] = ys[g] + spread * z[1, g]
    tile_velocity(fcode, fp, xa, ya, t, us, vs, m)
    xm = work[4]
    ym = work[5]
    for g in range(m):
        xm[g] = xa[g] + half * us[g]
        ym[g] = ya[g] + half * vs[g]
    tile_velocity(fcode, fp, xm, ym, t + half, us, vs, m)
    for g in range(m):
        x_new[g] = (xa[g] + dt * us[g]) + spread * z[2, g]
        y_new[g] = (ya[g] + dt * vs[g]) + spread * z[3, g]


@jit(inline_in_llvm=True)
def tile_rk4_step(fcode, fp, xs, ys, t, dt, m, x_new, y_new, work):
    """rk4 step of a tile (κ = 0; see :func:`advance_tile`): stages k1..k4 in rows (4, 5),
    (6, 7), (8, 9), (10, 11) of ``work``."""
    half = 0.5 * dt
    xa = work[2]
    ya = work[3]
    tile_velocity(fcode, fp, xs, ys, t, work[4], work[5], m)
    for g in range(m):
        xa[g] = xs[g] + half * work[4, g]
        ya[g] = ys[g] + half * work[5, g]
    tile_velocity(fcode, fp, xa, ya, t + half, work[6], work[7], m)
    for g in range(m):
        xa[g] = xs[g] + half * work[6, g]
        ya[g] = ys[g] + half * work[7, g]
    tile_velocity(fcode, fp, xa, ya, t + half, work[8], work[9], m)
    for g in range(m):
        xa[g] = xs[g] + dt * work[8, g]
        ya[g] = ys[g] + dt * work[9, g]
    tile_velocity(fcode, fp, xa, ya, t + dt, work[10], work[11], m)
    sixth = dt / 6.0
    for g in range(m):
        x_new[g] = xs[g] + sixth * (work[4, g] + 2.0 * work[6, g] + 2.0 * work[8, g]
                                    + work[10, g])
        y_new[g] = ys[g] + sixth * (work[5, g] + 2.0 * work[7, g] + 2.0 * work[9, g]
                                    + work[11, g])
