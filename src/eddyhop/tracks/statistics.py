"""Streamed statistics of measured trajectories → a Dataset in the layout of a run's result.

The Dataset holds what ``eddyhop run`` writes (``msd``, ``msd_x``, ``msd_y``, ``msd_xy``,
``mean_dx``, ``mean_dy`` on ``time``; ``batch_*`` group means; ``abs_moment`` on (``order``,
``time``); ``aged_msd`` on (``aging_time``, ``lag``)), so :func:`eddyhop.analysis.analyse`,
``plot`` and ``report`` read it unchanged: local exponent, regimes, crossovers, D_eff (drift
removed: the analyses centre on ``mean_dx``/``mean_dy``, see ``analysis/centring.py``), aging.
The tracked-trajectory statistics a run's ``analyse`` derives from ``track_x`` (time-averaged
MSD ``tamsd``, ``ergodicity_breaking``, ``displacement_pdf_x``/``_y``) are computed here from
the tracks with the same functions and the same variable names, since measured tracks do not
fit one dense (particle, time) array.  New variables: ``track_count`` (tracks contributing at
each time), ``aged_track_count``, ``track_id``, ``track_velocity_autocorrelation`` (+ ``_se``,
``_normalised``).

Conventions
-----------
* Times sit on one sampling grid t = t₀ + kΔ (Δ the smallest time step of any track unless
  given); a track may miss samples (gaps), and tracks may start and end at any grid time.
* ``time_origin = "track_start"`` (default): ``time`` is the lag since each track's first
  sample, ΔX = X(t₀ᵢ + τ) − X(t₀ᵢ).  ``"clock"``: ``time`` is clock time since
  ``clock_origin`` (default the earliest sample of the file), ΔX = X(t) − X(t_origin), over the
  tracks with a sample at the origin (the release-time picture of a run).
* Aging: ``aged_msd`` at clock times t_a since the clock origin (``aging_time``) and lags τ,
  ⟨|X(t_a + τ) − X(t_a)|²⟩ over the tracks present at both times.
* Errors: the tracks are dealt round-robin into ``batches`` groups of whole tracks (all tracks
  when fewer); the package's delete-one-batch jackknife over these groups is then a **delete-
  one-group jackknife over whole tracks** (Efron & Tibshirani 1993, *An Introduction to the
  Bootstrap*, ch. 11): each track's samples stay together, so their correlation along the
  track is kept.  ``batch_count`` is the number of tracks per group; at a time not reached by
  every track the group means are over the tracks present there.
* Memory: O(tracks × (tamsd lags + PDF times) + batches × lags): a file is read a chunk of
  tracks at a time (CSV and indexed ragged files are read whole by their readers).
"""

from __future__ import annotations

import datetime as _dt
import json
import math

import numpy as np
import xarray as xr

from ..analysis.aging import (
    DEFAULT_TAMSD_LAGS,
    ergodicity_breaking,
    tamsd_lag_indices,
    time_averaged_msd,
)
from ..analysis.moments import scaled_displacement_density
from ..errors import InputDataError
from .readers import TrackFileError, TrackSource, check_track, frames, period_pair, unwrap

DEFAULT_ORDERS = (1.0, 2.0, 3.0, 4.0)
DEFAULT_BATCHES = 20
DEFAULT_LAGS = 100
DEFAULT_VELOCITY_LAGS = 32
ORIGINS = ("track_start", "clock")
ERROR_METHOD = ("delete-one-group jackknife over groups of whole tracks (tracks dealt "
                "round-robin into the batches; Efron & Tibshirani 1993, ch. 11)")
_DENSE_LIMIT = 1_000_000  # samples per dense block of tracks (bounds the working memory)


class TrackOptionError(InputDataError):
    """An option of the track analysis is out of range (message names option and value)."""


def _option(name, value, low=-math.inf, high=math.inf, integer=False, low_open=False):
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value,
                                                                                     bool)
    if ok:
        value = float(value)
        ok = math.isfinite(value) and (value > low if low_open else value >= low) \
            and value <= high and (not integer or value == int(value))
    if not ok:
        kind = "an integer" if integer else "a number"
        left = "(" if low_open else "["
        raise TrackOptionError(f"option {name} = {value!r}: expected {kind} in "
                               f"{left}{low:g}, {high:g}]")
    return int(value) if integer else value


def _survey(source: TrackSource, chunk: int):
    """First pass: check every track, and return per-track first/last time, sample count and
    the smallest time step."""
    first, last, counts, ids = [], [], [], []
    smallest = math.inf
    for tracks in source.chunks(chunk):
        for track in tracks:
            check_track(track, source.name)
            first.append(track.t[0])
            last.append(track.t[-1])
            counts.append(track.t.size)
            ids.append(track.ident)
            if track.t.size > 1:
                smallest = min(smallest, float(np.min(np.diff(track.t))))
    if not counts:
        raise TrackFileError(f"track file {source.name} holds no trajectories")
    return (np.asarray(first), np.asarray(last), np.asarray(counts), ids, smallest)


def _log_frames(longest: int, count: int) -> np.ndarray:
    if longest < 1:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.rint(np.geomspace(1, longest, count)).astype(np.int64))


class _Accumulator:
    """Per-group sums over tracks (first axis: group), added block by block."""

    def __init__(self, groups, shape):
        self.sums = {}
        self.groups = groups
        self.shape = shape

    def add(self, key, onehot, values, where=None):
        """Add the rows of ``values`` (tracks first) to their groups (``onehot``: groups ×
        tracks); ``where`` indexes a sub-array of the accumulator."""
        if key not in self.sums:
            self.sums[key] = np.zeros((self.groups, *self.shape))
        n = values.shape[0]
        summed = (onehot @ values.reshape(n, -1)).reshape((self.groups, *values.shape[1:]))
        if where is None:
            self.sums[key] += summed
        else:
            self.sums[key][(slice(None), *where)] += summed


def track_statistics(source: TrackSource, *, period=None, interval: float | None = None,
                     time_origin: str = "track_start", clock_origin: float | None = None,
                     length_unit: str | None = None, time_unit: str | None = None,
                     lags: int = DEFAULT_LAGS, max_lag: float | None = None,
                     batches: int = DEFAULT_BATCHES, orders=DEFAULT_ORDERS,
                     aging_times=None, aging_lags: int = 30,
                     tamsd_lags: int = DEFAULT_TAMSD_LAGS, tamsd_max_fraction: float = 0.5,
                     pdf_times=None, bins: int = 41, extent: float = 5.0,
                     velocity_lags: int = DEFAULT_VELOCITY_LAGS,
                     grid_tolerance: float = 1e-3, label: str | None = None,
                     chunk: int = 2000) -> xr.Dataset:
    """Statistics of the trajectories of ``source`` as a run-shaped Dataset (module text).

    Units: times and lengths as in the file (``length_unit``/``time_unit`` label them when the
    file states none; a file's own units win and a conflicting option is refused).  ``period``
    (one length, or (Lx, Ly), file length units): the positions are folded into a periodic
    domain and are unwrapped (each step taken as its shortest image).  ``interval``: the
    sampling interval (default: the smallest time step).  ``lags``: number of log-spaced
    output times; ``max_lag``: the longest (default: the longest lag reached by at least
    max(2·batches, 10 %) of the tracks).  ``aging_times``: clock times since the clock
    origin (default 0 and three log-spaced times up to a third of the record).
    ``velocity_lags``: lags (in samples) of the velocity autocorrelation (0: skip it);
    velocities are the file's ``u``, ``v`` when given, else central differences.
    """
    if time_origin not in ORIGINS:
        raise TrackOptionError(f"option time_origin = {time_origin!r} is not one of "
                               + ", ".join(ORIGINS))
    lags = _option("lags", lags, 3, 10_000, integer=True)
    batches = _option("batches", batches, 2, 4096, integer=True)
    aging_lags = _option("aging_lags", aging_lags, 2, 10_000, integer=True)
    tamsd_lags = _option("tamsd_lags", tamsd_lags, 2, 10_000, integer=True)
    tamsd_max_fraction = _option("tamsd_max_fraction", tamsd_max_fraction, 0, 1,
                                 low_open=True)
    bins = _option("bins", bins, 3, 10_000, integer=True)
    extent = _option("extent", extent, 0, 100, low_open=True)
    velocity_lags = _option("velocity_lags", velocity_lags, 0, 100_000, integer=True)
    grid_tolerance = _option("grid_tolerance", grid_tolerance, 0, 0.5, low_open=True)
    chunk = _option("chunk", chunk, 1, 10**7, integer=True)
    orders = np.atleast_1d(np.asarray(orders if orders is not None else (), dtype=float))
    if orders.size and not np.all(np.isfinite(orders) & (orders > 0)):
        raise TrackOptionError(f"option orders = {list(orders)}: moment orders must be positive")
    periods = period_pair(period)
    units_length = _unit("length", source.length_unit, length_unit, source.name)
    units_time = _unit("time", source.time_unit, time_unit, source.name)

    first, last, counts, ids, smallest = _survey(source, chunk)
    if interval is None:
        if not math.isfinite(smallest):
            raise TrackFileError(f"track file {source.name}: every track has one sample; "
                                 "displacements need at least two")
        interval = smallest
    interval = _option("interval", interval, 0, math.inf, low_open=True)
    t0 = float(first.min())
    if time_origin == "clock":
        origin_time = t0 if clock_origin is None else _option("clock_origin", clock_origin)
    else:
        origin_time = t0
    origin_frame = int(np.rint((origin_time - t0) / interval))
    # frames of each track's first and last sample on the common grid (checked in pass 2)
    f_first = np.rint((first - t0) / interval).astype(np.int64)
    f_last = np.rint((last - t0) / interval).astype(np.int64)
    if time_origin == "clock":
        used = (counts > 1) & (f_first <= origin_frame) & (f_last > origin_frame)
        spans = np.where(used, f_last - origin_frame, 0)
    else:
        used = counts > 1
        spans = np.where(used, f_last - f_first, 0)
    n_candidates = int(used.sum())
    if n_candidates < 2:
        where = (f" present at the clock origin t = {origin_time:g}"
                 if time_origin == "clock" else " with two samples or more")
        raise TrackFileError(f"track file {source.name}: {n_candidates} track(s){where}; at "
                             "least 2 are needed")
    groups = min(batches, n_candidates)
    longest = int(spans.max())
    sorted_spans = np.sort(spans[used])[::-1]
    if max_lag is None:
        need = max(2 * groups, math.ceil(0.1 * n_candidates))
        need = min(need, n_candidates)
        lag_frames_max = int(sorted_spans[need - 1])
    else:
        max_lag = _option("max_lag", max_lag, 0, math.inf, low_open=True)
        lag_frames_max = int(np.floor(max_lag / interval + 1e-9))
        reach = int((spans >= lag_frames_max).sum())
        if reach < 2:
            best = int(np.argmax(spans))
            raise TrackFileError(
                f"track file {source.name}: tracks too short for the requested lags: max_lag "
                f"= {max_lag:g} is {lag_frames_max} sampling intervals, reached by {reach} "
                f"track(s); the longest (track {ids[best]}) spans {spans[best]} intervals "
                f"= {spans[best] * interval:g}")
    if lag_frames_max < 1:
        raise TrackFileError(f"track file {source.name}: tracks too short: no lag of one "
                             "sampling interval is reached by enough tracks")
    lag_frames = _log_frames(lag_frames_max, lags)

    # aging: clock frames since the origin, lags after them
    clock_span = int(f_last.max() - origin_frame)
    if aging_times is None:
        third = clock_span // 3
        aging_frames = np.unique(np.concatenate(
            [[0], np.rint(third * np.array([1 / 9, 1 / 3, 1.0]))])).astype(np.int64)
    else:
        values = np.atleast_1d(np.asarray(aging_times, dtype=float))
        for value in values:
            if not math.isfinite(value) or value < 0 or value >= clock_span * interval:
                raise TrackOptionError(f"option aging_times: {value:g} is outside the "
                                       f"record [0, {clock_span * interval:g}) after the "
                                       "clock origin")
        aging_frames = np.unique(np.rint(values / interval).astype(np.int64))
    aged_lag_frames = _log_frames(max(1, clock_span - int(aging_frames.min())), aging_lags)

    # time-averaged MSD lags (in samples), as the run's analysis chooses them
    tamsd_frames = tamsd_lag_indices(longest + 1, tamsd_lags, tamsd_max_fraction)
    # displacement PDF times: the sample lags nearest T/100, T/10, T (T the longest span)
    grid = np.arange(longest + 1) * interval
    if pdf_times is None:
        targets = np.array([grid[-1] / 100, grid[-1] / 10, grid[-1]])
    else:
        targets = np.atleast_1d(np.asarray(pdf_times, dtype=float))
        for value in targets:
            if not np.isfinite(value) or value <= 0 or value > grid[-1] * (1 + 1e-9):
                raise TrackOptionError(f"option pdf_times: {value:g} is outside the tracked "
                                       f"lags (0, {grid[-1]:g}]")
    pdf_frames = np.unique([int(np.argmin(np.abs(grid - v))) for v in targets])
    pdf_frames = pdf_frames[pdf_frames > 0]
    velocity_lags = min(velocity_lags, longest)

    moments = _Accumulator(groups, (lag_frames.size,))
    aged = _Accumulator(groups, (aging_frames.size, aged_lag_frames.size))
    velocity = _Accumulator(groups, (max(velocity_lags, 1),))
    tamsd = np.full((n_candidates, tamsd_frames.size), np.nan)
    pdf_dx = np.full((n_candidates, pdf_frames.size, 2), np.nan)
    track_ids = []
    velocity_source = "given (file u, v)" if source.has_velocity else \
        "central differences of the positions"
    n_used = 0
    all_complete = True
    for tracks in source.chunks(chunk):
        prepared = []
        for track in tracks:
            check_track(track, source.name)
            if track.t.size < 2:
                continue
            f = frames(track, t0, interval, grid_tolerance, source.name)
            x, y = track.x, track.y
            if periods is not None:
                x, y = unwrap(x, periods[0]), unwrap(y, periods[1])
            if time_origin == "clock":
                at = np.flatnonzero(f == origin_frame)
                if at.size == 0 or f[-1] <= origin_frame:
                    continue
                keep = slice(int(at[0]), None)
                f, x, y = f[keep], x[keep], y[keep]
                u = None if track.u is None else track.u[keep]
                v = None if track.v is None else track.v[keep]
            else:
                u, v = track.u, track.v
            prepared.append((track.ident, f, x, y, u, v))
        start = 0
        while start < len(prepared):
            width = 1
            stop = start
            while stop < len(prepared):
                span = int(prepared[stop][1][-1] - prepared[stop][1][0]) + 1
                if (stop - start + 1) * max(width, span) > _DENSE_LIMIT and stop > start:
                    break
                width = max(width, span)
                stop += 1
            block = prepared[start:stop]
            complete = _block(block, width, n_used, groups, interval, origin_frame,
                              lag_frames, orders, moments, aging_frames, aged_lag_frames, aged,
                              tamsd_frames, tamsd, pdf_frames, pdf_dx, velocity_lags,
                              velocity)
            all_complete &= complete
            track_ids += [b[0] for b in block]
            n_used += len(block)
            start = stop
    if n_used < 2:
        raise TrackFileError(f"track file {source.name}: fewer than 2 tracks have a "
                             "displacement to measure")
    tamsd = tamsd[:n_used]
    pdf_dx = pdf_dx[:n_used]
    ds = _assemble(locals())
    return ds


def _unit(what, found, given, name):
    if found is not None and given is not None and str(found) != str(given):
        raise TrackFileError(f"track file {name}: mixed units: the file gives {what} in "
                             f"{found!r}, the option {what}_unit {given!r}")
    return str(found if found is not None else given if given is not None else "1")


def _dense(block, width, key):
    out = np.full((len(block), width), np.nan)
    for row, item in enumerate(block):
        values = item[key]
        if values is None:
            return None
        out[row, item[1] - item[1][0]] = values
    return out


def _block(block, width, offset, groups, interval, origin_frame, lag_frames, orders, moments,
           aging_frames, aged_lag_frames, aged, tamsd_frames, tamsd, pdf_frames, pdf_dx,
           velocity_lags, velocity):
    """Add one block of prepared tracks (id, frames, x, y, u, v) to the accumulators; True
    when every track of the block is complete and as long as the block."""
    n = len(block)
    group = np.zeros((groups, n))
    group[(offset + np.arange(n)) % groups, np.arange(n)] = 1.0  # one-hot: group × track
    x, y = _dense(block, width, 2), _dense(block, width, 3)
    complete = bool(np.all(np.isfinite(x)))
    # ensemble moments from each track's reference sample (its first kept sample)
    inside = lag_frames < width
    cols = lag_frames[inside]
    dx = np.full((n, lag_frames.size), np.nan)
    dy = np.full((n, lag_frames.size), np.nan)
    dx[:, inside] = x[:, cols] - x[:, :1]
    dy[:, inside] = y[:, cols] - y[:, :1]
    present = np.isfinite(dx)
    dx0, dy0 = np.where(present, dx, 0.0), np.where(present, dy, 0.0)
    r2 = dx0 * dx0 + dy0 * dy0
    moments.add("count", group, present.astype(float))
    for key, values in (("dx", dx0), ("dy", dy0), ("dx2", dx0 * dx0), ("dy2", dy0 * dy0),
                        ("dxdy", dx0 * dy0), ("dx3", dx0 ** 3), ("dy3", dy0 ** 3),
                        ("dx4", dx0 ** 4), ("dy4", dy0 ** 4), ("r4", r2 * r2)):
        moments.add(key, group, values)
    for i, q in enumerate(orders):
        moments.add(f"abs{i}", group, np.sqrt(r2) ** q)
        moments.add(f"absx{i}", group, np.abs(dx0) ** q)
        moments.add(f"absy{i}", group, np.abs(dy0) ** q)
    # aged displacements on the clock: sample index of t_a is (a + origin) − first frame
    firsts = np.array([item[1][0] for item in block])
    for ia, a in enumerate(aging_frames):
        idx0 = a + origin_frame - firsts
        idx1 = idx0[:, None] + aged_lag_frames[None, :]
        valid = (idx0[:, None] >= 0) & (idx1 < width)
        rows = np.arange(n)[:, None]
        safe0 = np.clip(idx0, 0, width - 1)[:, None]
        safe1 = np.clip(idx1, 0, width - 1)
        ax = np.where(valid, x[rows, safe1] - x[rows, safe0], np.nan)
        ay = np.where(valid, y[rows, safe1] - y[rows, safe0], np.nan)
        ok = np.isfinite(ax) & np.isfinite(ay)
        ax0, ay0 = np.where(ok, ax, 0.0), np.where(ok, ay, 0.0)
        r = ax0 * ax0 + ay0 * ay0
        for key, values in (("count", ok.astype(float)), ("r2", r), ("x2", ax0 * ax0),
                            ("y2", ay0 * ay0), ("r4", r * r)):
            aged.add(key, group, values, where=(ia,))
    # time-averaged MSD of every track; exactly the run's estimator for complete tracks
    rows = slice(offset, offset + n)
    usable = tamsd_frames < width
    if complete and usable.all():
        tamsd[rows] = time_averaged_msd(x, y, tamsd_frames)
    else:
        for column, j in enumerate(tamsd_frames):
            if j >= width:
                continue
            d = (x[:, j:] - x[:, :-j]) ** 2 + (y[:, j:] - y[:, :-j]) ** 2
            count = np.isfinite(d).sum(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                tamsd[rows, column] = np.where(count > 0, np.nansum(d, axis=1) / count, np.nan)
    # displacements at the PDF lags
    for column, j in enumerate(pdf_frames):
        if j < width:
            pdf_dx[rows, column, 0] = x[:, j] - x[:, 0]
            pdf_dx[rows, column, 1] = y[:, j] - y[:, 0]
    # velocity autocorrelation <v(t)·v(t+m)> averaged over time origins
    if velocity_lags > 0:
        u, v = _dense(block, width, 4), _dense(block, width, 5)
        if u is None:
            u = np.full((n, width), np.nan)
            v = np.full((n, width), np.nan)
            if width >= 3:
                u[:, 1:-1] = (x[:, 2:] - x[:, :-2]) / (2 * interval)
                v[:, 1:-1] = (y[:, 2:] - y[:, :-2]) / (2 * interval)
        product = np.zeros((n, velocity_lags))
        count = np.zeros((n, velocity_lags))
        for m in range(min(velocity_lags, width)):
            c = u[:, :width - m] * u[:, m:] + v[:, :width - m] * v[:, m:]
            good = np.isfinite(c)
            product[:, m] = np.where(good, c, 0.0).sum(axis=1)
            count[:, m] = good.sum(axis=1)
        velocity.add("sum", group, product)
        velocity.add("count", group, count)
    return complete


def _grouped(sums, count):
    """Pooled mean Σ/N and the per-group means."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return sums.sum(axis=0) / count.sum(axis=0), sums / count


def _ratio_jackknife(sums, count):
    """Pooled Σ/N and its delete-one-group jackknife standard error (groups on axis 0)."""
    total, n = sums.sum(axis=0), count.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = total / n
        reps = (total[None] - sums) / (n[None] - count)
    b = sums.shape[0]
    se = np.sqrt((b - 1) / b * ((reps - reps.mean(axis=0)) ** 2).sum(axis=0))
    return value, se, reps


def _var(dims, data, long_name, units=None, **attrs):
    out = {"long_name": long_name}
    if units is not None:
        out["units"] = units
    out.update({k: v for k, v in attrs.items() if v is not None})
    return xr.Variable(dims, data, attrs=out)


def _assemble(s) -> xr.Dataset:
    from ..results.io import units_for

    units = units_for(s["units_length"], s["units_time"])
    L, L2, T = units("L"), units("L2"), units("T")
    interval = s["interval"]
    m = s["moments"].sums
    count = m["count"]
    keep = np.all(count > 0, axis=0)  # every group has a track at this lag
    if keep.sum() < 3:
        raise TrackFileError(f"track file {s['source'].name}: fewer than 3 lags are reached by "
                             "tracks of every error group; give fewer --batches or longer "
                             "tracks")
    count = count[:, keep]
    sums = {k: v[:, keep] for k, v in m.items() if k != "count"}
    n_t = count.sum(axis=0)
    mean = {k: v.sum(axis=0) / n_t for k, v in sums.items()}
    with np.errstate(invalid="ignore", divide="ignore"):
        batch = {k: v / count for k, v in sums.items()}
    mean_dx, mean_dy = mean["dx"], mean["dy"]
    msd_x, msd_y = mean["dx2"], mean["dy2"]
    var_x, var_y = msd_x - mean_dx ** 2, msd_y - mean_dy ** 2
    denominator = np.maximum(n_t - 1.0, 1.0)

    def standard_error(second, fourth):
        return np.sqrt(np.maximum(fourth - second ** 2, 0.0) / denominator)

    central4_x = (mean["dx4"] - 4 * mean_dx * mean["dx3"] + 6 * mean_dx ** 2 * msd_x
                  - 3 * mean_dx ** 4)
    central4_y = (mean["dy4"] - 4 * mean_dy * mean["dy3"] + 6 * mean_dy ** 2 * msd_y
                  - 3 * mean_dy ** 4)
    with np.errstate(invalid="ignore", divide="ignore"):
        kurt_x = np.where(var_x > 0, central4_x / var_x ** 2, np.nan)
        kurt_y = np.where(var_y > 0, central4_y / var_y ** 2, np.nan)
    group_tracks = np.bincount(np.arange(s["n_used"]) % s["groups"], minlength=s["groups"])
    t = ("time",)
    bt = ("batch", "time")
    data = {
        "msd": _var(t, msd_x + msd_y, "mean-squared displacement <|X(t)-X(0)|^2>", L2),
        "msd_x": _var(t, msd_x, "mean-squared displacement along x <dx^2>", L2),
        "msd_y": _var(t, msd_y, "mean-squared displacement along y <dy^2>", L2),
        "msd_xy": _var(t, mean["dxdy"], "mixed second moment <dx dy>", L2),
        "mean_dx": _var(t, mean_dx, "mean displacement along x", L),
        "mean_dy": _var(t, mean_dy, "mean displacement along y", L),
        "var_x": _var(t, var_x, "variance of the x displacement <dx^2> - <dx>^2", L2),
        "var_y": _var(t, var_y, "variance of the y displacement <dy^2> - <dy>^2", L2),
        "msd_se": _var(t, standard_error(msd_x + msd_y, mean["r4"]),
                       "standard error of msd over tracks", L2),
        "msd_x_se": _var(t, standard_error(msd_x, mean["dx4"]),
                         "standard error of msd_x over tracks", L2),
        "msd_y_se": _var(t, standard_error(msd_y, mean["dy4"]),
                         "standard error of msd_y over tracks", L2),
        "kurtosis_x": _var(t, kurt_x, "kurtosis of the x displacement (3 for a Gaussian)", "1"),
        "kurtosis_y": _var(t, kurt_y, "kurtosis of the y displacement (3 for a Gaussian)", "1"),
        "track_count": _var(t, n_t.astype(np.int64), "number of tracks with a displacement "
                            "at this time", "1"),
        "n_particles": _var((), int(s["n_used"]), "number of tracks analysed", "1"),
        "batch_count": _var(("batch",), group_tracks, "tracks per error group (whole tracks, "
                            "dealt round-robin)", "1"),
        "batch_mean_dx": _var(bt, batch["dx"], "group mean of dx", L),
        "batch_mean_dy": _var(bt, batch["dy"], "group mean of dy", L),
        "batch_msd_x": _var(bt, batch["dx2"], "group mean of dx^2", L2),
        "batch_msd_y": _var(bt, batch["dy2"], "group mean of dy^2", L2),
        "batch_msd_xy": _var(bt, batch["dxdy"], "group mean of dx dy", L2),
        "start_kind": _var((), "measured", "kind of start region"),
        "start_area_fraction": _var((), np.nan, "area of the start region as a fraction of a "
                                    "period cell (unknown for measured tracks)", "1"),
        "track_id": _var(("particle",), np.array(s["track_ids"], dtype=str),
                         "identifier of the track in the file"),
    }
    coords = {"time": _var(t, s["lag_frames"][keep] * interval,
                           "lag since each track's first sample" if s["time_origin"] ==
                           "track_start" else "clock time since the clock origin", T),
              "batch": _var(("batch",), np.arange(s["groups"]), "index of an error group of "
                            "whole tracks", "1"),
              "particle": _var(("particle",), np.arange(s["n_used"]), "index of a track",
                               "1")}
    orders = s["orders"]
    if orders.size:
        q = ("order", "time")
        stack = {k: np.stack([mean[f"{k}{i}"] for i in range(orders.size)])
                 for k in ("abs", "absx", "absy")}
        data["abs_moment"] = _var(q, stack["abs"], "absolute moment <|X(t)-X(0)|^q>",
                                  units("Lq"))
        data["abs_moment_x"] = _var(q, stack["absx"], "absolute moment <|dx|^q>", units("Lq"))
        data["abs_moment_y"] = _var(q, stack["absy"], "absolute moment <|dy|^q>", units("Lq"))
        data["batch_abs_moment"] = _var(
            ("batch", "order", "time"),
            np.stack([batch[f"abs{i}"] for i in range(orders.size)], axis=1),
            "group mean of |X(t)-X(0)|^q", units("Lq"))
        coords["order"] = _var(("order",), orders, "order q of the absolute moment", "1")
    a = s["aged"].sums
    notes = []
    if not (a and np.any(np.all(a["count"] > 0, axis=0))):
        notes.append("aged MSD not computed: at no aging time (clock time since the clock "
                     "origin) do tracks of every error group reach a lag; give aging_times "
                     "where tracks are present, or fewer batches")
    else:
        dims = ("aging_time", "lag")
        n_a = a["count"].sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            # as on the time axis: only points every error group reaches
            good = (n_a >= 2) & np.all(a["count"] > 0, axis=0)
            aged = np.where(good, a["r2"].sum(axis=0) / n_a, np.nan)
            aged_x = np.where(good, a["x2"].sum(axis=0) / n_a, np.nan)
            aged_y = np.where(good, a["y2"].sum(axis=0) / n_a, np.nan)
            fourth = a["r4"].sum(axis=0) / n_a
            aged_se = np.where(good, np.sqrt(np.maximum(fourth - aged ** 2, 0)
                                             / np.maximum(n_a - 1, 1)), np.nan)
            batch_aged = np.where(good[None] & (a["count"] > 0), a["r2"] / a["count"], np.nan)
        data["aged_msd"] = _var(dims, aged, "aged mean-squared displacement "
                                "<|X(t_a+lag)-X(t_a)|^2> over the tracks present at both "
                                "clock times", L2)
        data["aged_msd_x"] = _var(dims, aged_x, "aged mean-squared displacement along x", L2)
        data["aged_msd_y"] = _var(dims, aged_y, "aged mean-squared displacement along y", L2)
        data["aged_msd_se"] = _var(dims, aged_se, "standard error of aged_msd over tracks", L2)
        data["batch_aged_msd"] = _var(("batch", *dims), batch_aged, "group mean of "
                                      "|X(t_a+lag)-X(t_a)|^2", L2)
        data["aged_track_count"] = _var(dims, n_a.astype(np.int64), "number of tracks present "
                                        "at t_a and t_a + lag", "1")
        coords["aging_time"] = _var(("aging_time",), s["aging_frames"] * interval,
                                    "aging time t_a: clock time since the clock origin", T)
        coords["lag"] = _var(("lag",), s["aged_lag_frames"] * interval,
                             "lag after the aging time", T)
    # time-averaged MSD and ergodicity breaking (the run's estimators on the tracks)
    tamsd = s["tamsd"]
    finite = np.isfinite(tamsd)
    if np.all(finite):
        eb, eb_se = ergodicity_breaking(tamsd)
        tm = tamsd.mean(axis=0)
        tm_se = tamsd.std(axis=0, ddof=1) / np.sqrt(tamsd.shape[0])
    else:
        eb, eb_se = np.full(tamsd.shape[1], np.nan), np.full(tamsd.shape[1], np.nan)
        tm, tm_se = eb.copy(), eb.copy()
        for j in range(tamsd.shape[1]):
            column = tamsd[finite[:, j], j]
            if column.size >= 2:
                eb[j], eb_se[j] = (float(v[0]) for v in ergodicity_breaking(column[:, None]))
                tm[j] = column.mean()
                tm_se[j] = column.std(ddof=1) / math.sqrt(column.size)
    lag_dims = ("tamsd_lag",)
    data["tamsd"] = _var(("particle", "tamsd_lag"), tamsd, "time-averaged MSD of a track "
                         "(mean over the windows with both ends sampled)", L2)
    data["tamsd_mean"] = _var(lag_dims, tm, "ensemble mean of the time-averaged MSD", L2)
    data["tamsd_mean_se"] = _var(lag_dims, tm_se, "standard error of tamsd_mean over tracks",
                                 L2)
    data["ergodicity_breaking"] = _var(lag_dims, eb, "ergodicity-breaking parameter "
                                       "<(tamsd)^2>/<tamsd>^2 - 1", "1")
    data["ergodicity_breaking_se"] = _var(lag_dims, eb_se, "standard error of "
                                          "ergodicity_breaking (delete-one jackknife over "
                                          "tracks)", "1")
    data["tamsd_duration"] = _var((), float(s["longest"] * interval), "duration T of the "
                                  "longest track (tracks of unequal length: the time-averaged "
                                  "MSD of each is over its own duration)", T)
    coords["tamsd_lag"] = _var(lag_dims, s["tamsd_frames"] * interval,
                               "lag of the time-averaged MSD", T)
    # displacement PDFs at the PDF lags (the run's displacement_pdf estimator)
    if s["pdf_frames"].size:
        edges = np.linspace(-s["extent"], s["extent"], s["bins"] + 1)
        for axis, k in (("x", 0), ("y", 1)):
            pdf = np.zeros((s["pdf_frames"].size, s["bins"]))
            outside = np.zeros(s["pdf_frames"].size)
            for row in range(s["pdf_frames"].size):
                pdf[row], outside[row] = scaled_displacement_density(s["pdf_dx"][:, row, k],
                                                                     edges)
            data[f"displacement_pdf_{axis}"] = _var(
                ("pdf_time", "scaled_displacement"), pdf, f"probability density of the scaled "
                f"displacement (d{axis} - mean)/std of the tracks", "1")
            data[f"pdf_outside_fraction_{axis}"] = _var(
                ("pdf_time",), outside, f"fraction of tracks with |scaled d{axis}| > "
                f"{s['extent']:g}", "1")
        coords["pdf_time"] = _var(("pdf_time",), s["pdf_frames"] * interval,
                                  "time of a displacement PDF (lag since the track's start)", T)
        coords["scaled_displacement"] = _var(
            ("scaled_displacement",), 0.5 * (edges[:-1] + edges[1:]),
            "scaled displacement (displacement - mean)/std, bin centre", "1")
    v = s["velocity"].sums
    if s["velocity_lags"] > 0 and v:
        value, se, reps = _ratio_jackknife(v["sum"], v["count"])
        with np.errstate(invalid="ignore", divide="ignore"):
            normalised = value / value[0]
            norm_reps = reps / reps[:, :1]
        b = reps.shape[0]
        norm_se = np.sqrt((b - 1) / b * ((norm_reps - norm_reps.mean(axis=0)) ** 2)
                          .sum(axis=0))
        vdims = ("velocity_lag",)
        how = ERROR_METHOD
        data["track_velocity_autocorrelation"] = _var(
            vdims, value, "velocity autocorrelation <u(t)u(t+lag) + v(t)v(t+lag)> over tracks "
            "and time origins", units("L2 T-2"), velocity_source=s["velocity_source"])
        data["track_velocity_autocorrelation_se"] = _var(
            vdims, se, "standard error of track_velocity_autocorrelation", units("L2 T-2"),
            estimator=how)
        data["track_velocity_autocorrelation_normalised"] = _var(
            vdims, normalised, "velocity autocorrelation over its value at lag 0", "1")
        data["track_velocity_autocorrelation_normalised_se"] = _var(
            vdims, norm_se, "standard error of track_velocity_autocorrelation_normalised", "1",
            estimator=how)
        coords["velocity_lag"] = _var(vdims, np.arange(s["velocity_lags"]) * interval,
                                      "lag of the velocity autocorrelation", T)
    ds = xr.Dataset(data, coords=coords)
    ds = ds.assign_coords(start=s["label"] or _stem(s["source"].path))
    ds["start"].attrs["long_name"] = "label of the start region (here: the track set)"
    ds.attrs.update(_attrs(s))
    if notes:
        ds.attrs["track_notes"] = " | ".join(notes)
    return ds


def _stem(path):
    from pathlib import Path

    return Path(str(path)).stem or "tracks"


def _attrs(s) -> dict:
    from .. import __version__

    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    source = s["source"]
    periods = s["periods"]
    return {
        "Conventions": "CF-1.8",
        "title": f"measured trajectories: {source.path}",
        "summary": "statistics of measured (or external) trajectories in the layout of an "
                   "eddyhop run",
        "history": f"{now} created by eddyhop {__version__} (measured) from {source.path}",
        "source": f"trajectories read from {source.path} ({source.layout})",
        "eddyhop_version": __version__,
        "eddyhop_kind": "measured",
        "track_file": str(source.path),
        "track_layout": source.layout,
        "tracks_in_file": int(s["counts"].size),
        "tracks_analysed": int(s["n_used"]),
        "tracks_skipped": int(s["counts"].size - s["n_used"]),
        "sampling_interval": float(s["interval"]),
        "time_origin": s["time_origin"],
        "clock_origin": float(s["origin_time"]),
        "velocity_source": s["velocity_source"],
        "period": "none" if periods is None else json.dumps(list(periods)),
        "error_method": ERROR_METHOD,
        "n_batches": int(s["groups"]),
        "comment": "Measured data: the flow, its diffusivity and Peclet number are unknown to "
                   "eddyhop; analyses needing them report NaN.",
    }
