"""Crossover times between successive regimes, with jackknife errors and in natural units.

Definition: in each regime fit a power law, ln MSD = c + a ln t (least squares over the
regime's samples); the crossover between regimes i and i+1 is where the two power laws meet,
ln t_c = (c₍ᵢ₊₁₎ − cᵢ)/(aᵢ − a₍ᵢ₊₁₎) (the intersection of asymptotes, common practice, e.g.
t_c = 4D/A for a ballistic A t² meeting a diffusive 4Dt).  If the fits are parallel or meet
outside the two regimes, the geometric mean of the last sample of i and the first of i+1 is
used instead (``crossover_method`` = "boundary", whose error is at least half the log spacing
of the two samples).  Errors: jackknife over particle batches with the segmentation held
fixed.  Natural units: t·U·k (advective), t·κk² (cell diffusion) and t·κk²Pe^{1/2}
(separatrix boundary layer, Pe = U/(κk)).
"""

from __future__ import annotations

import itertools

import numpy as np
import xarray as xr

from ._common import flow_scales, per_start, require, var
from ._stats import batch_replicates, jackknife_se
from .exponents import DEFAULT_WINDOW
from .regimes import DEFAULT_MIN_POINTS, DEFAULT_TOLERANCE, LABELS, check_options, regime_table


def _fit(lt, ly, segment):
    """Least-squares power law over a regime's samples with finite ln t and ln MSD."""
    x = lt[segment.first:segment.last + 1]
    y = ly[..., segment.first:segment.last + 1]
    w = (np.isfinite(x) & np.isfinite(y)).astype(np.float64)
    if np.any(w.sum(axis=-1) < 2):
        return None
    x = np.where(np.isfinite(x), x, 0.0)
    y = np.where(w > 0, y, 0.0)
    n = w.sum(axis=-1)
    xm = (w * x).sum(axis=-1) / n
    ym = (w * y).sum(axis=-1) / n
    dx = x - xm[..., None]
    slope = (w * dx * (y - ym[..., None])).sum(axis=-1) / (w * dx * dx).sum(axis=-1)
    return slope, ym - slope * xm


def _crossing(lt, ly, left, right):
    """ln t_c and method for log-MSD rows ``ly`` (…, T)."""
    boundary = 0.5 * (lt[left.last] + lt[right.first])
    fit_l = _fit(lt, ly, left)
    fit_r = _fit(lt, ly, right)
    shape = ly.shape[:-1]
    if fit_l is None or fit_r is None:
        return np.full(shape, boundary), np.zeros(shape, dtype=bool)
    (a1, c1), (a2, c2) = fit_l, fit_r
    with np.errstate(divide="ignore", invalid="ignore"):
        value = (c2 - c1) / (a1 - a2)
    ok = np.isfinite(value) & (value >= lt[left.first]) & (value <= lt[right.last])
    return np.where(ok, value, boundary), ok


def crossover_times(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW,
                    ballistic_tolerance: float = DEFAULT_TOLERANCE,
                    diffusive_tolerance: float = DEFAULT_TOLERANCE,
                    min_points: int = DEFAULT_MIN_POINTS) -> xr.Dataset:
    """Crossover times on a ``crossover`` dimension (one fewer than the regimes)."""
    b, d, m = check_options(ballistic_tolerance, diffusive_tolerance, min_points)
    require(ds, ["time", "msd"], "crossover_times")
    units = str(ds["time"].attrs.get("units", "1"))
    scales = flow_scales(ds)

    def one(part):
        t = part["time"].values
        segments, _, _ = regime_table(part, window, b, d, m)
        with np.errstate(divide="ignore", invalid="ignore"):
            lt = np.log(t)
            ly = np.log(np.where(part["msd"].values > 0, part["msd"].values, np.nan))
            reps = batch_replicates(part, "msd")
            lreps = None if reps is None else np.log(np.where(reps > 0, reps, np.nan))
        values, errors, methods, froms, tos = [], [], [], [], []
        for left, right in itertools.pairwise(segments):
            value, ok = _crossing(lt, ly, left, right)
            values.append(float(np.exp(value)))
            methods.append("intersection" if bool(ok) else "boundary")
            froms.append(LABELS[left.code])
            tos.append(LABELS[right.code])
            # a "boundary" crossover is only known to the sampling resolution
            resolution = 0.5 * (lt[right.first] - lt[left.last])
            if lreps is None:
                errors.append(np.nan if bool(ok) else float(np.exp(value) * resolution))
            else:
                rep_values, _ = _crossing(lt, lreps, left, right)
                spread = float(jackknife_se(rep_values))
                if not bool(ok):
                    spread = max(spread, resolution)
                errors.append(float(np.exp(value) * spread))
        values = np.array(values, dtype=np.float64)
        errors = np.array(errors, dtype=np.float64)
        dims = ("crossover",)
        out = {
            "crossover_time": var(dims, values, "crossover time between successive regimes",
                                  units, method="intersection of the regimes' power-law fits"),
            "crossover_time_se": var(dims, errors, "standard error of crossover_time "
                                     "(jackknife over particle batches; NaN without batches)",
                                     units),
            "crossover_from": var(dims, np.array(froms, dtype="<U16"),
                                  "regime before the crossover"),
            "crossover_to": var(dims, np.array(tos, dtype="<U16"), "regime after the crossover"),
            "crossover_method": var(dims, np.array(methods, dtype="<U12"),
                                    "intersection of power-law fits, or boundary (geometric "
                                    "mean of the adjacent samples) when the fits do not meet "
                                    "between the regimes"),
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
