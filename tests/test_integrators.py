"""Convergence orders of the package's step rules, and a deterministic orbit check."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import ellipk

from eddyhop.engine.integrators import euler_maruyama_increment, milstein_increment


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


def _weak_bias(integrator, dt, particles, exact, seed=5):
    """Relative bias of the Monte Carlo MSD at t = 20 and its standard error (cellular flow,
    Pe = 10, uniform start), for one integrator and step."""
    import warnings

    import eddyhop
    from eddyhop.engine.runner import StepSizeWarning
    from tests.conftest import make_study

    study = make_study(noise={"peclet": 10.0},
                       run={"particles": particles, "dt": dt, "t_end": 20.0, "n_times": 2,
                            "spacing": "linear", "integrator": integrator, "seed": seed,
                            "workers": 2})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", StepSizeWarning)  # large steps are the point here
        ds = eddyhop.simulate(study, progress=False)
    return float(ds["msd"][-1]) / exact - 1.0, float(ds["msd_se"][-1]) / exact


def _two_point_order(coarse, fine, ratio):
    """Order p from biases at dt and dt/ratio, with its SE propagated from the biases' SEs."""
    (b1, s1), (b2, s2) = coarse, fine
    order = np.log(b1 / b2) / np.log(ratio)
    se = np.hypot(s1 / b1, s2 / b2) / np.log(ratio)
    return order, se


def test_weak_orders_of_euler_maruyama_and_strang_splitting_on_the_cellular_msd():
    """Weak order, measured on the quantity users report: the MSD of the cellular flow at
    t = 20 (Pe = 10, uniform start), against the package's noise-free moment-evolution solver
    (exact up to its 1e-8 tolerance; validated against closed forms in
    tests/test_reference_moments.py).

    Published orders: Euler–Maruyama weak order 1 (Kloeden & Platen 1992, *Numerical Solution
    of SDEs*, Thm 14.1.5); a symmetric (Strang) splitting with an exact Gaussian noise step has
    weak order 2 (Leimkuhler & Matthews 2015, *Molecular Dynamics*, ch. 7).  The order from two
    steps dt, dt/2 carries the SE propagated from the two Monte Carlo biases; the check is that
    the measured order is within 4 SE of the published one and more than 4 SE away from the next
    order down.  Steps are large on purpose so that the bias dwarfs the sampling error
    (dt·U·k up to 1.6 for the splitting, whose bias is 1000× smaller than Euler's).
    """
    from eddyhop.reference import moment_evolution
    from tests.conftest import make_study

    exact = float(moment_evolution(make_study(noise={"peclet": 10.0},
                                              run={"t_end": 20.0}), times=[20.0])["msd"][-1])
    em = [_weak_bias("euler_maruyama", dt, 200_000, exact) for dt in (0.2, 0.1, 0.05)]
    order, se = _two_point_order(em[0], em[2], 4.0)
    assert abs(order - 1.0) < 4 * se + 0.1, (order, se, em)  # + O(dt²) remainder at dt = 0.2
    assert order > 0.5 + 4 * se, (order, se)
    strang = [_weak_bias("strang_rk2", dt, 1_000_000, exact) for dt in (1.6, 0.8)]
    order, se = _two_point_order(strang[0], strang[1], 2.0)
    assert abs(order - 2.0) < 4 * se, (order, se, strang)
    assert order > 1.0 + 4 * se, (order, se)
    # accuracy per step: the splitting at dt = 0.8 beats Euler–Maruyama at dt = 0.05
    assert abs(strang[1][0]) < abs(em[2][0])
