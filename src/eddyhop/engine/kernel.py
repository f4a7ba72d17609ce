"""The ensemble kernel: integrate a contiguous run of particles and stream their statistics.

Pure numba, no I/O.  Particles are integrated in *tiles* of up to ``TILE`` consecutive particles
stepped together: at each step the random numbers of the whole tile are drawn at once
(``rng.fill_normals``, a loop that vectorises across particles) and the flow is evaluated once
per stage for the whole tile (``integrators.advance_tile``).  Every particle's arithmetic is
independent of its tile-mates and its noise is a pure function of (seed, global particle index,
step), so trajectories do not depend on the tiling.  Tiles are aligned with the blocks
(``_tile_length``): a tile holds whole blocks or one fixed segment of a block longer than a
tile, so the moment sums of a block — lane sums per segment, see ``LANES`` — are built from the
same segments in the same order whatever the chunking; aged and velocity sums are added in
ascending particle order.  Blocks have a fixed size, so the runner can fold blocks into batches
in a fixed order and the totals are bit-identical whatever the chunking or the number of
workers.

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

import functools
import math

import numpy as np
from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic, overload

from .._jit import inline_only, jit
from ..flows.compiled import confine, has_walls, specialised_code
from .callee import callee
from .integrators import (
    EULER_MARUYAMA,
    MILSTEIN,
    PROJECTED_RK45,
    RK4,
    STRANG_RK2,
    TILE_WORK_ROWS,
    advance_tile,
    tile_noise_step,
    tile_rk4_step,
    tile_strang_step,
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
MAX_PRODUCT_ORDER = 8  # at most 8: _add_powers sums up to eight powers per pass
# Rows of the tile's cell-hopping state (float64, one column per tile particle): the counted
# cell, the step it was entered, the cell where the current flight began, whether a flight is
# on, and the vectorised test's mark "a hop is due this step".  Cell indices and steps are
# integers held exactly in floats (|index| < 2**53).
_CX, _CY, _ENTERED, _FLIGHT_X, _FLIGHT_Y, _IN_FLIGHT, _HOP_DUE = range(7)
HOP_ROWS = 7
# Moment sums: every block's sums are built per *segment* (the block, or a fixed part of it,
# see _tile_length) in LANES = 32 interleaved partial sums — lane j adds the segment's
# particles j, j + 32, j + 64, ... in ascending order, starting from +0.0 — then combined:
# c_i = (lane i + lane i+8) + (lane i+16 + lane i+24) for i < 8, and
# ((c0 + c1) + (c2 + c3)) + ((c4 + c5) + (c6 + c7)), which is added to the block's column.
# A fixed order, written out in the source, independent of the tiling, the chunking and the
# machine's vector width (:func:`_emit_lane_totals` adds groups of 32 as four vectors of 8).
LANES = 32
_VECTOR = 8  # doubles per lane vector (four independent add chains per sum)
# Rows of the moment scratch (``moment_rows``, MOMENT_ROWS × (TILE + LANES): the padding lets
# the lane sums load a last partial group whole): Δx, Δy, two value rows (pow), |Δx|, |Δy|,
# |ΔX|, and the totals of one pass (:func:`_base_totals`, :func:`_power_totals`).
_DX, _DY, _V0, _V1, _AX, _AY, _AR, _SUMS = range(8)
MOMENT_ROWS = 8


@intrinsic
def _borrowed(typingctx, array):
    """View of ``array`` that carries no reference count (its meminfo is NULL).

    Every call that takes an array makes numba increment and decrement its reference count
    around the call unless it can prove the pair redundant.  On the flow and noise parameter
    vectors, shared by all threads, those atomic updates cost several per particle-step and
    bounce one cache line between cores.  A NULL meminfo turns them into a null test.  Only
    for arrays that outlive every use of the view: the kernel's arguments (the caller keeps
    them alive for the whole call) and its scratch passed to the event recorders inside the
    tile loop (the loop keeps the owning variables alive).
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
# the largest, and a stochastic study never compiles it; a strang_rk2 study compiles
# neither the Euler–Maruyama/Milstein nor the rk4 tile step.  Inlined, so one call per tile
# is left (to the scheme's stepper; every extra call level with array arguments costs
# reference-count updates per tile), and that call gets borrowed views (see _borrowed: the
# tile loop keeps the arrays alive), so the stepper and the rows of ``work`` it slices update
# no reference counts.  The four branches repeat ``integrators._scheme_tile_step`` on
# purpose: inlining that selection here instead compiles one more overload body and cost
# 0.2–0.4 s of the demo's cold start (measured A B A B).
_SELECT = {"inline": "always", "prefer_literal": True,
           "jit_options": {"error_model": "numpy", "fastmath": False}}


def _selector(target):
    """``@overload(target, **_SELECT)`` whose implementations are :func:`_jit.inline_only`:
    numba types and inlines them without compiling each on its own."""
    def decorate(overload_function):
        @functools.wraps(overload_function)
        def select(*args):
            implementation = overload_function(*args)
            return None if implementation is None else inline_only(implementation)
        return overload(target, **_SELECT)(select)
    return decorate


@_selector(_step_tile)
def _overload_step_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new,
                        y_new, work):
    code = specialised_code(scheme)
    if code == PROJECTED_RK45:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            advance_tile_projected(fcode, fp, nq, xs, ys, t, dt, m, x_new, y_new, work)
    elif code == EULER_MARUYAMA or code == MILSTEIN:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_noise_step(scheme, fcode, fp, ncode, nq, _borrowed(xs), _borrowed(ys), t, dt,
                            sqrt_dt, _borrowed(z), m, _borrowed(x_new), _borrowed(y_new),
                            _borrowed(work))
    elif code == STRANG_RK2:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_strang_step(fcode, fp, nq, _borrowed(xs), _borrowed(ys), t, dt, _borrowed(z),
                             m, _borrowed(x_new), _borrowed(y_new), _borrowed(work))
    elif code == RK4:
        def step(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new, y_new,
                 work):
            tile_rk4_step(fcode, fp, _borrowed(xs), _borrowed(ys), t, dt, m, _borrowed(x_new),
                          _borrowed(y_new), _borrowed(work))
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


@_selector(_start_tile)
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


@callee
def normal_pairs_per_step(scheme):
    """Philox blocks (pairs of normals) a scheme consumes per step."""
    if scheme == RK4 or scheme == PROJECTED_RK45:
        return 0
    if scheme == STRANG_RK2:
        return 2
    return 1


@callee
def _log_bin(value, log_low, inv_width, n_bins):
    if value <= 0.0:
        return 0
    index = np.int64((math.log(value) - log_low) * inv_width)  # as int(): truncation
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


@callee
def _tile_length(lo, n, block_size):
    """Particles of the tile starting at chunk particle ``lo`` (a block or segment start).

    Tiles are aligned with the blocks, so that every block's sums are built from the same
    segments whatever the chunking (chunks start at block starts): a block of up to ``TILE``
    particles lies in one tile (a tile holds ``TILE // block_size`` whole blocks); a larger
    block is cut into ``ceil(block_size / TILE)`` near-equal segments at the fixed offsets
    ``k·block_size // pieces`` from its start, one tile each.  Positions never depend on the
    tiling, only the segments of the moment sums do.
    """
    # conditional expressions, not min(): typing the builtin's generic overload costs compile
    # time (here and in the other helpers of the kernel)
    left = n - lo
    if block_size <= TILE:
        whole = (TILE // block_size) * block_size
        return whole if whole < left else left
    pieces = -(-block_size // TILE)
    start = (lo // block_size) * block_size
    for k in range(1, pieces + 1):
        end = start + (k * block_size) // pieces
        if end > lo:
            return (end if end < n else n) - lo
    return TILE if TILE < left else left


@jit(inline="always")
def _hop_due(fx, fy, nx, ny, cx, cy, margin):
    """Whether a tracer at (fx, fy) cells, in cell (nx, ny) = floor, counts a hop from its
    counted cell (cx, cy): it changed cell and is ``margin`` deep in the new one along every
    axis it crossed.  Non-short-circuit operators, so that the tile loop vectorises; the depth
    test min(a, b) > margin written as (a > margin) & (b > margin) (the same for the finite
    positions tested here), without the ``min`` builtin."""
    return ((nx != cx) | (ny != cy)) & (
        ((fx - nx > margin) & (nx + 1.0 - fx > margin)) | (nx == cx)
    ) & (((fy - ny > margin) & (ny + 1.0 - fy > margin)) | (ny == cy))


@callee
def _start_hops(hop, g, x, y, cell):
    cx = np.floor(x / cell)
    cy = np.floor(y / cell)
    hop[_CX, g] = cx
    hop[_CY, g] = cy
    hop[_ENTERED, g] = 0.0
    hop[_FLIGHT_X, g] = cx
    hop[_FLIGHT_Y, g] = cy
    hop[_IN_FLIGHT, g] = 0.0
    hop[_HOP_DUE, g] = 0.0


@callee
def _mark_hops(hop, xs, ys, m, cell, margin):
    """Mark (row ``_HOP_DUE``) the tile particles for which :func:`_check_hop` will count a
    hop; True when any is marked.  One vectorised pass over the tile: the common step, with
    no hop in the tile, ends here."""
    any_due = False
    for g in range(m):
        fx = xs[g] / cell
        fy = ys[g] / cell
        due = _hop_due(fx, fy, np.floor(fx), np.floor(fy), hop[_CX, g], hop[_CY, g], margin)
        hop[_HOP_DUE, g] = 1.0 if due else 0.0
        any_due |= due
    return any_due


@callee
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
    nx = np.floor(fx)
    ny = np.floor(fy)
    cx = hop[_CX, g]
    cy = hop[_CY, g]
    if _hop_due(fx, fy, nx, ny, cx, cy, margin):
        residence = step - hop[_ENTERED, g]
        n_res_bins = residence_hist.shape[1]
        residence_hist[block, _log_bin(residence * dt, res_log_low, res_inv_width,
                                       n_res_bins)] += 1.0
        hop_count[block] += 1.0
        if residence >= gap_steps:
            if hop[_IN_FLIGHT, g] != 0.0:
                length = math.hypot(cx - hop[_FLIGHT_X, g], cy - hop[_FLIGHT_Y, g])
                flight_hist[block, _log_bin(length, fl_log_low, fl_inv_width,
                                            flight_hist.shape[1])] += 1.0
            hop[_FLIGHT_X, g] = cx
            hop[_FLIGHT_Y, g] = cy
            hop[_IN_FLIGHT, g] = 1.0
        hop[_CX, g] = nx
        hop[_CY, g] = ny
        hop[_ENTERED, g] = step


def product_orders(orders) -> np.ndarray:
    """For each moment order (float64 array), the integer n if its power is computed as a
    product of n factors (:func:`_abs_power`), else 0 (``pow``); int64, the kernel's
    ``products`` argument."""
    orders = np.asarray(orders, dtype=np.float64)
    products = np.zeros(orders.size, dtype=np.int64)
    for q, order in enumerate(orders):
        if order == math.floor(order) and 1.0 <= order <= MAX_PRODUCT_ORDER:
            products[q] = int(order)
    return products


SCRATCH_ALIGNMENT = 64  # bytes: a cache line, a whole 8-double vector per load


def aligned_arrays(layout: dict) -> dict:
    """Zero-filled C-contiguous NumPy arrays, by name, carved from one fresh buffer, each
    starting on a ``SCRATCH_ALIGNMENT`` boundary; ``layout`` maps a name to ``(shape,
    dtype)``, or to None (then the name maps to None).

    NumPy's allocator guarantees only 16 bytes, numba's own ``np.empty`` 32; the kernels'
    tile loops load and store whole 8-double vectors of the scratch rows, which then never
    straddle a cache line, whatever the allocator returns.  (Measured A B against numba's
    allocation, the difference was within the ±2 % that separates one process from the next.)
    One buffer per call, not one per array: the runner makes a set for every chunk and
    step-check batch (a dozen arrays each), and separate allocations cost ≈ 5 µs an array.
    """
    offsets, total = {}, 0
    for name, spec in layout.items():
        if spec is not None:
            shape, dtype = spec
            shape = shape if isinstance(shape, tuple) else (shape,)
            dtype = np.dtype(dtype)
            nbytes = math.prod(shape) * dtype.itemsize
            offsets[name] = (total, nbytes, shape, dtype)
            total += -(-nbytes // SCRATCH_ALIGNMENT) * SCRATCH_ALIGNMENT
    raw = np.zeros(total + SCRATCH_ALIGNMENT, dtype=np.uint8)
    base = -raw.ctypes.data % SCRATCH_ALIGNMENT
    arrays = dict.fromkeys(layout)
    for name, (start, nbytes, shape, dtype) in offsets.items():
        arrays[name] = raw[base + start:base + start + nbytes].view(dtype).reshape(shape)
    return arrays


def tile_scratch(aging_refs: int, hops: bool, velocity_refs: int) -> dict:
    """The per-call scratch of :func:`run_particles`, by argument name: fresh NumPy arrays
    of O(``TILE``) size, for one call at a time (threads running chunks at once each need
    their own).

    Allocated by the caller, so that the kernel compiles no array allocation of its own (six
    ``np.empty``/``np.zeros`` variants were ≈ 0.4 s of a cold start); cache-line aligned
    (:func:`aligned_arrays`, one zero-filled buffer).  ``hop`` is None unless ``hops``
    (cell-hop bookkeeping), ``vref`` and ``tile_uv`` are None unless ``velocity_refs`` > 0
    (velocity-correlation references): the kernel's branches on them are pruned at compile
    time (see :func:`run_particles`).  The arrays the kernel reads before it writes them
    must be zero (``z`` rows a scheme does not draw, the lane sums' padding of
    ``moment_rows``, ``hop``); all are.
    """
    f8 = np.float64
    return aligned_arrays({
        "xs": (TILE, f8),
        "ys": (TILE, f8),
        "x_new": (TILE, f8),
        "y_new": (TILE, f8),
        "work": ((max(TILE_WORK_ROWS, PROJECTED_WORK_ROWS), TILE), f8),
        "ref": ((TILE, max(aging_refs, 1), 2), f8),
        "words": ((4, TILE), np.uint64),
        "z": ((4, TILE), f8),
        "moment_rows": ((MOMENT_ROWS, TILE + LANES), f8),
        "hop": ((HOP_ROWS, TILE), f8) if hops else None,
        "vref": ((velocity_refs, 2, TILE), f8) if velocity_refs > 0 else None,
        "tile_uv": ((2, TILE), f8) if velocity_refs > 0 else None,
    })


# The moment plan, a compile-time code (CompiledCode) of the kernel: the power pass of the
# integer orders — their highest n rounded up to an even count, PLAN_POWERS[n] (0: none) — plus
# PLAN_POW when some order is not a product (computed with ``pow``).  The six default orders
# (1 … 6) compile one pass of six powers and no ``pow`` code; a study with other orders
# compiles its own kernel.  The pass counts are those the kernel chose at run time before.
PLAN_POW = 16
PLAN_POWERS = (0, 2, 2, 4, 4, 6, 6, 8, 8)  # by the highest product order n = 0 … 8


def moment_plan(products) -> int:
    """The moment plan (see ``PLAN_POW``) of :func:`product_orders` ``products``."""
    products = np.asarray(products, dtype=np.int64)
    most = int(products.max()) if products.size else 0
    return PLAN_POWERS[most] + (PLAN_POW if bool(np.any(products == 0)) else 0)


def _power_pass(plan, row, start, end, totals):
    raise NotImplementedError("compiled only")


def _pow_orders(plan, moments, slot, lo, m, block_size, orders, products, rows):
    raise NotImplementedError("compiled only")


def _product_order_sums(plan, moments, slot, ax, ay, ar, lo, m, block_size, products, totals):
    raise NotImplementedError("compiled only")


def _plan(plan):
    code = specialised_code(plan)
    if code is None:
        raise TypeError("the moment plan must be a compile-time code (CompiledCode)")
    return code % PLAN_POW, code >= PLAN_POW


@_selector(_power_pass)
def _overload_power_pass(plan, row, start, end, totals):
    count, _ = _plan(plan)
    if count == 2:  # powers up to the next even count: at most 32 lane vectors in registers
        return lambda plan, row, start, end, totals: _power_totals(row, start, end, 2, totals)
    if count == 4:
        return lambda plan, row, start, end, totals: _power_totals(row, start, end, 4, totals)
    if count == 6:
        return lambda plan, row, start, end, totals: _power_totals(row, start, end, 6, totals)
    return lambda plan, row, start, end, totals: _power_totals(row, start, end, 8, totals)


@_selector(_pow_orders)
def _overload_pow_orders(plan, moments, slot, lo, m, block_size, orders, products, rows):
    if not _plan(plan)[1]:
        return lambda plan, moments, slot, lo, m, block_size, orders, products, rows: None

    def add(plan, moments, slot, lo, m, block_size, orders, products, rows):
        _add_pow_orders(moments, slot, lo, m, block_size, orders, products, rows)
    return add


@_selector(_product_order_sums)
def _overload_product_order_sums(plan, moments, slot, ax, ay, ar, lo, m, block_size,
                                 products, totals):
    if _plan(plan)[0] == 0:
        def nothing(plan, moments, slot, ax, ay, ar, lo, m, block_size, products, totals):
            pass
        return nothing

    def add(plan, moments, slot, ax, ay, ar, lo, m, block_size, products, totals):
        _add_powers(moments, slot, 0, ax, lo, m, block_size, products, plan, totals)
        _add_powers(moments, slot, 1, ay, lo, m, block_size, products, plan, totals)
        _add_powers(moments, slot, 2, ar, lo, m, block_size, products, plan, totals)
    return add


def _emit_lane_totals(context, builder, rows, start, end, values, count):
    """LLVM code of ``count`` lane sums (see ``LANES``) over entries ``start .. end - 1``:
    ``values(inputs)`` maps the input vectors (eight consecutive entries of each row of
    ``rows``, data pointers) to ``count`` value vectors, each added to its own 32 lanes;
    returns the ``count`` totals (scalars).

    Lane j adds the values of entries start + j, start + j + 32, … in ascending order from
    +0.0 (four vectors of eight lanes per sum, added element-wise: IEEE, no reassociation).
    In a last partial group the inputs past ``end`` are replaced by +0.0 before ``values`` is
    applied; every value of zero inputs must be +0.0, which leaves every lane unchanged (a lane
    that starts at +0.0 is never -0.0, and x + 0.0 = x for every other x, NaN and infinities
    included).  Then c = (lanes 0-7 + lanes 8-15) + (lanes 16-23 + lanes 24-31) element-wise
    and ((c0 + c1) + (c2 + c3)) + ((c4 + c5) + (c6 + c7)) by pairwise shuffles, four sums at a
    time: the numbers of the scalar definition, on any vector width.  Values are computed with
    plain IEEE operations (no contraction), as the scalar expressions they replace.
    """
    i64 = ir.IntType(64)
    i32 = ir.IntType(32)
    vector = ir.VectorType(ir.DoubleType(), _VECTOR)
    zero = ir.Constant(vector, [0.0] * _VECTOR)
    width = ir.Constant(i64, LANES)
    groups = LANES // _VECTOR
    before = builder.block
    head = builder.append_basic_block("lanes.head")
    body = builder.append_basic_block("lanes.body")
    tail = builder.append_basic_block("lanes.tail")
    partial = builder.append_basic_block("lanes.partial")
    done = builder.append_basic_block("lanes.done")
    builder.branch(head)
    builder.position_at_end(head)
    k = builder.phi(i64)
    k.add_incoming(start, before)
    sums = []
    for _ in range(count * groups):
        phi = builder.phi(vector)
        phi.add_incoming(zero, before)
        sums.append(phi)
    builder.cbranch(builder.icmp_signed("<=", builder.add(k, width), end), body, tail)

    def load(data, a):
        pointer = builder.gep(data, [builder.add(k, ir.Constant(i64, _VECTOR * a))])
        return builder.load(builder.bitcast(pointer, vector.as_pointer()), align=8)

    def accumulate(inputs_of):
        added = []
        for a in range(groups):
            for c, value in enumerate(values(inputs_of(a))):
                added.append((c * groups + a, builder.fadd(sums[c * groups + a], value)))
        return [value for _, value in sorted(added, key=lambda pair: pair[0])]

    builder.position_at_end(body)
    added = accumulate(lambda a: [load(data, a) for data in rows])
    for phi, value in zip(sums, added):
        phi.add_incoming(value, body)
    k.add_incoming(builder.add(k, width), body)
    builder.branch(head)
    # the last partial group (if any): inputs past ``end`` replaced by +0.0
    builder.position_at_end(tail)
    left = builder.sub(end, k)
    builder.cbranch(builder.icmp_signed(">", left, ir.Constant(i64, 0)), partial, done)
    builder.position_at_end(partial)
    i64_vector = ir.VectorType(i64, _VECTOR)
    left_splat = builder.insert_element(ir.Constant(i64_vector, None), left,
                                        ir.Constant(i32, 0))
    left_splat = builder.shuffle_vector(left_splat, ir.Constant(i64_vector, None),
                                        ir.Constant(ir.VectorType(i32, _VECTOR),
                                                    [0] * _VECTOR))

    def masked_inputs(a):
        offsets = ir.Constant(i64_vector, [_VECTOR * a + j for j in range(_VECTOR)])
        inside = builder.icmp_signed("<", offsets, left_splat)
        return [builder.select(inside, load(data, a), zero) for data in rows]

    topped = accumulate(masked_inputs)
    builder.branch(done)
    builder.position_at_end(done)
    lanes = []
    for phi_sum, value in zip(sums, topped):
        merged = builder.phi(vector)
        merged.add_incoming(phi_sum, tail)
        merged.add_incoming(value, partial)
        lanes.append(merged)

    def pick(value, indices):
        return builder.shuffle_vector(value, value,
                                      ir.Constant(ir.VectorType(i32, len(indices)), indices))

    def pair(first, second, indices):
        return builder.shuffle_vector(first, second,
                                      ir.Constant(ir.VectorType(i32, len(indices)), indices))

    folded = []
    for c in range(count):
        v = lanes[c * groups:(c + 1) * groups]
        folded.append(builder.fadd(builder.fadd(v[0], v[1]), builder.fadd(v[2], v[3])))
    folded += [zero] * (-count % 4)  # the tree runs on four sums at once
    evens = list(range(0, 2 * _VECTOR, 2))
    odds = list(range(1, 2 * _VECTOR, 2))
    totals = []
    for a in range(0, len(folded), 4):
        # c0 + c1, c2 + c3, … of two sums per vector; then (c0 + c1) + (c2 + c3) and
        # (c4 + c5) + (c6 + c7) of four sums per vector; then their sum, per sum
        pairs = [builder.fadd(pair(x, y, evens), pair(x, y, odds))
                 for x, y in (folded[a:a + 2], folded[a + 2:a + 4])]
        quads = builder.fadd(pair(pairs[0], pairs[1], evens), pair(pairs[0], pairs[1], odds))
        whole = builder.fadd(pick(quads, [0, 2, 4, 6]), pick(quads, [1, 3, 5, 7]))
        totals += [builder.extract_element(whole, ir.Constant(i32, j)) for j in range(4)]
    return totals[:count]


def _is_row(value):
    return (isinstance(value, types.Array) and value.layout == "C" and value.ndim == 1
            and value.dtype == types.float64)


def _row_data(context, builder, row_type, row):
    return context.make_array(row_type)(context, builder, value=row).data


@intrinsic
def _lane_total(typingctx, row, start, end):
    """Sum of ``row[start .. end - 1]`` in the order ``LANES`` defines, in vector registers
    (:func:`_emit_lane_totals`).  ``row``: C-contiguous float64 with at least ``LANES - 1``
    readable entries past ``end`` (a partial group is loaded whole, the entries past ``end``
    replaced by +0.0)."""
    if not _is_row(row):
        return None

    def codegen(context, builder, signature, args):
        first = context.cast(builder, args[1], signature.args[1], types.int64)
        stop = context.cast(builder, args[2], signature.args[2], types.int64)
        data = _row_data(context, builder, signature.args[0], args[0])
        [total] = _emit_lane_totals(context, builder, [data], first, stop,
                                    lambda inputs: inputs, 1)
        return total

    return types.float64(row, start, end), codegen


def _store_totals(context, builder, out_type, out, totals):
    data = _row_data(context, builder, out_type, out)
    for c, total in enumerate(totals):
        builder.store(total, builder.gep(data, [ir.Constant(ir.IntType(64), c)]))


def _base_values_first(builder, inputs):
    dx, dy = inputs
    return [dx, dy, builder.fmul(dx, dx), builder.fmul(dy, dy), builder.fmul(dx, dy)]


def _base_values_second(builder, inputs):
    dx, dy = inputs
    dx2 = builder.fmul(dx, dx)
    dy2 = builder.fmul(dy, dy)
    r2 = builder.fadd(dx2, dy2)
    return [builder.fmul(r2, r2), builder.fmul(dx2, dx), builder.fmul(dy2, dy),
            builder.fmul(dx2, dx2), builder.fmul(dy2, dy2)]


@intrinsic
def _base_totals(typingctx, dx, dy, start, end, part, out):
    """Lane sums (``LANES`` order) over entries ``start .. end - 1`` of five of the
    ``MOMENT_COLUMNS`` from the rows ``dx``, ``dy``, stored in ``out[0 .. 4]``: part 0 (a
    literal) Δx, Δy, Δx·Δx, Δy·Δy, Δx·Δy; part 1 (Δx²+Δy²)², Δx²·Δx, Δy²·Δy, Δx²·Δx², Δy²·Δy²
    (Δx² = Δx·Δx), the products of the scalar definitions.  Five sums per pass keep the
    twenty lane vectors in registers.  Rows as for :func:`_lane_total`."""
    if not (_is_row(dx) and _is_row(dy) and _is_row(out)):
        return None
    if not isinstance(part, types.IntegerLiteral):
        return None
    values = _base_values_first if part.literal_value == 0 else _base_values_second

    def codegen(context, builder, signature, args):
        first = context.cast(builder, args[2], signature.args[2], types.int64)
        stop = context.cast(builder, args[3], signature.args[3], types.int64)
        rows = [_row_data(context, builder, signature.args[a], args[a]) for a in (0, 1)]
        totals = _emit_lane_totals(context, builder, rows, first, stop,
                                   lambda inputs: values(builder, inputs), 5)
        _store_totals(context, builder, signature.args[5], args[5], totals)
        return context.get_dummy_value()

    return types.none(dx, dy, start, end, part, out), codegen


@intrinsic
def _power_totals(typingctx, row, start, end, count, out):
    """Lane sums (``LANES`` order) over entries ``start .. end - 1`` of row^1 … row^count
    (``count`` a literal), stored in ``out[0 .. count - 1]``: the n-th power is the (n-1)-th
    times the row, the running products of :func:`_abs_power`.  Rows as for
    :func:`_lane_total`."""
    if not (_is_row(row) and _is_row(out)):
        return None
    if not isinstance(count, types.IntegerLiteral):
        return None
    n = count.literal_value

    def powers(builder, inputs):
        [base] = inputs
        result = [base]
        for _ in range(n - 1):
            result.append(builder.fmul(result[-1], base))
        return result

    def codegen(context, builder, signature, args):
        first = context.cast(builder, args[1], signature.args[1], types.int64)
        stop = context.cast(builder, args[2], signature.args[2], types.int64)
        data = _row_data(context, builder, signature.args[0], args[0])
        totals = _emit_lane_totals(context, builder, [data], first, stop,
                                   lambda inputs: powers(builder, inputs), n)
        _store_totals(context, builder, signature.args[4], args[4], totals)
        return context.get_dummy_value()

    return types.none(row, start, end, count, out), codegen


@callee
def _add_row(moments, slot, column, row, lo, m, block_size):
    """Add ``row[g]`` of tile particles ``0 .. m-1`` (chunk particles ``lo ..``) to column
    ``column`` of their blocks' sums: one lane sum per block segment (see ``LANES``)."""
    block = lo // block_size
    s = 0
    e = (block + 1) * block_size - lo
    e = e if e < m else m
    while s < m:
        moments[block, slot, column] += _lane_total(row, s, e)
        block += 1
        s = e
        e = e + block_size if e + block_size < m else m


@callee
def _add_powers(moments, slot, family, row, lo, m, block_size, products, plan, totals):
    """Add row^n (tile particles ``0 .. m-1``, chunk particles ``lo ..``) to the columns of
    the integer orders n = ``products[q]`` of ``family`` (0: |Δx|, 1: |Δy|, 2: |ΔX|), one
    :func:`_power_totals` pass per block segment (of the power count of ``plan``)."""
    block = lo // block_size
    s = 0
    e = (block + 1) * block_size - lo
    e = e if e < m else m
    while s < m:
        _power_pass(plan, row, s, e, totals)
        for q in range(products.size):
            if products[q] > 0:
                moments[block, slot, N_BASE + 3 * q + family] += totals[products[q] - 1]
        block += 1
        s = e
        e = e + block_size if e + block_size < m else m


@callee
def _add_pow_orders(moments, slot, lo, m, block_size, orders, products, rows):
    """Add |Δx|^q, |Δy|^q, |ΔX|^q (rows ``_AX``, ``_AY``, ``_AR`` of ``rows``) of the orders
    that are not products (``products[q]`` = 0), by ``pow``, one lane sum per block segment
    (:func:`_add_row`)."""
    ax = rows[_AX]
    ay = rows[_AY]
    ar = rows[_AR]
    v0 = rows[_V0]
    v1 = rows[_V1]
    for q in range(orders.size):
        if products[q] == 0:
            for g in range(m):
                v0[g] = ax[g] ** orders[q]
                v1[g] = ay[g] ** orders[q]
            _add_row(moments, slot, N_BASE + 3 * q, v0, lo, m, block_size)
            _add_row(moments, slot, N_BASE + 3 * q + 1, v1, lo, m, block_size)
            for g in range(m):
                v0[g] = ar[g] ** orders[q]
            _add_row(moments, slot, N_BASE + 3 * q + 2, v0, lo, m, block_size)


@callee
def _add_moments(moments, slot, lo, m, block_size, xs, ys, x0, y0, orders, products, plan,
                 rows):
    """Add the displacements of tile particles ``0 .. m-1`` (chunk particles ``lo ..``) to the
    sums ``moments[block, slot]`` (columns: module docstring).

    Vectorised over the tile: Δx, Δy (and |Δx|, |Δy|, |ΔX| when orders are asked for) are rows
    of ``rows`` (scratch of ``MOMENT_ROWS`` rows of ``TILE + LANES`` entries); the columns are
    computed from them inside the lane sums, per block segment, several columns per pass
    (:func:`_base_totals`, :func:`_power_totals`); orders that are not products use ``pow``
    on a row (:func:`_add_row`).  |Δx|^n, |Δy|^n, |ΔX|^n for integer orders are running
    products (the n-th is the (n-1)-th times the base, the products of :func:`_abs_power`).
    """
    dx = rows[_DX]
    dy = rows[_DY]
    totals = rows[_SUMS]
    for g in range(m):
        dx[g] = xs[g] - x0[lo + g]
        dy[g] = ys[g] - y0[lo + g]
    block = lo // block_size
    s = 0
    e = (block + 1) * block_size - lo
    e = e if e < m else m
    while s < m:
        _base_totals(dx, dy, s, e, 0, totals)
        for c in range(5):
            moments[block, slot, c] += totals[c]
        _base_totals(dx, dy, s, e, 1, totals)
        for c in range(5):
            moments[block, slot, 5 + c] += totals[c]
        block += 1
        s = e
        e = e + block_size if e + block_size < m else m
    if orders.size == 0:
        return
    ax = rows[_AX]
    ay = rows[_AY]
    ar = rows[_AR]
    for g in range(m):
        ax[g] = abs(dx[g])
        ay[g] = abs(dy[g])
        ar[g] = math.sqrt(dx[g] * dx[g] + dy[g] * dy[g])
    # the parts of the moment plan (compile-time): pow for the orders that are not products,
    # running products for the others
    _pow_orders(plan, moments, slot, lo, m, block_size, orders, products, rows)
    _product_order_sums(plan, moments, slot, ax, ay, ar, lo, m, block_size, products, totals)


@callee
def _record_event(e, lo, m, block_size, xs, ys, x0, y0, ref,
                  ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders, products, plan,
                  moment_rows, moments, aged, tracks, n_tracked_here):
    """Everything event ``e`` asks of tile particles ``lo .. lo + m - 1`` (moments: lane sums
    per block segment, see ``LANES``; aged sums: ascending particle order)."""
    slot = ev_out[e]
    if slot >= 0:
        _add_moments(moments, slot, lo, m, block_size, xs, ys, x0, y0, orders, products, plan,
                     moment_rows)
    tslot = ev_track[e]
    if tslot >= 0:
        tracked = n_tracked_here - lo
        for g in range(m if m < tracked else tracked):
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


@callee
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


# llvm_inlines: the study's tile stepper (``inline_in_llvm``) is inlined into the step loop
# by LLVM — no call with a dozen array arguments per tile and step (see
# ``_jit._install_llvm_inlining``); same numbers.
@jit(llvm_inlines=True)
def run_particles(
    fcode, fp, ncode, nq, scheme, dt, key0, key1,
    x0, y0, first_index, stream_offset, block_size,
    events, ev_out, ev_track, ev_ref, aged_ptr, aged_a, aged_l, orders, products, plan,
    moments, aged, tracks, n_tracked_here,
    hop, cell, margin, gap_steps, res_log_low, res_inv_width, fl_log_low, fl_inv_width,
    residence_hist, flight_hist, hop_count,
    status, ev_vref, vc_ptr, vc_r, vc_l, vcorr, vref, tile_uv,
    xs, ys, x_new, y_new, work, ref, words, z, moment_rows,
):
    """Integrate particles ``first_index + i`` from (x0[i], y0[i]); see the module docstring.

    ``stream_offset`` separates the random streams of different start regions.  ``status`` is
    set to (global particle, step) of the lowest-numbered particle whose position became
    non-finite or ran away (at its first such step), else left at -1.  ``products``:
    :func:`product_orders` of ``orders``; ``plan``: ``CompiledCode(moment_plan(products))``.
    ``hop`` … ``moment_rows`` (and ``vref``, ``tile_uv``): scratch from :func:`tile_scratch`,
    one set per concurrent call.

    Specialised per study: ``fcode``, ``scheme`` and ``ncode`` are compile-time constants
    (``flows.compiled.CompiledCode``), so each combination is its own compiled (and cached)
    kernel that contains only that family's flow, that scheme and that noise model
    (``flows/compiled.py``); so is the moment plan (which power pass, whether any order needs
    ``pow``: :func:`moment_plan`).  The optional work is specialised by type too: ``hop`` (the
    cell-hop state) is None when ``[hopping]`` is off, ``vref`` and ``tile_uv`` are None when
    no velocity correlation is scheduled; numba prunes the branches ``if hop is not None``
    and ``if vref is not None`` before typing (dead-branch pruning on None arguments), so
    such a kernel never types, lowers or optimises that work.
    """
    sqrt_dt = math.sqrt(dt)
    n_pairs = normal_pairs_per_step(scheme)
    fp = _borrowed(fp)
    nq = _borrowed(nq)
    walls = has_walls(fcode)
    n = x0.size
    lo = 0
    m = 0
    while lo + m < n:  # tiles aligned with the blocks (see _tile_length)
        lo, m = lo + m, _tile_length(lo + m, n, block_size)
        particle0 = stream_offset + first_index + lo
        for g in range(m):
            xs[g] = x0[lo + g]
            ys[g] = y0[lo + g]
            if hop is not None:
                _start_hops(hop, g, xs[g], ys[g], cell)
        _start_tile(scheme, fcode, fp, xs, ys, dt, m, work)
        failed = False
        step = np.int64(0)  # not the constant 0: callees compile for int64 only
        for e in range(events.size):
            while step < events[e]:
                # borrowed views (see _borrowed): no atomic reference-count updates per step
                fill_normals(key0, key1, particle0, m, step, n_pairs, _borrowed(words),
                             _borrowed(z))
                t = step * dt
                _step_tile(scheme, fcode, fp, ncode, nq, xs, ys, t, dt, sqrt_dt, z, m, x_new,
                           y_new, work)
                if walls:
                    for g in range(m):
                        x_new[g], y_new[g] = confine(fcode, xs[g], ys[g], x_new[g], y_new[g],
                                                     fp)
                step += 1
                # The end points become the positions, copied in the same vectorised pass as
                # the blow-up test (the per-particle loop below runs only when a particle ran
                # away or a cell hop is due).  Not a swap of the buffers: reassigning array
                # variables costs four atomic reference-count updates per tile and step.
                runaway = False
                for g in range(m):
                    x = x_new[g]
                    y = y_new[g]
                    xs[g] = x
                    ys[g] = y
                    runaway |= not ((abs(x) < BLOWUP_LIMIT) & (abs(y) < BLOWUP_LIMIT))
                if not runaway:
                    if hop is not None and not failed and _mark_hops(hop, xs, ys, m, cell,
                                                                     margin):
                        for g in range(m):  # only the marked particles: same counts as a
                            # call of _check_hop for every particle (it tests the same)
                            if hop[_HOP_DUE, g] != 0.0:
                                _check_hop(hop, g, xs[g], ys[g], step, dt, cell, margin,
                                           gap_steps, (lo + g) // block_size, res_log_low,
                                           res_inv_width, fl_log_low, fl_inv_width,
                                           residence_hist, flight_hist, hop_count)
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
                    elif hop is not None and not failed:
                        _check_hop(hop, g, xs[g], ys[g], step, dt, cell, margin, gap_steps,
                                   (lo + g) // block_size, res_log_low, res_inv_width,
                                   fl_log_low, fl_inv_width, residence_hist, flight_hist,
                                   hop_count)
            if not failed:
                # every array borrowed (see _borrowed): the callees' reference counting
                # of a dozen arrays per call and tile would otherwise be atomic updates
                _record_event(e, lo, m, block_size, _borrowed(xs), _borrowed(ys),
                              _borrowed(x0), _borrowed(y0), _borrowed(ref), _borrowed(ev_out),
                              _borrowed(ev_track), _borrowed(ev_ref), _borrowed(aged_ptr),
                              _borrowed(aged_a), _borrowed(aged_l), _borrowed(orders),
                              _borrowed(products), plan, _borrowed(moment_rows),
                              _borrowed(moments),
                              _borrowed(aged), _borrowed(tracks), n_tracked_here)
                if vref is not None and (ev_vref[e] >= 0 or vc_ptr[e] < vc_ptr[e + 1]):
                    _record_velocity(e, lo, m, block_size, _borrowed(xs), _borrowed(ys),
                                     step * dt, fcode, fp, _borrowed(ev_vref),
                                     _borrowed(vc_ptr), _borrowed(vc_r), _borrowed(vc_l),
                                     _borrowed(vref), _borrowed(tile_uv[0]),
                                     _borrowed(tile_uv[1]), _borrowed(vcorr))
        if failed:
            return
