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
