"""Measured-track analysis against processes with known answers (fixed seeds).

* Fractional Brownian motion, generated exactly by circulant embedding of the fractional
  Gaussian noise covariance (Davies & Harte 1987, "Tests for Hurst effect", Biometrika 74,
  95–101; journal details from memory): the MSD is exactly ∝ t^{2H}, so the analysis must find
  one regime with α = 2H, and its time averages are ergodic: EB → 0 as lag/T → 0 (for
  Brownian motion EB = 4Δ/(3T) in 1-D, He, Burov, Metzler & Barkai 2008, Phys. Rev. Lett. 101,
  058101; 2Δ/(3T) for the sum of two independent components).
* A continuous-time random walk with Pareto waiting times ψ(τ) ∝ τ^{−1−a}, 0 < a < 1, started
  with a renewal at t = 0: weak ergodicity breaking.  The time-averaged MSD of one track is
  ∝ Δ·n(T)/T with n(T) the number of jumps, whose relative fluctuations follow the
  Mittag-Leffler distribution, so for Δ ≪ T
      EB = 2 Γ(1 + a)² / Γ(1 + 2a) − 1
  (He, Burov, Metzler & Barkai 2008, Phys. Rev. Lett. 101, 058101; the formula is quoted from
  memory and re-derived here: ⟨n²⟩/⟨n⟩² = 2Γ(1+a)²/Γ(1+2a) for the Mittag-Leffler moments
  ⟨n^k⟩ ∝ k! T^{ka}/Γ(1+ka)).  EB = 0.5708 at a = 1/2.  The ensemble MSD grows as t^a while
  the mean time-averaged MSD is linear in Δ.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from eddyhop.analysis import aging, regimes
from eddyhop.tracks import Track, TrackSource, track_statistics


def fractional_gaussian_noise(hurst: float, n: int, count: int, rng) -> np.ndarray:
    """``count`` exact samples (rows) of fractional Gaussian noise of length ``n`` with unit
    variance, by circulant embedding (Davies & Harte 1987): the covariance
    γ(k) = ½(|k+1|^{2H} − 2|k|^{2H} + |k−1|^{2H}) embedded in a circulant of size 2n, whose
    eigenvalues (the FFT of its first row) are non-negative for fGn."""
    k = np.arange(n + 1, dtype=np.float64)
    gamma = 0.5 * ((k + 1) ** (2 * hurst) - 2 * k ** (2 * hurst)
                   + np.abs(k - 1) ** (2 * hurst))
    row = np.concatenate([gamma, gamma[-2:0:-1]])  # size 2n
    eigen = np.fft.fft(row).real
    assert eigen.min() > -1e-9 * eigen.max()
    scale = np.sqrt(np.maximum(eigen, 0.0) / row.size)
    out = np.empty((count, n))
    for i in range(0, count, 2):
        z = rng.standard_normal(row.size) + 1j * rng.standard_normal(row.size)
        w = np.fft.fft(scale * z)
        out[i] = w.real[:n]  # real and imaginary parts: two independent samples
        if i + 1 < count:
            out[i + 1] = w.imag[:n]
    return out


def fbm_source(hurst: float, tracks: int, samples: int, seed: int) -> TrackSource:
    rng = np.random.default_rng(seed)
    steps = fractional_gaussian_noise(hurst, samples - 1, 2 * tracks, rng)
    zero = np.zeros((2 * tracks, 1))
    paths = np.concatenate([zero, np.cumsum(steps, axis=1)], axis=1)
    t = np.arange(samples, dtype=np.float64)

    def chunks(size):
        for start in range(0, tracks, size):
            yield [Track(str(i), t, paths[2 * i], paths[2 * i + 1], np.arange(samples))
                   for i in range(start, min(start + size, tracks))]

    return TrackSource("<fbm>", "arrays", None, None, False, chunks)


@pytest.fixture(scope="module", params=[0.25, 0.5, 0.75])
def fbm(request):
    hurst = request.param
    ds = track_statistics(fbm_source(hurst, tracks=200, samples=1024, seed=17), velocity_lags=0)
    return hurst, ds


def test_fbm_exponent_is_twice_the_hurst_exponent(fbm):
    hurst, ds = fbm
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        found = regimes(ds)
    assert int(found["regime_count"]) == 1
    alpha = float(found["regime_alpha"][0])
    se = float(found["regime_alpha_se"][0])
    # tolerance: 4 jackknife standard errors (20 groups of whole tracks: the se itself is
    # uncertain by about 1/sqrt(2*19) = 16 %, well inside the factor 4)
    assert abs(alpha - 2 * hurst) <= 4 * se, (alpha, se)
    assert se < 0.05
    expected = {0.25: "subdiffusive", 0.5: "diffusive", 0.75: "superdiffusive"}[hurst]
    assert str(found["regime_label"].values[0]) == expected


def test_fbm_time_averages_are_ergodic(fbm):
    hurst, ds = fbm
    eb = ds["ergodicity_breaking"].values
    se = ds["ergodicity_breaking_se"].values
    lags = ds["tamsd_lag"].values
    total = float(ds["tamsd_duration"])
    small = lags <= total / 50
    assert np.all(eb[small] < 0.05)  # EB -> 0 as lag/T -> 0
    assert eb[0] < eb[small][-1]    # and grows with lag/T
    if hurst == 0.5:
        # Brownian motion: EB = 2Δ/(3T) for two independent components, Δ << T
        # (He et al. 2008); corrections O((Δ/T)^2) and O(1/T) are far below the tolerance
        # of 4 jackknife standard errors over the 200 tracks
        predicted = 2 * lags[small] / (3 * total)
        assert np.all(np.abs(eb[small] - predicted) <= 4 * se[small] + 0.002 * predicted)
    # the mean time-averaged MSD is the ensemble MSD for stationary increments: 2 Δ^{2H}
    tamsd = ds["tamsd_mean"].values
    rel = np.abs(tamsd[small] / (2 * lags[small] ** (2 * hurst)) - 1)
    assert np.all(rel <= 4 * ds["tamsd_mean_se"].values[small] / tamsd[small])


def ctrw_source(exponent: float, tracks: int, samples: int, t_min: float, seed: int):
    """2-D CTRW sampled at t = 0, 1, …, samples − 1: Pareto waiting times P(τ > t) =
    (t/t_min)^(−exponent) from a renewal at t = 0, unit Gaussian jumps per component;
    generated chunk by chunk (the file never exists in memory)."""
    t = np.arange(samples, dtype=np.float64)

    def chunks(size):
        for start in range(0, tracks, size):
            rng = np.random.default_rng([seed, start])
            out = []
            for i in range(start, min(start + size, tracks)):
                renewals = np.zeros(0)
                while renewals.size == 0 or renewals[-1] <= t[-1]:
                    waits = t_min * rng.random(256) ** (-1.0 / exponent)
                    base = renewals[-1] if renewals.size else 0.0
                    renewals = np.concatenate([renewals, base + np.cumsum(waits)])
                jumps = rng.standard_normal((2, renewals.size + 1))
                jumps[:, 0] = 0.0
                position = np.cumsum(jumps, axis=1)
                count = np.searchsorted(renewals, t, side="right")  # jumps made by time t
                out.append(Track(str(i), t, position[0, count], position[1, count],
                                 np.arange(samples)))
            yield out

    return TrackSource("<ctrw>", "arrays", None, None, False, chunks)


@pytest.mark.slow  # about 15 s: 2000 tracks of 2001 samples
def test_ctrw_weak_ergodicity_breaking_matches_the_mittag_leffler_value():
    exponent = 0.5
    ds = track_statistics(ctrw_source(exponent, tracks=2000, samples=2001, t_min=0.01,
                                      seed=11), velocity_lags=0, chunk=250,
                          aging_times=[0, 50, 200, 600])
    expected = 2 * math.gamma(1 + exponent) ** 2 / math.gamma(1 + 2 * exponent) - 1  # 0.5708
    lags = ds["tamsd_lag"].values
    small = lags <= 2  # Δ/T ≤ 1e-3: the formula is the Δ/T → 0 limit
    eb = ds["ergodicity_breaking"].values[small]
    se = ds["ergodicity_breaking_se"].values[small]
    # tolerance: 4 jackknife standard errors over the 2000 tracks.  Measured: EB rises by
    # about 0.015 per sample of lag here (≈ 0.7 se), a finite-lag effect of the few jumps
    # per window (about 300 jumps per track), so only the two smallest lags are compared
    assert np.all(np.abs(eb - expected) <= 4 * se), (eb, se, expected)
    assert np.all(se < 0.03)
    # not ergodic: EB stays far from 0 (fBm above: below 0.05)
    assert np.all(eb - 5 * se > 0.4)
    # weak ergodicity breaking: the ensemble MSD grows as t^a, the mean TAMSD linearly
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        found = regimes(ds)
    last = int(found["regime_count"]) - 1
    alpha, alpha_se = float(found["regime_alpha"][last]), float(found["regime_alpha_se"][last])
    assert abs(alpha - exponent) <= 4 * alpha_se + 0.05, (alpha, alpha_se)
    tamsd = ds["tamsd_mean"].values[small]
    slope = np.polyfit(np.log(lags[small]), np.log(tamsd), 1)[0]
    assert abs(slope - 1.0) < 0.1, slope
    # aging on the clock: the renewal form aged MSD ∝ (t_a + τ)^a − t_a^a (the form the
    # aging analysis fits; Barkai 2003, see analysis/aging.py) with β = a.  Measured:
    # β = 0.496 ± 0.010 (the form is asymptotic in t/t_min: the fit's test rejects it
    # narrowly, p ≈ 0.02, and the error is widened); tolerance 4 se
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        aged = aging(ds)
    beta, beta_se = float(aged["aging_exponent"]), float(aged["aging_exponent_se"])
    assert abs(beta - exponent) <= 4 * beta_se and beta_se < 0.05, (beta, beta_se)
    ratio = aged["aged_msd_ratio"].values[:, 0]
    assert np.all(np.diff(ratio) < 0)  # older systems move less at the same lag


def brownian_drift_source(tracks: int, samples: int, drift: float, seed: int) -> TrackSource:
    """2-D Brownian motion with D = 1 and a mean drift ``drift`` along x, sampled every 0.1
    (steps N(drift·0.1, 2·D·0.1)); unequal lengths (samples/2 … samples)."""
    def chunks(size):
        rng = np.random.default_rng(seed)
        out = []
        for i in range(tracks):
            n = int(rng.integers(samples // 2, samples + 1))
            t = np.arange(n) * 0.1
            steps = rng.normal(0.0, math.sqrt(0.2), (2, n))
            steps[:, 0] = 0.0
            out.append(Track(str(i), t, np.cumsum(steps[0]) + drift * t, np.cumsum(steps[1]),
                             np.arange(n)))
            if len(out) == size:
                yield out
                out = []
        if out:
            yield out

    return TrackSource("<brownian>", "arrays", None, None, False, chunks)


@pytest.mark.slow  # about 20 s: 60 independent track sets
def test_track_jackknife_errors_of_d_eff_are_calibrated_and_drift_is_removed():
    """Brownian tracks with D = 1 and a drift 0.5 along x: the analysis (variance, drift
    removed) finds D_xx = D_yy = 1 and the drift, and the delete-one-group jackknife over
    whole tracks gives standard errors equal to the spread over independent sets."""
    from eddyhop.analysis import effective_diffusivity

    values, errors, drift, drift_se = [], [], [], []
    for seed in range(60):
        ds = track_statistics(brownian_drift_source(40, 200, 0.5, seed), velocity_lags=0,
                              orders=(), tamsd_lags=2)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit = effective_diffusivity(ds)
        values.append(float(fit["D_eff"]))
        errors.append(float(fit["D_eff_se"]))
        drift.append(float(fit["mean_velocity_x"]))
        drift_se.append(float(fit["mean_velocity_x_se"]))
    values, errors = np.array(values), np.array(errors)
    spread = values.std(ddof=1)
    # the mean of 60 estimates is within 4 of its standard errors of the exact D = 1
    assert abs(values.mean() - 1.0) <= 4 * spread / math.sqrt(values.size), values.mean()
    assert abs(np.mean(drift) - 0.5) <= 4 * np.std(drift, ddof=1) / math.sqrt(len(drift))
    # calibration: spread of the estimates against the mean reported se; tolerance 4 times
    # the sampling error of a standard deviation from 60 sets, 1/sqrt(2*59) = 9 %
    tolerance = 4 / math.sqrt(2 * (values.size - 1))
    assert abs(np.mean(errors) / spread - 1) <= tolerance, (np.mean(errors), spread)
    assert abs(np.mean(drift_se) / np.std(drift, ddof=1) - 1) <= tolerance
