"""The ensemble kernel: integrate a contiguous run of particles and stream their statistics.

Pure numba, no I/O.  Particle-major: each particle is carried from t = 0 to the last event with
its state in registers, adding its contributions to the sums of the block it belongs to.  All
sums of a block are accumulated in ascending particle order and blocks have a fixed size, so the
runner can fold blocks into batches in a fixed order and the totals are bit-identical whatever
the chunking or the number of workers.

Event schedule (built by ``schedule.py``): sorted step indices ``events``; at event ``e`` the
kernel may (a) record moments into output slot ``ev_out[e]``, (b) store a tracked sample in slot
``ev_track[e]``, (c) take the aging reference for aging index ``ev_ref[e]``, (d) accumulate aged
displacements for the pairs ``(aged_a, aged_l)[aged_ptr[e]:aged_ptr[e+1]]``.

Moment columns per (block, output slot): see ``MOMENT_COLUMNS``; then for each order q the sums
of |Δx|^q, |Δy|^q and |ΔX|^q.  Aged columns: Σ|ΔX|², ΣΔx², ΣΔy², Σ|ΔX|⁴.
"""

from __future__ import annotations

import math

import numpy as np

from ._jit import jit
from .integrators import advance
from .rng import normals4

MOMENT_COLUMNS = ("dx", "dy", "dx2", "dy2", "dxdy", "r4", "dx3", "dy3", "dx4", "dy4")
AGED_COLUMNS = ("r2", "dx2", "dy2", "r4")
N_BASE = len(MOMENT_COLUMNS)
BLOWUP_LIMIT = 1e150


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
def run_particles(
    fcode, fp, ncode, nq, scheme, dt, key0, key1,
    x0, y0, first_index, stream_offset, block_size,
    events, ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders,
    moments, aged, tracks, n_tracked_here,
    hop_on, cell, margin, gap_steps, res_log_low, res_inv_width, fl_log_low, fl_inv_width,
    residence_hist, flight_hist, hop_count,
    status,
):
    """Integrate particles ``first_index + i`` from (x0[i], y0[i]); see the module docstring.

    ``stream_offset`` separates the random streams of different start regions.  ``status`` is
    set to (global particle, step) of the first non-finite or runaway position, else left at -1.
    """
    n_orders = orders.size
    sqrt_dt = math.sqrt(dt)
    n_aging = aged.shape[1]
    ref_x = np.empty(max(n_aging, 1))
    ref_y = np.empty(max(n_aging, 1))
    n_res_bins = residence_hist.shape[1]
    n_fl_bins = flight_hist.shape[1]
    for i in range(x0.size):
        block = i // block_size
        particle = stream_offset + first_index + i
        x = x0[i]
        y = y0[i]
        step = 0
        # cell-hopping state
        cx = math.floor(x / cell)
        cy = math.floor(y / cell)
        entered = 0
        flight_x = cx
        flight_y = cy
        in_flight = False
        for e in range(events.size):
            target = events[e]
            while step < target:
                z0, z1, z2, z3 = normals4(key0, key1, particle, step)
                x, y = advance(scheme, fcode, fp, ncode, nq, x, y, step * dt, dt, sqrt_dt,
                               z0, z1, z2, z3)
                step += 1
                if not (abs(x) < BLOWUP_LIMIT and abs(y) < BLOWUP_LIMIT):
                    if status[0] < 0:
                        status[0] = particle
                        status[1] = step
                    return
                if hop_on:
                    # A cell change counts once the tracer is `margin` cells deep in the new
                    # cell, so that noise-driven recrossings of a boundary are not hops.
                    fx = x / cell
                    fy = y / cell
                    nx = math.floor(fx)
                    ny = math.floor(fy)
                    if (nx != cx or ny != cy) and (
                        min(fx - nx, nx + 1.0 - fx) > margin or nx == cx
                    ) and (min(fy - ny, ny + 1.0 - fy) > margin or ny == cy):
                        residence = step - entered
                        residence_hist[block, _log_bin(residence * dt, res_log_low,
                                                       res_inv_width, n_res_bins)] += 1.0
                        hop_count[block] += 1.0
                        if residence >= gap_steps:
                            if in_flight:
                                length = math.hypot(cx - flight_x, cy - flight_y)
                                flight_hist[block, _log_bin(length, fl_log_low, fl_inv_width,
                                                            n_fl_bins)] += 1.0
                            flight_x = cx
                            flight_y = cy
                            in_flight = True
                        cx = nx
                        cy = ny
                        entered = step
            dx = x - x0[i]
            dy = y - y0[i]
            slot = ev_out[e]
            if slot >= 0:
                dx2 = dx * dx
                dy2 = dy * dy
                r2 = dx2 + dy2
                row = moments[block, slot]
                row[0] += dx
                row[1] += dy
                row[2] += dx2
                row[3] += dy2
                row[4] += dx * dy
                row[5] += r2 * r2
                row[6] += dx2 * dx
                row[7] += dy2 * dy
                row[8] += dx2 * dx2
                row[9] += dy2 * dy2
                if n_orders > 0:
                    adx = abs(dx)
                    ady = abs(dy)
                    r = math.sqrt(r2)
                    for q in range(n_orders):
                        order = orders[q]
                        base = N_BASE + 3 * q
                        row[base] += adx ** order
                        row[base + 1] += ady ** order
                        row[base + 2] += r ** order
            tslot = ev_track[e]
            if tslot >= 0 and i < n_tracked_here:
                tracks[i, tslot, 0] = x
                tracks[i, tslot, 1] = y
            a_ref = ev_ref[e]
            if a_ref >= 0:
                ref_x[a_ref] = x
                ref_y[a_ref] = y
            for j in range(aged_ptr[e], aged_ptr[e + 1]):
                a = aged_a[j]
                ax = x - ref_x[a]
                ay = y - ref_y[a]
                ax2 = ax * ax
                ay2 = ay * ay
                ar2 = ax2 + ay2
                cell_sums = aged[block, a, aged_l[j]]
                cell_sums[0] += ar2
                cell_sums[1] += ax2
                cell_sums[2] += ay2
                cell_sums[3] += ar2 * ar2
