"""Counter-based random numbers: Philox4x32-10 words turned into exact standard normals.

Stream definition (a pure function of the study seed, the global particle index and the step):

* Philox4x32-10 block cipher, key = the 64-bit seed split into two 32-bit words, counter =
  ``(step low, step high | tag << 16, particle low, particle high)``.  Algorithm: Salmon,
  Moraes, Dror & Shaw (2011), "Parallel random numbers: as easy as 1, 2, 3", Proc. SC'11 —
  10 rounds, multipliers 0xD2511F53, 0xCD9E8D57, Weyl key increments 0x9E3779B9, 0xBB67AE85.
* One block gives two 64-bit words ``(w0 << 32 | w1, w2 << 32 | w3)``; each word gives one
  normal.  Normals ``z0, z1`` of (particle, step) come from tag 0 and ``z2, z3`` from tag 1, so
  a scheme that needs two normals per step pays for one block; tags ≥ 4 are reserved for the
  rare extra words of the rejection steps below.  Steps must stay below 2**48.
* Word → normal: the ziggurat method with 256 equal-area layers (Marsaglia & Tsang 2000,
  "The ziggurat method for generating random variables", J. Stat. Softw. 5(8)); per word, bits
  0–7 pick the layer, bit 8 the sign and bits 11–63 a 53-bit uniform (disjoint bits).  About
  98.5 % of words are accepted by one integer comparison and one multiplication; the rest go
  through the exact wedge test or, in the base layer, Marsaglia's tail method (Marsaglia 1964,
  "Generating a variable from the tail of the normal distribution", Technometrics 6, 101–102).
  The result is exactly N(0, 1) up to the 2**-53 resolution of the uniforms; the tables are
  built below from the layer equations at import (no hard-coded constants).

The same numbers are produced one at a time by :func:`normals4` and a tile of consecutive
particles at a time by :func:`fill_normals` (whose loops vectorise; the rare refused words are
finished afterwards, see there); both are bit-identical.
"""

from __future__ import annotations

import math

import numpy as np
from numba.cpython.unsafe.numbers import trailing_zeros

from .._jit import jit

_MASK = np.uint64(0xFFFFFFFF)
_M0 = np.uint64(0xD2511F53)
_M1 = np.uint64(0xCD9E8D57)
_W0 = np.uint64(0x9E3779B9)
_W1 = np.uint64(0xBB67AE85)
_SHIFT = np.uint64(32)
_TAG_SHIFT = np.uint64(16)
_LAYER_BITS = np.uint64(0xFF)
_SIGN_BIT = np.uint64(0x100)
_UNIFORM_SHIFT = np.uint64(11)
_INV_2_53 = 2.0**-53
# Extra words for one rejected normal: at most this many (a run of 64 rejections has
# probability below 1e-130; the last candidate is then returned).
MAX_ATTEMPTS = 64
# Lanes whose rejections one uint64 bit mask records (see fill_normals; a tile of 128 lanes
# is two groups).
_LANE_GROUP = 64
STEP_LIMIT = 2**48  # steps per particle; spec.py refuses longer runs (kept equal there)


# ---- ziggurat tables ------------------------------------------------------------------------
def _density(x: float) -> float:
    return math.exp(-0.5 * x * x)


def _layer_edges(r: float, layers: int) -> tuple[list[float], float]:
    """Edges x_1 = r > x_2 > ... > x_{n-1} of equal-area layers and that area v.

    Layer i ≥ 1 is the rectangle [0, x_i] × [f(x_i), f(x_{i+1})] of area v; the base layer is
    the rectangle [0, r] × [0, f(r)] plus the tail beyond r, also of area v.
    """
    tail = math.sqrt(math.pi / 2.0) * math.erfc(r / math.sqrt(2.0))
    area = r * _density(r) + tail
    edges = [r]
    for _ in range(layers - 2):
        height = _density(edges[-1]) + area / edges[-1]
        if height >= 1.0:
            return edges, area
        edges.append(math.sqrt(-2.0 * math.log(height)))
    return edges, area


def _top_mismatch(r: float, layers: int) -> float:
    """> 0 when the layers reach f = 1 too early (r too small), < 0 when they fall short."""
    edges, area = _layer_edges(r, layers)
    if len(edges) < layers - 1:
        return float(layers - len(edges))
    return _density(edges[-1]) + area / edges[-1] - 1.0


def ziggurat_tables(layers: int = 256, r: float | None = None):
    """(r, v, X, F, K, W) of the normal ziggurat, ``r`` solved to double precision by
    bisection unless given.

    ``X[0] = v/f(r)`` (the base layer's width including the tail), ``X[1] = r``, ...,
    ``X[layers] = 0``; ``F = f(X)``; ``K[i] = floor(2**53 X[i+1]/X[i])`` is the integer
    acceptance threshold of layer i and ``W[i] = X[i] 2**-53`` its scale.
    """
    if r is None:
        low, high = 2.0, 5.0
        for _ in range(200):
            middle = 0.5 * (low + high)
            if middle in (low, high):
                break
            if _top_mismatch(middle, layers) > 0.0:
                low = middle
            else:
                high = middle
        r = high
    edges, area = _layer_edges(r, layers)
    x = np.zeros(layers + 1)
    x[0] = area / _density(r)
    x[1:layers] = edges
    f = np.exp(-0.5 * x * x)
    k = np.array([math.floor(x[i + 1] / x[i] * 2.0**53) for i in range(layers)], dtype=np.uint64)
    w = x[:layers] * _INV_2_53
    return r, area, x, f, k, w


# r of the 256-layer tables as the bisection above finds it (tests/test_kernel_rng.py checks
# that it still does): every process imports this module, and the bisection costs ≈ 3 ms
R_256 = 3.6541528853610092
_R, _AREA, _ZX, _ZF, _ZK, _ZW = ziggurat_tables(256, R_256)


# ---- Philox ---------------------------------------------------------------------------------
@jit(inline="always")
def philox4x32(c0, c1, c2, c3, k0, k1):
    """Philox4x32-10 block: four uint32 counter words and two key words (held in uint64).

    Inlined into its callers (numba IR inlining) so that the tile loop of
    :func:`fill_normals` vectorises; LLVM's own inliner judges the unrolled rounds too long.
    """
    c0 = np.uint64(c0)
    c1 = np.uint64(c1)
    c2 = np.uint64(c2)
    c3 = np.uint64(c3)
    k0 = np.uint64(k0)
    k1 = np.uint64(k1)
    for _ in range(10):
        p0 = _M0 * c0
        p1 = _M1 * c2
        hi0 = p0 >> _SHIFT
        lo0 = p0 & _MASK
        hi1 = p1 >> _SHIFT
        lo1 = p1 & _MASK
        c0 = (hi1 ^ c1 ^ k0) & _MASK
        c1 = lo1
        c2 = (hi0 ^ c3 ^ k1) & _MASK
        c3 = lo0
        k0 = (k0 + _W0) & _MASK
        k1 = (k1 + _W1) & _MASK
    return c0, c1, c2, c3


def split_seed(seed):
    """The 64-bit seed (taken modulo 2**64) as the two 32-bit key words (Python ints).

    Plain Python: the runner calls it once per run, and a compiled version cost a dispatcher
    compile on a cold start and a cache load on every run."""
    s = int(seed) % 2**64
    return s & 0xFFFFFFFF, s >> 32


@jit
def _words(k0, k1, particle, step, tag):
    """The two 64-bit words of the Philox block for (particle, step, tag)."""
    s = np.uint64(step)
    q = np.uint64(particle)
    r0, r1, r2, r3 = philox4x32(s & _MASK, (s >> _SHIFT) | (np.uint64(tag) << _TAG_SHIFT),
                                q & _MASK, q >> _SHIFT, k0, k1)
    return (r0 << _SHIFT) | r1, (r2 << _SHIFT) | r3


# ---- word → normal --------------------------------------------------------------------------
@jit(inline="always")
def _candidate(word):
    """Signed ziggurat candidate of a word: (value, accepted without further tests)."""
    layer = np.int64(word & _LAYER_BITS)
    j = word >> _UNIFORM_SHIFT
    value = float(np.int64(j)) * _ZW[layer]
    if word & _SIGN_BIT:
        value = -value
    return value, j < _ZK[layer]


@jit
def _rejection_normal(k0, k1, particle, step, slot, word):
    """Finish a normal whose first word was not accepted at once (wedge or tail).

    Extra words come from tags ``4·attempt + slot``; the result is a pure function of
    (key, particle, step, slot).
    """
    value = 0.0
    attempt = 1
    while attempt <= MAX_ATTEMPTS:
        layer = np.int64(word & _LAYER_BITS)
        value, accepted = _candidate(word)
        if accepted:
            return value
        if layer == 0:
            # Tail beyond r, drawn afresh until accepted: x = -ln(U1)/r, accept when
            # -2 ln(U2) > x² (Marsaglia 1964); the sign is the first word's.
            sign = -1.0 if word & _SIGN_BIT else 1.0
            while attempt <= MAX_ATTEMPTS:
                extra_a, extra_b = _words(k0, k1, particle, step, 4 * attempt + slot)
                attempt += 1
                # uniforms in (0, 1) from the top 53 bits (written out: a called helper
                # costs a compile)
                tail = -math.log((float(np.int64(extra_a >> _UNIFORM_SHIFT)) + 0.5)
                                 * _INV_2_53) / _R
                if -2.0 * math.log((float(np.int64(extra_b >> _UNIFORM_SHIFT)) + 0.5)
                                   * _INV_2_53) > tail * tail:
                    return sign * (_R + tail)
            return sign * _R
        # Wedge: a uniform height in [f(x_i), f(x_{i+1})] under f(x) accepts; otherwise
        # start again from an unused word.
        extra_a, extra_b = _words(k0, k1, particle, step, 4 * attempt + slot)
        attempt += 1
        uniform = (float(np.int64(extra_b >> _UNIFORM_SHIFT)) + 0.5) * _INV_2_53  # in (0, 1)
        height = _ZF[layer] + uniform * (_ZF[layer + 1] - _ZF[layer])
        if height < math.exp(-0.5 * value * value):
            return value
        word = extra_a
    return value


@jit
def normal_pair(k0, k1, particle, step, tag):
    """The two N(0, 1) draws of Philox tag ``tag`` (0 or 1) for (particle, step)."""
    word_a, word_b = _words(k0, k1, particle, step, tag)
    za, ok_a = _candidate(word_a)
    zb, ok_b = _candidate(word_b)
    if not ok_a:
        za = _rejection_normal(k0, k1, particle, step, 2 * tag, word_a)
    if not ok_b:
        zb = _rejection_normal(k0, k1, particle, step, 2 * tag + 1, word_b)
    return za, zb


@jit
def normals4(k0, k1, particle, step):
    """Four independent N(0, 1) draws for (particle, step) under key (k0, k1)."""
    z0, z1 = normal_pair(k0, k1, particle, step, 0)
    z2, z3 = normal_pair(k0, k1, particle, step, 1)
    return z0, z1, z2, z3


@jit
def _fill_words(key0, key1, first_particle, count, low, c1, slot, words):
    """Rows ``slot``, ``slot + 1`` of ``words``: the two 64-bit words of the Philox blocks
    with counter word ``c1`` of the tile's particles.  Philox only — the table lookups of
    the ziggurat (gathers) are a separate pass, :func:`_candidates`: in one loop with the
    twenty broadcast round keys they ran out of vector registers (measured slower)."""
    for g in range(count):
        q = np.uint64(first_particle + g)
        r0, r1, r2, r3 = philox4x32(low, c1, q & _MASK, q >> _SHIFT, key0, key1)
        word_a = (r0 << _SHIFT) | r1
        word_b = (r2 << _SHIFT) | r3
        words[slot, g] = word_a
        words[slot + 1, g] = word_b


@jit
def _candidates(words, slot, start, stop, z):
    """Common-case values of the words ``start .. stop - 1`` (at most 64) of row ``slot``
    into ``z`` and the bit mask (bit ``g - start``) of the lanes whose word the common case
    does not accept: one vectorised pass with an OR reduction (unsigned indices, so numba
    adds no negative-index test that would stop it)."""
    rejected = np.uint64(0)
    row = np.uint64(slot)
    first = np.uint64(start)
    for i in range(stop - start):
        g = first + np.uint64(i)
        value, accepted = _candidate(words[row, g])
        z[row, g] = value
        rejected |= np.uint64(not accepted) << np.uint64(i)
    return rejected


# Not ``inline_in_llvm``: inlined into the kernel, the random-number passes saved another
# ≈ 0.25 ns per particle-step but made every output time 0.4–2.8 ns per particle dearer,
# depending on which of them were inlined (the kernel re-enters its step loop after each
# event; the cost comes with _fill_words), which broke the output-time goal (measured A B,
# raw kernel; docs/performance.md).
@jit
def fill_normals(k0, k1, first_particle, count, step, n_pairs, words, z):
    """Normals of particles ``first_particle .. + count - 1`` at ``step`` into ``z[slot, g]``.

    Fills slots ``0 .. 2·n_pairs - 1`` (tags ``0 .. n_pairs - 1``); ``words`` is uint64
    scratch of the same shape.  Bit-identical to :func:`normals4`, in three passes:

    1. per tag, the Philox words of the whole tile (:func:`_fill_words`, vectorised);
    2. per slot and group of 64 lanes, the ziggurat's common case into ``z`` and a bit mask
       of the ~1.5 % of draws that need the wedge or tail test (:func:`_candidates`,
       vectorised, an OR reduction);
    3. per pair of slots and 128 lanes, the marked lanes in one loop over the four masks
       (one hard-to-predict loop exit, not one per mask: that alone saved ≈ 0.4 ns per
       particle-step), each finished by a branch-free first retry (the extra block, the
       wedge test and the next word chosen by selects) and, for the ≈ 3 % of them that
       retry leaves, by :func:`_rejection_normal`.

    Each finished draw is a pure function of (key, particle, step, slot), so the order of
    the passes changes no number (``tests/test_kernel_rng.py`` checks every path of the
    rejection step against :func:`normals4`).
    """
    key0 = np.uint64(k0)
    key1 = np.uint64(k1)
    s = np.uint64(step)
    low = s & _MASK
    high = s >> _SHIFT
    for tag in range(n_pairs):
        _fill_words(key0, key1, first_particle, count, low,
                    high | (np.uint64(tag) << _TAG_SHIFT), 2 * tag, words)
    for first in range(0, count, 2 * _LANE_GROUP):
        middle = min(first + _LANE_GROUP, count)
        end = min(first + 2 * _LANE_GROUP, count)
        for slot in range(0, 2 * n_pairs, 2):
            # the four masks of two slots × two groups of 64 lanes, finished in one loop:
            # one mispredicted loop exit per 128 lanes and pair of slots, not four
            a0 = _candidates(words, slot, first, middle, z)
            a1 = _candidates(words, slot, middle, end, z)
            b0 = _candidates(words, slot + 1, first, middle, z)
            b1 = _candidates(words, slot + 1, middle, end, z)
            while a0 | a1 | b0 | b1:
                if a0:
                    row = slot
                    g = first + np.int64(trailing_zeros(a0))
                    a0 &= a0 - np.uint64(1)
                elif a1:
                    row = slot
                    g = middle + np.int64(trailing_zeros(a1))
                    a1 &= a1 - np.uint64(1)
                elif b0:
                    row = slot + 1
                    g = first + np.int64(trailing_zeros(b0))
                    b0 &= b0 - np.uint64(1)
                else:
                    row = slot + 1
                    g = middle + np.int64(trailing_zeros(b1))
                    b1 &= b1 - np.uint64(1)
                word = words[row, g]
                # The first retry of the refused word without branches — the arithmetic of
                # the first pass of _rejection_normal's loop: the extra block of tag
                # 4 + slot, the wedge test of the word and, should the wedge refuse, the
                # common case of the block's first word, the outcome chosen by selects — so
                # that the refused draws of a tile overlap in the CPU instead of each
                # waiting on its own mispredicted branches.  The ≈ 3 % it leaves unsettled
                # (the base layer's tail, a word refused twice) go to _rejection_normal,
                # which repeats this attempt and goes on: the same number either way.
                q = np.uint64(first_particle + g)
                r0, r1, r2, r3 = philox4x32(low, high | (np.uint64(4 + row) << _TAG_SHIFT),
                                            q & _MASK, q >> _SHIFT, key0, key1)
                extra_a = (r0 << _SHIFT) | r1
                extra_b = (r2 << _SHIFT) | r3
                layer = np.int64(word & _LAYER_BITS)
                value = float(np.int64(word >> _UNIFORM_SHIFT)) * _ZW[layer]
                if word & _SIGN_BIT:
                    value = -value
                # the uniform of extra_b and _candidate(extra_a) written out: each inlined
                # or called helper costs compile time
                uniform = (float(np.int64(extra_b >> _UNIFORM_SHIFT)) + 0.5) * _INV_2_53
                height = _ZF[layer] + uniform * (_ZF[layer + 1] - _ZF[layer])
                wedge = height < math.exp(-0.5 * value * value)
                next_layer = np.int64(extra_a & _LAYER_BITS)
                next_uniform = extra_a >> _UNIFORM_SHIFT
                following = float(np.int64(next_uniform)) * _ZW[next_layer]
                if extra_a & _SIGN_BIT:
                    following = -following
                if not wedge:
                    value = following
                if (layer == 0) | ((not wedge) & (next_uniform >= _ZK[next_layer])):
                    value = _rejection_normal(key0, key1, first_particle + g, step, row, word)
                z[row, g] = value


@jit
def _fill_normals(k0, k1, particles, steps, out):
    for i in range(particles.size):
        for j in range(steps.size):
            z0, z1, z2, z3 = normals4(k0, k1, particles[i], steps[j])
            out[i, j, 0] = z0
            out[i, j, 1] = z1
            out[i, j, 2] = z2
            out[i, j, 3] = z3


def normal_draws(seed: int, particles, steps) -> np.ndarray:
    """Array ``[particle, step, 4]`` of the normals the kernels use (for tests and checks).

    Two-normal schemes (Euler–Maruyama, Milstein) use slots 0 and 1; ``strang_rk2`` all four.
    """
    particles = np.asarray(particles, dtype=np.int64)
    steps = np.asarray(steps, dtype=np.int64)
    out = np.empty((particles.size, steps.size, 4))
    _fill_normals(*split_seed(seed), particles, steps, out)
    return out


@jit
def _block(c0, c1, c2, c3, k0, k1):
    return philox4x32(np.uint64(c0), np.uint64(c1), np.uint64(c2), np.uint64(c3),
                      np.uint64(k0), np.uint64(k1))


def philox_block(counter, key) -> tuple[int, int, int, int]:
    """Raw Philox4x32-10 output words for a 4-word counter and 2-word key (known-answer tests)."""
    return tuple(int(v) for v in _block(*[int(c) for c in counter], *[int(k) for k in key]))
