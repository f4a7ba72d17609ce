"""Counter-based random numbers: Philox4x32-10, keyed by the study seed.

A particle's noise at step ``n`` is a pure function of (seed, particle index, n): the counter is
(n low, n high, particle low, particle high) and the key is the 64-bit seed.  Results are
therefore identical whatever the chunking, the number of workers or threads, or the order in
which particles run.  Algorithm: Salmon, Moraes, Dror & Shaw (2011), "Parallel random numbers:
as easy as 1, 2, 3", Proc. SC'11 — Philox with 10 rounds, multipliers 0xD2511F53, 0xCD9E8D57 and
Weyl key increments 0x9E3779B9, 0xBB67AE85.  Each call gives four 32-bit words, turned into
four uniforms in (0, 1) and, by the Box–Muller transform, four independent standard normals
(32-bit uniforms bound |z| below 6.8, a tail of probability ~1e-11 per draw).
"""

from __future__ import annotations

import math

import numpy as np

from ._jit import jit

_MASK = np.uint64(0xFFFFFFFF)
_M0 = np.uint64(0xD2511F53)
_M1 = np.uint64(0xCD9E8D57)
_W0 = np.uint64(0x9E3779B9)
_W1 = np.uint64(0xBB67AE85)
_SHIFT = np.uint64(32)
_TWO_PI = 2.0 * math.pi
_INV_2_32 = 1.0 / 4294967296.0


@jit
def philox4x32(c0, c1, c2, c3, k0, k1):
    """Philox4x32-10 block: four uint32 counter words and two key words (held in uint64)."""
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


@jit
def split_seed(seed):
    """The 64-bit seed as the two 32-bit key words."""
    s = np.uint64(seed)
    return s & _MASK, (s >> _SHIFT) & _MASK


@jit
def normals4(k0, k1, particle, step):
    """Four independent N(0, 1) draws for (particle, step) under key (k0, k1)."""
    s = np.uint64(step)
    q = np.uint64(particle)
    r0, r1, r2, r3 = philox4x32(s & _MASK, s >> _SHIFT, q & _MASK, q >> _SHIFT, k0, k1)
    u0 = (float(r0) + 0.5) * _INV_2_32
    u1 = (float(r1) + 0.5) * _INV_2_32
    u2 = (float(r2) + 0.5) * _INV_2_32
    u3 = (float(r3) + 0.5) * _INV_2_32
    a = math.sqrt(-2.0 * math.log(u0))
    b = math.sqrt(-2.0 * math.log(u2))
    return (a * math.cos(_TWO_PI * u1), a * math.sin(_TWO_PI * u1),
            b * math.cos(_TWO_PI * u3), b * math.sin(_TWO_PI * u3))


@jit
def _fill_normals(seed, particles, steps, out):
    k0, k1 = split_seed(seed)
    for i in range(particles.size):
        for j in range(steps.size):
            z0, z1, z2, z3 = normals4(k0, k1, particles[i], steps[j])
            out[i, j, 0] = z0
            out[i, j, 1] = z1
            out[i, j, 2] = z2
            out[i, j, 3] = z3


def normal_draws(seed: int, particles, steps) -> np.ndarray:
    """Array ``[particle, step, 4]`` of the normals the kernels use (for tests and checks)."""
    particles = np.asarray(particles, dtype=np.int64)
    steps = np.asarray(steps, dtype=np.int64)
    out = np.empty((particles.size, steps.size, 4))
    _fill_normals(seed, particles, steps, out)
    return out


@jit
def _block(c0, c1, c2, c3, k0, k1):
    return philox4x32(np.uint64(c0), np.uint64(c1), np.uint64(c2), np.uint64(c3),
                      np.uint64(k0), np.uint64(k1))


def philox_block(counter, key) -> tuple[int, int, int, int]:
    """Raw Philox4x32-10 output words for a 4-word counter and 2-word key (known-answer tests)."""
    return tuple(int(v) for v in _block(*[int(c) for c in counter], *[int(k) for k in key]))
