"""Monte Carlo ensembles in the steady cellular flow ψ = (U/k) sin kx sin ky, analysed.

Numerics: Strang splitting with an RK2 advection step (``strang_rk2``), dt·U·k = 0.05.
Péclet number Pe = U/(κk) (the package's wavenumber convention).

High-Péclet law of the cellular flow: D_eff/κ ≈ C Pe^{1/2} (boundary-layer transport across
the separatrices; Shraiman 1987, Phys. Rev. A 36, 261; Rosenbluth, Berk, Doxas & Horton 1987,
Phys. Fluids 30, 2636; Soward 1987, J. Fluid Mech. 180, 267).  Their Pe is U L/κ with the
velocity amplitude U and L = 1/k for ψ = (U/k) sin kx sin ky — the same as ours.  C ≈ 1.07
(2 × 0.533; value from memory, not re-derived here).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import eddyhop
from eddyhop.analysis import analyse, effective_diffusivity
from tests.conftest import make_study


@pytest.fixture(scope="module")
def contrast():
    study = make_study(noise={"peclet": 100.0},
                       start=[{"kind": "separatrix", "label": "separatrix", "delta": 0.05},
                              {"kind": "centre", "label": "centre", "radius": 0.1}],
                       run={"particles": 800, "dt": 0.05, "t_end": 1500.0, "n_times": 90,
                            "integrator": "strang_rk2", "batches": 20})
    return analyse(eddyhop.simulate(study, progress=False))


def test_separatrix_start_is_ballistic_early_centre_start_diffusive(contrast):
    """Start-position contrast in a noisy cellular flow at Pe = 100 (Pöschke, Sokolov,
    Nepomnyashchy & Zaks 2016, Phys. Rev. E 94, 032128: the early regimes depend on whether
    tracers start on the separatrix or inside the cells).  On the separatrix the tracer is
    carried at speed O(U) along the cell edge, so MSD ≈ ⟨u²⟩t² (α ≈ 2) once t ≫ κ/U²;
    near an eddy centre the velocity is O(U k r) and molecular diffusion dominates (α ≈ 1).
    Required: a ballistic regime (|α − 2| ≤ 0.2) for the separatrix start beginning before
    1/(Uk); the centre start's first regime diffusive (|α − 1| ≤ 0.2); and at t ∈ [0.3, 1]/(Uk)
    α(separatrix) − α(centre) > 4 combined jackknife se."""
    sep = contrast.sel(start="separatrix")
    labels = [str(v) for v in sep["regime_label"].values[: int(sep["regime_count"])]]
    assert "ballistic" in labels
    i = labels.index("ballistic")
    assert float(sep["regime_start"][i]) < 1.0
    assert abs(float(sep["regime_alpha"][i]) - 2.0) <= 0.2

    core = contrast.sel(start="centre")
    assert str(core["regime_label"].values[0]) == "diffusive"
    assert abs(float(core["regime_alpha"][0]) - 1.0) <= 0.2

    t = contrast["time"].values
    pick = (t >= 0.3) & (t <= 1.0)
    gap = sep["alpha"].values[pick] - core["alpha"].values[pick]
    spread = np.hypot(sep["alpha_se"].values[pick], core["alpha_se"].values[pick])
    assert np.all(gap > 4 * spread)


def test_both_starts_end_diffusive(contrast):
    """At times long against the cell-crossing time π²/(κk²Pe^{1/2}) ≈ 99/(Uk) both ensembles
    spread diffusively (homogenization; Majda & Kramer 1999, Phys. Rep. 314, 237): the last
    regime is diffusive and the late-window slope is 1 within max(0.1, 4 se)."""
    for label in ("separatrix", "centre"):
        part = contrast.sel(start=label)
        last = int(part["regime_count"]) - 1
        assert str(part["regime_label"].values[last]) == "diffusive", label
        slope = float(part["deff_alpha"])
        assert abs(slope - 1) <= max(0.1, 4 * float(part["deff_alpha_se"])), label
        assert int(part["deff_converged"]) == 1
    # the long-time diffusivity does not remember the start: D_eff agree within 4 se
    a, b = contrast["D_eff"].values
    sa, sb = contrast["D_eff_se"].values
    assert abs(a - b) < 4 * math.hypot(sa, sb)


def _deff_over_kappa(peclet, particles=1000, seed=3):
    """D_eff/κ from one run lasting 10 cell-crossing times π²/(κk²Pe^{1/2})."""
    kappa = 1.0 / peclet
    t_end = round(10 * math.pi**2 / (kappa * math.sqrt(peclet)))
    study = make_study(noise={"peclet": peclet},
                       run={"particles": particles, "dt": 0.05, "t_end": t_end,
                            "n_times": 60, "integrator": "strang_rk2", "batches": 20,
                            "seed": seed})
    out = effective_diffusivity(eddyhop.simulate(study, progress=False))
    assert int(out["deff_converged"]) == 1
    return float(out["D_eff"]) / kappa, float(out["D_eff_se"]) / kappa


def _fit_exponent(peclets, values, errors):
    """Weighted least squares of ln(D/κ) on ln Pe, weights 1/(se/D)²; returns (slope, se)."""
    x = np.log(peclets)
    y = np.log(values)
    w = (np.asarray(values) / np.asarray(errors)) ** 2
    (slope, intercept), cov = np.polyfit(x, y, 1, w=np.sqrt(w), cov="unscaled")
    return slope, math.sqrt(cov[0, 0]), math.exp(intercept)


def test_deff_grows_as_square_root_of_peclet():
    """Exponent of D_eff/κ against Pe over [30, 300] is 0.5 ± 0.1 (the issue's requirement;
    the fit's own se ≈ 0.02), and D_eff/(κ Pe^{1/2}) at Pe = 300 is within 15% of C ≈ 1.07
    (finite-Pe corrections are O(Pe^{-1/2}) relative).  Sources: module docstring."""
    peclets = np.array([30.0, 100.0, 300.0])
    values, errors = zip(*(_deff_over_kappa(pe) for pe in peclets))
    slope, slope_se, _ = _fit_exponent(peclets, values, errors)
    assert abs(slope - 0.5) <= 0.1
    assert slope_se < 0.05
    allowed = 4 * errors[-1] / math.sqrt(300.0) + 0.05 * 1.07
    assert abs(values[-1] / math.sqrt(300.0) - 1.07) < allowed


@pytest.mark.slow
def test_deff_square_root_law_at_higher_peclet():
    """As above over Pe ∈ [100, 1000] with 2000 particles: exponent 0.5 ± 0.06 (fit se ≈ 0.02)
    and D_eff/(κ Pe^{1/2}) at Pe = 1000 within 4 se + 5% of C ≈ 1.07.  Sources: module
    docstring."""
    peclets = np.array([100.0, 300.0, 1000.0])
    values, errors = zip(*(_deff_over_kappa(pe, particles=2000, seed=11) for pe in peclets))
    slope, _, _ = _fit_exponent(peclets, values, errors)
    assert abs(slope - 0.5) <= 0.06
    allowed = 4 * errors[-1] / math.sqrt(1000.0) + 0.05 * 1.07
    assert abs(values[-1] / math.sqrt(1000.0) - 1.07) < allowed
