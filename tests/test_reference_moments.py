"""Moment evolution (method of moments on one period cell): exact cases, consistency with the
cell problem, Dataset layout, bad input.  All deterministic: tolerances are numerical."""

from __future__ import annotations

import math

import numpy as np
import pytest

from eddyhop.errors import StudyError
from eddyhop.reference import ResolutionWarning, effective_diffusivity, moment_evolution
from tests.conftest import make_study

LOG_TIMES = np.geomspace(1e-3, 1e3, 37)


def _noise(kappa):
    return {"kappa": kappa, "_replace": True}


def test_free_diffusion_is_exact_for_every_start():
    """No flow: MSD = 4κt, msd_x = msd_y = 2κt, zero mean and cross moment, from any start
    (Einstein 1905; the Gaussian heat kernel).  Tolerance 1e-6 relative (the issue's)."""
    kappa = 0.3
    study = make_study(flow={"family": "cellular", "U": 0.0, "k": 1.0}, noise=_noise(kappa),
                       start=[{"kind": "uniform"},
                              {"kind": "box", "x_min": 0.1, "x_max": 0.5, "y_min": 1.0,
                               "y_max": 2.5},
                              {"kind": "point", "x": 0.4, "y": 2.0}])
    ds = moment_evolution(study, times=LOG_TIMES, homogenized=False)
    t = ds["time"].values
    expected = np.broadcast_to(t, ds["msd"].shape)
    np.testing.assert_allclose(ds["msd"].values, 4 * kappa * expected, rtol=1e-6)
    np.testing.assert_allclose(ds["msd_x"].values, 2 * kappa * expected, rtol=1e-6)
    np.testing.assert_allclose(ds["msd_y"].values, 2 * kappa * expected, rtol=1e-6)
    assert np.abs(ds["mean_dx"].values).max() < 1e-9
    assert np.abs(ds["msd_xy"].values).max() < 1e-9


def shear_streamwise_msd(t, kappa, U, k):
    """Exact streamwise MSD of the shear flow u = U sin(ky) from a uniform start.

    Derivation: dX = U sin(kY) dt + √(2κ) dW_x, and Y is a Brownian motion whose start is
    uniform over a period, so the velocity U sin(kY(t)) is stationary with mean zero and
    autocorrelation C(τ) = ⟨u(0) u(τ)⟩ = (U²/2) E[cos(k(Y(τ) − Y(0)))] = (U²/2) e^{−κk²τ}
    (the characteristic function of the Gaussian increment Y(τ) − Y(0) ~ N(0, 2κτ)).  The
    noise is independent of Y, so ⟨ΔX²⟩ = 2κt + 2∫₀ᵗ (t − τ) C(τ) dτ
    = 2κt + (U²/(κk²)) [t − (1 − e^{−κk²t})/(κk²)]  (Taylor 1922, Proc. Lond. Math. Soc. 20,
    196: dispersion from the Lagrangian velocity autocorrelation).
    """
    rate = kappa * k * k
    return 2 * kappa * t + (U**2 / rate) * (t - (1 - np.exp(-rate * t)) / rate)


@pytest.mark.parametrize("kappa,U,k", [(0.02, 1.0, 1.0), (0.5, 2.0, 0.7)])
def test_shear_flow_from_uniform_start_is_exact(kappa, U, k):
    """Moment solver against :func:`shear_streamwise_msd` over six decades of time, 1e-6
    relative (the issue's tolerance); cross-stream: free diffusion 2κt."""
    study = make_study(flow={"family": "shear", "U": U, "k": k}, noise=_noise(kappa),
                       start={"kind": "uniform"})
    ds = moment_evolution(study, times=LOG_TIMES, homogenized=False)
    t = ds["time"].values
    np.testing.assert_allclose(ds["msd_x"].values, shear_streamwise_msd(t, kappa, U, k),
                               rtol=1e-6)
    np.testing.assert_allclose(ds["msd_y"].values, 2 * kappa * t, rtol=1e-6)
    assert np.abs(ds["mean_dx"].values).max() <= 1e-9 * ds["msd_x"].values.max()


def test_short_time_taylor_expansion():
    """Short times, uniform start in the cellular flow: msd_x = 2κt + ⟨u²⟩t² + O(t³) with
    ⟨u²⟩ = U²/4.

    Derivation (Dynkin's formula / Itô–Taylor expansion, E f(X_t) = Σ_n tⁿ Lⁿf(x₀)/n! for the
    generator L = u·∇ + κΔ; Kloeden & Platen 1992, *Numerical Solution of Stochastic
    Differential Equations*, ch. 5): with f = (x − x₀)², Lf = 2u(x − x₀) + 2κ, so Lf(x₀) = 2κ,
    and L²f(x₀) = 2u(x₀)² + 4κ ∂u/∂x(x₀).  From a point x₀ the t² coefficient is therefore
    u(x₀)² + 2κ ∂u/∂x(x₀); averaged over a uniform start ⟨∂u/∂x⟩ = 0 (periodic) and
    ⟨u²⟩ = U²⟨sin²kx cos²ky⟩ = U²/4.  The relative deviation must vanish linearly in t."""
    kappa = 0.01
    times = np.array([1e-3, 1e-2])
    study = make_study(noise=_noise(kappa), start=[{"kind": "uniform"},
                                                   {"kind": "point", "x": 0.3, "y": 0.7}])
    ds = moment_evolution(study, times=times, homogenized=False)
    ux = math.sin(0.3) * math.cos(0.7)
    dux = math.cos(0.3) * math.cos(0.7)
    coefficients = {"uniform": 0.25, "point": ux**2 + 2 * kappa * dux}
    for label, c2 in coefficients.items():
        msd_x = ds["msd_x"].sel(start=label).values
        deviation = (msd_x - 2 * kappa * times) / (c2 * times**2) - 1
        assert np.all(np.abs(deviation) < 3 * times)
        assert abs(deviation[0]) < abs(deviation[1]) / 5


def test_long_time_slope_matches_homogenized_tensor():
    """Homogenization: var(ΔX) = 2 D t + O(1) at long times (Bensoussan, Lions & Papanicolaou
    1978, ch. 3), so the moment solver's late MSD slope must equal 2 D_xx from the independent
    cell-problem solver; the offsets decay exponentially, so 1e-5 relative at t ≈ 10³ (Pe = 10)."""
    study = make_study(noise={"peclet": 10.0}, start={"kind": "uniform"})
    ds = moment_evolution(study, times=[400.0, 800.0, 1000.0])
    msd_x = ds["msd_x"].values
    slope = (msd_x[2] - msd_x[1]) / 200.0
    assert slope == pytest.approx(2 * float(ds["homogenized_dxx"]), rel=1e-5)
    direct = effective_diffusivity(study)
    assert float(ds["homogenized_dxx"]) == pytest.approx(direct.d_xx, rel=1e-12)


def test_mean_drift_is_exact_for_uniform_start():
    """Drifting cellular flow from a uniform start: the density stays uniform (it is
    stationary for an incompressible flow), so ⟨ΔX⟩ = ⟨u⟩ t exactly; the variance grows at
    2 D_xx at long times around that drift (homogenization with mean flow)."""
    study = make_study(flow={"family": "drifting_cellular", "U": 1.0, "k": 1.0,
                             "drift_x": 0.3, "drift_y": 0.1},
                       noise={"peclet": 5.0}, start={"kind": "uniform"})
    times = np.array([0.5, 5.0, 500.0, 1000.0])
    ds = moment_evolution(study, times=times)
    np.testing.assert_allclose(ds["mean_dx"].values, 0.3 * times, rtol=1e-9)
    np.testing.assert_allclose(ds["mean_dy"].values, 0.1 * times, rtol=1e-9)
    slope = (ds["var_x"].values[3] - ds["var_x"].values[2]) / 500.0
    assert slope == pytest.approx(2 * float(ds["homogenized_dxx"]), rel=1e-5)


def test_resolution_estimate_and_warning():
    """The default resolution reports a small error estimate; a deliberately coarse one warns
    with the estimate, which exceeds the true error against a well-resolved run (Pe = 50)."""
    study = make_study(noise={"peclet": 50.0}, start={"kind": "uniform"})
    times = np.geomspace(0.1, 300.0, 12)
    fine = moment_evolution(study, times=times, homogenized=False)
    assert float(fine["msd_resolution_error"]) < 1e-3
    with pytest.warns(ResolutionWarning, match="too coarse"):
        coarse = moment_evolution(study, times=times, modes=10, homogenized=False)
    true_error = np.max(np.abs(coarse["msd"].values - fine["msd"].values)
                        / fine["msd"].values)
    assert float(coarse["msd_resolution_error"]) >= true_error > 1e-4


def test_dataset_layout_matches_monte_carlo_conventions(tmp_path):
    """Same names, dims, long names and units as a Monte Carlo Dataset; default times are the
    study's own output times; provenance kind 'reference'; round trip through netCDF; the
    analysis layer accepts it (its fitted D agrees with the cell problem within 2%)."""
    from eddyhop.analysis import analyse
    from eddyhop.engine.schedule import build_schedule
    from eddyhop.results.dataset import VARIABLE_ATTRS
    from eddyhop.results.io import open_result, write_netcdf

    study = make_study(noise={"peclet": 10.0},
                       start=[{"kind": "uniform"}, {"kind": "centre", "label": "centres"}],
                       run={"t_end": 2000.0, "dt": 0.01, "n_times": 40})
    ds = moment_evolution(study)
    schedule = build_schedule(study.run, study.aging, study.run.track_samples)
    np.testing.assert_array_equal(ds["time"].values, schedule.times)
    assert list(ds["start"].values) == ["uniform", "centres"]
    for name in ("msd", "msd_x", "msd_y", "msd_xy", "mean_dx", "mean_dy", "var_x", "var_y"):
        assert ds[name].dims == ("start", "time")
        assert ds[name].attrs["long_name"] == VARIABLE_ATTRS[name][0]
        assert "units" in ds[name].attrs
    assert ds.attrs["eddyhop_kind"] == "reference"
    assert "Not a validated engineering correlation" in ds.attrs["comment"]
    assert ds.attrs["reference_modes"] and "reference_relative_error" in ds.attrs
    path = write_netcdf(ds, tmp_path / "ref.nc")
    again = open_result(path)
    np.testing.assert_array_equal(again["msd"].values, ds["msd"].values)
    analysed = analyse(again)
    fitted = analysed["D_xx"].sel(start="uniform").values
    assert fitted == pytest.approx(float(ds["homogenized_dxx"]), rel=0.02)

    single = moment_evolution(make_study(noise={"peclet": 10.0}), times=[1.0, 2.0],
                              homogenized=False)
    assert "start" not in single.dims and single["start"].ndim == 0


def test_zero_time_is_allowed_and_exactly_zero():
    study = make_study(noise={"peclet": 10.0})
    ds = moment_evolution(study, times=[0.0, 0.5, 1.0], homogenized=False)
    assert ds["msd"].values[0] == 0.0 and ds["msd"].values[1] > 0


def test_bad_input():
    with pytest.raises(StudyError, match=r"time-dependent.*Monte Carlo"):
        moment_evolution(make_study(flow={"family": "oscillating_cellular", "U": 1.0,
                                          "k": 1.0, "B": 0.3, "omega": 1.0}))
    study = make_study(noise={"peclet": 10.0})
    with pytest.raises(StudyError, match="strictly increasing"):
        moment_evolution(study, times=[1.0, 0.5])
    with pytest.raises(StudyError, match="non-negative"):
        moment_evolution(study, times=[-1.0, 2.0])
    with pytest.raises(StudyError, match="positive molecular diffusivity"):
        moment_evolution(make_study(noise=_noise(0.0), run={"integrator": "rk4"}))
