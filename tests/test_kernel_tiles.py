"""The tiled kernel: same numbers as the scalar step rules and the documented random stream,
whatever the tiling, chunking or workers; blow-ups reported deterministically."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import eddyhop
from eddyhop.engine import runner
from eddyhop.engine.integrators import (
    SCHEME_CODES,
    TILE_WORK_ROWS,
    advance,
    advance_tile,
    tile_velocity,
)
from eddyhop.engine.kernel import N_BASE, TILE, _abs_power
from eddyhop.engine.noise import MODEL_CODES
from eddyhop.engine.rng import normal_draws
from eddyhop.engine.schedule import build_schedule
from eddyhop.flows import get_family
from eddyhop.flows.compiled import evaluate_velocity
from tests.conftest import make_study

FLOWS = [
    ("cellular", {}),
    ("cats_eye", {"epsilon": 0.3}),
    ("shear", {}),
    ("drifting_cellular", {"drift_x": 0.2, "drift_y": -0.1}),
    ("oscillating_cellular", {"B": 0.4, "omega": 2.0}),
    ("fourier", {"modes": [[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.0], [2, 1, 0.1, 0.2]]}),
    ("obstacles", {"U": 0.0, "solid_fraction": 0.2}),  # generic (non-inlined) branch
]


def _points(m, seed):
    rng = np.random.default_rng(seed)
    return rng.uniform(-20.0, 20.0, m), rng.uniform(-20.0, 20.0, m)


@pytest.mark.parametrize("name, params", FLOWS, ids=[f[0] for f in FLOWS])
def test_tile_velocity_equals_the_compiled_dispatch(name, params):
    family = get_family(name)
    values = family.validate(params)
    m = 37
    x, y = _points(m, 1)
    us = np.empty(m)
    vs = np.empty(m)
    tile_velocity(family.code, family.pack(values), x, y, 0.7, us, vs, m)
    u, v = evaluate_velocity(family, values, x, y, 0.7)
    np.testing.assert_array_equal(us, u)
    np.testing.assert_array_equal(vs, v)


@pytest.mark.parametrize("name, params", FLOWS[:6], ids=[f[0] for f in FLOWS[:6]])
def test_tile_step_is_bit_identical_to_the_scalar_step(name, params):
    """advance_tile repeats advance's floating-point operations in the same order."""
    family = get_family(name)
    fp = family.pack(family.validate(params))
    m = 41
    x, y = _points(m, 2)
    z = np.random.default_rng(3).standard_normal((4, m))
    dt, t = 0.013, 1.9
    cases = [("euler_maruyama", "constant"), ("euler_maruyama", "modulated"),
             ("milstein", "constant"), ("milstein", "modulated"), ("strang_rk2", "constant"),
             ("rk4", "constant")]
    for scheme_name, noise_model in cases:
        scheme = SCHEME_CODES[scheme_name]
        ncode = MODEL_CODES[noise_model]
        kappa = 0.0 if scheme_name == "rk4" else 0.07
        nq = np.array([kappa, 0.6 if noise_model == "modulated" else 0.0, 1.0])
        x_new = np.empty(m)
        y_new = np.empty(m)
        work = np.empty((TILE_WORK_ROWS, m))
        advance_tile(scheme, family.code, fp, ncode, nq, x, y, t, dt, math.sqrt(dt), z, m,
                     x_new, y_new, work)
        for g in range(m):
            expected = advance(scheme, family.code, fp, ncode, nq, x[g], y[g], t, dt,
                               math.sqrt(dt), z[0, g], z[1, g], z[2, g], z[3, g])
            assert (x_new[g], y_new[g]) == expected, (scheme_name, noise_model, g)


@pytest.mark.parametrize("integrator", ["euler_maruyama", "strang_rk2"])
def test_kernel_consumes_the_documented_normals(integrator):
    """With the flow at rest, positions are sums of the documented normals: Euler–Maruyama
    adds sqrt(2κ)·(sqrt(dt)·z0) per step, strang_rk2 adds sqrt(κ dt)·z0 and sqrt(κ dt)·z2
    around a (null) advection step, each in that order.  Bit-identical reconstruction."""
    n, steps, dt, kappa, seed = TILE + 22, 12, 0.02, 0.3, 4242
    study = make_study(
        flow={"family": "cellular", "U": 0.0, "k": 1.0, "_replace": True},
        noise={"kappa": kappa, "_replace": True},
        run={"particles": n, "dt": dt, "t_end": steps * dt, "n_times": 3, "seed": seed,
             "tracked": n, "track_samples": steps, "integrator": integrator, "batches": 2},
    )
    result = runner.run_ensemble(study, workers=1)
    start = result.starts[0]
    z = normal_draws(seed, np.arange(n), np.arange(steps))
    x = start.track_starts[:, 0].copy()
    y = start.track_starts[:, 1].copy()
    sigma, sqrt_dt, spread = math.sqrt(2.0 * kappa), math.sqrt(dt), math.sqrt(kappa * dt)
    expected = np.empty((n, steps + 1, 2))
    expected[:, 0] = np.stack([x, y], 1)
    for step in range(steps):
        if integrator == "euler_maruyama":
            # drift·dt + σ·ΔW with drift = u + ∂κ = 0.0
            x = x + (0.0 * dt + sigma * (sqrt_dt * z[:, step, 0]))
            y = y + (0.0 * dt + sigma * (sqrt_dt * z[:, step, 1]))
        else:
            x = ((x + spread * z[:, step, 0]) + dt * 0.0) + spread * z[:, step, 2]
            y = ((y + spread * z[:, step, 1]) + dt * 0.0) + spread * z[:, step, 3]
        expected[:, step + 1] = np.stack([x, y], 1)
    steps_tracked = result.schedule.track_steps
    np.testing.assert_array_equal(start.tracks, expected[:, steps_tracked])


def test_tiles_that_straddle_chunks_and_blocks_change_nothing():
    """Blocks of 38 particles, tiles of TILE, chunks of 3 or 5 blocks: tiles cut blocks and
    chunks cut tiles differently in each run, yet every sum and position is bit-identical."""
    n = 305  # with 2 batches the block size is 305 // 8 = 38
    study = make_study(
        run={"particles": n, "batches": 2, "tracked": n, "track_samples": 20, "dt": 0.05,
             "t_end": 3.0, "n_times": 6},
        aging={"times": [1.0], "lags": 4},
        hopping={"enabled": True},
    )
    block = runner.block_size_for(n, 2)
    runs = [runner.run_ensemble(study, workers=1, chunk=10**6),
            runner.run_ensemble(study, workers=1, chunk=3 * block),
            runner.run_ensemble(study, workers=2, chunk=5 * block)]
    reference = runs[0].starts[0]
    for other in runs[1:]:
        start = other.starts[0]
        for field in ("moments", "aged", "tracks", "residence_counts", "flight_counts"):
            np.testing.assert_array_equal(getattr(start, field), getattr(reference, field),
                                          err_msg=field)
        assert start.hops == reference.hops


def _chunk_status(study, x0, y0, first):
    schedule = build_schedule(study.run, study.aging, study.run.track_samples)
    ctx, _, _ = runner._make_context(study, schedule)
    out = runner._run_chunk(ctx, 0, first, x0[first:], y0[first:])
    return tuple(int(v) for v in out[-1])


def test_blow_up_reports_the_lowest_failing_particle_whatever_the_tiling():
    n = 2 * TILE + 40
    study = make_study(run={"particles": n, "batches": 2})
    rng = np.random.default_rng(5)
    x0 = rng.uniform(0.0, 6.0, n)
    y0 = rng.uniform(0.0, 6.0, n)
    x0[TILE + 50] = np.nan  # fails at step 1
    y0[TILE + 9] = 1e151  # beyond the runaway limit at step 1, lower index
    assert _chunk_status(study, x0, y0, 0) == (TILE + 9, 1)
    assert _chunk_status(study, x0, y0, 7) == (TILE + 9, 1)  # tiles shifted by 7
    assert _chunk_status(study, x0, y0, TILE + 10) == (TILE + 50, 1)
    x0[:] = np.where(np.isfinite(x0), x0, 1.0)
    y0[:] = np.where(np.abs(y0) < 1e150, y0, 1.0)
    assert _chunk_status(study, x0, y0, 0) == (-1, -1)


@pytest.mark.parametrize("order", [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 2.5, 0.5, 9.0])
def test_absolute_powers(order):
    """Other orders use the C library's pow (as math.pow does); repeated products differ from
    it by at most one rounding per product (relative error ≤ order·eps)."""
    values = np.abs(np.random.default_rng(6).standard_normal(200)) * 3.0
    got = np.array([_abs_power(v, order) for v in values])
    exact = np.array([math.pow(v, order) for v in values])
    if order != int(order) or order > 8:
        np.testing.assert_array_equal(got, exact)
    else:
        np.testing.assert_allclose(got, exact, rtol=order * np.finfo(float).eps, atol=0)


def test_second_absolute_moment_equals_the_msd_component():
    """|Δx|·|Δx| and Δx·Δx are the same product: the order-2 absolute moment is msd_x."""
    ds = eddyhop.simulate(make_study(moments={"orders": [2.0, 4.0]}), progress=False)
    np.testing.assert_array_equal(ds["abs_moment_x"].sel(order=2.0).values, ds["msd_x"].values)


def test_absolute_moments_match_the_tracked_positions():
    """Σ|Δx|^q, Σ|Δy|^q, Σ|ΔX|^q (products for integer q, pow otherwise) against the same
    quantities from every particle's tracked path; rtol 1e-12 covers summation order only."""
    n, steps = 150, 8
    orders = [1.0, 2.5, 3.0, 8.0]
    study = make_study(
        run={"particles": n, "dt": 0.05, "t_end": steps * 0.05, "n_times": steps,
             "spacing": "linear", "tracked": n, "track_samples": steps, "batches": 2},
        moments={"orders": orders},
    )
    result = runner.run_ensemble(study, workers=1)
    start = result.starts[0]
    assert np.array_equal(result.schedule.track_steps[1:], result.schedule.out_steps)
    d = start.tracks[:, 1:, :] - start.track_starts[:, None, :]  # [particle, time, 2]
    sums = start.moments.sum(axis=0)  # [time, column]
    for q, order in enumerate(orders):
        base = N_BASE + 3 * q
        r = np.hypot(d[..., 0], d[..., 1])
        np.testing.assert_allclose(sums[:, base], (np.abs(d[..., 0]) ** order).sum(0),
                                   rtol=1e-12)
        np.testing.assert_allclose(sums[:, base + 1], (np.abs(d[..., 1]) ** order).sum(0),
                                   rtol=1e-12)
        np.testing.assert_allclose(sums[:, base + 2], (r**order).sum(0), rtol=1e-12)


def _lane_sum(values):
    """The kernel's documented lane order (``kernel.LANES`` = 32): lane j adds values j,
    j + 32, … in ascending order from +0.0; c_i = (lane i + lane i+8) + (lane i+16 +
    lane i+24); total ((c0 + c1) + (c2 + c3)) + ((c4 + c5) + (c6 + c7))."""
    lanes = [0.0] * 32
    for i, value in enumerate(values):
        lanes[i % 32] += value
    c = [(lanes[i] + lanes[i + 8]) + (lanes[i + 16] + lanes[i + 24]) for i in range(8)]
    return ((c[0] + c[1]) + (c[2] + c[3])) + ((c[4] + c[5]) + (c[6] + c[7]))


def _column_values(d, orders):
    """Every moment column's value per particle, by the scalar definitions (module docstring
    of ``kernel``): plain products in the written order, |·|^n for integer n ≤ 8 as running
    products, other orders by the C library's pow (``math.pow``)."""
    dx, dy = d[:, 0], d[:, 1]
    dx2, dy2 = dx * dx, dy * dy
    r2 = dx2 + dy2
    values = [dx, dy, dx2, dy2, dx * dy, r2 * r2, dx2 * dx, dy2 * dy, dx2 * dx2, dy2 * dy2]
    for order in orders:
        for base in (np.abs(dx), np.abs(dy), np.sqrt(r2)):
            if order == int(order) and 1 <= order <= 8:
                power = base
                for _ in range(int(order) - 1):
                    power = power * base
            else:
                power = np.array([math.pow(b, order) for b in base])
            values.append(power)
    return dict(enumerate(values))


@pytest.mark.parametrize("orders", [(1.0, 2.0, 3.0, 4.0, 5.0, 6.0), (2.0, 0.5, 8.0, 3.0),
                                    (3.0, 1.5), (2.0,)],
                         ids=["default orders", "pow and eighth power", "third power and pow",
                              "second power only"])
@pytest.mark.parametrize("particles, batches", [(305, 2), (1700, 2)],
                         ids=["blocks below a tile", "blocks cut into two segments"])
def test_moment_sums_follow_the_documented_lane_order(particles, batches, orders):
    """Every block's sums are lane sums (see ``kernel.LANES``) over the block, or over its
    fixed segments when it is longer than a tile (``_tile_length``), added to the block in
    segment order; rebuilt here from the tracked positions, bit for bit, for every column
    (the scalar definitions of the values), for a chunk of the whole ensemble and for chunks
    of three blocks.  The blocks of 38 particles end in partial groups of lanes."""
    from eddyhop.engine.kernel import _tile_length
    from eddyhop.starts import sample_starts

    steps = 6
    study = make_study(run={"particles": particles, "batches": batches, "tracked": particles,
                            "track_samples": steps, "dt": 0.05, "t_end": steps * 0.05,
                            "n_times": 3}, moments={"orders": list(orders)})
    schedule = build_schedule(study.run, study.aging, study.run.track_samples)
    ctx, _, _ = runner._make_context(study, schedule)
    block = ctx.block_size
    assert (block <= TILE) == (particles == 305)
    x0, y0 = sample_starts(study.starts[0], study.flow.model, study.flow.params, particles,
                           study.run.seed, 0)
    steps_tracked = list(schedule.track_steps)
    for chunk in (particles, 3 * block):
        for first in range(0, particles, chunk):
            hi = min(first + chunk, particles)
            moments, _, tracks = runner._run_chunk(ctx, 0, first, x0[first:hi],
                                                   y0[first:hi])[:3]
            for slot, out_step in enumerate(schedule.out_steps):
                d = tracks[:, steps_tracked.index(out_step)] - np.stack(
                    [x0[first:hi], y0[first:hi]], 1)
                values = _column_values(d, orders)
                assert len(values) == moments.shape[2]
                for b in range(moments.shape[0]):
                    lo, end = b * block, min((b + 1) * block, hi - first)
                    cuts = [lo]
                    while cuts[-1] < end:
                        cuts.append(min(end, cuts[-1] + int(_tile_length(cuts[-1], hi - first,
                                                                         block))))
                    for column, value in values.items():
                        expected = 0.0
                        for s, e in itertools.pairwise(cuts):
                            expected += _lane_sum(value[s:e])
                        assert moments[b, slot, column] == expected, (first, b, slot, column)


def test_tiles_are_aligned_with_blocks():
    """Tile starts are block starts or fixed offsets inside a block, whatever the chunk."""
    from eddyhop.engine.kernel import _tile_length

    for block in (1, 7, 38, 64, 128, 129, 200, 256):
        n = 5 * block + 3
        bounds, lo = [], 0
        while lo < n:
            m = int(_tile_length(lo, n, block))
            assert 0 < m <= TILE
            bounds.append((lo, lo + m))
            lo += m
        for lo, hi in bounds:
            if hi - lo > block or block <= TILE:
                assert lo % block == 0 and (hi % block == 0 or hi == n)
            else:  # a segment of one block, at a fixed offset from the block's start
                pieces = -(-block // TILE)
                assert lo // block == (hi - 1) // block
                assert lo % block in {k * block // pieces for k in range(pieces)}


def test_hop_counts_equal_the_rule_applied_to_every_step():
    """The vectorised pre-test only chooses which particles reach the bookkeeping: replaying
    the documented rule (a cell change counts once ``margin`` deep; flights split by gaps of
    ``gap_steps``) on every step of every tracked path gives the same integer counts."""
    from eddyhop.engine.kernel import _log_bin

    n, steps, dt = 200, 150, 0.02
    study = make_study(run={"particles": n, "tracked": n, "track_samples": steps, "dt": dt,
                            "t_end": steps * dt, "n_times": 4, "batches": 2},
                       hopping={"enabled": True, "margin": 0.05})
    result = runner.run_ensemble(study, workers=1)
    schedule = build_schedule(study.run, study.aging, study.run.track_samples)
    ctx, _, _ = runner._make_context(study, schedule)
    assert list(result.schedule.track_steps) == list(range(steps + 1))
    start = result.starts[0]
    path = start.tracks / ctx.cell  # [particle, step, 2] in cells
    n_res, n_fl = len(ctx.residence_edges) - 1, len(ctx.flight_edges) - 1
    res_low, res_inv = runner._log_binning(ctx.residence_edges)
    fl_low, fl_inv = runner._log_binning(ctx.flight_edges)
    residence, flights, hops = np.zeros(n_res), np.zeros(n_fl), 0
    for p in range(n):
        cx, cy = math.floor(path[p, 0, 0]), math.floor(path[p, 0, 1])
        entered, flight, in_flight = 0, (cx, cy), False
        for step in range(1, steps + 1):
            fx, fy = path[p, step]
            nx, ny = math.floor(fx), math.floor(fy)
            deep_x = min(fx - nx, nx + 1.0 - fx) > ctx.margin or nx == cx
            deep_y = min(fy - ny, ny + 1.0 - fy) > ctx.margin or ny == cy
            if (nx != cx or ny != cy) and deep_x and deep_y:
                residence[_log_bin((step - entered) * dt, res_low, res_inv, n_res)] += 1
                hops += 1
                if step - entered >= ctx.gap_steps:
                    if in_flight:
                        length = math.hypot(cx - flight[0], cy - flight[1])
                        flights[_log_bin(length, fl_low, fl_inv, n_fl)] += 1
                    flight, in_flight = (cx, cy), True
                cx, cy, entered = nx, ny, step
    assert hops > 20  # the check means something
    assert start.hops == hops
    np.testing.assert_array_equal(start.residence_counts, residence)
    np.testing.assert_array_equal(start.flight_counts, flights)
