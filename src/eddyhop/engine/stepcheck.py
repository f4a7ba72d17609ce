"""Step check kernel: the same particles integrated at dt and, on the same Brownian path, at 2·dt.

Pure numba, no I/O.  The *fine* path of a particle is the very path the ensemble kernel
(``kernel.run_particles``) integrates: the same normals (Philox keyed by seed, global particle
index and step), the same tile step (``kernel._step_tile``), the same wall handling.  The
*coarse* path takes steps of 2·dt driven by the same Brownian increments — the coupling of
multilevel Monte Carlo (Giles 2008, "Multilevel Monte Carlo path simulation", Oper. Res. 56(3),
607–617): a coarse increment is the sum of the fine increments it spans, so the coarse and
fine paths stay close and the difference of their moments has a small variance.

Coarse normals (unit variance, built from the fine normals z of steps n = 2m and n + 1):

* Euler–Maruyama, Milstein: ΔW_coarse = ΔW_n + ΔW_{n+1}, i.e. z_c = (z_n + z_{n+1}) / √2 in
  slots 0 (x) and 1 (y).
* Strang splitting (``strang_rk2``): a fine step is noise(dt/2) · advection(dt) · noise(dt/2)
  with normals (z0, z1) for the first half and (z2, z3) for the second, so fine step n carries
  the Brownian increment √(κ dt)(z0 + z2) of [t_n, t_n + dt] (x; y with z1, z3).  The coarse
  step noise(dt) · advection(2 dt) · noise(dt) takes, in time order, the increment of fine step
  n for its first noise half and that of fine step n + 1 for its second:
  z_c0 = (z0_n + z2_n)/√2, z_c2 = (z0_{n+1} + z2_{n+1})/√2 (and z_c1, z_c3 from z1, z3).

Outputs: per output step, sums over the particles of Δx, Δy, Δx², Δy², ΔxΔy for the coarse
path (``coarse``) and, on request, the fine path (``fine``; for tests: the runner uses the
ensemble's own sums of the same particles).  The coarse path exists only at even fine steps;
at odd output steps its sums stay 0 and the runner marks them NaN.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit
from ..flows.compiled import confine, has_walls
from .callee import callee
from .integrators import STRANG_RK2, TILE_WORK_ROWS
from .kernel import BLOWUP_LIMIT, TILE, _step_tile, aligned_arrays, normal_pairs_per_step
from .rng import fill_normals

CHECK_COLUMNS = ("dx", "dy", "dx2", "dy2", "dxdy")
_INV_SQRT2 = 1.0 / math.sqrt(2.0)


@callee
def _add(sums, slot, dx, dy):
    sums[slot, 0] += dx
    sums[slot, 1] += dy
    sums[slot, 2] += dx * dx
    sums[slot, 3] += dy * dy
    sums[slot, 4] += dx * dy


def check_scratch() -> dict:
    """The per-call scratch of :func:`run_step_check`, by argument name: fresh NumPy arrays of
    O(``TILE``) size for one call at a time (the caller allocates them, cache-line aligned —
    ``kernel.aligned_arrays`` — so the kernel compiles no array allocation of its own).  ``z``
    and ``zc`` are zero (rows a scheme does not draw are read); the others are written before
    they are read."""
    f8 = np.float64
    return aligned_arrays({
        **{name: (TILE, f8) for name in ("xs", "ys", "x_new", "y_new", "xc", "yc", "xc_new",
                                         "yc_new")},
        "work": ((TILE_WORK_ROWS, TILE), f8),
        "words": ((4, TILE), np.uint64),
        "z": ((4, TILE), f8),
        "zc": ((4, TILE), f8),
    })


@jit
def run_step_check(fcode, fp, ncode, nq, scheme, dt, key0, key1, x0, y0, first_index,
                   stream_offset, out_steps, fine, coarse, status,
                   xs, ys, x_new, y_new, xc, yc, xc_new, yc_new, work, words, z, zc):
    """Integrate particles ``first_index + i`` from (x0[i], y0[i]) at 2·dt (and at dt too when
    ``fine`` is an array, not None: the ensemble kernel's paths, recomputed — the runner takes
    them from the ensemble's own block sums instead, so the check costs only the coarse path
    and the draws; with ``fine`` None numba prunes the fine path before typing, so that kernel
    does not contain it).  ``xs`` … ``zc``: scratch from :func:`check_scratch`.

    ``fine``, ``coarse``: [T, 5] sums (columns ``CHECK_COLUMNS``) at the output steps
    ``out_steps`` (increasing, > 0), added in ascending particle order.  ``status`` is set to
    (global particle, fine step) of the lowest-numbered particle whose coarse path became
    non-finite or ran away (its tile then stops adding); the fine path is the ensemble
    kernel's, whose failures the ensemble run has already reported.

    Specialised like ``kernel.run_particles``: family, scheme and noise model are constants.
    """
    sqrt_dt = math.sqrt(dt)
    coarse_dt = 2.0 * dt
    sqrt_coarse_dt = math.sqrt(coarse_dt)
    n_pairs = normal_pairs_per_step(scheme)
    splitting = scheme == STRANG_RK2
    walls = has_walls(fcode)
    n = x0.size
    n_out = out_steps.size
    last = out_steps[n_out - 1]
    for lo in range(0, n, TILE):
        m = TILE if TILE < n - lo else n - lo  # not min(): its typing costs compile time
        particle0 = stream_offset + first_index + lo
        for g in range(m):
            xs[g] = x0[lo + g]
            ys[g] = y0[lo + g]
            xc[g] = x0[lo + g]
            yc[g] = y0[lo + g]
        k = 0
        failed = False
        for step in range(last):
            fill_normals(key0, key1, particle0, m, step, n_pairs, words, z)
            if fine is not None:
                _step_tile(scheme, fcode, fp, ncode, nq, xs, ys, step * dt, dt, sqrt_dt, z, m,
                           x_new, y_new, work)
                if walls:
                    for g in range(m):
                        x_new[g], y_new[g] = confine(fcode, xs[g], ys[g], x_new[g], y_new[g],
                                                     fp)
                xs, x_new = x_new, xs
                ys, y_new = y_new, ys
            # the coarse step's normals, from this fine step's increments
            odd = step % 2 == 1
            if splitting:
                first = 2 if odd else 0
                for g in range(m):
                    zc[first, g] = (z[0, g] + z[2, g]) * _INV_SQRT2
                    zc[first + 1, g] = (z[1, g] + z[3, g]) * _INV_SQRT2
            elif odd:
                for g in range(m):
                    zc[0, g] = (zc[0, g] + z[0, g]) * _INV_SQRT2
                    zc[1, g] = (zc[1, g] + z[1, g]) * _INV_SQRT2
            else:
                for g in range(m):
                    zc[0, g] = z[0, g]
                    zc[1, g] = z[1, g]
            if odd:
                _step_tile(scheme, fcode, fp, ncode, nq, xc, yc, (step - 1) * dt, coarse_dt,
                           sqrt_coarse_dt, zc, m, xc_new, yc_new, work)
                if walls:
                    for g in range(m):
                        xc_new[g], yc_new[g] = confine(fcode, xc[g], yc[g], xc_new[g],
                                                       yc_new[g], fp)
                xc, xc_new = xc_new, xc
                yc, yc_new = yc_new, yc
                for g in range(m):
                    if not (abs(xc[g]) < BLOWUP_LIMIT and abs(yc[g]) < BLOWUP_LIMIT):
                        if status[0] < 0 or particle0 + g < status[0]:
                            status[0] = particle0 + g
                            status[1] = step + 1
                        failed = True
                if failed:
                    break
            done = step + 1
            while k < n_out and out_steps[k] == done:
                if fine is not None:
                    for g in range(m):
                        _add(fine, k, xs[g] - x0[lo + g], ys[g] - y0[lo + g])
                if odd:
                    for g in range(m):
                        _add(coarse, k, xc[g] - x0[lo + g], yc[g] - y0[lo + g])
                k += 1
