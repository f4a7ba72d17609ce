"""Effective diffusivity tensor at long times, with a batch jackknife confidence interval.

Estimator: over the late-time window (the last ``fit_decades`` decades of the time axis, or
t ≥ ``fit_start``) fit straight lines to the displacement covariance,
    Var Δx(t) ≈ 2 D_xx t + c,  Var Δy ≈ 2 D_yy t + c',  Cov(Δx, Δy) ≈ 2 D_xy t + c'',
by least squares, so D is the slope / 2 (the intercepts absorb the early transient; a mean
drift is removed by using covariances).  This is the long-time limit that periodic
homogenization defines (e.g. Majda & Kramer 1999, Phys. Rep. 314, 237, §2.1).  Uncertainty:
jackknife over particle batches; the confidence interval is D ± t₍B−1₎ · se.
Convergence: in the diffusive regime Var Δx + Var Δy grows linearly (whatever its offset),
so the slopes fitted separately over the early and late halves of the window (split at its
geometric middle) agree.  Their ratio r = ``deff_slope_ratio`` (late/early, jackknife
standard error s) decides the flag ``deff_converged``: 1 (diffusive) when |r − 1| ≤
``deff_tolerance`` and 3 s ≤ ``deff_tolerance``; 0 (too short) when |r − 1| exceeds both
the tolerance and 3 s; 2 (undetermined) when 3 s > ``deff_tolerance`` but |r − 1| ≤ 3 s —
the data are too noisy to show linear growth at the stated tolerance, and a noisy run is
not called diffusive.  Flags 0 and 2 come with a :class:`ShortRunWarning`.  (A ballistic
remainder gives a ratio near 1.8 over half a decade, a subdiffusive plateau a ratio well
below 1.  The ratio's se falls as N^{-1/2}: for Brownian motion over the default window it
is ≈ 0.056 at 3000 particles, so 3 s ≤ 0.15 needs about 4000 particles or more.)  The
log-log slope ``deff_alpha`` over the window is reported as well; it approaches 1 only as
slowly as the offset becomes negligible.

Research estimate from a model flow: for design of real mixing or heat-transfer equipment use
validated methods and the applicable codes.
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from ._common import check_range, msd_units, per_start, per_time, require, time_units, var
from ._stats import batch_replicates, jackknife_se, late_window, ols_slope, student_quantile

DEFAULT_FIT_DECADES = 0.5


# values of the ``deff_converged`` flag
TOO_SHORT, DIFFUSIVE, UNDETERMINED = 0, 1, 2


class ShortRunWarning(UserWarning):
    """The run has not reached the diffusive regime (or the data cannot show that it has);
    D_eff is not yet a confirmed long-time limit."""


def convergence_flag(ratio: float, ratio_se: float, tolerance: float) -> int:
    """``deff_converged`` from the slope ratio r and its standard error s.

    A check that 1 − tol ≤ r ≤ 1 + tol needs s small against tol: when 3 s > tol a run can
    be neither confirmed diffusive nor shown too short unless |r − 1| > 3 s (then it is
    too short at 3 standard errors).  So: UNDETERMINED if 3 s > tol and |r − 1| ≤ 3 s;
    otherwise DIFFUSIVE if |r − 1| ≤ tol, else TOO_SHORT.  Without an error (no batches) the
    tolerance alone decides.
    """
    if not np.isfinite(ratio):
        return TOO_SHORT
    deviation = abs(ratio - 1.0)
    if np.isfinite(ratio_se) and 3 * ratio_se > tolerance:
        return TOO_SHORT if deviation > 3 * ratio_se else UNDETERMINED
    return DIFFUSIVE if deviation <= tolerance else TOO_SHORT


def _covariances(get):
    """Var Δx, Var Δy, Cov(Δx, Δy) from a getter of (msd_x, msd_y, msd_xy, mean_dx, mean_dy)."""
    msd_x, msd_y, msd_xy, mean_dx, mean_dy = (get(n) for n in
                                              ("msd_x", "msd_y", "msd_xy", "mean_dx", "mean_dy"))
    mx = 0.0 if mean_dx is None else mean_dx
    my = 0.0 if mean_dy is None else mean_dy
    var_x = msd_x - mx * mx
    var_y = msd_y - my * my
    cov = None if msd_xy is None else msd_xy - mx * my
    return var_x, var_y, cov


def effective_diffusivity(ds: xr.Dataset, *, fit_decades: float = DEFAULT_FIT_DECADES,
                          fit_start: float | None = None, confidence: float = 0.95,
                          deff_tolerance: float = 0.15) -> xr.Dataset:
    """``D_xx, D_yy, D_xy`` (+ ``_se``, ``_lower``, ``_upper``), ``D_eff`` = (D_xx + D_yy)/2,
    ``D_eff_over_kappa``, the window's log-log slope and the ``deff_converged`` flag."""
    fit_decades = check_range("fit_decades", fit_decades, 0.0, 10.0, low_open=True)
    confidence = check_range("confidence", confidence, 0.0, 1.0, low_open=True, high_open=True)
    deff_tolerance = check_range("deff_tolerance", deff_tolerance, 0.0, 1.0, low_open=True)
    if fit_start is not None:
        fit_start = check_range("fit_start", fit_start, 0.0, low_open=True)
    require(ds, ["time", "msd_x", "msd_y"], "effective_diffusivity")
    t_all = ds["time"].values
    if fit_start is not None and fit_start >= t_all[-1]:
        from ..errors import InputDataError

        raise InputDataError(f"option fit_start = {fit_start:g} is not before the last output "
                             f"time {t_all[-1]:g}")
    d_units = per_time(msd_units(ds), time_units(ds))
    tunits = time_units(ds)
    kappa = ds.attrs.get("kappa")
    try:
        kappa = float(kappa)
    except (TypeError, ValueError):
        kappa = np.nan
    not_converged, undetermined = [], []

    def one(part):
        t = part["time"].values
        window = late_window(t, fit_decades, fit_start)
        tw = t[window]

        def full(name):
            return part[name].values if name in part.variables else None

        var_x, var_y, cov = _covariances(full)
        estimates = {"D_xx": ols_slope(tw, var_x[window])[0] / 2,
                     "D_yy": ols_slope(tw, var_y[window])[0] / 2,
                     "D_xy": np.nan if cov is None else ols_slope(tw, cov[window])[0] / 2}
        replicated = {n: batch_replicates(part, n) for n in
                      ("msd_x", "msd_y", "msd_xy", "mean_dx", "mean_dy")}
        have_reps = replicated["msd_x"] is not None and replicated["msd_y"] is not None
        reps = {}
        if have_reps:
            rx, ry, rc = _covariances(lambda n: replicated[n])
            reps["D_xx"] = ols_slope(tw, rx[:, window])[0] / 2
            reps["D_yy"] = ols_slope(tw, ry[:, window])[0] / 2
            reps["D_xy"] = None if rc is None else ols_slope(tw, rc[:, window])[0] / 2
            reps["D_eff"] = 0.5 * (reps["D_xx"] + reps["D_yy"])
            quantile = student_quantile(reps["D_xx"].size, confidence)
        estimates["D_eff"] = 0.5 * (estimates["D_xx"] + estimates["D_yy"])
        out = {}
        names = {"D_xx": "effective diffusivity D_xx (long-time slope of Var dx / 2)",
                 "D_yy": "effective diffusivity D_yy (long-time slope of Var dy / 2)",
                 "D_xy": "effective diffusivity D_xy (long-time slope of Cov(dx, dy) / 2)",
                 "D_eff": "isotropic part of the effective diffusivity (D_xx + D_yy) / 2"}
        for name, text in names.items():
            value = float(estimates[name])
            se = float(jackknife_se(reps[name])) if reps.get(name) is not None else np.nan
            half = quantile * se if reps.get(name) is not None else np.nan
            out[name] = var((), value, text, d_units,
                            estimator="least-squares slope over the late-time window")
            out[f"{name}_se"] = var((), se, f"standard error of {name} (jackknife over "
                                    "particle batches; NaN without batches)", d_units)
            out[f"{name}_lower"] = var((), value - half, f"lower bound of the {confidence:.0%} "
                                       f"confidence interval of {name}", d_units)
            out[f"{name}_upper"] = var((), value + half, f"upper bound of the {confidence:.0%} "
                                       f"confidence interval of {name}", d_units)
        ratio = estimates["D_eff"] / kappa if kappa and kappa > 0 else np.nan
        out["D_eff_over_kappa"] = var((), ratio, "D_eff over the molecular diffusivity kappa",
                                      "1")
        total = var_x + var_y
        with np.errstate(divide="ignore", invalid="ignore"):
            lt = np.log(tw)
            slope = ols_slope(lt, np.log(total[window]))[0]
            slope_se = np.nan
            if have_reps:
                rtotal = rx + ry
                slope_reps = ols_slope(lt, np.log(rtotal[:, window]))[0]
                slope_se = float(jackknife_se(slope_reps))
        half = tw.size // 2
        middle = np.sqrt(tw[0] * tw[-1])
        early = tw <= middle if (tw <= middle).sum() >= 2 and (tw > middle).sum() >= 2 else \
            np.arange(tw.size) < max(half, 2)
        late = ~early
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio_value = (ols_slope(tw[late], total[window][late])[0]
                           / ols_slope(tw[early], total[window][early])[0])
            ratio_se = np.nan
            if have_reps and late.sum() >= 2:
                rw = rtotal[:, window]
                ratio_reps = (ols_slope(tw[late], rw[:, late])[0]
                              / ols_slope(tw[early], rw[:, early])[0])
                ratio_se = float(jackknife_se(ratio_reps))
        if late.sum() >= 2:
            flag = convergence_flag(ratio_value, ratio_se, deff_tolerance)
        else:
            ratio_value = np.nan
            flag = DIFFUSIVE if np.isfinite(slope) and abs(slope - 1.0) <= deff_tolerance \
                else TOO_SHORT
        if flag != DIFFUSIVE:
            label = part["start"].values.item() if "start" in part.coords else ""
            text = f"slope ratio {ratio_value:.3g} ± {ratio_se:.2g}, log-log slope {slope:.3g}"
            (not_converged if flag == TOO_SHORT else undetermined).append(
                f"{label} ({text})" if label else text)
        out["deff_slope_ratio"] = var((), float(ratio_value), "slope of Var dx + Var dy over "
                                      "the late half of the D_eff window over that of the early "
                                      "half (1 when diffusive)", "1")
        out["deff_slope_ratio_se"] = var((), ratio_se, "standard error of deff_slope_ratio "
                                         "(jackknife)", "1")
        out["deff_alpha"] = var((), float(slope), "log-log slope of Var dx + Var dy over the "
                                "D_eff fit window (1 when diffusive)", "1")
        out["deff_alpha_se"] = var((), slope_se, "standard error of deff_alpha (jackknife)",
                                   "1")
        out["deff_converged"] = var((), np.int8(flag), "1 if the run reached the diffusive "
                                    "regime in the D_eff fit window, 0 if it is too short, "
                                    "2 if the data are too noisy to tell", "1",
                                    flag_values=np.array([TOO_SHORT, DIFFUSIVE, UNDETERMINED],
                                                         dtype=np.int8),
                                    flag_meanings="too_short diffusive undetermined",
                                    criterion=f"r = deff_slope_ratio, s = deff_slope_ratio_se, "
                                    f"tol = {deff_tolerance:g}: undetermined if 3 s > tol and "
                                    f"|r - 1| <= 3 s; otherwise diffusive if |r - 1| <= tol, "
                                    f"else too_short")
        out["deff_fit_start"] = var((), float(tw[0]), "first time in the D_eff fit window",
                                    tunits)
        out["deff_fit_end"] = var((), float(tw[-1]), "last time in the D_eff fit window",
                                  tunits)
        return xr.Dataset(out)

    out = per_start(ds, one)
    if undetermined:
        warnings.warn("the run is too noisy to tell whether it reached the diffusive regime "
                      f"(3 standard errors of the slope ratio exceed deff_tolerance = "
                      f"{deff_tolerance:g}): " + ", ".join(undetermined) + "; "
                      "deff_converged = 2 (undetermined) — use more particles or a longer "
                      "fit window", ShortRunWarning, stacklevel=2)
    if not_converged:
        warnings.warn("the run is too short to have reached the diffusive regime (the "
                      "variance does not yet grow linearly over the D_eff window): "
                      + ", ".join(not_converged) + "; D_eff is not a long-time limit — run "
                      "longer (run.t_end) or set fit_start later", ShortRunWarning,
                      stacklevel=2)
    return out
