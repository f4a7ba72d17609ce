"""Aging: free diffusion (no aging, exact), the cellular flow started at eddy centres (aging),
and a continuous-time random walk with power-law waiting times (the renewal aging form).

Tolerances are stated per check; "se" is the standard error the analysis or the engine reports.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

import eddyhop
from eddyhop.analysis import aging
from eddyhop.errors import InputDataError
from tests.conftest import make_study


@pytest.fixture(scope="module")
def free_diffusion():
    kappa = 0.5
    study = make_study(flow={"U": 0.0}, noise={"kappa": kappa, "_replace": True},
                       run={"particles": 3000, "dt": 0.02, "t_end": 50.0, "n_times": 30,
                            "tracked": 1000, "track_samples": 500},
                       aging={"times": [1.0, 10.0, 30.0], "lags": 20})
    return kappa, eddyhop.simulate(study, progress=False)


def test_free_diffusion_aged_msd_does_not_depend_on_aging_time(free_diffusion):
    """Brownian increments are stationary: ⟨|X(t_a+τ) − X(t_a)|²⟩ = 4κτ for every t_a
    (exact; Einstein 1905).  Each point within 4 se; the aged/unaged ratio within 4 se of 1;
    the fitted aging exponent β = 1 (no aging) within 4 se + 0.02."""
    kappa, ds = free_diffusion
    out = aging(ds)
    lag = ds["lag"].values
    aged = ds["aged_msd"].values
    se = ds["aged_msd_se"].values
    valid = np.isfinite(aged)
    assert valid.sum() > 40
    deviation = np.abs(aged - 4 * kappa * lag[None, :]) / se
    assert np.all(deviation[valid] < 4)
    ratio = out["aged_msd_ratio"].values
    ratio_se = out["aged_msd_ratio_se"].values
    good = np.isfinite(ratio)
    assert np.all(np.abs(ratio[good] - 1) < 4 * ratio_se[good])
    assert abs(float(out["aging_exponent"]) - 1) < 4 * float(out["aging_exponent_se"]) + 0.02
    assert float(out["aging_amplitude"]) == pytest.approx(4 * kappa, rel=0.05)


def test_free_diffusion_ergodicity_breaking_parameter(free_diffusion):
    """Time-averaged MSD of Brownian motion: ⟨δ²(Δ)⟩ = 4κΔ (within 4 se) and
    EB(Δ) ≈ 4Δ/(3 d T) in d = 2 dimensions for Δ ≪ T (He, Burov, Metzler & Barkai 2008,
    Phys. Rev. Lett. 101, 058101, the 1-D result 4Δ/(3T); halved for two independent
    components).  Checked for 10 ≤ Δ/δ and Δ ≤ 0.05 T (continuum and Δ ≪ T limits) within
    4 jackknife se + 15% (the O(Δ/T) and discreteness corrections, measured ≲ 10% here)."""
    kappa, ds = free_diffusion
    out = aging(ds)
    lag = out["tamsd_lag"].values
    assert np.all(np.abs(out["tamsd_mean"].values - 4 * kappa * lag)
                  < 4 * out["tamsd_mean_se"].values)
    duration = float(out["tamsd_duration"])
    spacing = float(np.diff(ds["track_time"].values).mean())
    pick = (lag >= 10 * spacing) & (lag <= 0.05 * duration)
    assert pick.sum() >= 3
    eb = out["ergodicity_breaking"].values[pick]
    expected = 2 * lag[pick] / (3 * duration)
    allowed = 4 * out["ergodicity_breaking_se"].values[pick] + 0.15 * expected
    assert np.all(np.abs(eb - expected) < allowed)


def test_cellular_flow_started_at_centres_ages():
    """Cellular flow, Pe = 100, released at eddy centres: particles first circle near the
    centres and only later reach the separatrices, so increments are not stationary — the aged
    MSD at lags of one advective time grows with t_a (Pöschke, Sokolov, Nepomnyashchy & Zaks
    2016, Phys. Rev. E 94, 032128, "Anomalous transport in cellular flows: the role of initial
    conditions and aging").  Required: the ratio aged/unaged at t_a = 100 exceeds 1 by more
    than 4 se over lags 0.5–2 /(Uk), and exceeds the t_a = 10 ratio there."""
    study = make_study(noise={"peclet": 100.0}, start={"kind": "centre", "radius": 0.3},
                       run={"particles": 800, "dt": 0.05, "t_end": 200.0, "n_times": 40,
                            "integrator": "strang_rk2"},
                       aging={"times": [10.0, 100.0], "lags": 25})
    out = aging(eddyhop.simulate(study, progress=False))
    lag = out["lag"].values
    pick = (lag >= 0.5) & (lag <= 2.0)
    assert pick.sum() >= 3
    late = out["aged_msd_ratio"].sel(aging_time=100.0).values[pick]
    late_se = out["aged_msd_ratio_se"].sel(aging_time=100.0).values[pick]
    early = out["aged_msd_ratio"].sel(aging_time=10.0).values[pick]
    early_se = out["aged_msd_ratio_se"].sel(aging_time=10.0).values[pick]
    assert np.all(late - 1 > 4 * late_se)
    assert np.all(late - early > 4 * np.hypot(late_se, early_se))


def ctrw_dataset(rng, walkers, alpha, t0, sigma, aging_times, lags):
    """Continuous-time random walk in 2-D: Pareto waiting times P(τ > t) = (t/t0)^(−α), t > t0,
    Gaussian jumps of variance σ² per component, renewal started at t = 0.  Returns an
    engine-shaped Dataset with aged_msd (+ se) on (aging_time, lag) and msd on time."""
    horizon = max(aging_times) + max(lags)
    queries = np.unique(np.concatenate([aging_times, np.add.outer(aging_times, lags).ravel(),
                                        lags]))
    x_at = np.zeros((walkers, queries.size))
    y_at = np.zeros((walkers, queries.size))
    chunk = 4000
    for lo in range(0, walkers, chunk):
        n = min(chunk, walkers - lo)
        jumps = 128
        while True:  # enough renewals that every walker of the chunk passes the horizon
            waits = t0 * rng.random((n, jumps)) ** (-1.0 / alpha)
            renewals = np.cumsum(waits, axis=1)
            if renewals[:, -1].min() > horizon:
                break
            jumps *= 2
        steps = rng.standard_normal((2, n, jumps)) * sigma
        paths = np.concatenate([np.zeros((2, n, 1)), np.cumsum(steps, axis=2)], axis=2)
        # renewals up to each query time, all rows at once: rows shifted apart, then sorted
        clipped = np.minimum(renewals, horizon + 1.0)
        shift = np.arange(n)[:, None] * (horizon + 2.0)
        counts = np.searchsorted((clipped + shift).ravel(), (queries[None, :] + shift),
                                 side="right") - np.arange(n)[:, None] * jumps
        rows = np.arange(n)[:, None]
        x_at[lo:lo + n] = paths[0][rows, counts]
        y_at[lo:lo + n] = paths[1][rows, counts]

    def position(t):
        j = int(np.searchsorted(queries, t))
        return x_at[:, j], y_at[:, j]

    aged = np.zeros((len(aging_times), len(lags)))
    aged_se = np.zeros_like(aged)
    for a, ta in enumerate(aging_times):
        x0, y0 = position(ta)
        for j, lag in enumerate(lags):
            x1, y1 = position(ta + lag)
            r2 = (x1 - x0) ** 2 + (y1 - y0) ** 2
            aged[a, j] = r2.mean()
            aged_se[a, j] = r2.std(ddof=1) / math.sqrt(walkers)
    times = np.asarray(lags, dtype=float)
    msd = np.array([np.mean(np.sum(np.square(position(t)), axis=0)) for t in times])
    return xr.Dataset(
        {"msd": (("time",), msd), "aged_msd": (("aging_time", "lag"), aged),
         "aged_msd_se": (("aging_time", "lag"), aged_se)},
        coords={"time": times, "aging_time": np.asarray(aging_times, float),
                "lag": np.asarray(lags, float)})


def test_ctrw_aged_msd_follows_the_renewal_aging_form():
    """Aged MSD of a CTRW with waiting-time exponent α < 1 (Barkai 2003, Phys. Rev. Lett. 90,
    104101, aging MSD ∝ (t_a + τ)^α − t_a^α; equation number not checked, form from memory):
    the aged MSD is 2σ² times the mean number of renewals in [t_a, t_a + τ], and for Pareto
    waiting times ⟨n(t)⟩ ≈ (t/t0)^α / (Γ(1−α) Γ(1+α)) + const (renewal theory: ψ̂(s) ≈
    1 − Γ(1−α)(s t0)^α, ⟨n̂(s)⟩ = ψ̂/(s(1 − ψ̂))), so
        aged MSD ≈ 2σ² [(t_a + τ)^α − t_a^α] / (t0^α Γ(1−α) Γ(1+α)),
    the constant cancelling.  Checks: every point within 4 se + 3% (the neglected O(t^(−α))
    terms at τ, t_a ≥ 20 t0); the analysis' fitted β within 0.03 of α and its amplitude
    within 5% of 2σ²/(t0^α Γ(1−α) Γ(1+α))."""
    alpha, t0, sigma = 0.5, 1.0, 1.0
    rng = np.random.default_rng(2003)
    aging_times = [100.0, 1000.0, 4000.0]
    lags = list(np.geomspace(20.0, 20000.0, 13))
    ds = ctrw_dataset(rng, 30000, alpha, t0, sigma, aging_times, lags)
    amplitude = 2 * sigma**2 / (t0**alpha * math.gamma(1 - alpha) * math.gamma(1 + alpha))
    ta = ds["aging_time"].values[:, None]
    tau = ds["lag"].values[None, :]
    theory = amplitude * ((ta + tau) ** alpha - ta**alpha)
    aged = ds["aged_msd"].values
    assert np.all(np.abs(aged - theory) < 4 * ds["aged_msd_se"].values + 0.03 * theory)
    out = aging(ds)
    assert abs(float(out["aging_exponent"]) - alpha) < 0.03
    assert float(out["aging_amplitude"]) == pytest.approx(amplitude, rel=0.05)
    # aging is visible: at short lags the aged MSD falls with t_a
    assert np.all(np.diff(out["aged_msd_ratio"].values[:, 0]) < 0)


def test_aging_bad_inputs(free_diffusion):
    _, ds = free_diffusion
    with pytest.raises(InputDataError, match="outside the run"):
        aging(ds, aging_times=[60.0])
    with pytest.raises(InputDataError, match=r"was not recorded.*1, 10, 30"):
        aging(ds, aging_times=[5.0])
    plain = ds.drop_vars([n for n in ds.variables if n.startswith(("aged", "track"))])
    with pytest.raises(InputDataError, match=r"aged_msd.*\[aging\]"):
        aging(plain)
    assert list(aging(ds, aging_times=[10.0])["aging_time"].values) == [10.0]
