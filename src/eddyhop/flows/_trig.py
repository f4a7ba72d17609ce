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

Implementation: the polynomial is not a numba function body.  ``_emit_reduced`` writes its
LLVM IR (numba intrinsics): numba then types and lowers each ``sincos`` call in microseconds
wherever it is inlined, where a body of ~60 operations was re-typed at every inlining level
(≈ 8 s of a cold start).  Each IR operation is one IEEE double operation with no fast-math
flag, so LLVM can neither contract a product and a sum into an FMA nor reassociate: the
numbers are those of the method as written, bit for bit (``tests/test_trig.py`` compares
with the same method written as a numba body).  ``sincos2(a, b)`` gives
``sincos(a) + sincos(b)`` with the two evaluations interleaved operation by operation: the
processor overlaps their dependency chains (the polynomials are long serial chains).
"""

from __future__ import annotations

import math

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


def _emit_reduced(builder, arguments):
    """LLVM IR of (sin x, cos x) for each x of ``arguments`` (|x| ≤ LIMIT): the operations of
    the method above, in the order written here, each a separate IEEE operation (no fast-math
    flags, so LLVM may neither contract a product and a sum into an FMA nor reassociate).

    Every operation is emitted for all the arguments before the next one: their dependency
    chains (the polynomials are long serial chains) come interleaved, so the processor overlaps
    them instead of waiting on one.  Returns a list of (s, c) pairs."""
    from llvmlite import ir

    double = ir.DoubleType()
    module = builder.module

    def const(value):
        return [ir.Constant(double, value)] * len(arguments)

    def each(operation, *operands):
        return [operation(*values) for values in zip(*operands)]

    def add(a, b):
        return each(builder.fadd, a, b)

    def sub(a, b):
        return each(builder.fsub, a, b)

    def mul(a, b):
        return each(builder.fmul, a, b)

    def unary(name, a):
        function = module.declare_intrinsic(name, [double])
        return [builder.call(function, [value]) for value in a]

    def compare(operator, a, b):
        return each(lambda u, v: builder.fcmp_ordered(operator, u, v), a, b)

    def select(condition, a, b):
        return each(builder.select, condition, a, b)

    x = list(arguments)
    q = unary("llvm.rint", mul(x, const(TWO_OVER_PI)))
    # r = x − q π/2 as r + r_low: x − q C1 and q C2 are exact; the subtraction of q C2 keeps
    # its rounding error (two-sum) and q C3 goes into the low part
    head = sub(x, mul(q, const(C1)))
    middle = sub(const(-0.0), mul(q, const(C2)))  # negation, −0 kept
    r = add(head, middle)
    back = sub(r, head)
    r_low = sub(add(sub(head, sub(r, back)), sub(middle, back)), mul(q, const(C3)))
    # renormalise (|q C3| can exceed an ulp of r): afterwards |r_low| ≤ ulp(r)/2
    r_high = add(r, r_low)
    r_low = sub(r_low, sub(r_high, r))
    r = r_high
    z = mul(r, r)
    # sin(r + r_low) ≈ sin r + r_low (1 − z/2), cos(r + r_low) ≈ cos r − r r_low;
    # Horner from the innermost coefficient outwards, the two polynomials interleaved
    half_z = mul(const(0.5), z)
    sin_poly = mul(z, const(S17))
    cos_poly = mul(z, const(K16))
    for sin_coefficient, cos_coefficient in zip((S15, S13, S11, S9, S7, S5),
                                                (K14, K12, K10, K8, K6, None)):
        sin_poly = mul(z, add(const(sin_coefficient), sin_poly))
        if cos_coefficient is not None:
            cos_poly = mul(z, add(const(cos_coefficient), cos_poly))
    sin_poly = add(const(S3), sin_poly)
    cos_poly = add(const(K4), cos_poly)
    s = add(r, add(mul(r_low, sub(const(1.0), half_z)), mul(mul(r, z), sin_poly)))
    w = sub(const(1.0), half_z)
    c = add(w, add(sub(sub(sub(const(1.0), w), half_z), mul(r, r_low)), mul(mul(z, z), cos_poly)))
    # quadrant n = q mod 4 from floating-point q (exact for |q| < 2**52); selects, not sums,
    # so that the swapped value is exactly c or s
    n = sub(q, mul(const(4.0), unary("llvm.floor", mul(const(0.25), q))))
    is_one = compare("==", n, const(1.0))
    is_two = compare("==", n, const(2.0))
    is_three = compare("==", n, const(3.0))
    swap = each(builder.or_, is_one, is_three)
    sin_r = select(swap, c, s)
    cos_r = select(swap, s, c)
    sin_sign = select(compare(">=", n, const(2.0)), const(-1.0), const(1.0))  # n = 2, 3
    cos_sign = select(each(builder.or_, is_one, is_two), const(-1.0), const(1.0))
    # sin(±0) = ±0 (the sums above turn −0 into +0)
    sin_x = select(compare("==", x, const(0.0)), x, mul(sin_sign, sin_r))
    return list(zip(sin_x, mul(cos_sign, cos_r)))


def _sincos_intrinsic(fast: bool, count: int = 1):
    """numba intrinsic ``(x) -> (sin x, cos x)`` (``count`` 1) or ``(a, b) -> (sin a, cos a,
    sin b, cos b)`` (``count`` 2) of :func:`_emit_reduced`;
    ``fast``: nan (selected) where |x| > LIMIT or x is not finite, else no range test at all."""
    from numba import types
    from numba.extending import intrinsic

    def check(arguments):
        if not all(isinstance(a, (types.Float, types.Integer, types.Boolean))
                   for a in arguments):
            return None
        result = types.UniTuple(types.float64, 2 * count)

        def codegen(context, builder, signature, args):
            from llvmlite import ir

            values = []
            for x, (s, c) in zip(args, _emit_reduced(builder, args)):
                if fast:
                    double = ir.DoubleType()
                    magnitude = builder.call(
                        builder.module.declare_intrinsic("llvm.fabs", [double]), [x])
                    inside = builder.fcmp_ordered("<=", magnitude, ir.Constant(double, LIMIT))
                    nan = ir.Constant(double, float("nan"))
                    s = builder.select(inside, s, nan)
                    c = builder.select(inside, c, nan)
                values += [s, c]
            return context.make_tuple(builder, result, values)

        # the arguments are converted to float64 by the call (the signature's types)
        return result(*([types.float64] * count)), codegen

    if count == 1:
        def typer(typingctx, x):
            return check((x,))
    else:
        def typer(typingctx, a, b):
            return check((a, b))

    typer.__name__ = f"_sincos{count}_{'fast' if fast else 'reduced'}"
    return intrinsic(typer)


# The intrinsics are made (numba imported) when ``sincos`` or ``sincos2`` is first compiled,
# not at import: ``eddyhop validate`` imports the flow modules without numba.
_sincos_reduced = None
_sincos_fast = None
_sincos2_reduced = None
_sincos2_fast = None


def _make_intrinsics() -> None:
    global _sincos_reduced, _sincos_fast, _sincos2_reduced, _sincos2_fast
    if _sincos_reduced is None:
        from numba.core.registry import cpu_target

        _sincos_fast = _sincos_intrinsic(True)
        _sincos2_fast = _sincos_intrinsic(True, 2)
        _sincos2_reduced = _sincos_intrinsic(False, 2)
        _sincos_reduced = _sincos_intrinsic(False)
        # this may run while numba compiles a caller: its typing context loaded the registered
        # globals when that compilation began and must learn the new ones
        cpu_target.typing_context.refresh()


@jit(inline="always", before_first_use=_make_intrinsics)
def sincos(x, fast=False):
    """(sin x, cos x); see the module docstring for the method, accuracy and range.

    ``fast=True`` (for vectorised loops): nan instead of the library fallback when
    ``|x| > LIMIT`` or x is not finite; the caller re-evaluates those points with the default.
    """
    if fast:
        return _sincos_fast(x)
    s, c = _sincos_reduced(x)
    if not abs(x) <= LIMIT:
        s = math.sin(x)
        c = math.cos(x)
    return s, c


@jit(inline="always", before_first_use=_make_intrinsics)
def sincos2(a, b, fast=False):
    """(sin a, cos a, sin b, cos b): the values of ``sincos(a, fast)`` and ``sincos(b, fast)``,
    bit for bit, computed with the two evaluations interleaved (faster in a tile loop: the
    processor overlaps their long dependency chains)."""
    if fast:
        return _sincos2_fast(a, b)
    sa, ca, sb, cb = _sincos2_reduced(a, b)
    if not abs(a) <= LIMIT:
        sa = math.sin(a)
        ca = math.cos(a)
    if not abs(b) <= LIMIT:
        sb = math.sin(b)
        cb = math.cos(b)
    return sa, ca, sb, cb
