"""Homogenized diffusivity from the cell problem: exact and published values, bad input.

Conventions: ψ-based flows, u = ∂ψ/∂y, v = −∂ψ/∂x; Pe = U/(κk) (the package default); D is
the effective diffusivity per component, var(ΔX) ≈ 2 D t.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from eddyhop.errors import StudyError
from eddyhop.flows import get_family
from eddyhop.presentation.plots.asymptotes import CELLULAR_HIGH_PE, SOWARD_NU
from eddyhop.reference import (
    ReferenceConvergenceError,
    ResolutionWarning,
    effective_diffusivity,
)
from eddyhop.reference.cell_problem import homogenized_diffusivity, solve_cell_problem
from eddyhop.reference.fields import cell_fields


@pytest.mark.parametrize("kappa,U,k", [(0.1, 1.0, 1.0), (0.02, 2.0, 3.0), (1.5, 0.7, 0.5)])
def test_shear_flow_is_exact(kappa, U, k):
    """Sinusoidal shear u = U sin(ky): D_xx = κ + U²/(2κk²), D_yy = κ, D_xy = 0, exactly.

    Source: Majda & Kramer 1999, Phys. Rep. 314, 237–574, §2 (shear flows); Pavliotis & Stuart
    2008, *Multiscale Methods*, ch. 13.  (The corrector is χ_x = U sin(ky)/(κk²).)  The mode
    is represented exactly, so the tolerance is round-off: 1e-8 relative, as the issue asks.
    """
    result = effective_diffusivity("shear", {"U": U, "k": k}, kappa=kappa)
    exact = kappa + U**2 / (2 * kappa * k**2)
    assert result.d_xx == pytest.approx(exact, rel=1e-8)
    assert result.d_yy == pytest.approx(kappa, rel=1e-8)
    assert abs(result.d_xy) <= 1e-12 * exact
    assert result.converged


def test_diagonal_jets_match_rotated_shear():
    """Cat's-eye flow at ε = 1 is the diagonal shear ψ = (U/k) cos k(x − y), so
    u = v = U sin k(x − y): with η = (x − y)/√2 this is a shear of speed W = √2 U sin(Kη),
    K = √2 k, along e = (1, 1)/√2.  The shear formula above gives D_∥ = κ + W²/(2κK²) =
    κ(1 + Pe²/2) along e and D_⊥ = κ across; rotating, D = D_⊥ I + (D_∥ − D_⊥) e eᵀ, so
    D_xx = D_yy = κ(1 + Pe²/4) and D_xy = κ Pe²/4.  Exact representation: tolerance 1e-10
    relative."""
    peclet = 3.0
    result = effective_diffusivity("cats_eye", {"U": 1.0, "k": 1.0, "epsilon": 1.0},
                                   peclet=peclet)
    kappa = 1.0 / peclet
    assert result.d_xx == pytest.approx(kappa * (1 + peclet**2 / 4), rel=1e-10)
    assert result.d_yy == pytest.approx(kappa * (1 + peclet**2 / 4), rel=1e-10)
    assert result.d_xy == pytest.approx(kappa * peclet**2 / 4, rel=1e-10)


def test_cellular_low_peclet_is_quadratic():
    """D/κ − 1 = Pe²/8 + O(Pe⁴) for the cellular flow at small Pe.

    Derivation (regular perturbation of the cell problem κΔχ + u·∇χ = −u in powers of Pe;
    Pavliotis & Stuart 2008, *Multiscale Methods*, ch. 13, for the cell problem): at leading
    order κΔχ = −u with u = U sin kx cos ky, an eigenfunction of Δ (eigenvalue −2k²), so
    χ = u/(2κk²); then D_xx − κ = κ⟨|∇χ|²⟩ = ⟨u χ⟩ = ⟨u²⟩/(2κk²) = U²/(8κk²), i.e.
    D/κ − 1 = Pe²/8.  Reversing U leaves D unchanged, so the next term is O(Pe⁴) and at
    Pe ≤ 0.1 the ratio to Pe²/8 is 1 within 1e-3 and the log–log slope is 2 within 1e-3.
    """
    peclets = np.array([0.01, 0.03, 0.1])
    excess = np.array([effective_diffusivity("cellular", {"U": 1.0, "k": 1.0},
                                             peclet=pe).enhancement[0, 0] - 1.0
                       for pe in peclets])
    np.testing.assert_allclose(excess / (peclets**2 / 8), 1.0, rtol=1e-3)
    slope = np.polyfit(np.log(peclets), np.log(excess), 1)[0]
    assert slope == pytest.approx(2.0, abs=1e-3)


def test_cellular_large_peclet_extrapolates_to_the_boundary_layer_constant():
    """D/κ → C Pe^(1/2) with C = 2ν, ν ≈ 0.5327 (Soward 1987, J. Fluid Mech. 180, 267, as
    quoted by Haynes & Vanneste 2014, J. Fluid Mech. 745, 351; value from memory; the one copy
    is ``eddyhop.presentation.plots.asymptotes.CELLULAR_HIGH_PE``).

    The cell problem is solved at Pe = 10², 3·10², 10³, 3·10³ (rtol 1e-7; each solve's own
    error estimate is ≲ 6e-8) and D/(κ Pe^½) extrapolated by fitting C + a Pe^(−p).  The
    boundary-layer analysis fixes C but not, to our knowledge, the exponent of the first
    correction; fixing p = ½ (the layer thickness ratio) leaves systematic residuals (its C
    drifts from 1.0648 to 1.0650 when Pe = 10² is dropped), so p is fitted (measured
    p = 0.71 ± 0.01, C = 1.06539 ± 0.00003).  Tolerance: the quoted value's rounding (ν to 4
    digits: ±1e-4 in C) + 3 standard errors of the fitted C + the change of C when the
    lowest Pe is dropped (model error, measured 6e-5) + the solver's error estimates;
    about 2.5e-4 in all.  (Pe = 10⁴ gives 1.065578 in ~5 s of CPU, 4e-5 from the fit's prediction.)
    """
    from scipy.optimize import OptimizeWarning, curve_fit

    peclets = np.array([100.0, 300.0, 1000.0, 3000.0])
    ratios = []
    solver_error = 0.0
    for peclet in peclets:
        result = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=peclet,
                                       rtol=1e-7)
        assert result.converged
        assert result.d_xx == pytest.approx(result.d_yy, rel=1e-9)  # square symmetry
        ratios.append(result.enhancement[0, 0] / math.sqrt(peclet))
        solver_error = max(solver_error, result.relative_error * ratios[-1])
    ratios = np.array(ratios)
    assert np.all(np.diff(ratios) < 0)  # approached from above

    def model(pe, c, a, p):
        return c + a * pe ** (-p)

    fitted, covariance = curve_fit(model, peclets, ratios, p0=(1.065, 0.1, 0.7))
    with warnings.catch_warnings():  # three points, three parameters: no covariance
        warnings.simplefilter("ignore", OptimizeWarning)
        without_lowest, _ = curve_fit(model, peclets[1:], ratios[1:], p0=fitted)
    tolerance = (1e-4 + 3 * math.sqrt(covariance[0, 0])
                 + abs(fitted[0] - without_lowest[0]) + solver_error)
    assert CELLULAR_HIGH_PE == pytest.approx(2 * SOWARD_NU)
    assert abs(fitted[0] - CELLULAR_HIGH_PE) < tolerance, (fitted, tolerance)
    assert tolerance < 5e-4  # the fit itself is sharp enough to test the constant


def test_peclet_thousand_reaches_one_in_a_thousand():
    """The issue's requirement: Pe = 10³ cellular flow at 1e-3 relative accuracy.  The
    automatically refined answer at rtol = 1e-3 must agree with a fixed, much finer solve
    (160 modes per direction, converged to ~1e-9 by the spectral refinement) within 1e-3, and
    its own error estimate must not understate the true error."""
    result = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=1000.0, rtol=1e-3)
    fine = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=1000.0, modes=160,
                                 rtol=1e-3)
    assert result.converged and result.relative_error <= 1e-3
    true_error = abs(result.d_xx - fine.d_xx) / fine.d_xx
    assert true_error < 1e-3
    assert true_error <= result.relative_error


def test_error_estimate_bounds_true_error_when_coarse():
    """A deliberately coarse fixed resolution (Pe = 300, 20 modes) warns, and the estimate it
    reports is at least the true error (against an automatically converged reference)."""
    with pytest.warns(ResolutionWarning, match="estimated relative error"):
        coarse = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=300.0,
                                       modes=20)
    reference = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=300.0)
    true_error = abs(coarse.d_xx - reference.d_xx) / reference.d_xx
    assert not coarse.converged
    assert coarse.relative_error >= true_error > 1e-6


def test_modulated_diffusivity_weak_contrast():
    """No flow, κ(x, y) = κ0 (1 + a sin kx sin ky): D = κ0 (1 − a²/8) + O(a⁴) isotropically.

    Derivation (second-order perturbation of ∇·(κ∇(x + χ)) = 0, common practice for weakly
    heterogeneous media, e.g. Landau & Lifshitz, *Electrodynamics of Continuous Media*, §9):
    D_xx = ⟨κ⟩ − Σ_m (m_x²/|m|²) |δκ̂_m|²/κ0 = κ0 − ⟨δκ²⟩/(2κ0), and ⟨δκ²⟩ = κ0² a²/4 for
    the four modes (±1, ±1).  Tolerance a⁴/5 (the size of the neglected term is O(a⁴))."""
    family = get_family("cellular")
    for a in (0.05, 0.1):
        fields = cell_fields(family, family.validate({"U": 0.0, "k": 1.0}), 2.0, "modulated", a)
        result = homogenized_diffusivity(fields)
        assert result.d_xx / 2.0 == pytest.approx(1 - a**2 / 8, abs=a**4 / 5)
        assert result.d_yy == pytest.approx(result.d_xx, rel=1e-12)


def test_study_input_and_drift():
    """A Study is accepted; a drifting cellular flow reports its mean velocity as the drift and
    a tensor symmetric in x and y when the drift is diagonal."""
    from tests.conftest import make_study

    study = make_study(flow={"family": "drifting_cellular", "U": 1.0, "k": 1.0,
                             "drift_x": 0.3, "drift_y": 0.3}, noise={"peclet": 20.0})
    result = effective_diffusivity(study)
    assert result.drift == pytest.approx((0.3, 0.3), abs=1e-14)
    assert result.d_xx == pytest.approx(result.d_yy, rel=1e-9)
    assert result.d_xx > study.noise.kappa


# ---- bad input ------------------------------------------------------------------------------
def test_time_dependent_flow_is_refused_with_alternative():
    with pytest.raises(StudyError, match=r"time-dependent.*Monte Carlo"):
        effective_diffusivity("oscillating_cellular", {"U": 1.0, "k": 1.0, "B": 0.2,
                                                       "omega": 1.0}, peclet=10.0)


def test_walled_flow_is_refused():
    with pytest.raises(StudyError, match=r"solid walls.*Monte Carlo"):
        effective_diffusivity("obstacles", {"U": 0.0, "k": 1.0, "solid_fraction": 0.2},
                              kappa=1.0)


def test_zero_kappa_and_missing_noise_are_refused():
    with pytest.raises(StudyError, match="positive molecular diffusivity"):
        effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, kappa=0.0)
    with pytest.raises(StudyError, match="exactly one of kappa"):
        effective_diffusivity("cellular", {"U": 1.0, "k": 1.0})


def test_non_convergence_is_an_error_not_a_number():
    """Pe = 10⁴ needs ~300 modes; capped at 40 the solver must refuse to answer."""
    with pytest.raises(ReferenceConvergenceError, match=r"did not converge.*max_modes = 40"):
        effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=1e4, max_modes=40)


def test_single_resolution_solver_is_spectrally_convergent():
    """Successive resolutions at Pe = 100 approach each other geometrically (spectral
    convergence): each √2 refinement shrinks the change at least tenfold once resolved."""
    family = get_family("cellular")
    fields = cell_fields(family, family.validate({"U": 1.0, "k": 1.0}), 0.01)
    values = [solve_cell_problem(fields, m)[0][0, 0] for m in (16, 23, 32, 45)]
    changes = np.abs(np.diff(values))
    assert changes[1] < changes[0] / 10 and changes[2] < changes[1] / 10


def test_user_fourier_flow_equals_built_in_cellular():
    """The user Fourier family with modes [[1, −1, ½, 0], [1, 1, −½, 0]] is the cellular flow
    (½cos(x − y) − ½cos(x + y) = sin x sin y): the same tensor to 1e-10."""
    modes = [[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.0]]
    user = effective_diffusivity("fourier", {"U": 1.0, "k": 1.0, "modes": modes}, peclet=40.0)
    built_in = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=40.0)
    np.testing.assert_allclose(user.tensor, built_in.tensor, rtol=1e-10, atol=1e-14)


def test_bicubic_gridded_flow_is_refused_with_hint():
    """A bicubic gridded field is not a finite Fourier series: refused, naming the spectral
    interpolation and the Monte Carlo alternative (no silently truncated answer)."""
    from pathlib import Path

    from eddyhop.study.spec import load_study

    study = load_study(Path(__file__).resolve().parents[1] / "studies" /
                       "convection_tank_piv.toml")
    with pytest.raises(StudyError, match=r"not a finite Fourier series.*spectral"):
        effective_diffusivity(study)


# ---- the symmetry-reduced solver (issue 18: Pe = 10^4 in seconds) ------------------------------
def _fields(name, params, kappa, model="constant", modulation=0.0):
    family = get_family(name)
    return cell_fields(family, family.validate(params), kappa, model, modulation)


_FLOWS = [  # (family, params, kappa, noise model, modulation): symmetric and asymmetric cases
    ("cellular", {"U": 1.0, "k": 1.0}, 0.01, "constant", 0.0),
    ("cats_eye", {"U": 1.0, "k": 1.0, "epsilon": 0.3}, 0.05, "constant", 0.0),
    ("cellular", {"U": 1.0, "k": 2.0}, 0.3, "modulated", 0.4),
    ("drifting_cellular", {"U": 1.0, "k": 1.0, "drift_x": 0.3, "drift_y": 0.1}, 0.1,
     "constant", 0.0),
    ("fourier", {"U": 1.0, "k": 1.0, "modes": [[1, 2, 0.3, 0.2], [2, -1, 0.5, -0.4],
                                               [0, 1, 0.2, 0.0]]}, 0.1, "constant", 0.0),
]


@pytest.mark.parametrize("flow", _FLOWS, ids=lambda f: f[0])
def test_generator_rows_equal_the_galerkin_products(flow):
    """The entry-by-entry real-basis generator equals the real-basis image of the Galerkin
    products u ∂x + v ∂y + ∂x κ ∂x + ∂y κ ∂y built from SpectralCell.multiply/derivative (and
    the right-hand sides their vector counterparts): the same numbers up to round-off."""
    from eddyhop.reference.cell_problem import _operators
    from eddyhop.reference.grids import SpectralCell

    fields = _fields(*flow)
    cell = SpectralCell(fields.lx, fields.ly, 9)
    dx, dy = cell.derivative(0), cell.derivative(1)
    k_mult = cell.multiply(fields.kappa)
    products = cell.real_operator(cell.multiply(fields.u) @ dx + cell.multiply(fields.v) @ dy
                                  + dx @ k_mult @ dx + dy @ k_mult @ dy)
    matrix, rhs = _operators(fields, cell)
    assert abs(matrix - products).max() <= 1e-13 * abs(products).max()
    for r, drift in zip(rhs, (fields.drift_x, fields.drift_y)):
        vector = -cell.vector(drift)
        vector[cell.index(0, 0)] = 0.0
        np.testing.assert_allclose(r, cell.real_vector(vector), rtol=0, atol=1e-15)


def test_real_symmetries_are_the_complex_mode_maps():
    """SpectralCell.real_symmetry is the real-basis matrix of (S f)^_n = (−1)^(s·n) f̂_(ρ n)
    for all 16 reflections × half shifts, and maps the real vector of f to that of f∘g."""
    import scipy.sparse as sp

    from eddyhop.reference.grids import SpectralCell

    cell = SpectralCell(2.0, 3.0, 5)
    everything = np.arange(cell.size)
    rng = np.random.default_rng(7)
    for rx in (1, -1):
        for ry in (1, -1):
            for sx in (0, 1):
                for sy in (0, 1):
                    sign = np.where((sx * cell.mx + sy * cell.my) % 2 == 0, 1.0, -1.0)
                    permutation = sp.csr_matrix(
                        (sign.astype(complex), (everything, cell.index(rx * cell.mx,
                                                                       ry * cell.my))),
                        shape=(cell.size, cell.size))
                    source, signs = cell.real_symmetry((rx, ry), (sx, sy))
                    real = rng.normal(size=cell.size)
                    expected = cell.real_operator(permutation) @ real
                    np.testing.assert_array_equal(signs * real[source], expected)


def test_cellular_corrector_symmetries():
    """χ_x of the cellular flow (u = sin x cos y) is odd in x, even in y and unchanged by the
    shift (x, y) → (x + π, y + π); χ_y the other way round (a 90° rotation of the problem)."""
    from eddyhop.reference.cell_problem import cell_symmetries

    chi_x, chi_y = cell_symmetries(_fields("cellular", {"U": 1.0, "k": 1.0}, 0.1))
    assert chi_x[((-1, 1), (0, 0))] == -1.0 and chi_x[((1, -1), (0, 0))] == 1.0
    assert chi_y[((-1, 1), (0, 0))] == 1.0 and chi_y[((1, -1), (0, 0))] == -1.0
    assert chi_x[((1, 1), (1, 1))] == chi_y[((1, 1), (1, 1))] == 1.0
    assert len(chi_x) == len(chi_y) == 7  # with the identity, a group of 8 maps
    # a uniform drift breaks every reflection
    drifting = cell_symmetries(_fields("drifting_cellular", {"U": 1.0, "k": 1.0,
                                                             "drift_x": 0.3, "drift_y": 0.1}, 0.1))
    assert all(((-1, 1), (0, 0)) not in g and ((1, -1), (0, 0)) not in g for g in drifting)


@pytest.mark.parametrize("flow", _FLOWS, ids=lambda f: f[0])
def test_symmetry_reduction_is_exact(flow):
    """Solving in the symmetric subspace is an exact reformulation: the tensor equals the one
    of the whole system to round-off (1e-12 relative), with a quarter of the unknowns for the
    cellular flow and none saved when a drift breaks the reflections."""
    fields = _fields(*flow)
    reduced, unknowns = solve_cell_problem(fields, 24)
    whole, all_unknowns = solve_cell_problem(fields, 24, symmetry=False)
    np.testing.assert_allclose(reduced, whole, rtol=0, atol=1e-12 * np.abs(whole).max())
    if flow[0] == "cellular" and flow[3] == "constant":
        assert unknowns == pytest.approx(all_unknowns / 4, rel=0.01)  # up to the axes
    if flow[0] in ("drifting_cellular", "fourier"):
        assert unknowns == all_unknowns


# Values of D_xx/κ given by the solver before the symmetry reduction (commit 78b8650, rtol 1e-6,
# automatic refinement, cellular flow U = k = 1): the reduction must reproduce them within rtol
# (measured: to 1e-15 at Pe = 10³, 2e-15 at Pe = 10⁴).
_BEFORE = {1000.0: 33.71464692651442, 10000.0: 106.55776968987026}


def test_peclet_thousand_unchanged_by_the_reduction():
    result = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=1000.0)
    assert result.converged and result.modes == 155
    assert result.enhancement[0, 0] == pytest.approx(_BEFORE[1000.0], rel=1e-6)
    assert result.enhancement[1, 1] == pytest.approx(_BEFORE[1000.0], rel=1e-6)


@pytest.mark.slow
def test_peclet_ten_thousand_unchanged_by_the_reduction():
    """Pe = 10⁴ (486 modes, 118 340 unknowns per corrector): about 5 s of CPU and 0.5 GB."""
    result = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=1e4)
    assert result.converged and result.modes == 486
    assert result.enhancement[0, 0] == pytest.approx(_BEFORE[10000.0], rel=1e-6)
