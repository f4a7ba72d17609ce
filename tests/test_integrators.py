"""Convergence orders of the package's step rules, and a deterministic orbit check."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import ellipk

from eddyhop.integrators import euler_maruyama_increment, milstein_increment


def _strong_errors(rule, seed=20010101, paths=4000):
    """Strong error E|X_N − X(T)| for geometric Brownian motion dX = λX dt + μX dW.

    Set-up of Higham (2001), "An algorithmic introduction to numerical simulation of stochastic
    differential equations", SIAM Review 43(3), 525–546, §6–7: λ = 2, μ = 1, X₀ = 1, T = 1,
    Brownian paths on a fine grid δt = 2⁻⁹, steps Δt = R δt with R = 1, 2, 4, 8, 16; exact
    solution X(T) = X₀ exp((λ − μ²/2)T + μW(T)).  We use 4000 paths (Higham: 1000) so that the
    fitted slope's sampling error is well inside the ±0.1 band.
    """
    lam, mu, x0, big_t = 2.0, 1.0, 1.0, 1.0
    fine = 2**9
    dt = big_t / fine
    rng = np.random.default_rng(seed)
    dw = rng.standard_normal((paths, fine)) * np.sqrt(dt)
    exact = x0 * np.exp((lam - 0.5 * mu**2) * big_t + mu * dw.sum(axis=1))
    steps, errors = [], []
    for r in (1, 2, 4, 8, 16):
        big_dt = r * dt
        coarse = dw.reshape(paths, fine // r, r).sum(axis=2)
        x = np.full(paths, x0)
        for j in range(coarse.shape[1]):
            x = x + rule(x, lam, mu, big_dt, coarse[:, j])
        steps.append(big_dt)
        errors.append(np.mean(np.abs(x - exact)))
    return np.array(steps), np.array(errors)


def _em(x, lam, mu, dt, dw):
    return euler_maruyama_increment(lam * x, mu * x, dt, dw)


def _milstein(x, lam, mu, dt, dw):
    # b b' = (μx)(μ) for b(x) = μx
    return milstein_increment(lam * x, mu * x, mu * mu * x, dt, dw)


@pytest.mark.parametrize("rule, order", [(_em, 0.5), (_milstein, 1.0)],
                         ids=["euler_maruyama", "milstein"])
def test_strong_order_on_geometric_brownian_motion(rule, order):
    """Fitted log-log slope within ±0.1 of the published strong order (Higham 2001, Figs 4, 5;
    Kloeden & Platen 1992, Thms 10.2.2 and 10.3.5)."""
    steps, errors = _strong_errors(rule)
    slope = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert abs(slope - order) < 0.1, (slope, errors)


def test_rk4_orbit_period_matches_elliptic_integral():
    """Noise-free cellular flow: the orbit through (x₀, π/2k) has ψ = (U/k) sin kx₀ and period
    T(ψ) = (4/(Uk)) K(m), m = 1 − (kψ/U)² (K: complete elliptic integral of the first kind in
    SciPy's parameter convention).  This follows from integrating dt = ds/|u| along the
    streamline (e.g. Soward 1987, J. Fluid Mech. 180, 267–295, for the cellular-flow orbits).
    The period is read from the unwrapped angle about the eddy centre, linearly interpolated
    between samples of spacing 0.01, so the tolerance is 1e-4 relative."""
    import eddyhop
    from tests.conftest import make_study

    x0 = 0.9  # eddy centre at (π/2, π/2)
    study = make_study(
        noise={"kappa": 0.0, "_replace": True},
        start={"kind": "point", "x": x0, "y": np.pi / 2},
        run={"particles": 1, "dt": 0.001, "t_end": 20.0, "tracked": 1, "track_samples": 2000,
             "integrator": "rk4", "batches": 2},
    )
    ds = eddyhop.simulate(study, progress=False)
    t = ds["track_time"].values
    angle = np.unwrap(np.arctan2(ds["track_y"].values[0] - np.pi / 2,
                                 ds["track_x"].values[0] - np.pi / 2))
    turned = np.abs(angle - angle[0])
    period = np.interp(2 * np.pi, turned, t)
    psi0 = np.sin(x0)
    expected = 4.0 * ellipk(1.0 - psi0**2)
    assert period == pytest.approx(expected, rel=1e-4)
