"""Monte Carlo ensembles against exact results.

Tolerances are in standard errors of the ensemble mean (``msd_x_se`` etc., computed from the
particles' own fourth moments): 4 SE two-sided fails by chance with probability ~6e-5 per point
for a Gaussian estimator; with a fixed seed the outcome is deterministic.  Where several times are
checked we use the 4 SE band at each time (times are correlated, so this is not a joint test).
"""

from __future__ import annotations

import numpy as np
import pytest

import eddyhop
from tests.conftest import make_study


def test_free_diffusion_msd_is_4_kappa_t():
    """U = 0: ⟨|ΔX|²⟩ = 4κt in two dimensions (Einstein 1905, Ann. Phys. 17, 549)."""
    kappa = 0.3
    study = make_study(flow={"U": 0.0}, noise={"kappa": kappa, "_replace": True},
                       run={"particles": 4000, "dt": 0.05, "t_end": 20.0, "n_times": 12})
    ds = eddyhop.simulate(study, progress=False)
    t = ds["time"].values
    deviation = np.abs(ds["msd"].values - 4 * kappa * t) / ds["msd_se"].values
    assert np.all(deviation < 4.0), deviation
    # the mean displacement vanishes within 4 SE (SE of a mean: sqrt(2κt/N))
    n = float(ds["n_particles"])
    assert np.all(np.abs(ds["mean_dx"].values) < 4 * np.sqrt(2 * kappa * t / n))


def shear_streamwise_msd(t, velocity, wavenumber, kappa):
    """Exact ⟨Δx²⟩ for u = U sin(ky), uniform start in y, Itô noise of diffusivity κ.

    Δx = ∫₀ᵗ U sin(k y(s)) ds + √(2κ) W_x(t).  With y uniform on a period and diffusing, the
    velocity autocorrelation is ⟨u(s)u(s')⟩ = (U²/2) exp(−κk²|s − s'|), so
    ⟨(∫u)²⟩ = U² ∫₀ᵗ (t − τ) e^{−κk²τ} dτ = (U²/(κk²)) [t − (1 − e^{−κk²t})/(κk²)];
    the noise adds 2κt (independent of y).  Long-time slope: 2(κ + U²/(2κk²)) — Taylor-type
    dispersion from periodic homogenization (Majda & Kramer 1999, Phys. Rep. 314, 237–574).
    """
    rate = kappa * wavenumber**2
    return 2 * kappa * t + velocity**2 / rate * (t - (1 - np.exp(-rate * t)) / rate)


def test_shear_flow_streamwise_msd_matches_exact_formula():
    velocity, wavenumber, kappa = 1.0, 1.0, 0.5
    study = make_study(flow={"family": "shear", "U": velocity, "k": wavenumber, "_replace": True},
                       noise={"kappa": kappa, "_replace": True},
                       run={"particles": 6000, "dt": 0.01, "t_end": 30.0, "n_times": 12,
                            "integrator": "strang_rk2"})
    ds = eddyhop.simulate(study, progress=False)
    t = ds["time"].values
    exact = shear_streamwise_msd(t, velocity, wavenumber, kappa)
    deviation = np.abs(ds["msd_x"].values - exact) / ds["msd_x_se"].values
    assert np.all(deviation < 4.0), deviation
    # cross-stream motion is free diffusion exactly in law: ⟨Δy²⟩ = 2κt
    deviation_y = np.abs(ds["msd_y"].values - 2 * kappa * t) / ds["msd_y_se"].values
    assert np.all(deviation_y < 4.0), deviation_y
    # Long-time effective diffusivity κ + U²/(2κk²) = 1.5 from the late slope of msd_x.  The
    # slope is fitted per particle batch; its SE is the spread of the batch slopes over
    # sqrt(batches).  Over a finite window the exact curve's own slope sits a little below
    # the asymptote (by U²/(κk²)·e^{−κk²t}/2 per unit t, < 3% for t > 6), so the Monte Carlo
    # slope is compared with the exact formula's fitted slope on the same times (4 SE), and
    # that slope with the asymptote to the stated 3%.
    late = t > 6  # several relaxation times 1/(κk²) = 2
    assert late.sum() >= 3
    batch_msd_x = ds["batch_msd_x"].values[:, late]
    batch_slopes = np.polyfit(t[late], batch_msd_x.T, 1)[0] / 2
    slope = batch_slopes.mean()
    slope_se = batch_slopes.std(ddof=1) / np.sqrt(batch_slopes.size)
    exact_slope = np.polyfit(t[late], exact[late], 1)[0] / 2
    assert abs(slope - exact_slope) < 4 * slope_se, (slope, exact_slope, slope_se)
    asymptote = kappa + velocity**2 / (2 * kappa * wavenumber**2)
    assert exact_slope == pytest.approx(asymptote, rel=0.03)
    assert slope_se < 0.05 * asymptote  # the check has teeth: SE well below the effect


def test_short_time_msd_is_diffusive_plus_ballistic():
    """For t ≪ 1/(Uk): ⟨Δx²⟩ ≈ 2κt + ⟨u(x₀)²⟩t² (Taylor expansion of the path; common
    practice).  Cellular flow, uniform start: ⟨u²⟩ = ⟨v²⟩ = U²/4, so ⟨|ΔX|²⟩ ≈ 4κt + U²t²/2.
    The O(t³) remainder is below 1% at Uk·t ≤ 0.05; we allow 4 SE + 2%."""
    kappa = 0.01
    study = make_study(noise={"kappa": kappa, "_replace": True},
                       run={"particles": 8000, "dt": 0.001, "t_end": 0.05, "n_times": 5,
                            "spacing": "linear"})
    ds = eddyhop.simulate(study, progress=False)
    t = ds["time"].values
    expected = 4 * kappa * t + 0.5 * t**2
    assert np.all(np.abs(ds["msd"].values - expected)
                  < 4 * ds["msd_se"].values + 0.02 * expected)


def test_oscillating_cells_with_zero_amplitude_equal_steady_cells_bit_for_bit():
    steady = make_study(run={"particles": 300})
    moving = make_study(flow={"family": "oscillating_cellular", "U": 1.0, "k": 1.0, "B": 0.0,
                              "omega": 2.0, "_replace": True}, run={"particles": 300})
    a = eddyhop.simulate(steady, progress=False)
    b = eddyhop.simulate(moving, progress=False)
    np.testing.assert_array_equal(a["msd"].values, b["msd"].values)


def test_modulated_noise_keeps_uniform_density_stationary():
    """κ(x) = κ0(1 + a sin kx sin ky) with the Itô drift ∇κ: the generator is ∇·(κ∇·), which
    annihilates constants, so a uniform start stays uniform on the torus (Gardiner, *Handbook of
    Stochastic Methods*, 4th ed. 2009, §4.3.5 — Itô vs divergence-form Fokker–Planck).  Without the
    drift the density would relax to ∝ 1/κ, here varying ninefold.  Checks, U = 0, Milstein:
    positions folded into the period cell pass a χ² uniformity test on an 8×8 grid (p > 1e-3), the
    mean displacement is 0 within 4 SE (⟨∇κ⟩ = 0 over the cell), and the short-time growth rate
    of the MSD is 4⟨κ⟩ = 4κ0 (within 4 SE + the O(t) change of the rate, 2%)."""
    from scipy import stats

    kappa0 = 0.2
    study = make_study(flow={"U": 0.0}, noise={"kappa": kappa0, "model": "modulated",
                                               "modulation": 0.8, "_replace": True},
                       run={"particles": 4000, "dt": 0.01, "t_end": 20.0, "n_times": 8,
                            "integrator": "milstein", "tracked": 4000, "track_samples": 4})
    ds = eddyhop.simulate(study, progress=False)
    period = 2 * np.pi
    x = np.mod(ds["track_x"].values[:, -1], period)
    y = np.mod(ds["track_y"].values[:, -1], period)
    counts, _, _ = np.histogram2d(x, y, bins=8, range=[[0, period], [0, period]])
    assert stats.chisquare(counts.ravel()).pvalue > 1e-3
    n = float(ds["n_particles"])
    spread = np.sqrt(ds["msd_x"].values / n)
    assert np.all(np.abs(ds["mean_dx"].values) < 4 * spread)
    t0 = float(ds["time"][0])
    rate = float(ds["msd"][0]) / t0
    assert abs(rate - 4 * kappa0) < 4 * float(ds["msd_se"][0]) / t0 + 0.02 * 4 * kappa0


def test_log_grid_over_six_decades_free_diffusion():
    """The common case of a log output grid over six decades (dt = 1e-3 to t = 1e3, 10⁶ steps):
    every output time is kept, increasing, and the MSD follows 4κt (Einstein 1905) within 4 SE
    at each of them."""
    kappa = 0.05
    study = make_study(flow={"U": 0.0}, noise={"kappa": kappa, "_replace": True},
                       run={"particles": 128, "dt": 1e-3, "t_end": 1e3, "n_times": 25,
                            "workers": 2, "batches": 4})
    ds = eddyhop.simulate(study, progress=False)
    t = ds["time"].values
    assert t[0] == pytest.approx(1e-3) and t[-1] == pytest.approx(1e3)
    assert t.size == 25 and np.all(np.diff(t) > 0)
    deviation = np.abs(ds["msd"].values - 4 * kappa * t) / ds["msd_se"].values
    assert np.all(deviation < 4.0), deviation
