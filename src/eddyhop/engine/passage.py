"""Passage times of noise-free tracers across one period cell of a steady flow (κ = 0).

A *section* is the line ``x = at`` (``axis = "x"``) or ``y = at`` (``axis = "y"``); tracers
enter it at the *entry coordinate* s (the other coordinate) and are followed with the
streamline-preserving integrator (``streamline.py``) until they reach the next image of the
section one spatial period away, ``x = at ± Lx``.  The passage time T(s) is that arrival time,
found inside the last step by a cubic Hermite interpolant of the path (positions and
velocities at both ends; interpolation error O(h⁴) for a step h) and bisection.  A tracer on a
closed streamline, or one that has not arrived by ``t_max``, has T = NaN (flag ``closed``).

The distribution over the section weights each entry by its share of the flux through the
section, |u_n(s)| Δs (the rate at which a steady stream of tracers crosses there), over
log-spaced bins of T.  The distance to the *separatrix* (the limiting streamline on which T
diverges) is |s − s_sep|; ``s_sep`` is given, or found as the nearest zero of ψ(s) − ψ_sep
between entries, with ψ_sep the family's separatrix level nearest to the entries' ψ.

Only measured times are reported here (and fitted by ``analysis.passage``); nothing builds a
long-time model from them.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from .._jit import jit
from ..errors import StudyError
from ..flows.compiled import CompiledCode, evaluate_psi, evaluate_velocity, velocity
from .kernel import TILE
from .streamline import WORK_ROWS, advance_tile_projected, scheme_parameters, start_tile

OPEN, CLOSED = 0, 1
_BISECTIONS = 60


@jit
def _hermite(q0, q1, d0, d1, theta):
    """Cubic Hermite interpolant on [0, 1] with end values q0, q1 and end slopes d0, d1."""
    t2 = theta * theta
    t3 = t2 * theta
    return ((2.0 * t3 - 3.0 * t2 + 1.0) * q0 + (t3 - 2.0 * t2 + theta) * d0
            + (-2.0 * t3 + 3.0 * t2) * q1 + (t3 - t2) * d1)


@jit
def _arrival(q0, q1, d0, d1, target):
    """θ ∈ [0, 1] where the Hermite interpolant crosses ``target`` (q0 and q1 bracket it)."""
    low = 0.0
    high = 1.0
    below = q0 < target
    for _ in range(_BISECTIONS):
        middle = 0.5 * (low + high)
        if (_hermite(q0, q1, d0, d1, middle) < target) == below:
            low = middle
        else:
            high = middle
    return 0.5 * (low + high)


@jit
def _passage_kernel(fcode, fp, nq, x0, y0, along_x, at, period, dt, max_steps, times):
    n = x0.size
    xs = np.empty(TILE)
    ys = np.empty(TILE)
    x_new = np.empty(TILE)
    y_new = np.empty(TILE)
    work = np.empty((WORK_ROWS, TILE))
    for lo in range(0, n, TILE):
        m = min(TILE, n - lo)
        for g in range(m):
            xs[g] = x0[lo + g]
            ys[g] = y0[lo + g]
            times[lo + g] = np.nan
        start_tile(fcode, fp, xs, ys, dt, m, work)
        left = m
        for step in range(max_steps):
            t = step * dt
            advance_tile_projected(fcode, fp, nq, xs, ys, t, dt, m, x_new, y_new, work)
            for g in range(m):
                if not math.isnan(times[lo + g]):
                    continue
                q0 = xs[g] if along_x else ys[g]
                q1 = x_new[g] if along_x else y_new[g]
                target = at + period if q1 >= at + period else (
                    at - period if q1 <= at - period else np.nan)
                if math.isnan(target):
                    continue
                u0, v0 = velocity(fcode, xs[g], ys[g], t, fp)
                u1, v1 = velocity(fcode, x_new[g], y_new[g], t + dt, fp)
                slope0 = (u0 if along_x else v0) * dt
                slope1 = (u1 if along_x else v1) * dt
                times[lo + g] = t + dt * _arrival(q0, q1, slope0, slope1, target)
                left -= 1
            for g in range(m):
                xs[g] = x_new[g]
                ys[g] = y_new[g]
            if left == 0:
                break


def _section_points(axis, at, entries):
    if axis == "x":
        return np.full(entries.size, at), entries
    return entries, np.full(entries.size, at)


def _separatrix_entry(model, values, axis, at, entries, psi_entries, level, period_across):
    """Entry coordinate where ψ = ``level`` on the section nearest to the entry whose ψ is
    closest to it: sign changes of ψ − level on a 1024-point grid over one period across (or
    the entries' span without one), refined by bisection; NaN when there is none."""
    nearest = entries[np.argmin(np.abs(psi_entries - level))]
    span = period_across if period_across else max(np.ptp(entries), 1e-300)
    grid = nearest + np.linspace(-0.5, 0.5, 1025) * span
    offset = evaluate_psi(model, values, *_section_points(axis, at, grid)) - level
    changes = np.flatnonzero(np.sign(offset[:-1]) * np.sign(offset[1:]) <= 0)
    if changes.size == 0:
        return math.nan
    i = changes[np.argmin(np.abs(grid[changes] - nearest))]
    low, high, f_low = grid[i], grid[i + 1], offset[i]
    for _ in range(80):
        mid = 0.5 * (low + high)
        f_mid = evaluate_psi(model, values, *_section_points(axis, at, np.array([mid])))[0] - level
        if f_mid == 0.0:
            return float(mid)
        if (f_mid > 0) == (f_low > 0):
            low, f_low = mid, f_mid
        else:
            high = mid
    return float(0.5 * (low + high))


def passage_times(study, entries, *, axis: str = "x", at: float = 0.0,
                  separatrix: float | None = None, t_max: float | None = None,
                  tolerance: float = 1e-10, bins: int = 40) -> xr.Dataset:
    """Passage times across one period cell from the section ``axis = at`` (see module doc).

    ``study``: a validated study whose flow is steady and whose noise has κ = 0 (its starts
    and run are not used).  ``entries``: entry coordinates on the section (length units).
    ``t_max`` defaults to 1000 advective times 1/(U k); ``tolerance`` is the integrator's
    (eddy sides per advective time).  Returns a Dataset on dimension ``entry`` with
    ``passage_time``, ``passage_status``, ``entry_psi``, ``entry_normal_velocity``,
    ``separatrix_distance`` and, on ``passage_time_bin``, the flux-weighted distribution
    ``passage_time_pdf``.  Raises ``StudyError`` naming the field for a noisy or
    time-dependent study, a direction without period, or a section the flow never carries a
    tracer across.
    """
    model, values = study.flow.model, study.flow.params
    if study.noise.kappa != 0.0:
        raise StudyError(f"noise.kappa = {study.noise.kappa:g}: passage times are defined for "
                         "noise-free runs only (kappa = 0)")
    if not model.steady:
        raise StudyError(f"flow.family = '{study.flow.family}' is time-dependent; passage "
                         "times need a steady flow")
    if axis not in ("x", "y"):
        raise StudyError(f"section.axis = {axis!r}; allowed: 'x' or 'y'")
    period = model.period(values)[0 if axis == "x" else 1]
    if period is None:
        raise StudyError(f"section.axis = '{axis}': flow.family = '{study.flow.family}' has "
                         f"no period along {axis}, so there is no next period cell")
    entries = np.asarray(entries, dtype=np.float64).ravel()
    if entries.size == 0 or not np.all(np.isfinite(entries)):
        raise StudyError("section.entries: give at least one finite entry coordinate")
    k = model.wavenumber(values)
    side = model.eddy_size(values)
    speed = max(model.velocity_scale(values), 0.0)
    x0, y0 = _section_points(axis, float(at), entries)
    u, v = evaluate_velocity(model, values, x0, y0)
    normal = u if axis == "x" else v
    if not np.any(np.abs(normal) > 1e-12 * max(speed, 1e-300)):
        raise StudyError(f"section {axis} = {at:g}: the flow never crosses it (the velocity "
                         f"normal to the section vanishes at every entry); choose another "
                         f"section.at")
    scale = speed * k if speed > 0 else 1.0
    t_max = 1000.0 / scale if t_max is None else float(t_max)
    if not t_max > 0:
        raise StudyError(f"t_max = {t_max:g}; allowed: a positive time")
    dt = 0.05 / scale  # output step: the arrival is interpolated inside it
    nq = scheme_parameters(np.zeros(3), tolerance, side, speed)
    times = np.empty(entries.size)
    _passage_kernel(CompiledCode(model.code), model.pack(values), nq, x0, y0, axis == "x",
                    float(at), float(period), dt, math.ceil(t_max / dt), times)
    if not np.any(np.isfinite(times)):
        raise StudyError(f"section {axis} = {at:g}: no tracer from the {entries.size} entries "
                         f"reaches the next period cell within t_max = {t_max:g} (closed "
                         "streamlines through every entry); choose entries on open streamlines")
    psi_entries = evaluate_psi(model, values, x0, y0)
    if separatrix is None:
        levels = model.separatrix_levels(values)
        if levels:
            level = min(levels, key=lambda s: np.min(np.abs(psi_entries - s)))
            separatrix = _separatrix_entry(model, values, axis, float(at), entries,
                                           psi_entries, level,
                                           model.period(values)[1 if axis == "x" else 0])
        else:
            separatrix = math.nan
    status = np.where(np.isfinite(times), OPEN, CLOSED).astype(np.int8)
    ds = xr.Dataset(coords={"entry": ("entry", entries, {
        "long_name": f"entry coordinate ({'y' if axis == 'x' else 'x'}) on the section",
        "units": "L"})})
    ds["passage_time"] = ("entry", times, {
        "long_name": "time to cross one period cell from the section", "units": "T",
        "estimator": "projected_rk45 path, arrival by cubic Hermite interpolation"})
    ds["passage_status"] = ("entry", status, {
        "long_name": "whether the tracer crossed the period cell",
        "flag_values": np.array([OPEN, CLOSED], dtype=np.int8),
        "flag_meanings": "crossed closed_or_not_arrived"})
    ds["entry_psi"] = ("entry", psi_entries, {"long_name": "stream function at the entry",
                                              "units": "L2 T-1"})
    ds["entry_normal_velocity"] = ("entry", normal, {
        "long_name": "velocity normal to the section at the entry", "units": "L T-1"})
    ds["separatrix_distance"] = ("entry", np.abs(entries - separatrix), {
        "long_name": "distance along the section to the limiting (separatrix) streamline",
        "units": "L"})
    crossed = np.isfinite(times)
    low, high = np.min(times[crossed]), np.max(times[crossed])
    edges = np.geomspace(low * 0.999, high * 1.001 if high > low else low * 1.01, bins + 1)
    widths = np.gradient(entries) if entries.size > 1 else np.ones(1)
    weights = np.abs(normal) * np.abs(widths)
    histogram, _ = np.histogram(times[crossed], bins=edges, weights=weights[crossed])
    total = np.sum(weights[crossed])
    pdf = histogram / (total * np.diff(edges)) if total > 0 else histogram * np.nan
    centres = np.sqrt(edges[:-1] * edges[1:])
    ds = ds.assign_coords(passage_time_bin=("passage_time_bin", centres, {
        "long_name": "passage time (geometric bin centre)", "units": "T"}))
    ds["passage_time_pdf"] = ("passage_time_bin", pdf, {
        "long_name": "flux-weighted density of passage times over the section",
        "units": "T-1", "weights": "|normal velocity| x entry spacing"})
    ds["passage_time_bin_edges"] = ("passage_time_edge", edges, {
        "long_name": "passage-time bin edges", "units": "T"})
    ds.attrs.update({"section_axis": axis, "section_at": float(at),
                     "section_period": float(period), "separatrix_entry": float(separatrix),
                     "passage_tolerance": float(tolerance), "passage_t_max": float(t_max),
                     "flow_family": study.flow.family,
                     "closed_fraction": float(np.mean(~crossed))})
    return ds
