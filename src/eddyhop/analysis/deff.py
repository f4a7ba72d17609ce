"""Effective diffusivity tensor at long times, with a batch jackknife confidence interval.

Estimator: over the late-time window (the last ``fit_decades`` decades of the time axis, or
t ≥ ``fit_start``) fit straight lines to the displacement covariance,
    Var Δx(t) ≈ 2 D_xx t + c,  Var Δy ≈ 2 D_yy t + c',  Cov(Δx, Δy) ≈ 2 D_xy t + c'',
by least squares, so D is the slope / 2 (the intercepts absorb the early transient).  The
moments are the centred ones of :func:`eddyhop.analysis.centring.transport_curve` (a mean
drift is removed; each jackknife replicate is centred with its own mean).  This is the
long-time limit that periodic homogenization defines (e.g. Majda & Kramer 1999, Phys. Rep.
314, 237, §2.1).  Uncertainty: jackknife over particle batches; the confidence interval is
D ± t₍B−1₎ · se.  :func:`fit_diffusivity` is the estimator on plain arrays (reusable by other
analyses, e.g. to compare two coupled runs).

Mean velocity: ``mean_velocity_x``/``_y`` = least-squares slope of the mean displacement
against t over the same late window, jackknife se over batches.  For uniform starts in a
divergence-free periodic flow the uniform density is invariant, so E ΔX(t) = ⟨u⟩ t exactly
and the estimate is the cell-averaged velocity (the imposed drift of ``drifting_cellular``).

Convergence: in the diffusive regime Var Δx + Var Δy grows linearly (whatever its offset),
so the slopes fitted separately over the early and late halves of the window (split at its
geometric middle) agree.  Their ratio r = ``deff_slope_ratio`` (late/early, jackknife
standard error s) decides the flag ``deff_converged``: 1 (diffusive) when |r − 1| ≤
``deff_tolerance`` and 3 s ≤ ``deff_tolerance``; 0 (too short) when |r − 1| exceeds both
the tolerance and 3 s; 2 (undetermined) when 3 s > ``deff_tolerance`` but |r − 1| ≤ 3 s —
the data are too noisy to show linear growth at the stated tolerance, and a noisy run is
not called diffusive.  (A ballistic remainder gives a ratio near 1.8 over half a decade, a
subdiffusive plateau a ratio well below 1.  The ratio's se falls as N^{-1/2}: for Brownian
motion over the default window it is ≈ 0.056 at 3000 particles, so 3 s ≤ 0.15 needs about
4000 particles or more.)  The log-log slope ``deff_alpha`` over the window is reported as
well; it approaches 1 only as slowly as the offset becomes negligible.

Bounded variance (flag 3, checked first): a straight line V ≈ c + b t is fitted to
V = Var Δx + Var Δy over the last max(``fit_decades``, 1.5) decades (or from
min(``fit_start``, t_end/10^1.5)), and a = ``variance_growth_alpha`` = b t̄/V̄ is its relative
growth rate d ln V/d ln t at the window's mean time (1 diffusive, 0 bounded), with standard
error s = √(s_jk² + s_fit²) — the batch jackknife plus the least-squares error from the
scatter about the line, which carries the deterministic, quasi-periodic wobble of a bounded
variance that the jackknife does not see.  ``deff_converged`` = 3 (bounded) when a is
consistent with 0 (|a| ≤ max(tol, 3 s)) and inconsistent with diffusive growth (1 − a > 3 s).
The window is long because the wobble is large: at κ = 0 with drift (1, 1/φ)U the variance
swings between 0.2 and 7.5 for t = 10 … 2000, and a = 0.87 ± 0.53 over half a decade,
0.27 ± 0.23 over one, 0.005 ± 0.13 over 1.5 (measured, 1000 particles, 40 output times).
A bounded variance means no diffusivity: D_xx, D_yy, D_xy, D_eff and every ratio built from
them are then NaN (their ``comment`` says why) and a :class:`BoundedVarianceWarning` is
issued.  With κ > 0 a periodic flow always spreads in the end (the homogenized D ≥ κ; Majda &
Kramer 1999, §2), so there the flag means a plateau longer than the run, and the warning says
so.  Flags 0 and 2 come with a :class:`ShortRunWarning`.

Research estimate from a model flow: for design of real mixing or heat-transfer equipment use
validated methods and the applicable codes.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ._common import (
    check_range,
    flow_scales,
    msd_units,
    per_start,
    per_time,
    require,
    time_units,
    var,
)
from ._stats import batch_replicates, jackknife_se, late_window, ols_slope, student_quantile
from .centring import transport_curve, transport_moment

DEFAULT_FIT_DECADES = 0.5
BOUNDED_MIN_DECADES = 1.5  # shortest window of the bounded-variance test (see module doc)

# values of the ``deff_converged`` flag
TOO_SHORT, DIFFUSIVE, UNDETERMINED, BOUNDED = 0, 1, 2, 3
FLAG_VALUES = (TOO_SHORT, DIFFUSIVE, UNDETERMINED, BOUNDED)
FLAG_MEANINGS = "too_short diffusive undetermined bounded"
DIFFUSIVITY_NAMES = ("D_xx", "D_yy", "D_xy", "D_eff")


class ShortRunWarning(UserWarning):
    """The run has not reached the diffusive regime (or the data cannot show that it has);
    D_eff is not yet a confirmed long-time limit."""


class BoundedVarianceWarning(UserWarning):
    """The displacement variance does not grow at late times: no diffusivity is claimed."""


def convergence_flag(ratio: float, ratio_se: float, tolerance: float) -> int:
    """``deff_converged`` from the slope ratio r and its standard error s.

    A check that 1 − tol ≤ r ≤ 1 + tol needs s small against tol: when 3 s > tol a run can
    be neither confirmed diffusive nor shown too short unless |r − 1| > 3 s (then it is
    too short at 3 standard errors).  So: UNDETERMINED if 3 s > tol and |r − 1| ≤ 3 s;
    otherwise DIFFUSIVE if |r − 1| ≤ tol, else TOO_SHORT.  Without an error (no batches) the
    tolerance alone decides.  (The bounded test, :func:`is_bounded`, comes first.)
    """
    if not np.isfinite(ratio):
        return TOO_SHORT
    deviation = abs(ratio - 1.0)
    if np.isfinite(ratio_se) and 3 * ratio_se > tolerance:
        return TOO_SHORT if deviation > 3 * ratio_se else UNDETERMINED
    return DIFFUSIVE if deviation <= tolerance else TOO_SHORT


def is_bounded(alpha: float, alpha_se: float, tolerance: float) -> bool:
    """Bounded variance: the late log-log slope a consistent with 0 (|a| ≤ max(tol, 3 s)) and
    not with diffusive growth (1 − a > 3 s).  Without an error, |a| ≤ tol decides."""
    if not np.isfinite(alpha):
        return False
    if not np.isfinite(alpha_se):
        return abs(alpha) <= tolerance
    return abs(alpha) <= max(tolerance, 3 * alpha_se) and 1.0 - alpha > 3 * alpha_se


@dataclass(frozen=True)
class DiffusivityFit:
    """Result of :func:`fit_diffusivity`: ``values`` / ``se`` / ``replicates`` keyed by
    "D_xx", "D_yy", "D_xy", "D_eff" (length²/time; se NaN and replicates None without
    replicates; D_xy NaN without a covariance) and the boolean time ``window`` used."""

    window: np.ndarray
    values: dict
    se: dict
    replicates: dict


def fit_diffusivity(time, var_x, var_y, cov=None, replicates=None, *,
                    fit_decades: float = DEFAULT_FIT_DECADES,
                    fit_start: float | None = None) -> DiffusivityFit:
    """D_xx, D_yy, D_xy, D_eff = half the least-squares slopes of Var Δx, Var Δy,
    Cov(Δx, Δy) against ``time`` over the late window (last ``fit_decades`` decades, or
    t ≥ ``fit_start``), with jackknife standard errors.

    ``var_x``, ``var_y``, ``cov``: (T,) centred second moments (length²); ``replicates``:
    None or a tuple (var_x, var_y, cov-or-None) of delete-one-batch replicates, each (B, T)
    (e.g. from :func:`eddyhop.analysis.centring.transport_curve`).  No option checking: the
    caller validates.
    """
    t = np.asarray(time, dtype=np.float64)
    window = late_window(t, fit_decades, fit_start)
    tw = t[window]

    def half_slope(curve):
        if curve is None:
            return None
        return ols_slope(tw, np.asarray(curve, dtype=np.float64)[..., window])[0] / 2

    values = {"D_xx": float(half_slope(var_x)), "D_yy": float(half_slope(var_y)),
              "D_xy": np.nan if cov is None else float(half_slope(cov))}
    values["D_eff"] = 0.5 * (values["D_xx"] + values["D_yy"])
    reps = dict.fromkeys(DIFFUSIVITY_NAMES)
    if replicates is not None:
        rx, ry, rc = replicates
        if rx is not None and ry is not None:
            reps["D_xx"], reps["D_yy"] = half_slope(rx), half_slope(ry)
            reps["D_xy"] = half_slope(rc)
            reps["D_eff"] = 0.5 * (reps["D_xx"] + reps["D_yy"])
    se = {n: np.nan if r is None else float(jackknife_se(r)) for n, r in reps.items()}
    return DiffusivityFit(window=window, values=values, se=se, replicates=reps)


def variance_growth(time, total, replicates=None, *, fit_decades=DEFAULT_FIT_DECADES,
                    fit_start=None):
    """The bounded-variance test statistic: (a, se, first time of its window).

    Over the last max(``fit_decades``, 1.5) decades (or t ≥ min(``fit_start``, t_end/10^1.5))
    a straight line V ≈ c + b t is fitted by least squares to ``total`` = Var Δx + Var Δy and
    a = b t̄ / V̄ (t̄, V̄ the window means) is its relative growth rate d ln V / d ln t at t̄:
    1 for diffusive growth without offset, 0 for a bounded variance.  A line, not a fit of
    ln V, because a bounded variance may dip close to 0, where logarithms swing wildly.
    se = √(s_jk² + s_fit²): the batch jackknife of a, and the least-squares error of b from
    the residual scatter (n − 2 degrees of freedom) times t̄/V̄, which carries the
    deterministic wobble of a bounded variance that the jackknife cannot see.
    """
    t = np.asarray(time, dtype=np.float64)
    total = np.asarray(total, dtype=np.float64)
    if fit_start is not None:
        window = late_window(t, BOUNDED_MIN_DECADES,
                             min(fit_start, t[-1] * 10.0 ** -BOUNDED_MIN_DECADES))
    else:
        window = late_window(t, max(fit_decades, BOUNDED_MIN_DECADES))
    window &= np.isfinite(total)
    if window.sum() < 3:
        return np.nan, np.nan, np.nan
    x, y = t[window], total[window]
    level = y.mean()
    if not level > 0:
        return np.nan, np.nan, float(x[0])
    slope, intercept = ols_slope(x, y)
    growth = float(slope * x.mean() / level)
    residual = y - (intercept + slope * x)
    sxx = ((x - x.mean()) ** 2).sum()
    fit_se = math.sqrt((residual ** 2).sum() / (x.size - 2) / sxx) * x.mean() / level \
        if x.size > 2 else np.nan
    jk_se = np.nan
    if replicates is not None:
        reps = np.asarray(replicates, dtype=np.float64)[:, window]
        with np.errstate(divide="ignore", invalid="ignore"):
            jk_se = float(jackknife_se(ols_slope(x, reps)[0] * x.mean() / reps.mean(axis=1)))
    parts = [s for s in (jk_se, fit_se) if np.isfinite(s)]
    se = math.sqrt(sum(s * s for s in parts)) if parts else np.nan
    return growth, se, float(x[0])


def effective_diffusivity(ds: xr.Dataset, *, fit_decades: float = DEFAULT_FIT_DECADES,
                          fit_start: float | None = None, confidence: float = 0.95,
                          deff_tolerance: float = 0.15) -> xr.Dataset:
    """``D_xx, D_yy, D_xy`` (+ ``_se``, ``_lower``, ``_upper``), ``D_eff`` = (D_xx + D_yy)/2,
    ``D_eff_over_kappa`` and ``D_eff_over_kappa_sqrt_peclet`` (+ ``_se``, ``_lower``,
    ``_upper``), ``mean_velocity_x``/``_y`` (+ ``_se``), the window's log-log slope, the
    bounded-variance test, the ``deff_converged`` flag and ``transport_moment``."""
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
    length_units = msd_units(ds)
    tunits = time_units(ds)
    d_units = per_time(length_units, tunits)
    length = str(ds["mean_dx"].attrs.get("units", _root_units(length_units))) \
        if "mean_dx" in ds.variables else _root_units(length_units)
    velocity_units = per_time(length, tunits)
    scales = flow_scales(ds)
    kappa, peclet = scales["kappa"], scales["peclet"]
    not_converged, undetermined, bounded = [], [], []

    def one(part):
        t = part["time"].values
        var_x, rep_x, _ = transport_curve(part, "x")
        var_y, rep_y, _ = transport_curve(part, "y")
        cov, rep_c = (None, None)
        if "msd_xy" in part.variables:
            cov, rep_c, _ = transport_curve(part, "xy")
        have_reps = rep_x is not None and rep_y is not None
        fit = fit_diffusivity(t, var_x, var_y, cov, (rep_x, rep_y, rep_c) if have_reps
                              else None, fit_decades=fit_decades, fit_start=fit_start)
        window = fit.window
        tw = t[window]
        quantile = student_quantile(fit.replicates["D_xx"].size, confidence) \
            if have_reps else np.nan

        total = var_x + var_y
        rtotal = rep_x + rep_y if have_reps else None
        with np.errstate(divide="ignore", invalid="ignore"):
            lt = np.log(tw)
            slope = ols_slope(lt, np.log(total[window]))[0]
            slope_se = np.nan
            if have_reps:
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
        growth, growth_se, growth_start = variance_growth(
            t, total, rtotal, fit_decades=fit_decades, fit_start=fit_start)
        raw_total = np.asarray(part["msd_x"].values + part["msd_y"].values, dtype=np.float64)
        no_spread = np.all(total[window] <= 1e-12 * np.max(np.abs(raw_total[window])))
        if no_spread or is_bounded(growth, growth_se, deff_tolerance):
            flag = BOUNDED
        elif late.sum() >= 2:
            flag = convergence_flag(ratio_value, ratio_se, deff_tolerance)
        else:
            ratio_value = np.nan
            flag = DIFFUSIVE if np.isfinite(slope) and abs(slope - 1.0) <= deff_tolerance \
                else TOO_SHORT
        label = part["start"].values.item() if "start" in part.coords else ""
        if flag == BOUNDED:
            text = (f"relative growth rate {growth:.3g} ± {growth_se:.2g} from t = "
                    f"{growth_start:.4g}")
            bounded.append(f"{label} ({text})" if label else text)
        elif flag != DIFFUSIVE:
            text = f"slope ratio {ratio_value:.3g} ± {ratio_se:.2g}, log-log slope {slope:.3g}"
            (not_converged if flag == TOO_SHORT else undetermined).append(
                f"{label} ({text})" if label else text)

        out = {}
        names = {"D_xx": "effective diffusivity D_xx (long-time slope of Var dx / 2)",
                 "D_yy": "effective diffusivity D_yy (long-time slope of Var dy / 2)",
                 "D_xy": "effective diffusivity D_xy (long-time slope of Cov(dx, dy) / 2)",
                 "D_eff": "isotropic part of the effective diffusivity (D_xx + D_yy) / 2"}
        withheld = {"comment": "NaN: the displacement variance is bounded at late times "
                               "(deff_converged = 3), so no diffusivity is claimed"} \
            if flag == BOUNDED else {}
        keep = np.nan if flag == BOUNDED else 1.0  # NaN withholds every diffusivity

        def interval(name, value, se, text, units, **attrs):
            half_width = quantile * se
            out[name] = var((), value * keep, text, units, **attrs, **withheld)
            out[f"{name}_se"] = var((), se * keep, f"standard error of {name} (jackknife "
                                    "over particle batches; NaN without batches)", units,
                                    **withheld)
            out[f"{name}_lower"] = var((), (value - half_width) * keep, f"lower bound of the "
                                       f"{confidence:.0%} confidence interval of {name}",
                                       units, **withheld)
            out[f"{name}_upper"] = var((), (value + half_width) * keep, f"upper bound of the "
                                       f"{confidence:.0%} confidence interval of {name}",
                                       units, **withheld)

        for name, text in names.items():
            interval(name, fit.values[name], fit.se[name], text, d_units,
                     estimator="least-squares slope over the late-time window")
        d_eff, d_eff_se = fit.values["D_eff"], fit.se["D_eff"]
        over_kappa = 1.0 / kappa if kappa > 0 else np.nan
        interval("D_eff_over_kappa", d_eff * over_kappa, d_eff_se * over_kappa,
                 "D_eff over the molecular diffusivity kappa", "1")
        over_sqrt = over_kappa / math.sqrt(peclet) if peclet > 0 else np.nan
        interval("D_eff_over_kappa_sqrt_peclet", d_eff * over_sqrt, d_eff_se * over_sqrt,
                 "D_eff / (kappa Pe^(1/2)), Pe = U/(kappa k) (wavenumber convention, whatever "
                 "the run's own); tends to a constant at high Pe in cellular flows", "1",
                 peclet=float(peclet))

        for axis, dim in (("x", "dx"), ("y", "dy")):
            name = f"mean_velocity_{axis}"
            value, se = np.nan, np.nan
            if f"mean_{dim}" in part.variables:
                value = float(ols_slope(tw, part[f"mean_{dim}"].values[window])[0])
                reps = batch_replicates(part, f"mean_{dim}")
                if reps is not None:
                    se = float(jackknife_se(ols_slope(tw, reps[:, window])[0]))
            out[name] = var((), value, f"mean velocity along {axis} (least-squares slope of "
                            f"mean_{dim} over the D_eff fit window)", velocity_units)
            out[f"{name}_se"] = var((), se, f"standard error of {name} (jackknife over "
                                    "particle batches; NaN without batches)", velocity_units)

        out["deff_slope_ratio"] = var((), float(ratio_value), "slope of Var dx + Var dy over "
                                      "the late half of the D_eff window over that of the early "
                                      "half (1 when diffusive)", "1")
        out["deff_slope_ratio_se"] = var((), ratio_se, "standard error of deff_slope_ratio "
                                         "(jackknife)", "1")
        out["deff_alpha"] = var((), float(slope), "log-log slope of Var dx + Var dy over the "
                                "D_eff fit window (1 when diffusive)", "1")
        out["deff_alpha_se"] = var((), slope_se, "standard error of deff_alpha (jackknife)",
                                   "1")
        out["variance_growth_alpha"] = var(
            (), float(growth), f"relative growth rate d ln V / d ln t of a line fitted to "
            f"V = Var dx + Var dy over the last max(fit_decades, {BOUNDED_MIN_DECADES:g}) "
            "decades, at the window's mean time (bounded-variance test: 0 when bounded, 1 "
            "when diffusive)", "1")
        out["variance_growth_alpha_se"] = var(
            (), float(growth_se), "standard error of variance_growth_alpha: jackknife and "
            "least-squares (scatter about the power law) in quadrature", "1")
        out["variance_growth_start"] = var((), growth_start, "first time of the "
                                           "bounded-variance test window", tunits)
        out["deff_converged"] = var(
            (), np.int8(flag), "1 if the run reached the diffusive regime in the D_eff fit "
            "window, 0 if it is too short, 2 if the data are too noisy to tell, 3 if the "
            "variance is bounded (no diffusivity)", "1",
            flag_values=np.array(FLAG_VALUES, dtype=np.int8), flag_meanings=FLAG_MEANINGS,
            criterion=f"a = variance_growth_alpha, sa = variance_growth_alpha_se, "
            f"r = deff_slope_ratio, s = deff_slope_ratio_se, tol = {deff_tolerance:g}: "
            f"bounded if |a| <= max(tol, 3 sa) and 1 - a > 3 sa; otherwise undetermined if "
            f"3 s > tol and |r - 1| <= 3 s; otherwise diffusive if |r - 1| <= tol, "
            f"else too_short")
        out["deff_fit_start"] = var((), float(tw[0]), "first time in the D_eff fit window",
                                    tunits)
        out["deff_fit_end"] = var((), float(tw[-1]), "last time in the D_eff fit window",
                                  tunits)
        out["transport_moment"] = var((), transport_moment(part), "second moment whose growth "
                                      "the analyses interpret: variance (centred on the "
                                      "ensemble mean) or msd (raw)")
        return xr.Dataset(out)

    out = per_start(ds, one)
    if bounded:
        spreading = ("; with kappa > 0 a periodic flow always spreads in the end (D_eff >= "
                     "kappa), so this is a plateau longer than the run — run longer "
                     "(run.t_end)") if kappa > 0 else ""
        warnings.warn("the displacement variance stays bounded at late times: "
                      + ", ".join(bounded) + "; D_eff is BOUNDED and no "
                      "diffusivity is claimed (D values are NaN)" + spreading,
                      BoundedVarianceWarning, stacklevel=2)
    if undetermined:
        warnings.warn("the run is too noisy to tell whether it reached the diffusive regime "
                      f"(3 standard errors of the slope ratio exceed deff_tolerance = "
                      f"{deff_tolerance:g}): " + ", ".join(undetermined) + "; "
                      "D_eff is UNDETERMINED — use more particles or a longer fit window",
                      ShortRunWarning, stacklevel=2)
    if not_converged:
        warnings.warn("the run is too short to have reached the diffusive regime (the "
                      "variance does not yet grow linearly over the D_eff window): "
                      + ", ".join(not_converged) + "; D_eff is not a long-time limit — run "
                      "longer (run.t_end) or set fit_start later", ShortRunWarning,
                      stacklevel=2)
    return out


def _root_units(units: str) -> str:
    """Length units from the MSD's (length²) units: "m2" → "m", "1" → "1"."""
    if units == "1":
        return "1"
    return units[:-1] if units.endswith("2") else f"({units})^(1/2)"
