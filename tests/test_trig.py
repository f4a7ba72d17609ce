"""The flows' branch-free sin/cos (``flows._trig.sincos``) against NumPy and exact values.

Tolerance: 2 ulp of the result against NumPy.  Our error is below 0.8 ulp of the exact value
(measured against 300-bit mpmath values on 2×10⁵ arguments; ``test_error_against_exact_values``
repeats a smaller version and asserts < 1 ulp); NumPy's float64 ``sin``/``cos`` are allowed
1 ulp more (measured 0.52 ulp on the development machine's C library).  So
|ours − NumPy| ≤ 1 + 1 ulp.  Beyond ``LIMIT`` the function is the C library's, compared exactly.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from eddyhop.engine.integrators import tile_velocity
from eddyhop.flows import _trig, get_family
from eddyhop.flows._trig import LIMIT, sincos, sincos2
from eddyhop.flows.compiled import evaluate_velocity
from tests.test_kernel_tiles import FLOWS as TILE_FLOWS

ULP_TOLERANCE = 2.0


@numba.njit
def _sincos_array(x, fast):
    s = np.empty(x.size)
    c = np.empty(x.size)
    for i in range(x.size):
        s[i], c[i] = sincos(x[i], fast)
    return s, c


@numba.njit
def _numba_body_sincos(x):
    """The method of ``_trig`` written as a numba function body (how ``sincos`` was compiled
    before it emitted its LLVM IR directly): the reference the intrinsic must match bit for
    bit.  Same operations, same order, selects for the quadrant."""
    t = _trig
    q = np.rint(x * t.TWO_OVER_PI)
    head = x - q * t.C1
    middle = -(q * t.C2)
    r = head + middle
    back = r - head
    r_low = ((head - (r - back)) + (middle - back)) - q * t.C3
    r_high = r + r_low
    r_low = r_low - (r_high - r)
    r = r_high
    z = r * r
    s = r + (r_low * (1.0 - 0.5 * z) + (r * z) * (t.S3 + z * (t.S5 + z * (t.S7 + z * (
        t.S9 + z * (t.S11 + z * (t.S13 + z * (t.S15 + z * t.S17))))))))
    half_z = 0.5 * z
    w = 1.0 - half_z
    c = w + ((((1.0 - w) - half_z) - r * r_low) + (z * z) * (t.K4 + z * (t.K6 + z * (
        t.K8 + z * (t.K10 + z * (t.K12 + z * (t.K14 + z * t.K16)))))))
    n = q - 4.0 * math.floor(0.25 * q)
    swap = n == 1.0 or n == 3.0
    sin_r = c if swap else s
    cos_r = s if swap else c
    sin_sign = -1.0 if n >= 2.0 else 1.0
    cos_sign = -1.0 if n == 1.0 or n == 2.0 else 1.0
    return (x if x == 0.0 else sin_sign * sin_r), cos_sign * cos_r


@numba.njit
def _numba_body_array(x):
    s = np.empty(x.size)
    c = np.empty(x.size)
    for i in range(x.size):
        s[i], c[i] = _numba_body_sincos(x[i])
    return s, c


@numba.njit
def _sincos2_array(a, b, fast):
    out = np.empty((4, a.size))
    for i in range(a.size):
        out[0, i], out[1, i], out[2, i], out[3, i] = sincos2(a[i], b[i], fast)
    return out


def _ulp_error(value, reference):
    """|value − reference| in units of the spacing of doubles at |reference| (exact zeros
    count as an error of any difference)."""
    value = np.asarray(value)
    reference = np.asarray(reference)
    return np.abs(value - reference) / np.spacing(np.abs(reference))


def _assert_close_to_numpy(x):
    s, c = _sincos_array(x, False)
    for ours, ref in ((s, np.sin(x)), (c, np.cos(x))):
        error = _ulp_error(ours, ref)
        worst = int(np.argmax(error))
        assert error[worst] <= ULP_TOLERANCE, (x[worst], ours[worst], ref[worst], error[worst])


def _random_arguments():
    rng = np.random.default_rng(20260102)
    n = 200_000
    magnitudes = 10.0 ** rng.uniform(-300, math.log10(LIMIT), n)
    return {
        "cell scale": rng.uniform(-50.0, 50.0, n),
        "whole range": rng.uniform(-LIMIT, LIMIT, n),
        "log-uniform magnitude": magnitudes * rng.choice([-1.0, 1.0], n),
    }


@pytest.mark.parametrize("label", ["cell scale", "whole range", "log-uniform magnitude"])
def test_random_arguments_agree_with_numpy(label):
    _assert_close_to_numpy(_random_arguments()[label])


def _bits(values):
    return np.asarray(values, dtype=np.float64).view(np.uint64)


@pytest.mark.parametrize("label", ["cell scale", "whole range", "log-uniform magnitude"])
def test_intrinsic_is_bit_identical_to_the_numba_body(label):
    """``sincos`` emits its IR directly (``_trig._emit_reduced``); the numbers must be those of
    the same method written as a numba body, bit for bit, in both forms, over 2×10⁵ arguments
    per range plus the quadrant boundaries (a single differing bit fails)."""
    x = _random_arguments()[label]
    k = np.arange(-4096, 4097)
    edges = k * (math.pi / 4.0)
    x = np.concatenate([x, edges, np.nextafter(edges, np.inf), np.nextafter(edges, -np.inf),
                        [0.0, -0.0, 5e-324, -5e-324, LIMIT, -LIMIT]])
    reference_s, reference_c = _numba_body_array(x)
    partner = x[::-1].copy()  # sincos2: the two arguments come from different places
    for fast in (False, True):
        s, c = _sincos_array(x, fast)
        np.testing.assert_array_equal(_bits(s), _bits(reference_s))
        np.testing.assert_array_equal(_bits(c), _bits(reference_c))
        pair = _sincos2_array(x, partner, fast)
        np.testing.assert_array_equal(_bits(pair[0]), _bits(reference_s))
        np.testing.assert_array_equal(_bits(pair[1]), _bits(reference_c))
        np.testing.assert_array_equal(_bits(pair[2]), _bits(reference_s[::-1]))
        np.testing.assert_array_equal(_bits(pair[3]), _bits(reference_c[::-1]))


def test_sincos2_outside_the_range_matches_sincos():
    """Beyond LIMIT and for non-finite arguments ``sincos2`` gives ``sincos``'s values (the
    library fallback, or nan in the fast form), each argument on its own."""
    a = np.array([1.0, 3e6, np.nan, -1e300, 0.5, np.inf])
    b = np.array([2e7, -2.0, 0.25, np.nan, -np.inf, 7.0])
    for fast in (False, True):
        pair = _sincos2_array(a, b, fast)
        for row, (values, part) in enumerate(((a, 0), (a, 1), (b, 0), (b, 1))):
            expected = _sincos_array(values, fast)[part]
            np.testing.assert_array_equal(_bits(pair[row]), _bits(expected))


def test_multiples_of_quarter_pi_and_their_neighbours():
    """Quadrant boundaries (rounding of q), zeros of sin and cos (cancellation in the
    reduction) and the octant edges |r| = π/4 where the polynomials are least accurate."""
    k = np.concatenate([np.arange(-64, 65), np.array([-667_000, -123_457, 99_999, 667_000]),
                        np.random.default_rng(1).integers(-1_300_000, 1_300_000, 5000)])
    base = k * (math.pi / 4.0)
    neighbours = [base]
    for _ in range(3):
        neighbours.append(np.nextafter(neighbours[-1], np.inf))
    below = [base]
    for _ in range(3):
        below.append(np.nextafter(below[-1], -np.inf))
    x = np.concatenate(neighbours + below[1:])
    x = x[np.abs(x) <= LIMIT]
    _assert_close_to_numpy(x)


def test_zero_keeps_its_sign_and_tiny_arguments_are_exact():
    x = np.array([0.0, -0.0, 5e-324, -5e-324, 1e-300, -1e-200, 2.0**-30, -(2.0**-27)])
    s, c = _sincos_array(x, False)
    np.testing.assert_array_equal(s, x)  # sin x = x to double precision for |x| < 2**-26
    np.testing.assert_array_equal(np.signbit(s), np.signbit(x))
    np.testing.assert_array_equal(c, np.ones_like(x))


def test_beyond_the_limit_the_library_functions_are_used():
    x = np.array([LIMIT, -LIMIT, np.nextafter(LIMIT, np.inf), -np.nextafter(LIMIT, np.inf),
                  1e6, -1e6, 2.0**30, 1e15, -3.7e17, 1e300, -1e300, np.finfo(float).max])
    s, c = _sincos_array(x, False)
    beyond = np.abs(x) > LIMIT
    assert beyond.sum() == 8
    np.testing.assert_array_equal(s[beyond], [math.sin(v) for v in x[beyond]])
    np.testing.assert_array_equal(c[beyond], [math.cos(v) for v in x[beyond]])
    _assert_close_to_numpy(x[~beyond])


def test_non_finite_arguments_give_nan():
    x = np.array([np.nan, np.inf, -np.inf])
    for fast in (False, True):
        s, c = _sincos_array(x, fast)
        assert np.isnan(s).all() and np.isnan(c).all()


def test_fast_form_is_identical_in_range_and_nan_beyond():
    rng = np.random.default_rng(7)
    x = np.concatenate([rng.uniform(-LIMIT, LIMIT, 10_000), [LIMIT, -LIMIT, 0.0, -0.0],
                        [np.nextafter(LIMIT, np.inf), -2e6, 1e300]])
    s, c = _sincos_array(x, False)
    fs, fc = _sincos_array(x, True)
    inside = np.abs(x) <= LIMIT
    np.testing.assert_array_equal(fs[inside], s[inside])
    np.testing.assert_array_equal(fc[inside], c[inside])
    assert np.isnan(fs[~inside]).all() and np.isnan(fc[~inside]).all()


def test_error_against_exact_values():
    """Below 1 ulp of the exact value (300-bit mpmath), in all four quadrants."""
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.prec = 300
    rng = np.random.default_rng(11)
    x = np.concatenate([rng.uniform(-50.0, 50.0, 1500), rng.uniform(-LIMIT, LIMIT, 1500)])
    s, c = _sincos_array(x, False)
    worst = 0.0
    for xi, si, ci in zip(x, s, c):
        exact = mpmath.mpf(float(xi))
        for ours, true in ((si, mpmath.sin(exact)), (ci, mpmath.cos(exact))):
            spacing = np.spacing(abs(float(true)))
            worst = max(worst, float(abs(mpmath.mpf(float(ours)) - true) / spacing))
    assert worst < 1.0


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=-LIMIT, max_value=LIMIT, allow_nan=False))
def test_property_agrees_with_the_library_and_is_on_the_unit_circle(x):
    s, c = _sincos_array(np.array([x]), False)
    assert _ulp_error(s[0], math.sin(x)) <= ULP_TOLERANCE
    assert _ulp_error(c[0], math.cos(x)) <= ULP_TOLERANCE
    # each value within ~1.3 ulp ≤ 1.2e-16 of the exact one: s² + c² = 1 within 4.4e-16
    assert abs(s[0] * s[0] + c[0] * c[0] - 1.0) <= 4.5e-16


# the closed-form families of the tile tests (obstacles take the generic branch: no sincos)
FAST_FAMILIES = [flow for flow in TILE_FLOWS if flow[0] != "obstacles"]


@pytest.mark.parametrize("name, params", FAST_FAMILIES, ids=[f[0] for f in FAST_FAMILIES])
def test_tile_velocity_beyond_the_polynomial_range(name, params):
    """Positions whose trigonometric arguments exceed LIMIT go through the library fallback:
    the tile loop gives the compiled dispatch's values bit for bit, and both agree with the
    closed form evaluated by NumPy (to the few-ulp level of the velocity scale)."""
    family = get_family(name)
    values = family.validate(params)
    rng = np.random.default_rng(5)
    m = 40
    x = rng.uniform(-5.0, 5.0, m)
    y = rng.uniform(-5.0, 5.0, m)
    x[::3] += 3.0e6  # beyond LIMIT for k = 1 (and for the mode numbers above)
    y[1::4] -= 7.0e12
    x[5] = y[5] = np.nan
    us = np.empty(m)
    vs = np.empty(m)
    t = 1.1e7  # ω t beyond LIMIT for the oscillating cells
    tile_velocity(family.code, family.pack(values), x, y, t, us, vs, m)
    u, v = evaluate_velocity(family, values, x, y, t)
    np.testing.assert_array_equal(us, u)
    np.testing.assert_array_equal(vs, v)
    assert np.isnan(us[5])
    finite = np.isfinite(x)
    if name == "cellular":
        np.testing.assert_allclose(u[finite], (np.sin(x) * np.cos(y))[finite], rtol=0,
                                   atol=1e-15)
        np.testing.assert_allclose(v[finite], (-np.cos(x) * np.sin(y))[finite], rtol=0,
                                   atol=1e-15)
