"""Residence-time tail fits: exponential against power law on binned samples.

Synthetic residences are binned on log-spaced edges exactly as the engine bins them (draws
beyond the last edge cannot occur in a run, so they are dropped: both models are fitted as
truncated distributions).  Parameters must lie within 4 standard errors (observed Fisher
information) of the truth, and Vuong's test must prefer the true model.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from eddyhop.analysis import fit_tails, hopping
from eddyhop.errors import InputDataError

EDGES = np.geomspace(0.01, 1000.0, 61)


def binned(samples):
    samples = samples[samples < EDGES[-1]]
    return np.histogram(samples, EDGES)[0].astype(float)


def test_exponential_residences_prefer_the_exponential_tail():
    rng = np.random.default_rng(12)
    counts = binned(rng.exponential(5.0, 20000))
    fit = fit_tails(counts, EDGES)
    assert fit["preferred"] == "exponential"
    assert abs(fit["exp_rate"] - 0.2) < 4 * fit["exp_rate_se"]
    assert fit["exp_gof_p"] > 1e-3
    assert fit["pow_gof_p"] < 1e-3


def test_power_law_residences_prefer_the_power_law_tail():
    """Pareto density ∝ t^(−μ) for t > 1 with μ = 1.8: t = U^(−1/(μ − 1))."""
    rng = np.random.default_rng(13)
    counts = binned(rng.random(20000) ** (-1 / 0.8))
    fit = fit_tails(counts, EDGES)
    assert fit["preferred"] == "power_law"
    assert abs(fit["pow_exponent"] - 1.8) < 4 * fit["pow_exponent_se"]
    assert fit["pow_gof_p"] > 1e-3
    # an explicit tail start deep in the tail gives the same exponent
    deep = fit_tails(counts, EDGES, tail_start=10.0)
    assert deep["tail_start"] == pytest.approx(EDGES[np.searchsorted(EDGES, 10.0)])
    assert abs(deep["pow_exponent"] - 1.8) < 4 * deep["pow_exponent_se"]


def test_hopping_dataset_variables_and_errors():
    rng = np.random.default_rng(14)
    counts = np.stack([binned(rng.exponential(5.0, 5000)), binned(rng.random(5000) ** -1.25)])
    flight_edges = np.geomspace(0.5, 50, 21)
    ds = xr.Dataset(
        {"residence_count": (("start", "residence_time"), counts),
         "residence_time_edges": (("residence_time_edge",), EDGES),
         "flight_count": (("start", "flight_length"), np.ones((2, 20))),
         "flight_length_edges": (("flight_length_edge",), flight_edges)},
        coords={"start": ["cells", "traps"], "residence_time": np.sqrt(EDGES[1:] * EDGES[:-1]),
                "flight_length": np.sqrt(flight_edges[1:] * flight_edges[:-1])})
    out = hopping(ds)
    assert list(out["residence_preferred"].values) == ["exponential", "power_law"]
    assert float(out["residence_decay_time"].sel(start="cells")) == pytest.approx(5.0, rel=0.1)
    assert np.allclose(out["residence_survival"].values[:, 0], 1.0)
    assert np.allclose((out["flight_pdf"] * np.diff(flight_edges)).sum("flight_length"), 1.0)
    for name in out.data_vars:
        assert out[name].attrs.get("long_name"), name
    with pytest.raises(InputDataError, match=r"residence_count.*\[hopping\] enabled"):
        hopping(ds.drop_vars("residence_count"))


def test_tail_fits_are_judged_by_their_goodness_of_fit():
    """Each tail model carries a verdict from its Pearson χ² test (bins merged to ≥ 5
    expected counts; Cochran's rule).  Exact samples of each law (inverse-CDF draws:
    exponential, and the Pareto law of density ∝ t^(−1.8), t > 1, as t = U^(−1/0.8)) must
    be accepted by their own model at the 5 % level (fixed seeds) and rejected by the other
    one; a log-normal sample (ln t ~ N(0, 1.5²)), which is neither, is rejected by both.  A
    rejected model's standard error is widened by √(χ²/dof); an accepted one is untouched."""
    rng = np.random.default_rng(21)
    exponential = fit_tails(binned(rng.exponential(5.0, 20000)), EDGES)
    rng = np.random.default_rng(23)
    assert (exponential["exp_verdict"], exponential["pow_verdict"]) == (0, 1)
    assert exponential["exp_error_scale"] == 1.0
    assert exponential["pow_error_scale"] == pytest.approx(
        np.sqrt(exponential["pow_chi2"] / exponential["pow_dof"]))
    pareto = fit_tails(binned(rng.random(20000) ** (-1 / 0.8)), EDGES)
    assert (pareto["exp_verdict"], pareto["pow_verdict"]) == (1, 0)
    assert pareto["pow_gof_p"] >= 0.05 and pareto["pow_error_scale"] == 1.0
    # (calibration, measured on 200 seeds: 7.5 % of Pareto and 4 % of exponential samples
    # rejected by their own model at the 5 % level)
    lognormal = fit_tails(binned(np.exp(1.5 * rng.standard_normal(20000))), EDGES,
                          tail_start=0.2)
    assert (lognormal["exp_verdict"], lognormal["pow_verdict"]) == (1, 1)
    few = fit_tails(binned(rng.exponential(5.0, 30)), EDGES)
    assert (few["exp_verdict"], few["pow_verdict"]) == (2, 2)


def test_hopping_verdict_variables_are_cf_flags():
    rng = np.random.default_rng(22)
    ds = xr.Dataset({"residence_count": (("residence_time",), binned(rng.exponential(5.0,
                                                                                     8000))),
                     "residence_time_edges": (("residence_time_edge",), EDGES)})
    out = hopping(ds)
    for model in ("exp", "pow"):
        verdict = out[f"residence_{model}_verdict"]
        assert verdict.attrs["flag_meanings"] == "accepted rejected undetermined"
        assert list(verdict.attrs["flag_values"]) == [0, 1, 2]
        assert "Pearson" in verdict.attrs["test"]
        assert np.isfinite(float(out[f"residence_{model}_reduced_chi2"]))
    assert int(out["residence_exp_verdict"]) == 0 and int(out["residence_pow_verdict"]) == 1
    assert "rejects" in out["residence_pow_exponent_se"].attrs["estimator"]
