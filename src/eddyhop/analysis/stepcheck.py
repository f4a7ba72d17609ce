"""Step check: the measured step-size bias of the MSD and of D_eff, and a verdict on dt.

The engine integrates a subsample of every start region twice on the *same* Brownian path: at
the run's dt (the run's own paths, "fine") and at 2·dt ("coarse", increments summed from the
fine ones — the multilevel Monte Carlo coupling of Giles 2008, "Multilevel Monte Carlo path
simulation", Oper. Res. 56(3), 607–617).  A scheme of weak order p has an error
E(dt) = c dt^p + o(dt^p) in every expectation, so

    bias(dt) ≈ [E(2 dt) − E(dt)] / (2^p − 1)

(Richardson's argument; p is the scheme's weak order, ``integrators.SCHEME_ORDERS``: 1 for
Euler–Maruyama and Milstein, 2 for ``strang_rk2``, but at most 1 for flows with solid walls,
whose reflection step is weak order 1 — the engine records p as the ``step_check_weak_order``
attribute).  While the
two paths share their noise and stay close, the per-particle difference has a far smaller
variance than either path.  Estimators (per start region):

* ``step_bias_msd(t)`` = [msd_coarse(t) − msd_fine(t)] / (2^p − 1) at the output times on even
  fine steps (NaN at odd steps, where no coarse state exists);
* ``D_eff_step_bias`` = [D_coarse − D_fine] / (2^p − 1), each D from the displacement
  covariances by the D_eff estimator of ``analysis/deff.py`` (least-squares slope / 2 over the
  same late-time window, ``_stats.late_window``/``ols_slope``), restricted to the window's
  even-step times;
* in both, the fine term is β·(subsample) + (1 − β)·(whole run) with the variance-minimising
  β = Cov(coarse, fine)/Var(fine) ∈ [0, 1] (a control variate, :func:`_controlled_difference`,
  β chosen separately for each time and for D_eff): the coupled difference while the paths
  stay close,
  the whole run's precision once they decorrelate;
* ``D_eff_extrapolated`` = D_eff − D_eff_step_bias, its se from the same covariances (the bias
  estimate shares the run's own D_eff when β < 1);
* ``step_check_target`` = the target τ of the verdict (below);

standard errors by the delete-one jackknife over *check batches* (contiguous groups of whole
blocks of the subsample), combined with the run's own jackknife se as stated.

Verdict ``step_check`` (b = |D_eff_step_bias|, s = its se, target τ = se(D_eff), the run's
statistical error, or ``step_tolerance`` · |D_eff| when that option is given):

* 1 ``biased``: b − 2 s > τ — the bias exceeds the target by more than two standard errors;
* 0 ``passed``: b ≤ τ and s ≤ τ — the estimated bias is below the target and the check
  resolves a bias of the target's size (its own standard error is no larger);
* 2 ``inconclusive``: otherwise — the check's own error is too large to tell (raise
  ``run.step_check_particles``), or there is no estimate (no even output steps in the window,
  or the coarse path blew up).

The coupled paths decorrelate at late times in cellular flows (tracers sharing their noise
still separate near the hyperbolic points), so s cannot fall far below the error of an
uncoupled estimate on the same subsample: measured s / se(D_eff) ≈ 0.3–0.4 × (run.particles /
step_check_particles)^½ for ``strang_rk2`` on the cellular flow at Pe = 10–100.

``step_check_suggested_dt`` = dt · (τ / (2 b))^(1/p): the step at which the bias, scaled by the
weak order, would be half the target; NaN when b ≤ τ (nothing to suggest) or when passed.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import xarray as xr

from ._common import check_range, msd_units, per_start, per_time, require, time_units, var
from ._stats import batch_replicates, jackknife_se, late_window, ols_slope, pooled_replicates
from .deff import DEFAULT_FIT_DECADES, effective_diffusivity

PASSED, BIASED, INCONCLUSIVE = 0, 1, 2
FLAG_MEANINGS = "passed biased inconclusive"
# Standard errors of the bias estimate that separate the verdicts (two-sided ≈ 95 %).
VERDICT_SE = 2.0
_SUFFIXES = ("mean_dx", "mean_dy", "msd_x", "msd_y", "msd_xy")
CHECK_VARIABLES = (*(f"check_{path}_{name}" for path in ("fine", "coarse")
                     for name in _SUFFIXES), "check_count")


def has_step_check(ds) -> bool:
    """Whether ``ds`` carries the step check's raw variables."""
    return all(name in ds.variables for name in CHECK_VARIABLES)


def weak_order(ds) -> float:
    """Weak order p of the run's scheme that the engine recorded (``step_check_weak_order``:
    ``integrators.SCHEME_ORDERS``, at most 1 with solid walls)."""
    try:
        order = float(ds.attrs["step_check_weak_order"])
    except (KeyError, TypeError, ValueError):
        order = math.nan
    if not (math.isfinite(order) and order > 0):
        from ..errors import InputDataError

        raise InputDataError("step_check needs the attribute step_check_weak_order (a positive "
                             "number) that eddyhop run writes with the step check's variables; "
                             f"got {ds.attrs.get('step_check_weak_order')!r}")
    return order


def _variances(means):
    """Var Δx + Var Δy and Var Δx, Var Δy from (mean_dx, mean_dy, msd_x, msd_y, msd_xy)."""
    mean_dx, mean_dy, msd_x, msd_y, _ = means
    return msd_x - mean_dx**2 + msd_y - mean_dy**2


def _se_or_nan(replicates):
    return math.nan if replicates is None else jackknife_se(replicates)


def _jackknife_cov(a, b):
    """Jackknife covariance of two estimates from their delete-one replicates (axis 0)."""
    count = a.shape[0]
    return (count - 1) / count * ((a - a.mean(axis=0)) * (b - b.mean(axis=0))).sum(axis=0)


def _controlled_difference(coarse, fine, run, coarse_reps, fine_reps, run_se, share):
    """(E(2dt) − E(dt) estimate, its se, β, variance parts) with the whole run as a control
    variate.

    The subsample's coarse mean A and fine mean F share their paths; the whole run's mean R
    estimates E(dt) too, from ``1/share`` times more particles (the subsample is part of it).
    Of the unbiased estimates A − βF − (1 − β)R the least variance has β = Cov(A, F)/Var(F)
    (a control variate; e.g. Glasserman 2003, *Monte Carlo Methods in Financial Engineering*,
    §4.1): β ≈ 1 while the coupled paths stay close (the plain coupled difference A − F),
    β → 0 once they decorrelate (then A − R, which spends the run's precision on E(dt)).
    β is clipped to [0, 1] and estimated from the jackknife over check batches; the variance
    is V_AA − 2βC_AF + β²V_FF + (1 − β)²S − 2(1 − β)(C_AF·share − βS), S = se(R)², with
    Cov(A, R) = C_AF·share and Cov(F, R) = S because R contains the subsample.  Without the
    run's se (no batches) β = 1.  The parts (Var(A − βF), Cov(A − βF, R), S) give the error of
    anything else built from R and the estimate (the extrapolated D_eff).
    """
    v_aa = _jackknife_cov(coarse_reps, coarse_reps)
    v_ff = _jackknife_cov(fine_reps, fine_reps)
    c_af = _jackknife_cov(coarse_reps, fine_reps)
    run_var = np.asarray(run_se, dtype=np.float64) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        beta = np.where(np.isfinite(run_var) & (v_ff > 0), c_af / v_ff, 1.0)
    beta = np.clip(np.nan_to_num(beta, nan=1.0), 0.0, 1.0)
    run_var = np.where(np.isfinite(run_var), run_var, 0.0)
    estimate = coarse - beta * fine - (1.0 - beta) * run
    controlled = v_aa - 2 * beta * c_af + beta**2 * v_ff  # Var(A − βF)
    with_run = c_af * share - beta * run_var  # Cov(A − βF, R)
    variance = controlled + (1 - beta) ** 2 * run_var - 2 * (1 - beta) * with_run
    parts = {"controlled": controlled, "with_run": with_run, "run": run_var}
    return estimate, np.sqrt(np.maximum(variance, 0.0)), beta, parts


def verdict(bias: float, bias_se: float, target: float) -> int:
    """The ``step_check`` flag from the bias b, its se s and the target τ (module docstring)."""
    if not (np.isfinite(bias) and np.isfinite(bias_se) and np.isfinite(target)):
        return INCONCLUSIVE
    if abs(bias) - VERDICT_SE * bias_se > target:
        return BIASED
    if abs(bias) <= target and bias_se <= target:
        return PASSED
    return INCONCLUSIVE


def suggested_dt(dt: float, order: float, bias: float, target: float, flag: int) -> float:
    """dt · (τ / (2 |b|))^(1/p) when the estimate |b| exceeds the target τ, else NaN."""
    if flag == PASSED or not (np.isfinite(bias) and abs(bias) > target > 0):
        return math.nan
    return dt * (0.5 * target / abs(bias)) ** (1.0 / order)


def step_check(ds: xr.Dataset, *, fit_decades: float = DEFAULT_FIT_DECADES,
               fit_start: float | None = None, step_tolerance: float | None = None
               ) -> xr.Dataset:
    """Measured step-size bias of the MSD and D_eff, Richardson-extrapolated D_eff and the
    ``step_check`` verdict, per start region (see the module docstring for the estimators
    and the rule).  ``fit_decades``/``fit_start`` choose the late window as for
    :func:`~eddyhop.analysis.effective_diffusivity`; ``step_tolerance`` (relative, e.g. 0.01)
    replaces the run's statistical error of D_eff as the target."""
    if step_tolerance is not None:
        step_tolerance = check_range("step_tolerance", step_tolerance, 0.0, 1.0,
                                     low_open=True)
    require(ds, ["time", "msd", *CHECK_VARIABLES], "step_check")
    order = weak_order(ds)
    factor = 2.0**order - 1.0
    dt = float(ds.attrs.get("dt", math.nan))
    tunits = time_units(ds)
    units = msd_units(ds)
    d_units = per_time(units, tunits)
    with warnings.catch_warnings():
        # convergence of the run is effective_diffusivity's own verdict, warned about there
        warnings.simplefilter("ignore")
        deff = effective_diffusivity(ds, fit_decades=fit_decades, fit_start=fit_start)
    rule = ("b = |D_eff_step_bias|, s = D_eff_step_bias_se, target = "
            + (f"{step_tolerance:g} |D_eff|" if step_tolerance is not None else "D_eff_se")
            + f": biased if b - {VERDICT_SE:g} s > target; passed if b <= target and "
            "s <= target; otherwise (or without an estimate) inconclusive")

    def one(part):
        t = part["time"].values
        counts = part["check_count"].values
        label = part["start"].values.item() if "start" in part.coords else None
        d_part = deff.sel(start=label) if label is not None and "start" in deff.dims else deff
        d_run = float(d_part["D_eff"].values)
        d_se = float(d_part["D_eff_se"].values)
        means = {path: [np.asarray(part[f"check_{path}_{n}"].values, dtype=np.float64)
                        for n in _SUFFIXES] for path in ("fine", "coarse")}
        keep = counts > 0
        reps = {path: [pooled_replicates(counts, m) for m in values]
                for path, values in means.items()}
        pooled = {path: [np.tensordot(counts[keep], m[keep], axes=(0, 0)) / counts[keep].sum()
                         for m in values] for path, values in means.items()}

        def msd(values):
            return values[2] + values[3]

        run = [np.asarray(part[n].values, dtype=np.float64) for n in _SUFFIXES]
        run_reps = [batch_replicates(part, n) for n in _SUFFIXES]
        share = counts[keep].sum() / float(np.asarray(part["batch_count"].values).sum())
        bias_msd, bias_msd_se, _, _ = _controlled_difference(
            msd(pooled["coarse"]), msd(pooled["fine"]), msd(run), msd(reps["coarse"]),
            msd(reps["fine"]), _se_or_nan(None if run_reps[2] is None
                                          else msd(run_reps)), share)
        bias_msd = bias_msd / factor
        bias_msd_se = bias_msd_se / factor
        window = late_window(t, fit_decades, fit_start) & np.isfinite(bias_msd)
        beta = math.nan
        if window.sum() >= 2:
            tw = t[window]

            def d_of(values):
                return ols_slope(tw, _variances(values)[..., window])[0] / 4.0

            run_d_reps = None if any(r is None for r in run_reps) else d_of(run_reps)
            bias, bias_se, beta, parts = _controlled_difference(
                d_of(pooled["coarse"]), d_of(pooled["fine"]), d_of(run), d_of(reps["coarse"]),
                d_of(reps["fine"]), _se_or_nan(run_d_reps), share)
            bias = float(bias) / factor
            bias_se = float(bias_se) / factor
            # D_run − bias = g R − (A − βF)/k with g = 1 + (1 − β)/k, k = 2^p − 1
            gain = 1.0 + (1.0 - float(beta)) / factor
            ext_var = (gain**2 * float(parts["run"]) + float(parts["controlled"]) / factor**2
                       - 2 * gain * float(parts["with_run"]) / factor)
            ext_se = math.sqrt(max(ext_var, 0.0)) if math.isfinite(d_se) else math.nan
        else:
            bias = bias_se = ext_se = math.nan
        target = step_tolerance * abs(d_run) if step_tolerance is not None else d_se
        flag = verdict(bias, bias_se, target)
        out = {
            "step_bias_msd": var(("time",), bias_msd, "estimated step-size bias of msd: "
                                 "(msd at 2 dt - msd at dt) / (2^p - 1), coupled subsample with "
                                 "the whole run as control variate (NaN at odd steps)", units,
                                 weak_order=order),
            "step_bias_msd_se": var(("time",), bias_msd_se, "standard error of step_bias_msd "
                                    "(jackknife over check batches)", units),
            "D_eff_step_bias": var((), bias, "estimated step-size bias of D_eff: (D_eff at "
                                   "2 dt - D_eff at dt) / (2^p - 1), coupled subsample with "
                                   "the whole run as control variate", d_units,
                                   weak_order=order),
            "D_eff_step_bias_se": var((), bias_se, "standard error of D_eff_step_bias "
                                      "(jackknife over check batches)", d_units),
            "D_eff_extrapolated": var((), d_run - bias, "Richardson-extrapolated D_eff: "
                                      "D_eff - D_eff_step_bias", d_units),
            "D_eff_extrapolated_se": var((), ext_se, "standard error of D_eff_extrapolated "
                                         "(from the same jackknife covariances as the bias, "
                                         "which shares the run's own estimate)", d_units),
            "step_check_target": var((), target, "target of the step check: the statistical "
                                     "error D_eff_se, or step_tolerance |D_eff|", d_units),
            "step_check": var((), np.int8(flag), "verdict of the step check on run.dt: "
                              "0 passed, 1 biased, 2 inconclusive", "1",
                              flag_values=np.array([PASSED, BIASED, INCONCLUSIVE],
                                                   dtype=np.int8),
                              flag_meanings=FLAG_MEANINGS, criterion=rule),
            "step_check_suggested_dt": var((), suggested_dt(dt, order, bias, target, flag),
                                           "time step whose D_eff bias would be half the "
                                           "target, from the weak order (NaN when passed)",
                                           tunits),
        }
        return xr.Dataset(out)

    return per_start(ds, one)


def step_bias_messages(result: xr.Dataset) -> list[str]:
    """One line per start region whose verdict is not ``passed`` (for warnings and summaries)."""
    lines = []
    flags = np.atleast_1d(result["step_check"].values)
    labels = (np.atleast_1d(result["start"].values) if "start" in result.dims
              else [None] * flags.size)
    for i, (flag, label) in enumerate(zip(flags, labels)):
        if flag == PASSED:
            continue

        def pick(name, i=i):
            return float(np.atleast_1d(result[name].values)[i])

        where = f"start '{label}': " if label is not None else ""
        word = "biased" if flag == BIASED else "inconclusive"
        text = (f"{where}step check {word}: D_eff step-size bias "
                f"{pick('D_eff_step_bias'):.3g} ± {pick('D_eff_step_bias_se'):.2g} against a "
                f"target of {pick('step_check_target'):.2g} (the statistical error of D_eff "
                "unless step_tolerance is given)")
        suggestion = pick("step_check_suggested_dt")
        if flag == INCONCLUSIVE:
            text += " — inconclusive: the check cannot tell whether dt is small enough " \
                    "(raise run.step_check_particles)"
        if math.isfinite(suggestion):
            text += f"; a dt of {suggestion:.3g} or less would meet it"
        lines.append(text)
    return lines
