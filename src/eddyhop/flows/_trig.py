"""Branch-free sine and cosine for the flow families, so that particle loops vectorise.

``sincos(x)`` returns ``(sin x, cos x)`` in float64.  The C library's ``sin``/``cos`` are
called one value at a time and stop the compiler from vectorising a particle loop; this
version is straight-line arithmetic that it can vectorise.

Method
------
* Argument reduction by π/2 in the manner of Cody & Waite (1980), *Software Manual for the
  Elementary Functions*, Prentice-Hall: ``q = rint(x · 2/π)`` and ``r = x − q (C1 + C2 + C3)``
  where C1 is π/2 rounded to 33 significant bits, C2 the remainder π/2 − C1 rounded to 33
  bits and C3 the next remainder rounded to 53 bits (119 bits of π/2 in all; the constants
  were derived for this module from π to 300 bits).  For ``|q| < 2**20`` the products
  ``q C1`` and ``q C2`` are exact and so is ``x − q C1`` (Sterbenz); the rounding error of
  subtracting ``q C2`` is kept (two-sum) and, with ``q C3``, carried as the low part of a
  double-double ``r + r_low``.  ``|r| ≤ π/4`` up to rounding.  Valid for
  ``|x| ≤ LIMIT = 2**20``.
* Taylor polynomials on ``|r| ≤ π/4`` (coefficients ±1/n! rounded to double): sin to degree
  17 (odd terms r … r¹⁷), cos to degree 16 (even terms 1 … r¹⁶); the first omitted terms are
  below 1e-19 and 3e-18 there, far below the rounding error.  Horner evaluation in ``z = r²``,
  written ``r + r z P(z)`` and ``(1 − z/2) + z² Q(z)`` with the rounding error of ``1 − z/2``
  added back, plus the first-order terms of ``r_low``.
* Quadrant: with n = q mod 4, sin x = (s, c, −s, −c)[n] and cos x = (c, −s, −c, s)[n], where
  (s, c) = (sin r, cos r); chosen by selects on q (no branch).  sin(±0) = ±0.

Accuracy, measured against 300-bit mpmath values: at most 0.78 ulp of the result (absolute
error ≤ 8.6e-17) over 2×10⁵ random arguments in each of [−50, 50], [−2**20, 2**20] and
log-uniform magnitudes 1e-8 … 1e6, and 6×10⁴ nearest neighbours of multiples of π/4 up to
2**20 (zeros of sin and cos included: the relative accuracy holds there too).  For
comparison, the C library's sin/cos on the development machine measured 0.52 ulp.
``tests/test_trig.py`` checks the bound against NumPy and mpmath.

Outside ``|x| ≤ LIMIT`` (and for inf or nan) ``sincos`` falls back to ``math.sin`` and
``math.cos``.  That fallback is a branch, and a branch holding a call stops vectorisation, so
the kernel's tile loop calls ``sincos(x, True)`` ("fast"): the same polynomial, but nan
(selected, not branched) instead of the fallback, and re-evaluates the few points that came
back nan with the default ``sincos(x)`` (``integrators.tile_velocity``).  In range both give
identical bits.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit

LIMIT = 1048576.0  # 2**20: |q| = |rint(x·2/π)| ≤ 667 544 < 2**20, so q·C1 and q·C2 are exact
TWO_OVER_PI = 0.6366197723675814
C1 = 1.5707963267341256  # π/2 to 33 bits (0x1.921fb544p+0)
C2 = 6.077100506303966e-11  # (π/2 − C1) to 33 bits (0x1.0b4611a6p-34)
C3 = 2.0222662487959506e-21  # π/2 − C1 − C2 to 53 bits (0x1.3198a2e037073p-69)

# Taylor coefficients (−1)^k / (2k+1)! and (−1)^k / (2k)!
S3 = -1.0 / 6.0
S5 = 1.0 / 120.0
S7 = -1.0 / 5040.0
S9 = 1.0 / 362880.0
S11 = -1.0 / 39916800.0
S13 = 1.0 / 6227020800.0
S15 = -1.0 / 1307674368000.0
S17 = 1.0 / 355687428096000.0
K4 = 1.0 / 24.0
K6 = -1.0 / 720.0
K8 = 1.0 / 40320.0
K10 = -1.0 / 3628800.0
K12 = 1.0 / 479001600.0
K14 = -1.0 / 87178291200.0
K16 = 1.0 / 20922789888000.0


@jit(inline="always")
def _reduced(x):
    """(sin x, cos x) for |x| ≤ LIMIT by reduction and polynomials; no branch."""
    q = np.rint(x * TWO_OVER_PI)
    # r = x − q π/2 as r + r_low: x − q C1 and q C2 are exact; the subtraction of q C2 keeps
    # its rounding error (two-sum) and q C3 goes into the low part
    head = x - q * C1
    middle = -(q * C2)
    r = head + middle
    back = r - head
    r_low = ((head - (r - back)) + (middle - back)) - q * C3
    # renormalise (|q C3| can exceed an ulp of r): afterwards |r_low| ≤ ulp(r)/2
    r_high = r + r_low
    r_low = r_low - (r_high - r)
    r = r_high
    z = r * r
    # sin(r + r_low) ≈ sin r + r_low (1 − z/2), cos(r + r_low) ≈ cos r − r r_low
    s = r + (r_low * (1.0 - 0.5 * z) + (r * z) * (S3 + z * (S5 + z * (S7 + z * (S9 + z * (
        S11 + z * (S13 + z * (S15 + z * S17))))))))
    half_z = 0.5 * z
    w = 1.0 - half_z
    c = w + ((((1.0 - w) - half_z) - r * r_low) + (z * z) * (K4 + z * (K6 + z * (K8 + z * (
        K10 + z * (K12 + z * (K14 + z * K16)))))))
    # quadrant n = q mod 4 from floating-point q (exact for |q| < 2**52); selects, not sums,
    # so that the swapped value is exactly c or s
    n = q - 4.0 * math.floor(0.25 * q)
    swap = n == 1.0 or n == 3.0
    sin_r = c if swap else s
    cos_r = s if swap else c
    sin_sign = -1.0 if n >= 2.0 else 1.0  # n = 2, 3
    cos_sign = -1.0 if n == 1.0 or n == 2.0 else 1.0
    # sin(±0) = ±0 (the sums above turn −0 into +0)
    return (x if x == 0.0 else sin_sign * sin_r), cos_sign * cos_r


@jit(inline="always")
def sincos(x, fast=False):
    """(sin x, cos x); see the module docstring for the method, accuracy and range.

    ``fast=True`` (for vectorised loops): nan instead of the library fallback when
    ``|x| > LIMIT`` or x is not finite; the caller re-evaluates those points with the default.
    """
    s, c = _reduced(x)
    inside = abs(x) <= LIMIT
    if fast:
        s = s if inside else np.nan
        c = c if inside else np.nan
    elif not inside:
        s = math.sin(x)
        c = math.cos(x)
    return s, c
