"""The Student-t quantile behind every D_eff interval, computed without SciPy (start-up)."""

from __future__ import annotations

import math

import pytest

from eddyhop.analysis._stats import student_quantile


@pytest.mark.parametrize("confidence", [0.0, 0.3, 0.6827, 0.9, 0.95, 0.99])
def test_student_quantile_matches_scipy(confidence):
    # reference: SciPy's stdtrit (the inverse of the Student-t CDF, Cephes).  1e-12 relative is
    # ~100 ulp: the closed-form sums of A&S 26.7.3/26.7.4 round at the 1e-15 level per term
    special = pytest.importorskip("scipy.special")
    for b in [*range(2, 80), 100, 257, 1000, 4096]:
        ours = student_quantile(b, confidence)
        ref = float(special.stdtrit(b - 1, 0.5 + 0.5 * confidence))
        assert ours == pytest.approx(ref, rel=1e-12, abs=1e-15), (b, confidence)


@pytest.mark.parametrize("confidence", [0.5, 0.95, 0.999999])
def test_student_quantile_closed_forms(confidence):
    # ν = 1 (Cauchy): t = tan(π c / 2); ν = 2: t = c √(2 / (1 − c²)) (invert P(|T|<t) =
    # t/√(2 + t²)).  Near c → 1 the quantile's condition number is ~1/(1 − c), hence the
    # tolerance of 1e-16/(1 − c) relative
    tolerance = max(1e-14, 1e-16 / (1.0 - confidence))
    assert student_quantile(2, confidence) == pytest.approx(
        math.tan(0.5 * math.pi * confidence), rel=tolerance)
    assert student_quantile(3, confidence) == pytest.approx(
        confidence * math.sqrt(2.0 / (1.0 - confidence**2)), rel=tolerance)



def test_student_quantile_large_dof_tends_to_normal():
    # ν → ∞: t_ν = z + (z³ + z)/(4ν) + O(ν⁻²) (Cornish–Fisher; Abramowitz & Stegun 26.7.5, from
    # memory), z = 1.959963984540054 the two-sided 95 % normal quantile; at ν = 4095 (the most
    # batches a study may have) the O(ν⁻²) remainder is ~1e-7
    z = 1.959963984540054
    nu = 4095
    assert student_quantile(nu + 1, 0.95) == pytest.approx(z + (z**3 + z) / (4 * nu), abs=1e-6)
