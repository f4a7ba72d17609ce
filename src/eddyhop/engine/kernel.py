"""The ensemble kernel: integrate a contiguous run of particles and stream their statistics.

Pure numba, no I/O.  Particles are integrated in *tiles* of up to ``TILE`` consecutive particles
stepped together: at each step the random numbers of the whole tile are drawn at once
(``rng.fill_normals``, a loop that vectorises across particles) and the flow is evaluated once
per stage for the whole tile (``integrators.advance_tile``).  Every particle's arithmetic is
independent of its tile-mates and its noise is a pure function of (seed, global particle index,
step), so trajectories do not depend on the tiling.  Every particle adds to the sums of the
block it belongs to, in ascending particle order (tiles in order, particles in order within a
tile), and blocks have a fixed size, so the runner can fold blocks into batches in a fixed order
and the totals are bit-identical whatever the chunking or the number of workers.

Blow-up: a tile in which a position becomes non-finite or runaway is finished without further
statistics and the kernel returns with ``status`` = (global particle, step) of the
lowest-numbered particle that failed (at its first failing step): the same particle a one-at-a-
time integration would report, whatever the tiling or chunking.

Event schedule (built by ``schedule.py``): sorted step indices ``events``; at event ``e`` the
kernel may (a) record moments into output slot ``ev_out[e]``, (b) store a tracked sample in slot
``ev_track[e]``, (c) take the aging reference for aging index ``ev_ref[e]``, (d) accumulate aged
displacements for the pairs ``(aged_a, aged_l)[aged_ptr[e]:aged_ptr[e+1]]``, (e) take the
flow velocity u(X, t) as the reference of velocity-correlation index ``ev_vref[e]`` and (f) add
the velocity products of the pairs ``(vc_r, vc_l)[vc_ptr[e]:vc_ptr[e+1]]`` (lag 0 included:
the reference is taken first).  Velocity columns per (block, reference, lag): see
``velocity_pairs.VELOCITY_COLUMNS`` (u_i at t_r times u_j at t_r + τ, then u_x, u_y at
t_r + τ).  With no velocity pairs scheduled nothing is evaluated.

Moment columns per (block, output slot): see ``MOMENT_COLUMNS``; then for each order q the sums
of |Δx|^q, |Δy|^q and |ΔX|^q (integer orders up to ``MAX_PRODUCT_ORDER`` by repeated
multiplication, others by ``pow``).  Aged columns: Σ|ΔX|², ΣΔx², ΣΔy², Σ|ΔX|⁴.
"""

from __future__ import annotations

import math

import numpy as np
from numba.core import cgutils
from numba.extending import intrinsic, overload

from .._jit import jit
from ..flows.compiled import confine, has_walls, specialised_code
from .integrators import (
    PROJECTED_RK45,
    RK4,
    STRANG_RK2,
    TILE_WORK_ROWS,
    advance_tile,
    tile_velocity,
)
from .rng import fill_normals
from .streamline import WORK_ROWS as PROJECTED_WORK_ROWS
from .streamline import advance_tile_projected, start_tile

MOMENT_COLUMNS = ("dx", "dy", "dx2", "dy2", "dxdy", "r4", "dx3", "dy3", "dx4", "dy4")
AGED_COLUMNS = ("r2", "dx2", "dy2", "r4")
N_BASE = len(MOMENT_COLUMNS)
BLOWUP_LIMIT = 1e150
# Particles stepped together: long enough to vectorise the random-number loop and to spread
# the per-step call overhead, short enough to keep the scratch in L1 (benchmarks/bench_kernel.py).
TILE = 128
MAX_PRODUCT_ORDER = 8
# Columns of the per-particle cell-hopping state.
_CX, _CY, _ENTERED, _FLIGHT_X, _FLIGHT_Y, _IN_FLIGHT = range(6)


@intrinsic
def _borrowed(typingctx, array):
    """View of ``array`` that carries no reference count (its meminfo is NULL).

    Every call that takes an array makes numba increment and decrement its reference count
    around the call unless it can prove the pair redundant.  On the flow and noise parameter
    vectors, shared by all threads, those atomic updates cost several per particle-step and
    bounce one cache line between cores.  A NULL meminfo turns them into a null test.  Only
    for arguments of the kernel: the caller keeps the array alive for the whole call.
    """
    def codegen(context, builder, signature, args):
        view = context.make_array(signature.args[0])(context, builder, value=args[0])
        view.meminfo = cgutils.get_null_value(view.meminfo.type)
        return view._getvalue()

    return array(array), codegen


def _step_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new, work):
    raise NotImplementedError("compiled only")


def _start_tile(scheme, fcode, fp, xs, ys, dt, m, work):
    raise NotImplementedError("compiled only")


# Scheme selection at compile time: a kernel specialised on its scheme code (a CompiledCode)
# types and compiles only that scheme's tile step — the adaptive projected_rk45 stepper is
# the largest, and a stochastic study never compiles it.  Inlined, so no call is left.
_SELECT = {"inline": "always", "prefer_literal": True,
           "jit_options": {"error_model": "numpy", "fastmath": False}}


@overload(_step_tile, **_SELECT)
def _overload_step_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new,
                        y_new, work):
    code = specialised_code(scheme)
    if code == PROJECTED_RK45:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            advance_tile_projected(fcode, fp, nq, xs, ys, t, dt, m, x_new, y_new, work)
    elif code is not None:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            advance_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new,
                         y_new, work)
    else:  # a run-time scheme code: both steppers
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            if scheme == PROJECTED_RK45:  # adaptive substeps kept on ψ's level set
                advance_tile_projected(fcode, fp, nq, xs, ys, t, dt, m, x_new, y_new, work)
            else:
                advance_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m,
                             x_new, y_new, work)
    return step


@overload(_start_tile, **_SELECT)
def _overload_start_tile(scheme, fcode, fp, xs, ys, dt, m, work):
    code = specialised_code(scheme)
    if code is not None and code != PROJECTED_RK45:
        def start(scheme, fcode, fp, xs, ys, dt, m, work):
            pass
    else:
        def start(scheme, fcode, fp, xs, ys, dt, m, work):
            if scheme == PROJECTED_RK45:  # ψ₀ and the first trial step of each particle
                start_tile(fcode, fp, xs, ys, dt, m, work)
    return start


@jit
def normal_pairs_per_step(scheme):
    """Philox blocks (pairs of normals) a scheme consumes per step."""
    if scheme == RK4 or scheme == PROJECTED_RK45:
        return 0
    if scheme == STRANG_RK2:
        return 2
    return 1


@jit
def _log_bin(value, log_low, inv_width, n_bins):
    if value <= 0.0:
        return 0
    index = int((math.log(value) - log_low) * inv_width)
    if index < 0:
        return 0
    if index >= n_bins:
        return n_bins - 1
    return index


@jit
def _abs_power(value, order):
    """|value|**order, by repeated multiplication for small positive integer orders."""
    if order == math.floor(order) and 1.0 <= order <= MAX_PRODUCT_ORDER:
        result = value
        for _ in range(int(order) - 1):
            result *= value
        return result
    return value**order


@jit
def _start_hops(hop, g, x, y, cell):
    cx = math.floor(x / cell)
    cy = math.floor(y / cell)
    hop[g, _CX] = cx
    hop[g, _CY] = cy
    hop[g, _ENTERED] = 0
    hop[g, _FLIGHT_X] = cx
    hop[g, _FLIGHT_Y] = cy
    hop[g, _IN_FLIGHT] = 0


@jit
def _check_hop(hop, g, x, y, step, dt, cell, margin, gap_steps, block,
               res_log_low, res_inv_width, fl_log_low, fl_inv_width,
               residence_hist, flight_hist, hop_count):
    """Count a cell change of tile particle ``g`` after ``step`` steps.

    A change counts once the tracer is ``margin`` cells deep in the new cell, so that
    noise-driven recrossings of a boundary are not hops.  Hops closer than ``gap_steps`` in
    time belong to one flight, whose length (in cells) is binned when the flight ends.
    """
    fx = x / cell
    fy = y / cell
    nx = math.floor(fx)
    ny = math.floor(fy)
    cx = hop[g, _CX]
    cy = hop[g, _CY]
    if (nx != cx or ny != cy) and (
        min(fx - nx, nx + 1.0 - fx) > margin or nx == cx
    ) and (min(fy - ny, ny + 1.0 - fy) > margin or ny == cy):
        residence = step - hop[g, _ENTERED]
        n_res_bins = residence_hist.shape[1]
        residence_hist[block, _log_bin(residence * dt, res_log_low, res_inv_width,
                                       n_res_bins)] += 1.0
        hop_count[block] += 1.0
        if residence >= gap_steps:
            if hop[g, _IN_FLIGHT]:
                length = math.hypot(cx - hop[g, _FLIGHT_X], cy - hop[g, _FLIGHT_Y])
                flight_hist[block, _log_bin(length, fl_log_low, fl_inv_width,
                                            flight_hist.shape[1])] += 1.0
            hop[g, _FLIGHT_X] = cx
            hop[g, _FLIGHT_Y] = cy
            hop[g, _IN_FLIGHT] = 1
        hop[g, _CX] = nx
        hop[g, _CY] = ny
        hop[g, _ENTERED] = step


@jit
def _product_orders(orders):
    """For each order, the integer n if it is computed as a product of n factors, else 0."""
    products = np.zeros(orders.size, dtype=np.int64)
    for q in range(orders.size):
        order = orders[q]
        if order == math.floor(order) and 1.0 <= order <= MAX_PRODUCT_ORDER:
            products[q] = int(order)
    return products


@jit
def _add_moments(moments, block, slot, dx, dy, orders, products, powers):
    """Add one particle's displacement (dx, dy) to the sums ``moments[block, slot]``.

    ``powers`` is scratch [3, MAX_PRODUCT_ORDER + 1]: |Δx|^n, |Δy|^n, |ΔX|^n built by the same
    repeated products as :func:`_abs_power`, once for all orders.
    """
    dx2 = dx * dx
    dy2 = dy * dy
    r2 = dx2 + dy2
    moments[block, slot, 0] += dx
    moments[block, slot, 1] += dy
    moments[block, slot, 2] += dx2
    moments[block, slot, 3] += dy2
    moments[block, slot, 4] += dx * dy
    moments[block, slot, 5] += r2 * r2
    moments[block, slot, 6] += dx2 * dx
    moments[block, slot, 7] += dy2 * dy
    moments[block, slot, 8] += dx2 * dx2
    moments[block, slot, 9] += dy2 * dy2
    if orders.size == 0:
        return
    adx = abs(dx)
    ady = abs(dy)
    r = math.sqrt(r2)
    px = adx
    py = ady
    pr = r
    powers[0, 1] = px
    powers[1, 1] = py
    powers[2, 1] = pr
    for n in range(2, MAX_PRODUCT_ORDER + 1):
        px *= adx
        py *= ady
        pr *= r
        powers[0, n] = px
        powers[1, n] = py
        powers[2, n] = pr
    for q in range(orders.size):
        base = N_BASE + 3 * q
        n = products[q]
        if n > 0:
            moments[block, slot, base] += powers[0, n]
            moments[block, slot, base + 1] += powers[1, n]
            moments[block, slot, base + 2] += powers[2, n]
        else:
            moments[block, slot, base] += _abs_power(adx, orders[q])
            moments[block, slot, base + 1] += _abs_power(ady, orders[q])
            moments[block, slot, base + 2] += _abs_power(r, orders[q])


@jit
def _record_event(e, lo, m, block_size, xs, ys, x0, y0, ref,
                  ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders, products, powers,
                  moments, aged, tracks, n_tracked_here):
    """Everything event ``e`` asks of tile particles ``lo .. lo + m - 1`` (ascending order)."""
    slot = ev_out[e]
    if slot >= 0:
        for g in range(m):
            _add_moments(moments, (lo + g) // block_size, slot, xs[g] - x0[lo + g],
                         ys[g] - y0[lo + g], orders, products, powers)
    tslot = ev_track[e]
    if tslot >= 0:
        for g in range(min(m, n_tracked_here - lo)):
            tracks[lo + g, tslot, 0] = xs[g]
            tracks[lo + g, tslot, 1] = ys[g]
    a_ref = ev_ref[e]
    if a_ref >= 0:
        for g in range(m):
            ref[g, a_ref, 0] = xs[g]
            ref[g, a_ref, 1] = ys[g]
    for j in range(aged_ptr[e], aged_ptr[e + 1]):
        a = aged_a[j]
        lag = aged_l[j]
        for g in range(m):
            block = (lo + g) // block_size
            ax = xs[g] - ref[g, a, 0]
            ay = ys[g] - ref[g, a, 1]
            ax2 = ax * ax
            ay2 = ay * ay
            ar2 = ax2 + ay2
            aged[block, a, lag, 0] += ar2
            aged[block, a, lag, 1] += ax2
            aged[block, a, lag, 2] += ay2
            aged[block, a, lag, 3] += ar2 * ar2


@jit
def _record_velocity(e, lo, m, block_size, xs, ys, t, fcode, fp, ev_vref, vc_ptr, vc_r, vc_l,
                     vref, us, vs, vcorr):
    """Velocity-correlation work of event ``e`` for tile particles ``lo .. lo + m - 1``.

    The flow velocity of the whole tile comes from ``integrators.tile_velocity`` (the values
    of ``flows.compiled.velocity``, vectorised); ``vref[r, 0|1, g]`` keeps each particle's
    velocity at reference time r.  Sums are added in ascending particle order.
    """
    r_ref = ev_vref[e]
    if r_ref < 0 and vc_ptr[e] == vc_ptr[e + 1]:
        return
    tile_velocity(fcode, fp, xs, ys, t, us, vs, m)
    if r_ref >= 0:
        for g in range(m):
            vref[r_ref, 0, g] = us[g]
            vref[r_ref, 1, g] = vs[g]
    for j in range(vc_ptr[e], vc_ptr[e + 1]):
        r = vc_r[j]
        lag = vc_l[j]
        for g in range(m):
            block = (lo + g) // block_size
            u = us[g]
            v = vs[g]
            u0 = vref[r, 0, g]
            v0 = vref[r, 1, g]
            vcorr[block, r, lag, 0] += u0 * u
            vcorr[block, r, lag, 1] += u0 * v
            vcorr[block, r, lag, 2] += v0 * u
            vcorr[block, r, lag, 3] += v0 * v
            vcorr[block, r, lag, 4] += u
            vcorr[block, r, lag, 5] += v


@jit
def run_particles(
    fcode, fp, ncode, nq, scheme, dt, key0, key1,
    x0, y0, first_index, stream_offset, block_size,
    events, ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders,
    moments, aged, tracks, n_tracked_here,
    hop_on, cell, margin, gap_steps, res_log_low, res_inv_width, fl_log_low, fl_inv_width,
    residence_hist, flight_hist, hop_count,
    status, ev_vref, vc_ptr, vc_r, vc_l, vcorr,
):
    """Integrate particles ``first_index + i`` from (x0[i], y0[i]); see the module docstring.

    ``stream_offset`` separates the random streams of different start regions.  ``status`` is
    set to (global particle, step) of the lowest-numbered particle whose position became
    non-finite or ran away (at its first such step), else left at -1.

    Specialised per study: ``fcode``, ``scheme`` and ``ncode`` are compile-time constants
    (``flows.compiled.CompiledCode``), so each combination is its own compiled (and cached) kernel that contains
    only that family's flow, that scheme and that noise model (``flows/compiled.py``).
    """
    sqrt_dt = math.sqrt(dt)
    n_pairs = normal_pairs_per_step(scheme)
    fp = _borrowed(fp)
    nq = _borrowed(nq)
    # per-tile scratch, allocated once per call
    xs = np.empty(TILE)
    ys = np.empty(TILE)
    x_new = np.empty(TILE)
    y_new = np.empty(TILE)
    work = np.empty((max(TILE_WORK_ROWS, PROJECTED_WORK_ROWS), TILE))
    ref = np.empty((TILE, max(aged.shape[1], 1), 2))
    vref = np.empty((max(vcorr.shape[1], 1), 2, TILE))
    tile_u = np.empty(TILE)
    tile_v = np.empty(TILE)
    hop = np.zeros((TILE, 6), dtype=np.int64)
    words = np.empty((4, TILE), dtype=np.uint64)
    z = np.zeros((4, TILE))
    products = _product_orders(orders)
    powers = np.empty((3, MAX_PRODUCT_ORDER + 1))
    walls = has_walls(fcode)
    n = x0.size
    for lo in range(0, n, TILE):
        m = min(TILE, n - lo)
        particle0 = stream_offset + first_index + lo
        for g in range(m):
            xs[g] = x0[lo + g]
            ys[g] = y0[lo + g]
            if hop_on:
                _start_hops(hop, g, xs[g], ys[g], cell)
        _start_tile(scheme, fcode, fp, xs, ys, dt, m, work)
        failed = False
        step = np.int64(0)  # not the constant 0: callees compile for int64 only
        for e in range(events.size):
            while step < events[e]:
                fill_normals(key0, key1, particle0, m, step, n_pairs, words, z)
                t = step * dt
                _step_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new,
                           y_new, work)
                if walls:
                    for g in range(m):
                        x_new[g], y_new[g] = confine(fcode, xs[g], ys[g], x_new[g], y_new[g],
                                                     fp)
                # the end points become the positions (swap the buffers, no copy)
                xs, x_new = x_new, xs
                ys, y_new = y_new, ys
                step += 1
                runaway = False
                for g in range(m):  # a vectorised test first; the per-particle loop below
                    # runs only when a particle ran away or cell hops are counted
                    runaway |= not ((abs(xs[g]) < BLOWUP_LIMIT) & (abs(ys[g]) < BLOWUP_LIMIT))
                if not (runaway or (hop_on and not failed)):
                    continue
                for g in range(m):
                    if not (abs(xs[g]) < BLOWUP_LIMIT and abs(ys[g]) < BLOWUP_LIMIT):
                        if status[0] < 0 or particle0 + g < status[0]:
                            status[0] = particle0 + g
                            status[1] = step
                        # park the failed particle at its (valid) start; the tile still runs
                        # to its end so that the lowest-numbered failure is the one reported
                        xs[g] = x0[lo + g]
                        ys[g] = y0[lo + g]
                        failed = True
                    elif hop_on and not failed:
                        _check_hop(hop, g, xs[g], ys[g], step, dt, cell, margin, gap_steps,
                                   (lo + g) // block_size, res_log_low, res_inv_width,
                                   fl_log_low, fl_inv_width, residence_hist, flight_hist,
                                   hop_count)
            if not failed:
                _record_event(e, lo, m, block_size, xs, ys, x0, y0, ref,
                              ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders,
                              products, powers, moments, aged, tracks, n_tracked_here)
                _record_velocity(e, lo, m, block_size, xs, ys, step * dt, fcode, fp, ev_vref,
                                 vc_ptr, vc_r, vc_l, vref, tile_u, tile_v, vcorr)
        if failed:
            return
