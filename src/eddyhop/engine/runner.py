"""Ensemble runner: starts, chunks, seeds, parallel backend and streamed accumulation.

The runner owns parallelism and randomness; the kernel owns the numerics.  Particles are split
into fixed-size *blocks* (a property of the study, never of the machine) and blocks into
``run.batches`` contiguous *batches*.  Chunks handed to workers are whole numbers of blocks, and
block sums are folded into batch sums strictly in block order, so every number in the output is
bit-identical for any chunk size, worker count or backend.  Memory is O(particles + samples):
positions exist only for the starts of the current start region, the kernel streams moments.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..atomic import raise_lost_ctrl_c
from ..errors import BlowUpError
from ..flows.compiled import CompiledCode
from ..starts import area_fraction, sample_starts
from .integrators import SCHEME_CODES
from .kernel import (
    AGED_COLUMNS,
    MOMENT_COLUMNS,
    N_BASE,
    moment_plan,
    product_orders,
    run_particles,
    tile_scratch,
)
from .noise import pack_noise
from .rng import split_seed
from .schedule import MIN_CHECK_BATCH, Schedule, build_schedule
from .step_advice import STATIC_ADVECTIVE_LIMIT, _peak_speed, step_size_warnings  # noqa: F401
from .stepcheck import CHECK_COLUMNS, check_scratch, run_step_check
from .streamline import scheme_parameters
from .velocity_pairs import VELOCITY_COLUMNS

MAX_BLOCK = 256
# Random streams of different start regions are separated by this particle-index offset.
STREAM_STRIDE = 1 << 40

# progress-bar label while the kernels are loaded or compiled (before the first chunk)
KERNELS_PENDING = "loading or compiling kernels (compiled once per flow family, scheme, noise)"


class StepSizeWarning(UserWarning):
    """dt is large against a time scale of the flow or the noise."""


class StepBiasWarning(UserWarning):
    """The measured step-size bias of D_eff exceeds its statistical error (or the tolerance),
    or the step check cannot tell; the message names the bias, the error and a dt to use."""


def block_size_for(particles: int, batches: int) -> int:
    """Particles per block: ≤ 256 and small enough that each batch holds several blocks."""
    return max(1, min(MAX_BLOCK, particles // (4 * batches)))


@dataclass
class StartSums:
    """Streamed sums of one start region, folded per batch (plain NumPy data)."""

    label: str
    kind: str
    area_fraction: float
    particles: int
    batch_counts: np.ndarray  # [B]
    moments: np.ndarray  # [B, T, C] sums
    aged: np.ndarray  # [B, A, L, 4] sums
    tracks: np.ndarray  # [n_tracked, S, 2] positions
    track_starts: np.ndarray  # [n_tracked, 2]
    residence_counts: np.ndarray  # [bins]
    flight_counts: np.ndarray  # [bins]
    hops: float
    # step check (None when off): particles per check batch [C] and sums [C, T, 5] of the
    # fine (dt) and coarse (2·dt) paths, coarse NaN at odd output steps
    check_counts: np.ndarray | None = None
    check_fine: np.ndarray | None = None
    check_coarse: np.ndarray | None = None
    # velocity correlation (None when off): sums [B, R, L, 6] (velocity_pairs.py columns)
    velocity: np.ndarray | None = None


@dataclass
class EnsembleResult:
    schedule: Schedule
    block_size: int
    batches: int
    orders: np.ndarray
    residence_edges: np.ndarray
    flight_edges: np.ndarray
    starts: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    step_check_particles: int = 0  # per start region; 0 when the check is off


@dataclass
class _Context:
    """Everything a chunk needs, shared read-only between threads."""

    fcode: int
    fp: np.ndarray
    ncode: int
    nq: np.ndarray
    scheme: int
    dt: float
    key: tuple
    schedule: Schedule
    orders: np.ndarray
    block_size: int
    tracked: int
    hop_on: bool
    cell: float
    margin: float
    gap_steps: int
    residence_edges: np.ndarray
    flight_edges: np.ndarray
    products: np.ndarray = field(init=False)  # kernel.product_orders(orders)
    plan: int = field(init=False)  # kernel.moment_plan(products), a compile-time code

    def __post_init__(self):
        self.products = product_orders(self.orders)
        self.plan = moment_plan(self.products)


def _log_binning(edges):
    low = math.log(edges[0])
    return low, (len(edges) - 1) / (math.log(edges[-1]) - low)


def _run_chunk(ctx: _Context, stream_offset: int, first: int, x0, y0):
    s = ctx.schedule
    n = x0.size
    n_blocks = -(-n // ctx.block_size)
    n_cols = N_BASE + 3 * ctx.orders.size
    moments = np.zeros((n_blocks, s.out_steps.size, n_cols))
    aged = np.zeros((n_blocks, s.aging_steps.size, s.lag_steps.size, len(AGED_COLUMNS)))
    n_tracked_here = max(0, min(ctx.tracked - first, n))
    tracks = np.zeros((max(n_tracked_here, 0), s.track_steps.size, 2))
    residence = np.zeros((n_blocks, len(ctx.residence_edges) - 1))
    flights = np.zeros((n_blocks, len(ctx.flight_edges) - 1))
    hops = np.zeros(n_blocks)
    vcorr = np.zeros((n_blocks, s.vc_ref_steps.size, s.vc_lag_steps.size,
                      len(VELOCITY_COLUMNS)))
    status = np.full(2, -1, dtype=np.int64)
    res_low, res_inv = _log_binning(ctx.residence_edges)
    fl_low, fl_inv = _log_binning(ctx.flight_edges)
    # the kernel's scratch, this call's own (threads run chunks at once); no hop state or
    # velocity buffers (None) when the study has no hops or velocity correlations
    scratch = tile_scratch(s.aging_steps.size, ctx.hop_on, s.vc_ref_steps.size)
    # family, noise model and scheme as compile-time constants, the optional work by the
    # None-or-array type of its scratch: a kernel specialised per study
    run_particles(
        CompiledCode(ctx.fcode), ctx.fp, CompiledCode(ctx.ncode), ctx.nq,
        CompiledCode(ctx.scheme), ctx.dt, ctx.key[0], ctx.key[1],
        x0, y0, first, stream_offset, ctx.block_size,
        s.events, s.ev_out, s.ev_track, s.ev_ref, s.aged_ptr, s.aged_a, s.aged_l, ctx.orders,
        ctx.products, CompiledCode(ctx.plan), moments, aged, tracks, n_tracked_here,
        scratch["hop"], ctx.cell, ctx.margin, ctx.gap_steps, res_low, res_inv, fl_low, fl_inv,
        residence, flights, hops, status, s.ev_vref, s.vc_ptr, s.vc_r, s.vc_l, vcorr,
        scratch["vref"], scratch["tile_uv"], scratch["xs"], scratch["ys"], scratch["x_new"],
        scratch["y_new"], scratch["work"], scratch["ref"], scratch["words"], scratch["z"],
        scratch["moment_rows"],
    )
    return moments, aged, tracks, residence, flights, hops, vcorr, status


def _run_check_batch(ctx: _Context, stream_offset: int, first: int, x0, y0):
    s = ctx.schedule
    coarse = np.zeros((s.out_steps.size, len(CHECK_COLUMNS)))
    status = np.full(2, -1, dtype=np.int64)
    w = check_scratch()  # this call's own (threads run check batches at once)
    # no fine path (None): the ensemble's own block sums are the fine path's
    run_step_check(CompiledCode(ctx.fcode), ctx.fp, CompiledCode(ctx.ncode), ctx.nq,
                   CompiledCode(ctx.scheme), ctx.dt, ctx.key[0],
                   ctx.key[1], x0, y0, first, stream_offset, s.out_steps, None, coarse, status,
                   w["xs"], w["ys"], w["x_new"], w["y_new"], w["xc"], w["yc"], w["xc_new"],
                   w["yc_new"], w["work"], w["words"], w["z"], w["zc"])
    return coarse, status


def check_plan(step_check_particles: int, particles: int, block: int, batches: int):
    """(subsample size, check batch of every subsample block) of the step check.

    The subsample is the first ``step_check_particles`` particles of each start region rounded
    up to whole blocks (so that its fine-path sums are the ensemble's own block sums), split
    into min(batches, blocks, size // MIN_CHECK_BATCH) contiguous check batches of whole
    blocks — a rule of the study, never of the machine.  (0, empty) when the subsample is too
    small for a jackknife (fewer than two check batches).
    """
    n_blocks = min(-(-step_check_particles // block), -(-particles // block))
    size = min(particles, n_blocks * block)
    count = min(batches, n_blocks, size // MIN_CHECK_BATCH)
    if count < 2:
        return 0, np.zeros(0, dtype=np.int64)
    return size, (np.arange(n_blocks) * count) // n_blocks


def _check_edges(n_check: int, check_of_block, block: int) -> list[int]:
    """Particle boundaries of the step check's batches (whole blocks; see ``check_plan``)."""
    count = int(check_of_block[-1]) + 1
    return [int(np.searchsorted(check_of_block, c)) * block for c in range(count)] + [n_check]


def _coarse_sums(ctx, region, offset, outs, edges, messages):
    """Coarse-path (2·dt) sums [C, T, 5] of one start region's subsample, per check batch,
    from the outputs ``outs`` of ``_run_check_batch`` (one per check batch, in order)."""
    coarse = np.stack([o[0] for o in outs])
    coarse[:, ctx.schedule.out_steps % 2 == 1, :] = np.nan  # no coarse state at odd steps
    failures = [o[1] for o in outs if o[1][0] >= 0]
    if failures:
        particle, step = min((int(f[0]), int(f[1])) for f in failures)
        messages.append(f"step check: the coarse integration at 2·dt = {2 * ctx.dt:g} became "
                        f"non-finite for particle {particle - offset} of start "
                        f"'{region.label}' at fine step {step}; its bias is not measured "
                        "(reduce run.dt)")
        warnings.warn(messages[-1], StepBiasWarning, stacklevel=3)
        coarse[:] = np.nan
    counts = np.diff(edges).astype(float)
    return counts, coarse


# the step check's columns among the ensemble kernel's moment columns
_CHECK_IN_MOMENTS = [MOMENT_COLUMNS.index(c) for c in CHECK_COLUMNS]


def _gap_steps(gap: float, dt: float) -> int:
    """Flight gap in steps, at least 1; capped where it could not be reached anyway (a huge
    advective time 1/(U k) must not overflow the kernel's integer)."""
    steps = gap / dt
    return int(max(1.0, min(float(round(steps)) if math.isfinite(steps) else 2.0**62,
                            2.0**62)))


def _make_context(study, schedule: Schedule) -> tuple[_Context, np.ndarray, np.ndarray]:
    family = study.flow.model
    params = study.flow.params
    k = family.wavenumber(params)
    ncode, nq = pack_noise(study.noise, k)
    run = study.run
    if run.integrator == "projected_rk45":
        nq = scheme_parameters(nq, run.tolerance, family.eddy_size(params),
                               max(family.velocity_scale(params), _peak_speed(family, params)))
    velocity_scale = family.velocity_scale(params)
    advective = 1.0 / (velocity_scale * k) if velocity_scale > 0 else run.t_end
    gap = study.hopping.flight_gap if study.hopping.flight_gap is not None else advective
    n_bins = study.hopping.bins
    residence_edges = np.geomspace(run.dt, max(run.t_end, 2 * run.dt), n_bins + 1)
    cell = family.eddy_size(params)
    longest = max(10.0, 2.0 * (velocity_scale * run.t_end + 4.0 * math.sqrt(
        max(study.noise.kappa, 0.0) * run.t_end)) / cell)
    flight_edges = np.geomspace(0.5, longest, n_bins + 1)
    key = split_seed(run.seed)
    ctx = _Context(
        fcode=family.code, fp=family.pack(params), ncode=ncode, nq=nq,
        scheme=SCHEME_CODES[run.integrator], dt=run.dt, key=(key[0], key[1]),
        schedule=schedule, orders=np.asarray(study.moments.orders, dtype=np.float64),
        block_size=block_size_for(run.particles, run.batches), tracked=run.tracked,
        hop_on=study.hopping.enabled, cell=cell, margin=study.hopping.margin,
        gap_steps=_gap_steps(gap, run.dt), residence_edges=residence_edges,
        flight_edges=flight_edges,
    )
    return ctx, residence_edges, flight_edges


CHUNK_OUTPUT_BUDGET = 8 * 2**20  # bytes of block sums one in-flight chunk may hold


def _memory_capped_chunk(ctx: _Context) -> int:
    """Largest chunk whose per-block sums fit the budget, so that memory stays
    O(particles + samples) even with 10⁴ output times (chunking never changes the numbers)."""
    s = ctx.schedule
    per_block = 8 * (s.out_steps.size * (N_BASE + 3 * ctx.orders.size)
                     + s.aging_steps.size * s.lag_steps.size * len(AGED_COLUMNS)
                     + 2 * (len(ctx.residence_edges) + len(ctx.flight_edges))
                     + s.vc_ref_steps.size * s.vc_lag_steps.size * len(VELOCITY_COLUMNS))
    return ctx.block_size * max(1, CHUNK_OUTPUT_BUDGET // max(per_block, 1))


def _chunks(particles: int, chunk: int, block: int):
    size = max(block, (chunk // block) * block)
    return [(first, min(particles, first + size)) for first in range(0, particles, size)]


class ChunkPool:
    """Kernel tasks on a fixed set of daemon threads (the kernels release the GIL).

    Tasks run in the order they are submitted (one FIFO queue), so a caller that submits the
    chunks of several ensembles in a fixed order — as ``run_plans`` does for a sweep — keeps
    every thread busy across ensembles: the chunks of the next one are queued while the
    previous one is folded and written.  Only kernel calls run here (``_run_chunk``,
    ``_run_check_batch``): no Python warnings, no I/O, so the caller's thread is the only one
    running package Python code.  Which thread runs a task never changes a number.
    """

    def __init__(self, workers: int):
        import queue
        import threading

        self.workers = max(1, int(workers))
        self._tasks = queue.SimpleQueue()
        self._threads = [threading.Thread(target=self._work, name=f"eddyhop-chunks-{i}",
                                          daemon=True) for i in range(self.workers)]
        for thread in self._threads:
            thread.start()

    def _work(self) -> None:
        while True:
            item = self._tasks.get()
            if item is None:
                return
            future, function, args = item
            if not future.set_running_or_notify_cancel():
                continue  # cancelled while queued (its ensemble failed or was abandoned)
            try:
                future.set_result(function(*args))
            except BaseException as exc:  # handed to the caller, in order
                future.set_exception(exc)

    def submit(self, function, args):
        """A ``concurrent.futures.Future`` of ``function(*args)``."""
        from concurrent.futures import Future

        future = Future()
        self._tasks.put((future, function, args))
        return future

    def close(self) -> None:
        """Let the threads end once the queued tasks are done (they are daemons anyway)."""
        for _ in self._threads:
            self._tasks.put(None)
        self._threads = []

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def run_plans(plans, pool: ChunkPool, *, window: int | None = None):
    """Run several ensembles on one ``ChunkPool``; yield ``(key, result)`` in order.

    ``plans`` is an iterable of ``(key, make_plan)``; ``make_plan()`` returns an
    ``EnsemblePlan`` (or raises).  Tasks are submitted in a fixed order — every task of the
    first ensemble, then of the next … — keeping up to ``window`` tasks in flight (default
    16 per thread, at most 64: each holds at most ``CHUNK_OUTPUT_BUDGET`` of sums once run),
    so that while the caller handles one result (builds, writes, analyses it)
    the pool already runs the chunks of the following ensembles; ``make_plan`` of a later
    key may therefore run before the caller receives an earlier result.  Each ensemble's
    outputs are folded strictly in task order, so every result is bit-identical to
    ``run_ensemble`` with any worker count.  ``result`` is an ``EnsembleResult``, or the
    exception the ensemble raised (a blow-up, an invalid study): one failing ensemble never
    stops the others.  Closing the generator early cancels the queued tasks.
    """
    from collections import deque

    window = window or min(16 * pool.workers, 64)
    source = iter(plans)
    states = deque()  # ensembles started and not yet yielded, in order
    feeding = deque()  # those whose tasks are not all submitted yet
    in_flight = deque()  # (state, future) in submission order
    exhausted = False

    class State:
        def __init__(self, key, make_plan):
            self.key, self.plan, self.error, self.tasks = key, None, None, None
            try:
                self.plan = make_plan()
                self.tasks = self.plan.tasks()
            except Exception as exc:
                self.error = exc

    def fail(state, exc) -> None:
        state.error = exc
        if state in feeding:
            feeding.remove(state)
        for other, future in in_flight:
            if other is state:
                future.cancel()

    def top_up() -> None:
        nonlocal exhausted
        while len(in_flight) < window:
            if not feeding:
                if exhausted:
                    return
                try:
                    key, make_plan = next(source)
                except StopIteration:
                    exhausted = True
                    return
                state = State(key, make_plan)
                states.append(state)
                if state.error is None:
                    feeding.append(state)
                continue
            state = feeding[0]
            try:
                function, args = next(state.tasks)
            except StopIteration:
                feeding.popleft()
                continue
            except Exception as exc:  # e.g. sampling the starts of the next region
                fail(state, exc)
                continue
            in_flight.append((state, pool.submit(function, args)))

    try:
        top_up()
        while states:
            state = states[0]
            while in_flight and in_flight[0][0] is state:
                _, future = in_flight.popleft()
                top_up()  # keep the pool fed before waiting
                if state.error is not None:
                    future.cancel()
                    continue
                try:
                    state.plan.fold(future.result())
                except Exception as exc:
                    fail(state, exc)
                if not in_flight or in_flight[0][0] is not state:
                    top_up()  # the ensemble's next region (more tasks) if it has one
            if state in feeding:  # tasks still to come (in_flight was full of others)
                top_up()
                continue
            states.popleft()
            if state.error is None:
                try:
                    outcome = state.plan.result()
                except Exception as exc:
                    outcome = exc
            else:
                outcome = state.error
            if state.plan is not None:
                state.plan.close()
            yield state.key, outcome
    finally:
        for _, future in in_flight:
            future.cancel()
        for state in states:
            if state.plan is not None:
                state.plan.close()


def _runs(targets):
    """(first, end, target) of each run of equal entries of the non-decreasing ``targets``
    (the batch, or check batch, of each block of a chunk)."""
    if targets.size == 0:
        return []
    cuts = [0, *(np.flatnonzero(targets[1:] != targets[:-1]) + 1).tolist(), targets.size]
    return [(a, b, int(targets[a])) for a, b in itertools.pairwise(cuts)]


def _add_in_order(sums, target, rows):
    """``sums[target] += rows[0]``, then ``+= rows[1]`` … in place: the additions of a loop
    over the blocks, in block order (bit-identical whatever the chunking), on one view of
    the batch's sums per run of blocks."""
    total = sums[target]
    for row in rows:
        total += row


def _check_finite_sums(moments, schedule, dt, label, lo, hi):
    """Positions can stay below the kernel's runaway limit while their powers (Δx⁴, |Δx|^q)
    overflow float64; such a run must fail loudly rather than write NaN moments."""
    _raise_blow_up(~np.isfinite(moments), schedule, dt, label, lo, hi,
                   "moment sums overflowed (displacements too large for float64 powers)",
                   "reduce run.dt, lower the highest moments.orders, or check the flow "
                   "parameters")


def _raise_blow_up(bad, schedule, dt, label, lo, hi, what, advice):
    """BlowUpError naming the first output step at which ``bad`` [batch, time, column] holds,
    the particles, the start, dt and what to do; nothing when ``bad`` is all False."""
    if not bad.any():
        return
    step = int(schedule.out_steps[int(np.argmax(bad.any(axis=(0, 2))))])
    raise BlowUpError(f"{what} for particles {lo}-{hi - 1} of start '{label}' by output step "
                      f"{step} (t = {step * dt:g}) with run.dt = {dt:g}; {advice}")


# Largest phase k·|Δx| a displacement may reach: 2**32 radians.  There one unit in the last
# place of k·x is 2**-20 ≈ 1e-6 rad, so a position still resolves the flow to about six
# digits; beyond it the flow is increasingly lost in round-off (a run with positions frozen
# near 1e48 once exited 0).  Legitimate runs stay far below: reaching it by diffusion alone
# takes κ t ~ 1e19/k².
MAX_DISPLACEMENT_PHASE = 2.0 ** 32
_FOURTH_POWERS = [MOMENT_COLUMNS.index("dx4"), MOMENT_COLUMNS.index("dy4")]


def _displacement_phase_limit(study) -> float:
    """``MAX_DISPLACEMENT_PHASE / k`` (length units), or inf for a family without one k."""
    try:
        k = float(study.flow.model.wavenumber(study.flow.params))
    except (KeyError, TypeError, ValueError, AttributeError):
        return math.inf
    return MAX_DISPLACEMENT_PHASE / k if k > 0 else math.inf


def _check_displacement_range(moments, schedule, dt, label, lo, hi, limit):
    """A batch's Σ Δx⁴ bounds its largest |Δx| (max |Δx| ≤ (Σ Δx⁴)^(1/4)); a bound beyond
    ``limit`` means positions have left the range where the flow is resolved: a blow-up."""
    if not math.isfinite(limit):
        return
    fourth = moments[:, :, _FOURTH_POWERS]
    beyond = fourth > limit ** 4 if limit < 1e75 else np.zeros(fourth.shape, bool)
    _raise_blow_up(beyond, schedule, dt, label, lo, hi,
                   f"runaway displacement (beyond {limit:.3g} = 2**32/k, where the flow is no "
                   "longer resolved in float64)", "reduce run.dt or check the flow parameters")


def run_ensemble(study, *, workers: int | None = None, chunk: int | None = None,
                 backend: str = "threads", progress: bool | None = None,
                 pool: ChunkPool | None = None) -> EnsembleResult:
    """Integrate every start region of ``study`` and return batch-folded sums.

    ``workers``/``chunk`` override the study's run table; results do not depend on either.
    ``pool``: run the chunks on this ``ChunkPool`` (its thread count replaces ``workers``)
    instead of threads started for this call.
    """
    if pool is not None:
        workers = pool.workers
    plan = EnsemblePlan(study, workers=workers, chunk=chunk, progress=progress)
    if pool is None and (backend == "serial" or plan.workers == 1):
        try:
            for function, args in plan.tasks():
                plan.fold(function(*args))
            return plan.result()
        finally:
            plan.close()
    owned = pool is None
    pool = pool or ChunkPool(plan.workers)
    try:
        # two tasks per thread in flight: the fold keeps up, and memory stays that of a few
        # chunks' sums
        [(_, outcome)] = run_plans([(None, lambda: plan)], pool, window=2 * pool.workers)
    finally:
        if owned:
            pool.close()
    if isinstance(outcome, BaseException):
        raise outcome
    return outcome


class EnsemblePlan:
    """One ensemble as an ordered list of kernel tasks and the fold of their outputs.

    ``tasks()`` yields ``(function, args)``: for each start region in turn (its starts are
    drawn when the generator reaches it, so positions exist for one region at a time), the
    chunks of whole blocks, then the step check's coarse batches.  ``fold(output)`` takes the
    outputs in exactly that order — it raises ``BlowUpError`` at the first chunk that blew up
    — and ``result()`` returns the ``EnsembleResult``.  Because block sums are folded into
    batch sums in block order whatever ran them, any executor (this thread, ``ChunkPool``,
    several ensembles interleaved by ``run_plans``) gives bit-identical numbers.
    """

    def __init__(self, study, *, workers: int | None = None, chunk: int | None = None,
                 progress: bool | None = None):
        run = study.run
        workers = run.workers if workers is None else workers
        if workers < 0:
            import os

            workers = os.cpu_count() or 1
        chunk = run.chunk if chunk is None else chunk
        if workers > 1:
            # enough chunks to keep every worker busy; chunking never changes the numbers
            chunk = min(chunk, max(1, -(-run.particles // (4 * workers))))
        self.study, self.workers = study, workers
        show = run.progress if progress is None else progress
        schedule = build_schedule(run, study.aging, run.track_samples,
                                  study.velocity_correlation)
        messages = step_size_warnings(study)
        for message in messages:
            warnings.warn(message, StepSizeWarning, stacklevel=3)
        ctx, residence_edges, flight_edges = _make_context(study, schedule)
        self.chunk = min(chunk, _memory_capped_chunk(ctx))
        self.ctx, self.schedule, self.messages = ctx, schedule, messages
        n = run.particles
        block = ctx.block_size
        n_blocks = -(-n // block)
        self.n_batches = min(run.batches, n_blocks)
        self.batch_of_block = (np.arange(n_blocks) * self.n_batches) // n_blocks
        block_counts = np.full(n_blocks, block, dtype=np.int64)
        block_counts[-1] = n - block * (n_blocks - 1)
        self.batch_counts = np.bincount(self.batch_of_block, weights=block_counts,
                                        minlength=self.n_batches)
        # the step check's subsample: the first n_check particles of every start region (a
        # study built in code may have fewer particles than its resolved subsample)
        self.n_check, self.check_of_block = 0, np.zeros(0, dtype=np.int64)
        if run.step_check:
            self.n_check, self.check_of_block = check_plan(run.step_check_particles, n, block,
                                                           run.batches)
            if not self.n_check:
                messages.append(f"step check skipped: {min(run.step_check_particles, n)} "
                                f"particles are too few for an error estimate (need at least "
                                f"{2 * MIN_CHECK_BATCH})")
                warnings.warn(messages[-1], StepBiasWarning, stacklevel=3)
        self.phase_limit = _displacement_phase_limit(study)
        self.ensemble = EnsembleResult(schedule=schedule, block_size=block,
                                       batches=self.n_batches, orders=ctx.orders,
                                       residence_edges=residence_edges,
                                       flight_edges=flight_edges, warnings=messages,
                                       step_check_particles=self.n_check)
        self._expected = []  # what the next outputs are, in task order
        self._region = None
        self.bar = None
        if show:
            from tqdm.auto import tqdm

            # until the first chunk returns the kernels are being loaded from the cache or,
            # on the first run of this flow family, scheme and noise model, compiled (tens of
            # seconds): say so instead of a frozen "integrating 0 %"
            self.bar = tqdm(total=n * len(study.starts), unit="particle", unit_scale=True,
                            desc=KERNELS_PENDING, leave=False, dynamic_ncols=True)

    def tasks(self):
        """``(function, args)`` of every kernel call, in fold order (a generator)."""
        study, ctx, n = self.study, self.ctx, self.study.run.particles
        family, params = study.flow.model, study.flow.params
        for s_index, region in enumerate(study.starts):
            x0, y0 = sample_starts(region, family, params, n, study.run.seed, s_index)
            offset = s_index * STREAM_STRIDE
            chunks = _chunks(n, self.chunk, ctx.block_size)
            edges = (_check_edges(self.n_check, self.check_of_block, ctx.block_size)
                     if self.n_check else [])
            self._expected.append(("region", region, offset, x0, y0, edges))
            self._expected += [("chunk", lo, hi) for lo, hi in chunks]
            self._expected += [("check",)] * (len(edges) - 1 if edges else 0)
            self._expected.append(("end",))
            for lo, hi in chunks:
                yield _run_chunk, (ctx, offset, lo, x0[lo:hi], y0[lo:hi])
            for lo, hi in itertools.pairwise(edges):
                yield _run_check_batch, (ctx, offset, lo, x0[lo:hi], y0[lo:hi])

    def fold(self, output) -> None:
        """Fold the output of the next task (in the order of ``tasks()``)."""
        raise_lost_ctrl_c()  # a Ctrl-C Python dropped (while kernels loaded) ends the run here
        item = self._expected.pop(0)
        if item[0] == "region":  # the first output of a start region
            _, region, offset, x0, y0, edges = item
            self._region = {
                "region": region, "offset": offset, "x0": x0, "y0": y0, "sums": None,
                "tracks": [], "hops": 0.0, "checks": [], "check_edges": edges,
                "check_fine": np.zeros((len(edges) - 1 if edges else 0,
                                        self.schedule.out_steps.size, len(CHECK_COLUMNS)))}
            item = self._expected.pop(0)
        r = self._region
        if item[0] == "chunk":
            self._fold_chunk(r, item[1], item[2], output)
        else:  # a step-check batch
            r["checks"].append(output)
        if self._expected[0][0] == "end":
            self._expected.pop(0)
            self._finish_region(r)

    def _fold_chunk(self, r, lo, hi, out) -> None:
        run, schedule, block = self.study.run, self.schedule, self.ctx.block_size
        region, offset = r["region"], r["offset"]
        (moments, aged, chunk_tracks, residence, flights, chunk_hops, vcorr, status) = out
        if status[0] >= 0:
            raise BlowUpError(
                f"non-finite or runaway position (|x| > 1e150) for particle "
                f"{int(status[0]) - offset} of start '{region.label}' at step "
                f"{int(status[1])} (t = {int(status[1]) * run.dt:g}) with "
                f"run.dt = {run.dt:g}; reduce run.dt or check the flow parameters")
        _check_finite_sums(moments, schedule, run.dt, region.label, lo, hi)
        _check_displacement_range(moments, schedule, run.dt, region.label, lo, hi,
                                  self.phase_limit)
        n_batches, batch_of_block = self.n_batches, self.batch_of_block
        check_of_block, check_fine = self.check_of_block, r["check_fine"]
        if r["sums"] is None:
            r["sums"] = [np.zeros((n_batches, *moments.shape[1:])),
                         np.zeros((n_batches, *aged.shape[1:])),
                         np.zeros(residence.shape[1]), np.zeros(flights.shape[1]),
                         np.zeros((n_batches, *vcorr.shape[1:]))]
        sums = r["sums"]
        first_block = lo // block
        count = moments.shape[0]
        for a, b, target in _runs(batch_of_block[first_block:first_block + count]):
            _add_in_order(sums[0], target, moments[a:b])
            if aged.size:
                _add_in_order(sums[1], target, aged[a:b])
            if vcorr.size:
                _add_in_order(sums[4], target, vcorr[a:b])
        in_check = max(0, min(count, check_of_block.size - first_block))
        if in_check:  # the subsample's fine path: the chunk's first blocks
            fine = moments[:in_check][:, :, _CHECK_IN_MOMENTS]
            for a, b, target in _runs(check_of_block[first_block:first_block + in_check]):
                _add_in_order(check_fine, target, fine[a:b])
        # counts (whole numbers far below 2**53 held in floats): exact in any order
        sums[2] += residence.sum(axis=0)
        sums[3] += flights.sum(axis=0)
        r["hops"] += chunk_hops.sum()
        if chunk_tracks.shape[0]:
            r["tracks"].append(chunk_tracks)
        if self.bar is not None:
            if self.bar.desc != "integrating":
                self.bar.set_description_str("integrating", refresh=False)
            self.bar.update(hi - lo)

    def _finish_region(self, r) -> None:
        study, run, schedule = self.study, self.study.run, self.schedule
        region, x0, y0, sums = r["region"], r["x0"], r["y0"], r["sums"]
        family, params = study.flow.model, study.flow.params
        check = (None, None, None)
        if self.n_check:
            counts, coarse = _coarse_sums(self.ctx, region, r["offset"], r["checks"],
                                          r["check_edges"], self.messages)
            check = (counts, r["check_fine"], coarse)
        tracked = (np.concatenate(r["tracks"]) if r["tracks"]
                   else np.zeros((0, schedule.track_steps.size, 2)))
        self.ensemble.starts.append(StartSums(
            label=region.label, kind=region.kind,
            area_fraction=area_fraction(region, family, params), particles=run.particles,
            batch_counts=self.batch_counts.astype(float), moments=sums[0], aged=sums[1],
            tracks=tracked, track_starts=np.stack([x0[:run.tracked], y0[:run.tracked]], 1),
            residence_counts=sums[2], flight_counts=sums[3], hops=r["hops"],
            check_counts=check[0], check_fine=check[1], check_coarse=check[2],
            velocity=sums[4] if schedule.vc_ref_steps.size else None))
        self._region = None

    def result(self) -> EnsembleResult:
        """The ensemble, once every task's output has been folded."""
        if len(self.ensemble.starts) != len(self.study.starts):
            raise RuntimeError("EnsemblePlan.result() before every task was folded")
        return self.ensemble

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None
