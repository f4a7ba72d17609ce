"""End to end: Péclet sweeps of a parallel shear (Taylor dispersion) and of closed cells
(D_eff ∝ Pe^{1/2}).

Reference: for u = U sin(ky), v = 0 and molecular diffusivity κ, the long-time longitudinal
diffusivity is D_xx = κ + U²/(2 κ k²) (Taylor dispersion by periodic homogenization; Majda &
Kramer 1999, Phys. Rep. 314, 237, the shear-flow example of their section on homogenization).
With Pe = U/(κ k) and U = k = 1: D_xx/κ = 1 + Pe²/2.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from eddyhop.sweeps import fit_power_law, run_sweep, scaling_summary

STUDY = """
title = "Taylor dispersion in a periodic shear, Pe sweep"
[flow]
family = "shear"
U = 1.0
k = 1.0
[noise]
peclet = 2.0
[run]
particles = 10000
dt = 0.02
t_end = 200.0
n_times = 40
seed = 5
progress = false
[sweep]
"noise.peclet" = [2.0, 4.0, 8.0, 16.0]
"""


def _merged_sweep(tmp_path, name, text):
    """Run the sweep study ``text`` serially and open its merged, analysed result."""
    pytest.importorskip("eddyhop.analysis")
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    report = run_sweep(path, tmp_path / "out", backend="serial", progress=False)
    assert report.complete
    return xr.open_dataset(report.merged)


def test_shear_sweep_matches_taylor_dispersion(tmp_path):
    ds = _merged_sweep(tmp_path, "shear.toml", STUDY)
    pe = ds["peclet"].values
    kappa = ds["kappa"].values
    exact = kappa * (1.0 + pe**2 / 2.0)
    # t_end = 200 ≥ 12 cell-diffusion times; 10⁴ particles make the slope ratio's se ≈ 0.04,
    # small enough (3 se < deff_tolerance = 0.15) for the flag to be decided (2000 gave 2)
    assert (ds["deff_converged"].values != 0).all()
    # each D_xx within 4 jackknife standard errors of the formula (statistical tolerance)
    deviation = (ds["D_xx"].values - exact) / ds["D_xx_se"].values
    assert np.all(np.abs(deviation) < 4), deviation
    # the sweep's scaling summary: fitted exponent of D_xx/κ against Pe, with a 4-sigma
    # (99.994 %) interval, contains the exponent that the same fit gives for the exact values
    summary = scaling_summary(ds, confidence=0.99994)
    expected = fit_power_law(pe, exact / kappa).exponent
    lower = float(summary["D_xx_exponent_lower"])
    upper = float(summary["D_xx_exponent_upper"])
    assert lower <= expected <= upper, (lower, expected, upper)
    assert lower > 0.5  # informative: excludes the closed-cell exponent 1/2


CELLULAR = """
title = "Closed cellular flow, Pe sweep from 30 to 300"
[flow]
family = "cellular"
U = 1.0
k = 1.0
[noise]
peclet = 100.0
[run]
particles = 800
dt = 0.05
t_end = 600.0
n_times = 40
spacing = "log"
integrator = "strang_rk2"
seed = 1
progress = false
[sweep]
"noise.peclet" = { first = 30.0, last = 300.0, per_decade = 4, scale = "log" }
"""


@pytest.mark.slow
def test_cellular_sweep_deff_exponent_is_one_half(tmp_path):
    """Boundary-layer transport in closed cells: D_eff/κ ∝ Pe^{1/2} at large Pe (Shraiman
    1987, Phys. Rev. A 36, 261; Rosenbluth, Berk, Doxas & Horton 1987, Phys. Fluids 30, 2636).
    Five points Pe = 30 … 300, each run for ≥ 2 cell-diffusion times 1/(κk²) = Pe/(Uk) so that
    no D_eff is flagged too short (with 800 particles the slope-ratio test is undetermined,
    flag 2, and such points stay in the fit); the fitted exponent's 95 % interval (jackknife
    standard errors, Birge-widened) must contain 1/2 and be informative (exclude 0, 1 and the
    shear's 2)."""
    ds = _merged_sweep(tmp_path, "cellular.toml", CELLULAR)
    assert np.allclose(ds["peclet"].values, 30.0 * 10.0 ** (np.arange(5) / 4))
    assert (ds["deff_converged"].values != 0).all()
    assert int(ds["D_eff_fit_points"]) == 5
    lower, upper = float(ds["D_eff_exponent_lower"]), float(ds["D_eff_exponent_upper"])
    assert lower <= 0.5 <= upper, (lower, float(ds["D_eff_exponent"]), upper)
    assert 0.0 < lower and upper < 1.0
