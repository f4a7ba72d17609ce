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

from ..errors import BlowUpError
from ..flows.compiled import CompiledCode
from ..flows.compiled import velocity as _velocity  # noqa: F401  (compiled with the kernel)
from ..starts import area_fraction, sample_starts
from .integrators import SCHEME_CODES
from .kernel import AGED_COLUMNS, MOMENT_COLUMNS, N_BASE, run_particles
from .noise import pack_noise
from .rng import split_seed
from .schedule import MIN_CHECK_BATCH, Schedule, build_schedule
from .step_advice import STATIC_ADVECTIVE_LIMIT, _peak_speed, step_size_warnings  # noqa: F401
from .stepcheck import CHECK_COLUMNS, run_step_check
from .streamline import scheme_parameters
from .velocity_pairs import VELOCITY_COLUMNS

MAX_BLOCK = 256
# Random streams of different start regions are separated by this particle-index offset.
STREAM_STRIDE = 1 << 40


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
    # family, noise model and scheme as compile-time constants: a kernel specialised per study
    run_particles(
        CompiledCode(ctx.fcode), ctx.fp, CompiledCode(ctx.ncode), ctx.nq,
        CompiledCode(ctx.scheme), ctx.dt, ctx.key[0], ctx.key[1],
        x0, y0, first, stream_offset, ctx.block_size,
        s.events, s.ev_out, s.ev_track, s.ev_ref, s.aged_ptr, s.aged_a, s.aged_l, ctx.orders,
        moments, aged, tracks, n_tracked_here,
        ctx.hop_on, ctx.cell, ctx.margin, ctx.gap_steps, res_low, res_inv, fl_low, fl_inv,
        residence, flights, hops, status, s.ev_vref, s.vc_ptr, s.vc_r, s.vc_l, vcorr,
    )
    return moments, aged, tracks, residence, flights, hops, vcorr, status


def _run_check_batch(ctx: _Context, stream_offset: int, first: int, x0, y0):
    s = ctx.schedule
    coarse = np.zeros((s.out_steps.size, len(CHECK_COLUMNS)))
    status = np.full(2, -1, dtype=np.int64)
    run_step_check(CompiledCode(ctx.fcode), ctx.fp, CompiledCode(ctx.ncode), ctx.nq,
                   CompiledCode(ctx.scheme), ctx.dt, ctx.key[0],
                   ctx.key[1], x0, y0, first, stream_offset, s.out_steps, False,
                   np.zeros((0, len(CHECK_COLUMNS))), coarse, status)
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


def _coarse_sums(ctx, region, offset, x0, y0, n_check, check_of_block, workers, backend,
                 messages):
    """Coarse-path (2·dt) sums [C, T, 5] of one start region's subsample, per check batch."""
    block = ctx.block_size
    count = int(check_of_block[-1]) + 1
    edges = [int(np.searchsorted(check_of_block, c)) * block for c in range(count)] + [n_check]
    tasks = [(ctx, offset, lo, x0[lo:hi], y0[lo:hi]) for lo, hi in itertools.pairwise(edges)]
    outs = list(_parallel_map(_run_check_batch, tasks, workers, backend))
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


def _parallel_map(function, tasks, workers: int, backend: str):
    """Ordered results of ``function(*task)``: serial, or joblib threads (the kernel releases
    the GIL).  Results come back in submission order, which the deterministic fold needs."""
    if backend == "serial" or workers == 1 or len(tasks) == 1:
        for task in tasks:
            yield function(*task)
        return
    from joblib import Parallel, delayed

    parallel = Parallel(n_jobs=workers, backend="threading", return_as="generator",
                        pre_dispatch="2*n_jobs")
    yield from parallel(delayed(function)(*task) for task in tasks)


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
                 backend: str = "threads", progress: bool | None = None) -> EnsembleResult:
    """Integrate every start region of ``study`` and return batch-folded sums.

    ``workers``/``chunk`` override the study's run table; results do not depend on either.
    """
    run = study.run
    workers = run.workers if workers is None else workers
    if workers < 0:
        import os

        workers = os.cpu_count() or 1
    chunk = run.chunk if chunk is None else chunk
    if workers > 1:
        # enough chunks to keep every worker busy; chunking never changes the numbers
        chunk = min(chunk, max(1, -(-run.particles // (4 * workers))))
    show = run.progress if progress is None else progress
    schedule = build_schedule(run, study.aging, run.track_samples,
                              study.velocity_correlation)
    messages = step_size_warnings(study)
    for message in messages:
        warnings.warn(message, StepSizeWarning, stacklevel=2)
    ctx, residence_edges, flight_edges = _make_context(study, schedule)
    chunk = min(chunk, _memory_capped_chunk(ctx))
    family = study.flow.model
    params = study.flow.params
    n = run.particles
    block = ctx.block_size
    n_blocks = -(-n // block)
    n_batches = min(run.batches, n_blocks)
    batch_of_block = (np.arange(n_blocks) * n_batches) // n_blocks
    block_counts = np.full(n_blocks, block, dtype=np.int64)
    block_counts[-1] = n - block * (n_blocks - 1)
    batch_counts = np.bincount(batch_of_block, weights=block_counts, minlength=n_batches)
    # the step check's subsample: the first n_check particles of every start region (a
    # study built in code may have fewer particles than its resolved subsample)
    n_check, check_of_block = 0, np.zeros(0, dtype=np.int64)
    if run.step_check:
        n_check, check_of_block = check_plan(run.step_check_particles, n, block, run.batches)
        if not n_check:
            messages.append(f"step check skipped: {min(run.step_check_particles, n)} "
                            f"particles are too few for an error estimate (need at least "
                            f"{2 * MIN_CHECK_BATCH})")
            warnings.warn(messages[-1], StepBiasWarning, stacklevel=2)
    result = EnsembleResult(schedule=schedule, block_size=block, batches=n_batches,
                            orders=ctx.orders, residence_edges=residence_edges,
                            flight_edges=flight_edges, warnings=messages,
                            step_check_particles=n_check)
    bar = None
    if show:
        from tqdm.auto import tqdm

        bar = tqdm(total=n * len(study.starts), unit="particle", unit_scale=True,
                   desc="integrating", leave=False, dynamic_ncols=True)
    try:
        for s_index, region in enumerate(study.starts):
            x0, y0 = sample_starts(region, family, params, n, run.seed, s_index)
            offset = s_index * STREAM_STRIDE
            tasks = [(ctx, offset, lo, x0[lo:hi], y0[lo:hi]) for lo, hi in _chunks(n, chunk,
                                                                                    block)]
            sums = None
            check_fine = np.zeros((int(check_of_block[-1]) + 1 if n_check else 0,
                                   schedule.out_steps.size, len(CHECK_COLUMNS)))
            tracks = []
            hops = 0.0
            for (lo, hi), out in zip(_chunks(n, chunk, block),
                                     _parallel_map(_run_chunk, tasks, workers, backend)):
                (moments, aged, chunk_tracks, residence, flights, chunk_hops, vcorr,
                 status) = out
                if status[0] >= 0:
                    raise BlowUpError(
                        f"non-finite or runaway position (|x| > 1e150) for particle "
                        f"{int(status[0]) - offset} of start '{region.label}' at step "
                        f"{int(status[1])} (t = {int(status[1]) * run.dt:g}) with "
                        f"run.dt = {run.dt:g}; reduce run.dt or check the flow parameters")
                _check_finite_sums(moments, schedule, run.dt, region.label, lo, hi)
                _check_displacement_range(moments, schedule, run.dt, region.label, lo, hi,
                                          _displacement_phase_limit(study))
                if sums is None:
                    sums = [np.zeros((n_batches, *moments.shape[1:])),
                            np.zeros((n_batches, *aged.shape[1:])),
                            np.zeros(residence.shape[1]), np.zeros(flights.shape[1]),
                            np.zeros((n_batches, *vcorr.shape[1:]))]
                first_block = lo // block
                for b in range(moments.shape[0]):
                    target = batch_of_block[first_block + b]
                    sums[0][target] += moments[b]
                    sums[1][target] += aged[b]
                    if vcorr.size:
                        sums[4][target] += vcorr[b]
                    if first_block + b < check_of_block.size:  # the subsample's fine path
                        check_fine[check_of_block[first_block + b]] += \
                            moments[b][:, _CHECK_IN_MOMENTS]
                    sums[2] += residence[b]
                    sums[3] += flights[b]
                    hops += chunk_hops[b]
                if chunk_tracks.shape[0]:
                    tracks.append(chunk_tracks)
                if bar is not None:
                    bar.update(hi - lo)
            check = (None, None, None)
            if n_check:
                counts, coarse = _coarse_sums(ctx, region, offset, x0, y0, n_check,
                                              check_of_block, workers, backend, messages)
                check = (counts, check_fine, coarse)
            tracked = (np.concatenate(tracks) if tracks
                       else np.zeros((0, schedule.track_steps.size, 2)))
            result.starts.append(StartSums(
                label=region.label, kind=region.kind,
                area_fraction=area_fraction(region, family, params), particles=n,
                batch_counts=batch_counts.astype(float), moments=sums[0], aged=sums[1],
                tracks=tracked, track_starts=np.stack([x0[:run.tracked], y0[:run.tracked]], 1),
                residence_counts=sums[2], flight_counts=sums[3], hops=hops,
                check_counts=check[0], check_fine=check[1], check_coarse=check[2],
                velocity=sums[4] if schedule.vc_ref_steps.size else None))
    finally:
        if bar is not None:
            bar.close()
    return result
