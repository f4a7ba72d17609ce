"""Moment spectrum ν(q) and displacement PDFs on synthetic ensembles with exact answers."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats

from eddyhop.analysis import AnalysisOptionError, displacement_pdf, moment_spectrum
from eddyhop.errors import InputDataError
from tests.test_analysis_exponents import brownian_paths, ensemble_dataset

ORDERS = np.array([0.5, 1.0, 2.0, 3.0, 4.0, 6.0])


def with_moments(dx, dy, t, batches=20):
    """ensemble_dataset plus absolute moments on (order, time) and, like the engine, the
    per-batch means of the total one (``batch_abs_moment``)."""
    ds = ensemble_dataset(dx, dy, t, batches=batches)
    r = np.hypot(dx, dy)
    ds = ds.assign_coords(order=ORDERS)
    for name, values in (("abs_moment", r), ("abs_moment_x", np.abs(dx)),
                         ("abs_moment_y", np.abs(dy))):
        ds[name] = (("order", "time"), np.stack([(values**q).mean(0) for q in ORDERS]))
    bounds = np.linspace(0, r.shape[0], batches + 1).astype(int)
    ds["batch_abs_moment"] = (("batch", "order", "time"), np.array(
        [[(r[lo:hi] ** q).mean(0) for q in ORDERS] for lo, hi in itertools.pairwise(bounds)]))
    return ds


def test_moment_exponent_errors_are_calibrated():
    """Across 150 independent Brownian ensembles (1000 paths, seeds 300…449) the standard
    deviation of ν(q) agrees with the mean jackknife se at every order, within 4 standard
    errors of the ratio sd/mean se (½√((κ₄ − 1)/N) for the sd, κ₄ the sample kurtosis, and
    sd(se)/(mean se·√N) for the mean se, in quadrature: ≈ 6%); ν(q) = q/2 exactly in law, so
    the mean of the estimates is within 4 of its standard errors of q/2."""
    t = np.geomspace(0.1, 100.0, 40)
    values, errors = [], []
    for k in range(150):
        rng = np.random.default_rng(300 + k)
        out = moment_spectrum(with_moments(*brownian_paths(rng, 1000, t, 0.5), t))
        values.append(out["moment_exponent"].values)
        errors.append(out["moment_exponent_se"].values)
    values, errors = np.array(values), np.array(errors)
    assert out["moment_exponent_se"].attrs["units"] == "1"
    assert np.allclose(out["moment_exponent_over_order_se"], errors[-1] / ORDERS)
    sd = values.std(axis=0, ddof=1)
    mean_se = errors.mean(axis=0)
    kurtosis = np.mean((values - values.mean(0)) ** 4, axis=0) / np.var(values, axis=0) ** 2
    relative = np.sqrt((kurtosis - 1) / (4 * len(values))
                       + (errors.std(axis=0) / mean_se) ** 2 / len(values))
    assert np.all(np.abs(sd / mean_se - 1) < 4 * relative), sd / mean_se
    assert np.all(np.abs(values.mean(0) - ORDERS / 2) < 4 * sd / np.sqrt(len(values)))


def test_brownian_and_ballistic_spectra_are_linear_in_q():
    """Self-similar processes: Brownian motion ⟨|ΔX|^q⟩ ∝ t^{q/2} (ν = q/2), a constant random
    velocity ⟨|ΔX|^q⟩ ∝ t^q (ν = q), exactly in law (the 1e-8 diffusivity added to the
    ballistic paths changes ν by < 1e-8).  With 4000 paths the late-window ν(q) and ν(q)/q
    are within 4 jackknife se of the exact values (calibration of the se:
    test_moment_exponent_errors_are_calibrated).  The local exponent of the x moments has
    no error bar; it is checked within 0.05·q (sampling noise of high moments grows with q;
    measured < 0.02·q)."""
    rng = np.random.default_rng(8)
    t = np.geomspace(0.1, 100.0, 40)
    out = moment_spectrum(with_moments(*brownian_paths(rng, 4000, t, 0.5), t))
    se = out["moment_exponent_se"].values
    assert np.all(np.abs(out["moment_exponent"].values - ORDERS / 2) < 4 * se)
    assert np.all(np.abs(out["moment_exponent_over_order"].values - 0.5)
                  < 4 * out["moment_exponent_over_order_se"].values)
    dx, dy = brownian_paths(rng, 4000, t, 1e-8, velocity_spread=1.0)
    out = moment_spectrum(with_moments(dx, dy, t))
    se = out["moment_exponent_se"].values
    assert np.all(np.abs(out["moment_exponent"].values - ORDERS) < 4 * se)
    assert np.all(np.abs(out["moment_alpha_x"].values - 1.0 * ORDERS[:, None]) < 0.05 * ORDERS[
        :, None])


def test_moment_orders_must_be_positive_and_recorded():
    rng = np.random.default_rng(9)
    t = np.geomspace(0.1, 10.0, 20)
    ds = with_moments(*brownian_paths(rng, 200, t, 0.5), t)
    with pytest.raises(AnalysisOptionError, match=r"positive \(q > 0\)"):
        moment_spectrum(ds, orders=[0.0, 2.0])
    with pytest.raises(InputDataError, match="order 5 was not recorded"):
        moment_spectrum(ds, orders=[5.0])
    with pytest.raises(InputDataError, match="q > 0"):
        moment_spectrum(ds.assign_coords(order=-ORDERS))
    assert list(moment_spectrum(ds, orders=[2.0])["order"].values) == [2.0]
    with pytest.raises(InputDataError, match=r"abs_moment.*\[moments\]"):
        moment_spectrum(ds.drop_vars(["abs_moment", "abs_moment_x", "abs_moment_y"]))


def test_displacement_pdf_of_brownian_tracks_is_gaussian():
    """Scaled displacements of Brownian tracks are standard normal: each bin's density within
    4 Poisson standard errors of the normal bin probability (plus the discreteness of the
    bin, exact here because the expected value is the bin integral)."""
    rng = np.random.default_rng(10)
    track_time = np.linspace(0.0, 10.0, 101)
    n = 5000
    dx, dy = brownian_paths(rng, n, track_time[1:], 0.5)
    ds = ensemble_dataset(dx[:, :5], dy[:, :5], track_time[1:6])
    ds = ds.assign_coords(particle=np.arange(n), track_time=track_time)
    ds["track_x"] = (("particle", "track_time"), np.hstack([np.zeros((n, 1)), dx]))
    ds["track_y"] = (("particle", "track_time"), np.hstack([np.zeros((n, 1)), dy]))
    out = displacement_pdf(ds, pdf_times=[1.0, 10.0], bins=21, extent=4.0)
    assert list(out["pdf_time"].values) == [1.0, 10.0]
    edges = np.linspace(-4, 4, 22)
    probability = np.diff(stats.norm.cdf(edges))
    width = edges[1] - edges[0]
    for axis in ("x", "y"):
        density = out[f"displacement_pdf_{axis}"].values
        counts = density * n * width
        assert np.all(np.abs(counts - n * probability) < 4 * np.sqrt(n * probability) + 1)
    with pytest.raises(InputDataError, match="outside the tracked run"):
        displacement_pdf(ds, pdf_times=[20.0])
