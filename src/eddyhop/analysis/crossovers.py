"""Crossover times between successive regimes, with jackknife errors and in natural units.

Definition: the crossover between regimes i and i+1 (:mod:`eddyhop.analysis.regimes`) is
the time where the local exponent α(t) crosses the level α* = (a_i + a_{i+1})/2, the mean
of the two classes' representative exponents
(:func:`~eddyhop.analysis.regimes.representative_exponent`: 0 bounded, 0.5 subdiffusive,
1 diffusive, 1.5 superdiffusive, 2 ballistic, 2.4 super-ballistic with the default
tolerances; the regimes' fitted exponents when a class is undetermined).  The level
depends only on the labels, so an ensemble and the exact curve with the same regimes use the
same α*.  For MSD = A t^p + B t^q the exponent is α = (pA t^p + qB t^q)/(A t^p + B t^q), so
α = (p + q)/2 exactly where A t^p = B t^q: between reference exponents the crossing is the
intersection of the asymptotes (t* = 4D/A for A t² meeting 4Dt, ballistic ↔ diffusive at
α* = 1.5).

Location: a crossing of α* in the direction from the earlier regime's exponent to the later
one's is found by linear interpolation between the bracketing samples, searched between the
first sample of regime i and the last of regime i+1 — which includes any passage between
them that was not a regime — nearest to the middle of the gap between the two regimes if
there are several.  It is then refined to the fixed point c of "fit the line
α ≈ a₀ + a₁ (ln t − c) by tricube-weighted least squares over ±``window`` decades around c,
and move c to where the line reaches α*", which smooths the noise of α over the fit and
depends smoothly on the data.  If α never crosses α* there or the refinement leaves the
interval, the geometric mean of the last sample of i and the first of i+1 is used
(``crossover_method`` = "boundary"): the data do not locate the crossover, and its standard
error is NaN (undetermined) — a sampling-resolution error bar would understate it when α
hovers near α* (e.g. a regime whose early exponent sits close to the level).

Uncertainty: the delete-one-batch jackknife of the whole estimator.  On every replicate (the
pooled MSD of all batches but one) α(t) is recomputed and the same fixed point is iterated
from the full-ensemble crossing, for the same level α* over the same interval.  The regime
boundaries themselves are not used by the value, only to choose the level and the interval,
so their placement (which moves between ensembles in discrete jumps, and which the jackknife
cannot represent) does not enter.  If the refinement fails on a replicate the crossover is
not resolved by the data: its standard error is NaN and ``crossover_missing_replicates``
counts those replicates.  se(t) = t · se(ln t).  Calibration, measured on 200 independent
synthetic ensembles (tests/test_analysis_exponents.py): the spread of the estimates matches
the mean reported se to a few per cent.

Natural units: t·U·k (advective), t·κk² (cell diffusion) and t·κk²Pe^{1/2} (separatrix
boundary layer, Pe = U/(κk)).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import xarray as xr

from ._common import check_range, flow_scales, per_start, require, var
from ._stats import jackknife_se
from .exponents import DEFAULT_WINDOW, alpha_with_replicates
from .regimes import (
    DEFAULT_BOUNDED_TOLERANCE,
    DEFAULT_CONFIDENCE,
    DEFAULT_MIN_POINTS,
    DEFAULT_MIN_SPAN,
    DEFAULT_MISFIT_FLOOR,
    DEFAULT_TOLERANCE,
    check_options,
    regime_segments,
    representative_exponent,
)


def threshold(left, right, options) -> float:
    """The level α* between two regimes: the mean of their classes' representative
    exponents (:func:`eddyhop.analysis.regimes.representative_exponent`), or of their fitted
    exponents when either class is undetermined."""
    pair = [representative_exponent(s.code, options) for s in (left, right)]
    if not all(math.isfinite(v) for v in pair):
        pair = [left.alpha, right.alpha]
    return 0.5 * (pair[0] + pair[1])


def crossings(lt, alpha, level, upward, first, last):
    """ln t of every crossing of ``level`` by ``alpha`` (…, T) between samples first…last,
    in the given direction, by linear interpolation in ln t.  Returns (ln t, valid) with a
    trailing axis over the candidate sample pairs."""
    a0 = alpha[..., first:last]
    a1 = alpha[..., first + 1:last + 1]
    x0 = lt[first:last]
    x1 = lt[first + 1:last + 1]
    if upward:
        valid = (a0 < level) & (a1 >= level)
    else:
        valid = (a0 > level) & (a1 <= level)
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.where(valid, (level - a0) / (a1 - a0), 0.0)
    return x0 + fraction * (x1 - x0), valid


def nearest(values, valid, target):
    """The valid candidate nearest ``target`` along the last axis (NaN where none)."""
    distance = np.where(valid, np.abs(values - np.asarray(target)[..., None]), np.inf)
    index = np.argmin(distance, axis=-1)
    chosen = np.take_along_axis(values, index[..., None], axis=-1)[..., 0]
    return np.where(valid.any(axis=-1), chosen, np.nan)


def refine(lt, alpha, level, upward, centre, half, first, last, iterations=50):
    """Fixed point c = c + (α* − a₀(c))/a₁(c) of the tricube-weighted least-squares line
    α ≈ a₀ + a₁ (ln t − c) over the samples first…last within ``half`` (in ln t) of c,
    iterated from ``centre``: the ln t where the locally fitted α(t) reaches ``level``.
    The weights, hence the fixed point, depend smoothly on the data.  ``alpha`` may be
    batched (…, T); NaN where the iteration leaves the interval, finds fewer than 3 samples
    or a line sloping against the direction of the crossover (``upward``: α increasing), or
    does not settle."""
    x_all = lt[first:last + 1]
    y_all = alpha[..., first:last + 1]
    finite_t = np.isfinite(x_all)
    if finite_t.sum() < 3:
        return np.full(alpha.shape[:-1], np.nan)
    low, high = x_all[finite_t][0], x_all[finite_t][-1]
    usable = finite_t & np.isfinite(y_all)
    x_all = np.where(finite_t, x_all, 0.0)
    y_all = np.where(usable, y_all, 0.0)
    c = np.broadcast_to(np.asarray(centre, dtype=np.float64), alpha.shape[:-1]).copy()
    ok = np.isfinite(c)
    for _ in range(iterations):
        u = x_all - c[..., None]
        w = np.where(np.abs(u) < half, (1.0 - (np.abs(u) / half) ** 3) ** 3, 0.0)
        w = np.where(usable, w, 0.0)
        y = y_all
        s0 = w.sum(axis=-1)
        with np.errstate(divide="ignore", invalid="ignore"):
            um = (w * u).sum(axis=-1) / s0
            ym = (w * y).sum(axis=-1) / s0
            du = u - um[..., None]
            slope = (w * du * (y - ym[..., None])).sum(axis=-1) / (w * du * du).sum(axis=-1)
            step = um + (level - ym) / slope
        ok &= ((w > 0).sum(axis=-1) >= 3) & np.isfinite(step) & (
            slope > 0 if upward else slope < 0)
        step = np.where(ok, step, 0.0)
        c = c + step
        ok &= (c >= low) & (c <= high)
        if np.all(np.abs(step[ok]) < 1e-12):
            break
    else:
        ok &= np.abs(step) < 1e-8
    return np.where(ok, c, np.nan)


def _crossover(lt, alpha, replicates, left, right, options, half):
    """(ln t_c, method, jackknife se of ln t_c, missing replicates, α*) of one crossover."""
    level = threshold(left, right, options)
    upward = right.alpha > left.alpha
    boundary = 0.5 * (lt[left.last] + lt[right.first])
    values, valid = crossings(lt, alpha, level, upward, left.first, right.last)
    first_pass = float(nearest(values, valid, boundary))
    # a "boundary" crossover is not located by the data (α does not settle on a crossing of
    # α* there): its value is the regime boundary and its standard error undetermined
    resolution = np.nan
    if not np.isfinite(first_pass):
        return boundary, "boundary", resolution, 0, level
    value = float(refine(lt, alpha, level, upward, first_pass, half, left.first, right.last))
    if not np.isfinite(value):
        return boundary, "boundary", resolution, 0, level
    if replicates is None:
        return value, "threshold", np.nan, 0, level
    reps = refine(lt, replicates, level, upward, value, half, left.first, right.last)
    missing = int(np.isnan(reps).sum())
    spread = float(jackknife_se(reps)) if missing == 0 else np.nan
    return value, "threshold", spread, missing, level


def crossover_times(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW,
                    ballistic_tolerance: float = DEFAULT_TOLERANCE,
                    diffusive_tolerance: float = DEFAULT_TOLERANCE,
                    bounded_tolerance: float = DEFAULT_BOUNDED_TOLERANCE,
                    min_span: float = DEFAULT_MIN_SPAN, min_points: int = DEFAULT_MIN_POINTS,
                    misfit_floor: float = DEFAULT_MISFIT_FLOOR,
                    confidence: float = DEFAULT_CONFIDENCE) -> xr.Dataset:
    """Crossover times on a ``crossover`` dimension (one fewer than the regimes); the regime
    options are those of :func:`eddyhop.analysis.regimes.regimes`, ``window`` (decades)
    that of the local exponent α(t) whose crossing locates each crossover."""
    options = check_options(ballistic_tolerance, diffusive_tolerance, bounded_tolerance,
                            min_span, min_points, misfit_floor, confidence)
    window = check_range("window", window, 0.05, 3.0)
    require(ds, ["time", "msd"], "crossover_times")
    units = str(ds["time"].attrs.get("units", "1"))
    scales = flow_scales(ds)

    def one(part):
        t = part["time"].values
        segments, _, _ = regime_segments(part, options)
        alpha, replicates, _ = alpha_with_replicates(part, "total", window)
        with np.errstate(divide="ignore", invalid="ignore"):
            lt = np.log(t)
        half = window * math.log(10.0)
        values, errors, methods, froms, tos, missing, levels = [], [], [], [], [], [], []
        for left, right in itertools.pairwise(segments):
            value, method, spread, lost, level = _crossover(lt, alpha, replicates, left,
                                                            right, options, half)
            values.append(math.exp(value))
            errors.append(math.exp(value) * spread)
            methods.append(method)
            froms.append(left.label)
            tos.append(right.label)
            missing.append(lost)
            levels.append(level)
        values = np.array(values, dtype=np.float64)
        errors = np.array(errors, dtype=np.float64)
        dims = ("crossover",)
        out = {
            "crossover_time": var(dims, values, "crossover time between successive regimes",
                                  units, method="time where the local exponent alpha crosses "
                                  "alpha* between the two regimes (interpolated in ln t, "
                                  "refined by a local line fit)"),
            "crossover_time_se": var(dims, errors, "standard error of crossover_time "
                                     "(jackknife over particle batches with alpha and the "
                                     "crossing recomputed on every replicate; NaN without "
                                     "batches, when a replicate has no crossing, or for a "
                                     "boundary crossover)", units),
            "crossover_alpha_level": var(dims, np.array(levels, dtype=np.float64),
                                         "local exponent alpha* whose crossing defines the "
                                         "crossover (mean of the two regimes' "
                                         "representative exponents)", "1"),
            "crossover_missing_replicates": var(dims, np.array(missing, dtype=np.int64),
                                                "delete-one-batch replicates in which alpha "
                                                "does not cross alpha* between the two "
                                                "regimes (crossover not resolved if > 0)",
                                                "1"),
            "crossover_from": var(dims, np.array(froms, dtype="<U16"),
                                  "regime before the crossover"),
            "crossover_to": var(dims, np.array(tos, dtype="<U16"), "regime after the crossover"),
            "crossover_method": var(dims, np.array(methods, dtype="<U12"),
                                    "threshold (alpha crosses alpha* between the regimes), "
                                    "or boundary (geometric mean of the adjacent samples) when "
                                    "it does not"),
        }
        for key, name, text in (
                ("advective", "crossover_time_advective", "in advective units 1/(U k)"),
                ("diffusive", "crossover_time_diffusive", "in cell-diffusion units "
                 "1/(kappa k^2)"),
                ("boundary_layer", "crossover_time_boundary_layer", "in separatrix "
                 "boundary-layer units 1/(kappa k^2 Pe^(1/2)), Pe = U/(kappa k)")):
            out[name] = var(dims, values / scales[key], f"crossover time {text}", "1")
            out[f"{name}_se"] = var(dims, errors / scales[key],
                                    f"standard error of crossover time {text}", "1")
        return xr.Dataset(out, coords={"crossover": np.arange(values.size)})

    out = per_start(ds, one)
    out = out.assign_coords(crossover=np.arange(out.sizes.get("crossover", 0)))
    out["crossover"].attrs.update({"long_name": "index of a crossover in time order",
                                   "units": "1"})
    for key, text in (("advective", "advective time 1/(U k)"),
                      ("diffusive", "cell diffusion time 1/(kappa k^2)"),
                      ("boundary_layer", "separatrix boundary-layer time "
                       "1/(kappa k^2 Pe^(1/2)), Pe = U/(kappa k)")):
        out[f"time_scale_{key}"] = var((), scales[key], text, units)
    return out
