"""Scaling summary of a Péclet sweep: the power-law fit, its interval, and the summary Dataset.

Synthetic inputs only (no simulation): the fits are checked against SciPy, their confidence
intervals by coverage over many seeded replicas, the summary against closed-form power laws.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

from eddyhop.errors import InputDataError
from eddyhop.sweeps import fit_power_law, scaling_summary
from eddyhop.sweeps.scaling import nearest_scale


def test_unweighted_fit_matches_scipy_linregress():
    from scipy import stats

    rng = np.random.default_rng(5)
    x = np.geomspace(1.0, 1e4, 9)
    y = 3.0 * x**0.47 * np.exp(0.1 * rng.standard_normal(x.size))
    fit = fit_power_law(x, y)
    reference = stats.linregress(np.log(x), np.log(y))
    assert fit.exponent == pytest.approx(reference.slope, rel=1e-12)
    assert fit.stderr == pytest.approx(reference.stderr, rel=1e-10)
    assert fit.prefactor == pytest.approx(math.exp(reference.intercept), rel=1e-12)
    half = stats.t.ppf(0.975, x.size - 2) * reference.stderr
    assert fit.lower == pytest.approx(reference.slope - half, rel=1e-10)


def test_interval_coverage_without_errors_is_nominal():
    """Gaussian scatter in ln y: the Student-t interval covers the true exponent in 95 % of
    replicas.  400 seeded replicas; tolerance 4 binomial standard errors (0.044)."""
    rng = np.random.default_rng(2024)
    x = np.geomspace(1.0, 1e3, 7)
    hits = 0
    trials = 400
    for _ in range(trials):
        y = 1.7 * x**0.5 * np.exp(0.2 * rng.standard_normal(x.size))
        fit = fit_power_law(x, y)
        hits += fit.lower <= 0.5 <= fit.upper
    tolerance = 4 * math.sqrt(0.95 * 0.05 / trials)
    assert abs(hits / trials - 0.95) <= tolerance


def test_interval_coverage_with_true_errors_is_at_least_nominal():
    """Stated errors equal to the true ones: the normal interval covers 95 %, and the Birge
    widening can only add coverage (between 0.95 − 4 binomial SE and 0.995)."""
    rng = np.random.default_rng(7)
    x = np.geomspace(1.0, 1e3, 7)
    sigma = np.array([0.05, 0.1, 0.2, 0.05, 0.3, 0.1, 0.15])  # of ln y
    hits = 0
    trials = 400
    for _ in range(trials):
        y = 0.8 * x**2.0 * np.exp(sigma * rng.standard_normal(x.size))
        fit = fit_power_law(x, y, se=sigma * y)
        hits += fit.lower <= 2.0 <= fit.upper
    tolerance = 4 * math.sqrt(0.95 * 0.05 / trials)
    assert 0.95 - tolerance <= hits / trials <= 0.995


def test_scatter_beyond_the_errors_widens_the_interval():
    x = np.geomspace(1.0, 100.0, 6)
    y = x**0.5 * np.array([1.0, 1.3, 0.8, 1.2, 0.75, 1.1])
    tight = fit_power_law(x, y, se=1e-3 * y)
    assert tight.birge > 10
    assert tight.upper - tight.lower == pytest.approx(
        2 * 1.959963984540054 * tight.stderr, rel=1e-12)
    plain = fit_power_law(x, y)
    assert tight.stderr == pytest.approx(plain.stderr, rel=0.05)  # scatter-limited either way


def test_fit_needs_three_usable_points():
    with pytest.raises(InputDataError, match="at least 3"):
        fit_power_law([1.0, 10.0, 100.0], [1.0, np.nan, -2.0])


def merged_like(pe, exponent=0.5, prefactor=1.07):
    """A Dataset shaped like a merged Pe sweep: D_eff = κ A Pe^β with κ = U/(Pe k), U = k = 1."""
    pe = np.asarray(pe, dtype=float)
    starts = ["whole", "centre"]
    kappa = np.tile(1.0 / pe[:, None], (1, 2))
    deff = kappa * prefactor * pe[:, None] ** exponent * np.array([1.0, 0.5])
    ds = xr.Dataset(
        {
            "kappa": (("peclet", "start"), kappa, {"units": "1"}),
            "velocity_scale": (("peclet", "start"), np.ones_like(kappa)),
            "wavenumber": (("peclet", "start"), np.ones_like(kappa)),
            "D_eff": (("peclet", "start"), deff),
            "D_eff_se": (("peclet", "start"), 0.01 * deff),
            "deff_converged": (("peclet", "start"), np.ones_like(kappa, dtype=np.int8)),
        },
        coords={"peclet": pe, "start": starts, "time": ("time", [1.0], {"units": "s"})},
    )
    return ds


def test_summary_recovers_exponents_and_skips_unconverged_points():
    pe = [10.0, 30.0, 100.0, 300.0, 1000.0]
    ds = merged_like(pe)
    ds["D_eff"][0, 0] = 1e3  # an outlier ...
    ds["deff_converged"][0, 0] = 0  # ... flagged as not yet diffusive: left out of the fit
    summary = scaling_summary(ds)
    exponent = summary["D_eff_exponent"]
    assert exponent.dims == ("start",)
    assert np.allclose(exponent.values, 0.5, atol=1e-12)
    assert list(summary["D_eff_fit_points"].values) == [4, 5]
    assert np.allclose(summary["D_eff_prefactor"].values, [1.07, 0.535], rtol=1e-10)
    assert (summary["D_eff_exponent_lower"] <= 0.5).all()
    assert (summary["D_eff_exponent_upper"] >= 0.5).all()
    # natural time scales, Pe = U/(kappa k) = pe here
    assert np.allclose(summary["time_scale_diffusive"].sel(start="whole").values, pe)
    assert np.allclose(summary["time_scale_boundary_layer"].sel(start="whole").values,
                       np.sqrt(pe))
    assert np.allclose(summary["time_scale_advective"].values, 1.0)
    assert summary["time_scale_advective"].attrs["units"] == "s"
    restricted = scaling_summary(ds, peclet_range=(30.0, 1000.0))
    assert list(restricted["D_eff_fit_points"].values) == [4, 4]


def test_crossover_fits_match_transitions_not_indices():
    """Crossovers are matched across Pe by the regimes they join: here the ballistic->diffusive
    crossover (∝ Pe^(1/2)) is at index 0 except at one Pe where an extra early crossover
    shifts it to index 1; a trapped->diffusive crossover ∝ Pe^1 appears at some points."""
    pe = np.array([4.0, 16.0, 64.0, 256.0, 1024.0])
    ds = merged_like(pe)
    shape = (pe.size, 2, 3)
    values = np.full(shape, np.nan)
    frm = np.full(shape, "", dtype=object)
    to = np.full(shape, "", dtype=object)
    values[:, :, 0] = 2.0 * np.sqrt(pe)[:, None]
    frm[:, :, 0], to[:, :, 0] = "ballistic", "diffusive"
    values[2, :, :2] = [0.1, 2.0 * np.sqrt(pe[2])]  # an extra early crossover at Pe = 64
    frm[2, :, :2] = [["ballistic", "ballistic"]] * 2
    to[2, :, :2] = [["superballistic", "diffusive"]] * 2
    frm[2, :, 0] = "diffusive"
    to[2, :, 0] = "ballistic"
    values[2:, :, 2] = 0.5 * pe[2:, None]  # a later trapped->diffusive crossover
    frm[2:, :, 2], to[2:, :, 2] = "trapped", "diffusive"
    ds["crossover_time"] = (("peclet", "start", "crossover"), values)
    ds["crossover_time_se"] = (("peclet", "start", "crossover"), 0.02 * values)
    ds["crossover_from"] = (("peclet", "start", "crossover"), frm)
    ds["crossover_to"] = (("peclet", "start", "crossover"), to)
    summary = scaling_summary(ds)
    exponent = summary["crossover_time_exponent"]
    assert exponent.dims == ("transition", "start")
    transitions = [str(t) for t in exponent["transition"].values]
    assert set(transitions) == {"settled->diffusive", "ballistic->diffusive",
                                "trapped->diffusive"}
    assert np.allclose(exponent.sel(transition="ballistic->diffusive").values, 0.5,
                       atol=1e-12)
    assert list(summary["crossover_time_fit_points"].sel(
        transition="ballistic->diffusive").values) == [5, 5]
    assert np.allclose(exponent.sel(transition="trapped->diffusive").values, 1.0, atol=1e-12)
    # settled: the last crossover into diffusion (Pe^1/2 at the two lowest Pe, then Pe^1)
    assert list(summary["crossover_time_fit_points"].sel(
        transition="settled->diffusive").values) == [5, 5]
    lower = float(summary["crossover_time_exponent_lower"].sel(
        transition="ballistic->diffusive", start="whole"))
    upper = float(summary["crossover_time_exponent_upper"].sel(
        transition="ballistic->diffusive", start="whole"))
    assert "boundary-layer" in nearest_scale(0.5, lower, upper)
    assert "diffusive" in nearest_scale(0.97, 0.9, 1.05)


def test_a_sweep_without_any_crossover_gets_the_diffusivity_fits_and_no_crossover_fit():
    """Short points may find no crossover at all: the merged crossover dimension then has
    length 0 (this once stopped the sweep's merge with an internal error)."""
    pe = np.array([5.0, 50.0, 500.0])
    ds = merged_like(pe)
    empty = np.empty((pe.size, 2, 0))
    ds["crossover_time"] = (("peclet", "start", "crossover"), empty)
    ds["crossover_time_se"] = (("peclet", "start", "crossover"), empty)
    ds["crossover_from"] = (("peclet", "start", "crossover"), empty.astype(str))
    ds["crossover_to"] = (("peclet", "start", "crossover"), empty.astype(str))
    summary = scaling_summary(ds)
    assert "crossover_time_exponent" not in summary
    assert np.allclose(summary["D_eff_exponent"].values, 0.5, atol=1e-12)


def test_summary_needs_a_peclet_dimension():
    ds = merged_like([1.0, 2.0, 3.0]).rename({"peclet": "epsilon"})
    with pytest.raises(InputDataError, match=r"noise\.peclet"):
        scaling_summary(ds)


# ---- every scaling fit is judged, and undetermined points are counted and said -----------------
def test_power_law_fit_verdict_accepts_a_true_law_and_rejects_scatter():
    """With errors equal to the true ones a pure power law passes the χ² test (n − 2 degrees
    of freedom; seed 7, a 5 % test at a fixed seed); scatter 100× the stated errors fails it,
    and its interval is widened by the Birge ratio (never a tight number)."""
    x = np.geomspace(1.0, 1e3, 7)
    sigma = 0.05
    y = 0.8 * x**0.5 * np.exp(sigma * np.random.default_rng(7).standard_normal(x.size))
    good = fit_power_law(x, y, se=sigma * y)
    assert good.verdict == 0 and good.p_value >= 0.05 and good.dof == 5
    bad = fit_power_law(x, y * np.array([1, 1.3, 0.8, 1.2, 0.75, 1.1, 1.0]), se=1e-3 * y)
    assert bad.verdict == 1 and bad.p_value < 1e-6 and bad.birge > 10
    plain = fit_power_law(x, y)  # no errors: nothing to test against
    assert plain.verdict == 2 and math.isnan(plain.p_value)


def test_fit_over_undetermined_points_is_counted_and_said():
    """The case of the issue: every point has deff_converged = undetermined.  The fit is
    made (the points carry errors) but its verdict is undetermined, the count of undetermined
    points is stored, and the printed line says so instead of a bare interval."""
    from eddyhop.presentation.text import scaling_lines

    pe = [10.0, 30.0, 100.0, 300.0, 1000.0]
    ds = merged_like(pe)
    ds["deff_converged"][:] = 2
    ds["deff_converged"].attrs.update(flag_values=np.array([0, 1, 2, 3], np.int8),
                                      flag_meanings="too_short diffusive undetermined bounded")
    ds["deff_converged"][0, 1] = 3  # bounded: no diffusivity claimed, left out
    summary = scaling_summary(ds)
    assert list(summary["D_eff_undetermined_points"].values) == [5, 4]
    assert list(summary["D_eff_excluded_points"].values) == [0, 1]
    assert list(summary["D_eff_fit_points"].values) == [5, 4]
    assert list(summary["D_eff_fit_verdict"].values) == [2, 2]
    assert summary["D_eff_fit_verdict"].attrs["flag_meanings"] == \
        "accepted rejected undetermined"
    merged = ds.assign(summary.data_vars)
    merged.attrs["scaling_fits"] = "D_eff"
    lines = scaling_lines(merged)
    assert lines[0] == ("  D_eff convergence across the sweep: 10 results: 9 undetermined, "
                        "1 bounded")
    whole = next(line for line in lines if "start=whole" in line)
    assert "5 of 5 points UNDETERMINED" in whole and "not a confirmed long-time scaling" in whole
    corner = next(line for line in lines if "start=centre" in line)
    assert "4 of 4 points UNDETERMINED" in corner and "1 point(s) left out" in corner
    # the report's scaling table says the same
    from eddyhop.presentation.report import scaling_html

    page = scaling_html(merged.assign_attrs(sweep_deff_status="10 results: 9 undetermined, "
                                            "1 bounded"))
    assert page.count("not a confirmed long-time scaling") == 2
    assert "<b>5 undetermined</b>" in page and "<b>4 undetermined</b>" in page
    assert "1 left out (too short or bounded)" in page and "9 undetermined, 1 bounded" in page
    # with the points confirmed the same fit is judged on its chi-square
    ds["deff_converged"][:] = 1
    confirmed = scaling_summary(ds)
    assert list(confirmed["D_eff_fit_verdict"].values) == [0, 0]
    assert list(confirmed["D_eff_undetermined_points"].values) == [0, 0]


def test_merge_attributes_count_undetermined_points():
    from eddyhop.sweeps.merge import _note_undetermined

    ds = merged_like([10.0, 30.0, 100.0])
    ds["deff_converged"][:2, 0] = 2
    ds["deff_converged"].attrs.update(flag_values=np.array([0, 1, 2], np.int8),
                                      flag_meanings="too_short diffusive undetermined")
    ds.attrs["sweep_warnings"] = "none"
    _note_undetermined(ds)
    assert ds.attrs["sweep_undetermined_points"] == 2
    assert ds.attrs["sweep_deff_status"] == "6 results: 4 diffusive, 2 undetermined"
    assert ds.attrs["sweep_warnings"].startswith("D_eff undetermined at 2 of 6 results")
