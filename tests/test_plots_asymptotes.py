"""The D_eff(Pe) reference curves drawn on the sweep figure.

Checks are against closed forms that follow from the homogenization cell problem
−κΔχ − u·∇χ = u, D = κ I + ⟨u ⊗ χ⟩ (Majda & Kramer 1999, Phys. Rep. 314, 237, Sec. 2.1):
* periodic shear u = U sin ky: D_xx = κ (1 + Pe²/2) exactly (Taylor dispersion; the same
  reference, Sec. 2.2), D_yy = κ;
* cat's-eye at ε = 1, ψ = (U/k) cos k(x − y): u = v = U sin k(x − y) is a shear of speed
  √2 U sin(√2 k η) along (1, 1)/√2 (η the distance across it), so by the shear result
  D_∥ = κ(1 + Pe²/2), D_⊥ = κ, and rotating back D_xx = D_yy = ½(D_∥ + D_⊥) = κ(1 + Pe²/4),
  D_xy = ½(D_∥ − D_⊥) = κ Pe²/4;
* cellular flow, small Pe: at leading order κΔχ = −u, and u = U sin kx cos ky satisfies
  Δu = −2k²u, so χ = u/(2κk²) and D_xx − κ = ⟨u χ⟩ = ⟨u²⟩/(2κk²) = U²/(8κk²): D = κ(1 + Pe²/8)
  + O(Pe⁴) (Pavliotis & Stuart 2008, *Multiscale Methods*, ch. 13, for the expansion);
* cellular flow, large Pe: D/κ → C Pe^½ with C = 2ν = 1.0654 (the constant and its sources in
  ``eddyhop.presentation.plots.asymptotes``; checked against the cell-problem solver in
  ``tests/test_reference_cell_problem.py``).
Each is exact arithmetic, so tolerances are rounding only.
"""

from __future__ import annotations

import numpy as np
import pytest

from eddyhop.presentation.plots.asymptotes import (
    CELLULAR_HIGH_PE,
    asymptotes,
    is_exact_shear,
    low_peclet_coefficients,
)


def test_shear_is_taylor_dispersion():
    assert low_peclet_coefficients("shear", {"U": 1.0, "k": 1.0}) == pytest.approx(
        (0.5, 0.0, 0.0))
    assert is_exact_shear("shear", {"U": 1.0, "k": 1.0})
    (curve,) = asymptotes("shear", {}, [1.0, 10.0], "xx")
    assert curve[2] == "exact"
    np.testing.assert_allclose(curve[1], [1.5, 51.0])


def test_cats_eye_at_one_is_the_diagonal_shear():
    a_xx, a_yy, a_xy = low_peclet_coefficients("cats_eye", {"epsilon": 1.0})
    assert (a_xx, a_yy, a_xy) == pytest.approx((0.25, 0.25, 0.25))
    assert is_exact_shear("cats_eye", {"epsilon": 1.0})
    assert not is_exact_shear("cats_eye", {"epsilon": 0.5})


def test_cellular_small_peclet_and_its_fourier_form_agree():
    cellular = low_peclet_coefficients("cellular", {})
    assert cellular == pytest.approx((0.125, 0.125, 0.0))
    fourier = low_peclet_coefficients(
        "fourier", {"modes": [[1.0, -1.0, 0.5, 0.0], [1.0, 1.0, -0.5, 0.0]]})
    assert fourier == pytest.approx(cellular)
    # cat's-eye interpolates: (1 + ε²)/8 along the axes and ε/4 across
    assert low_peclet_coefficients("cats_eye", {"epsilon": 0.5}) == pytest.approx(
        ((1 + 0.25) / 8, (1 + 0.25) / 8, 0.125))


def test_opposite_wavevectors_are_one_fourier_component():
    """(m, n, c, s) and (−m, −n, c, −s) are the same term of ψ, so they add before squaring."""
    one = low_peclet_coefficients("fourier", {"modes": [[0.0, 1.0, 1.0, 0.0]]})
    split = low_peclet_coefficients("fourier", {"modes": [[0.0, 1.0, 0.5, 0.0],
                                                          [0.0, -1.0, 0.5, 0.0]]})
    assert split == pytest.approx(one)
    cancelled = low_peclet_coefficients("fourier", {"modes": [[1.0, 2.0, 0.0, 1.0],
                                                              [-1.0, -2.0, 0.0, 1.0]]})
    assert cancelled == pytest.approx((0.0, 0.0, 0.0))


def test_cellular_high_peclet_curve():
    curves = {kind: values for _, values, kind in asymptotes("cellular", {}, [100.0], "xx")}
    assert curves["high"] == pytest.approx([CELLULAR_HIGH_PE * 10.0])
    assert curves["low"] == pytest.approx([1 + 0.125 * 1e4])


def test_unknown_family_falls_back_to_molecular_diffusion():
    (curve,) = asymptotes("oscillating_cellular", {}, [0.1, 1.0], "xx")
    assert curve[2] == "low"
    np.testing.assert_allclose(curve[1], 1.0)
    assert asymptotes("oscillating_cellular", {}, [1.0], "xy") == []
