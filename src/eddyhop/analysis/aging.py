"""Aging: aged ensemble MSD against lag, its fit to the renewal aging form, and time averages.

From the streamed aged MSD ⟨|X(t_a+τ) − X(t_a)|²⟩ (dims ``aging_time``, ``lag``):

* ``aged_msd_ratio`` = aged MSD / MSD(τ) (MSD interpolated log-log onto the lags): 1 for every
  t_a when the increments are stationary (free diffusion: exactly 4κτ for all t_a).
* ``aged_alpha``: local exponent d ln aged MSD / d ln τ (same estimator as α(t)).
* a weighted least-squares fit of the aging form  aged MSD ≈ A [(t_a + τ)^β − t_a^β]
  across all (t_a, τ) — the renewal form of a continuous-time random walk with waiting-time
  exponent β < 1: each renewal adds an independent jump, so the aged MSD is proportional to
  the mean number of renewals in [t_a, t_a + τ], and ⟨n(t)⟩ ∝ t^β/Γ(1+β) at long times
  (Barkai 2003, Phys. Rev. Lett. 90, 104101; Barkai & Cheng 2003, "Aging continuous time
  random walks", J. Chem. Phys.; references and equation numbers from memory, the form is
  derived in tests/test_analysis_aging.py).  β = 1 means no aging.

Errors: with per-batch aged MSD (``batch_aged_msd``, written by the engine) the ratio and the
fit are recomputed on every delete-one-batch replicate, aged and unaged MSD from the same
batches (they come from the same particles and are correlated, strongly once τ > t_a), and
the jackknife spread is the standard error.  Without batches the ratio's error combines the
two relative errors as if independent and the fit's error comes from the Jacobian; the
``estimator`` attribute says which was used.

Goodness of fit: the fit is judged (``aging_fit_p_value``, ``aging_fit_verdict``: accepted,
rejected or undetermined) by a test that accounts for the points sharing particles (the
jackknife covariance of the points; see :func:`fit_aging_form`); a rejected fit's errors are
widened by √(T/E[T]) and its ``long_name`` says it is rejected.

From tracked trajectories (``track_x``, ``track_y`` on a linear grid of spacing δ, duration
T), for lags Δ = jδ: the time-averaged MSD of each particle,
    δ²ᵢ(Δ) = 1/(T − Δ) ∫₀^{T−Δ} |Xᵢ(t + Δ) − Xᵢ(t)|² dt   (discrete mean over all windows),
its ensemble mean, and the ergodicity-breaking parameter EB(Δ) = ⟨(δ²)²⟩/⟨δ²⟩² − 1 (variance
over mean squared; He, Burov, Metzler & Barkai 2008, Phys. Rev. Lett. 101, 058101, from
memory).  For Brownian motion in d dimensions EB ≈ 4Δ/(3dT) for Δ ≪ T (the 1-D result of that
paper; independent components divide it by d); the exact value for sampled tracks at any lag
is derived in tests/test_analysis_aging.py (``exact_brownian_eb``).
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ..errors import InputDataError
from ._common import check_range, msd_units, per_start, require, time_units, var
from ._stats import batch_replicates, jackknife_se, local_log_slope
from .exponents import DEFAULT_WINDOW
from .verdicts import (
    DEFAULT_SIGNIFICANCE,
    REJECTED,
    UNDETERMINED,
    verdict_attrs,
    verdict_from_p,
)

DEFAULT_TAMSD_LAGS = 30


def _interp_loglog(x_new, x, y):
    good = (x > 0) & (y > 0) & np.isfinite(y)
    out = np.full(np.shape(x_new), np.nan)
    if good.sum() < 2:
        return out
    lx, ly = np.log(x[good]), np.log(y[good])
    inside = (x_new >= x[good][0]) & (x_new <= x[good][-1])
    out[inside] = np.exp(np.interp(np.log(x_new[inside]), lx, ly))
    return out


def fit_aging_form(aging_time, lag, aged, aged_se, replicates=None, *,
                   significance: float = DEFAULT_SIGNIFICANCE):
    """Weighted least squares of ln aged MSD against ln(A[(t_a+τ)^β − t_a^β]), judged.

    Residuals are weighted by the relative standard error σᵢ of each point (or equally without
    errors).  Returns a dict with beta, amplitude, their standard errors and how these were
    obtained (``se_method``), and the goodness of fit: ``chi2`` (the weighted sum of squared
    residuals T), ``chi2_expected`` (its mean if the form holds), ``reduced_chi2`` = T over
    that mean, ``dof`` (effective degrees of freedom), ``p_value``, ``verdict`` (0 accepted,
    1 rejected, 2 undetermined; see :mod:`.verdicts`), ``test`` (which test) and
    ``error_scale`` (the factor applied to the standard errors).

    Errors: with delete-one-batch ``replicates`` of the aged MSD (B, aging_time, lag) the fit
    is repeated on every replicate (same points and weights) and the errors are the jackknife
    spread — honest although the points share particles.  Without them the errors come from
    the Jacobian, treating the points as independent (they are not: indicative only).

    Test: the points share particles, so T is not χ²-distributed with n − 2 degrees of
    freedom.  With replicates, the covariance C of the ln aged MSD points is estimated by the
    jackknife; linearising the fit, T = εᵀ W^{1/2} P W^{1/2} ε with P the projector off the
    weighted Jacobian, so under the model E[T] = tr(P S), Var T = 2 tr(P S P S), S =
    W^{1/2} C W^{1/2}.  T is matched to g·χ²_h by these two moments (Satterthwaite 1946,
    Biometrics Bulletin 2, 110; journal details from memory) and p = P(χ²_h > T/g).  This is
    an approximation (C is itself estimated from B − 1 batch contrasts); its calibration is
    checked on Brownian ensembles in tests/test_analysis_aging.py (measured: 4.7 % of 300
    ensembles rejected at the 5 % level, 8.3 % at 10 %, with B = 20).  Without
    replicates: χ² with n − 2 degrees of freedom from the stated errors, treating the points
    as independent (indicative).  A rejected fit (p < ``significance``) keeps its estimates,
    but its standard errors are multiplied by √(T/E[T]) when that exceeds 1 (the Birge ratio
    generalised to correlated points), and the verdict says "rejected".
    """
    ta, tau = np.meshgrid(aging_time, lag, indexing="ij")
    good = np.isfinite(aged) & (aged > 0)
    if aged_se is not None:
        good &= np.isfinite(aged_se) & (aged_se > 0)
    if replicates is not None:
        good &= np.all(np.isfinite(replicates) & (replicates > 0), axis=0)
    result = {"beta": np.nan, "amplitude": np.nan, "beta_se": np.nan, "amplitude_se": np.nan,
              "reduced_chi2": np.nan, "chi2": np.nan, "chi2_expected": np.nan,
              "dof": np.nan, "p_value": np.nan, "verdict": UNDETERMINED,
              "error_scale": 1.0, "points": int(good.sum()),
              "test": "none (fewer than 3 points)",
              "se_method": "no fit (fewer than 3 points)"}
    if good.sum() < 3:
        return result
    ta, tau = ta[good], tau[good]
    sigma = aged_se[good] / aged[good] if aged_se is not None else np.ones(ta.size)
    fit = _fit_form(ta, tau, np.log(aged[good]), sigma)
    chi2 = float((fit.fun ** 2).sum())
    amplitude = float(np.exp(fit.x[0]))
    log_reps = None if replicates is None else np.log(replicates[:, good])
    gof = _goodness_of_fit(chi2, fit.jac, sigma, log_reps, aged_se is not None)
    if replicates is not None:
        reps = np.array([_fit_form(ta, tau, row, sigma, fit.x).x for row in log_reps])
        beta_se = float(jackknife_se(reps[:, 1]))
        amplitude_se = float(jackknife_se(np.exp(reps[:, 0])))
        method = "jackknife over particle batches (the fit repeated on every replicate)"
    else:
        try:
            cov = np.linalg.inv(fit.jac.T @ fit.jac)
            errors = np.sqrt(np.diag(cov))
        except np.linalg.LinAlgError:
            errors = np.array([np.nan, np.nan])
        beta_se, amplitude_se = float(errors[1]), float(amplitude * errors[0])
        method = ("least squares from the stated errors; treats points that share particles "
                  "as independent (indicative only; no batches)")
    verdict = verdict_from_p(gof["p_value"], significance)
    scale = 1.0
    if verdict == REJECTED and np.isfinite(gof["reduced_chi2"]):
        scale = max(1.0, math.sqrt(gof["reduced_chi2"]))
        method += (f"; multiplied by sqrt(aging_fit_reduced_chi2) = {scale:.3g} because the "
                   "data reject the aging form")
    elif aged_se is None and replicates is None and np.isfinite(gof["reduced_chi2"]):
        # no stated errors: the residual scatter is the only error scale
        scale = max(1.0, math.sqrt(gof["reduced_chi2"]))
    result.update(beta=float(fit.x[1]), amplitude=amplitude, beta_se=beta_se * scale,
                  amplitude_se=amplitude_se * scale, se_method=method, verdict=verdict,
                  error_scale=scale, **gof)
    return result


def _goodness_of_fit(chi2, jacobian, sigma, log_replicates, have_errors):
    """T, its expectation and effective degrees of freedom under the model, p-value and the
    name of the test (see :func:`fit_aging_form`)."""
    from scipy import stats

    n, parameters = jacobian.shape
    out = {"chi2": chi2, "chi2_expected": np.nan, "reduced_chi2": np.nan, "dof": np.nan,
           "p_value": np.nan, "test": "none"}
    if n - parameters < 1:
        out["test"] = "none (no degrees of freedom left)"
        return out
    if log_replicates is not None and log_replicates.shape[0] >= 3:
        batches = log_replicates.shape[0]
        centred = (log_replicates - log_replicates.mean(axis=0)) / sigma[None, :]
        # S = W^{1/2} C W^{1/2} with C the jackknife covariance, kept as its factor R: S = RᵀR
        factor = math.sqrt((batches - 1) / batches) * centred
        q, _ = np.linalg.qr(jacobian)
        projected = factor - (factor @ q) @ q.T          # R P (P symmetric, idempotent)
        ps = projected.T @ factor                        # P S (n × n)
        mean = float(np.trace(ps))
        variance = 2.0 * float(np.sum(ps * ps.T))        # 2 tr(P S P S)
        if mean > 0 and variance > 0:
            dof = 2 * mean * mean / variance  # h of g*chi2_h; g = mean/h
            out.update(chi2_expected=mean, reduced_chi2=chi2 / mean, dof=dof,
                       p_value=float(stats.chi2.sf(chi2 * dof / mean, dof)))
            out["test"] = (f"diagonal-weighted chi-square T against its distribution under the "
                           f"model given the jackknife covariance of the points ({batches} "
                           f"batches), matched to g*chi2_h by two moments (Satterthwaite), "
                           f"h = {dof:.3g}")
        return out
    dof = n - parameters
    out.update(chi2_expected=float(dof), reduced_chi2=chi2 / dof, dof=float(dof))
    if have_errors:
        out["p_value"] = float(stats.chi2.sf(chi2, dof))
        out["test"] = (f"chi-square with {dof} degrees of freedom from the stated errors, "
                       "points treated as independent (they share particles: indicative)")
    else:
        out["test"] = "none (no error estimates: the reduced chi-square only scales the errors)"
    return out


def _fit_form(ta, tau, y, sigma, start=None):
    from scipy.optimize import least_squares

    def residual(p):
        return (y - p[0] - np.log((ta + tau) ** p[1] - ta ** p[1])) / sigma

    if start is None:
        start = np.array([np.median(y - np.log(tau)), 1.0])  # β = 1: (t_a + τ) − t_a = τ
    return least_squares(residual, start, bounds=([-np.inf, 1e-3], [np.inf, 3.0]),
                         x_scale=[1.0, 0.1])


def _aged_part(part, window, tunits, munits, significance):
    require(part, ["aged_msd", "aging_time", "lag"], "aging")
    ta = part["aging_time"].values
    lag = part["lag"].values
    aged = part["aged_msd"].transpose("aging_time", "lag").values
    aged_se = (part["aged_msd_se"].transpose("aging_time", "lag").values
               if "aged_msd_se" in part.variables else None)
    out = {}
    dims = ("aging_time", "lag")
    aged_reps = batch_replicates(part, "aged_msd", ("aging_time", "lag"))
    if "msd" in part.variables:
        t = part["time"].values
        reference = _interp_loglog(lag, t, part["msd"].values)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = aged / reference[None, :]
        msd_reps = batch_replicates(part, "msd")
        if aged_reps is not None and msd_reps is not None:
            ref_reps = np.stack([_interp_loglog(lag, t, row) for row in msd_reps])
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio_se = jackknife_se(aged_reps / ref_reps[:, None, :])
            how = "jackknife over particle batches: aged and unaged MSD from the same batches"
        elif aged_se is not None:
            ref_se = (_interp_loglog(lag, t, part["msd_se"].values)
                      if "msd_se" in part.variables else np.zeros_like(reference))
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio_se = np.abs(ratio) * np.sqrt((aged_se / aged) ** 2
                                                   + (ref_se / reference)[None, :] ** 2)
            how = ("no batches: aged and unaged errors combined as if independent, which "
                   "they are not (same particles)")
        else:
            ratio_se = np.full(ratio.shape, np.nan)
            how = "no batches or errors: NaN"
        out["aged_msd_ratio"] = var(dims, ratio, "aged MSD over the MSD at the same lag "
                                    "(1 for stationary increments)", "1")
        out["aged_msd_ratio_se"] = var(dims, ratio_se, "standard error of aged_msd_ratio", "1",
                                       estimator=how)
    out["aged_alpha"] = var(dims, local_log_slope(lag, aged, window), "local exponent d ln "
                            "aged_msd / d ln lag", "1")
    fit = fit_aging_form(ta, lag, aged, aged_se, aged_reps, significance=significance)
    beta = fit["beta"]
    amp_units = munits if tunits == "1" or not np.isfinite(beta) else \
        f"{munits} {tunits}-{beta:.4g}"
    text = "A [(t_a + lag)^beta - t_a^beta]"
    rejected = fit["verdict"] == REJECTED
    note = (" (the data reject the aging form: see aging_fit_verdict)" if rejected else "")
    out["aging_exponent"] = var((), beta, f"exponent beta of the aging form {text} fitted to "
                                "aged_msd (1: no aging)" + note, "1")
    out["aging_exponent_se"] = var((), fit["beta_se"], "standard error of aging_exponent",
                                   "1", estimator=fit["se_method"],
                                   error_scale=fit["error_scale"])
    out["aging_amplitude"] = var((), fit["amplitude"], f"amplitude A of the aging form {text}"
                                 + note, amp_units)
    out["aging_amplitude_se"] = var((), fit["amplitude_se"], "standard error of "
                                    "aging_amplitude", amp_units, estimator=fit["se_method"],
                                    error_scale=fit["error_scale"])
    out["aging_fit_chi2"] = var((), fit["chi2"], "weighted sum of squared residuals T of the "
                                "aging-form fit (weights: relative errors of aged_msd)", "1")
    out["aging_fit_reduced_chi2"] = var((), fit["reduced_chi2"], "T over its expected value "
                                        "if the aging form holds (about 1 when it fits; "
                                        "chi2/dof for independent points)", "1",
                                        test=fit["test"])
    out["aging_fit_dof"] = var((), fit["dof"], "effective degrees of freedom of T under the "
                               "aging form", "1")
    out["aging_fit_p_value"] = var((), fit["p_value"], "goodness-of-fit p-value of the "
                                   "aging-form fit", "1", test=fit["test"])
    out["aging_fit_verdict"] = var((), np.int8(fit["verdict"]), "verdict of the goodness-of-"
                                   "fit test of the aging form", "1",
                                   **verdict_attrs(fit["test"], significance))
    return out


def tamsd_lag_indices(samples: int, count: int, max_fraction: float) -> np.ndarray:
    """Log-spaced distinct integer lags 1 … max_fraction·(samples − 1)."""
    longest = max(1, int(np.floor(max_fraction * (samples - 1))))
    return np.unique(np.rint(np.geomspace(1, longest, count)).astype(np.int64))


def time_averaged_msd(x: np.ndarray, y: np.ndarray, lags: np.ndarray) -> np.ndarray:
    """δ²ᵢ(jδ) for tracks x, y of shape (particles, samples); result (particles, lags)."""
    out = np.empty((x.shape[0], lags.size))
    for column, j in enumerate(lags):
        dx = x[:, j:] - x[:, :-j]
        dy = y[:, j:] - y[:, :-j]
        out[:, column] = (dx * dx + dy * dy).mean(axis=1)
    return out


def ergodicity_breaking(tamsd: np.ndarray):
    """EB = ⟨(δ²)²⟩/⟨δ²⟩² − 1 over particles (axis 0) and its delete-one jackknife error."""
    n = tamsd.shape[0]
    s1 = tamsd.sum(axis=0)
    s2 = (tamsd ** 2).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        eb = (s2 / n) / (s1 / n) ** 2 - 1.0
        if n < 3:
            return eb, np.full(eb.shape, np.nan)
        m1 = (s1[None, :] - tamsd) / (n - 1)
        m2 = (s2[None, :] - tamsd ** 2) / (n - 1)
        reps = m2 / m1 ** 2 - 1.0
    se = np.sqrt((n - 1) / n * ((reps - reps.mean(axis=0)) ** 2).sum(axis=0))
    return eb, se


def _track_part(part, lags_count, max_fraction, tunits, munits):
    require(part, ["track_x", "track_y", "track_time"], "aging (time-averaged MSD)")
    x = part["track_x"].transpose("particle", "track_time").values
    y = part["track_y"].transpose("particle", "track_time").values
    times = part["track_time"].values
    keep = np.all(np.isfinite(x), axis=1) & np.all(np.isfinite(y), axis=1)
    if keep.sum() < 2 or times.size < 3:
        raise InputDataError("aging: time-averaged MSD needs at least 2 tracked particles with "
                             "3 samples each ([run] tracked, track_samples)")
    spacing = float(np.mean(np.diff(times)))
    lags = tamsd_lag_indices(times.size, lags_count, max_fraction)
    tamsd = np.full((x.shape[0], lags.size), np.nan)
    tamsd[keep] = time_averaged_msd(x[keep], y[keep], lags)
    eb, eb_se = ergodicity_breaking(tamsd[keep])
    dims = ("tamsd_lag",)
    n = int(keep.sum())
    return {
        "tamsd": var(("particle", "tamsd_lag"), tamsd, "time-averaged MSD of a tracked "
                     "particle", munits),
        "tamsd_mean": var(dims, tamsd[keep].mean(axis=0), "ensemble mean of the "
                          "time-averaged MSD", munits),
        "tamsd_mean_se": var(dims, tamsd[keep].std(axis=0, ddof=1) / np.sqrt(n),
                             "standard error of tamsd_mean over tracked particles", munits),
        "ergodicity_breaking": var(dims, eb, "ergodicity-breaking parameter "
                                   "<(tamsd)^2>/<tamsd>^2 - 1", "1"),
        "ergodicity_breaking_se": var(dims, eb_se, "standard error of ergodicity_breaking "
                                      "(delete-one jackknife over tracked particles)", "1"),
        "tamsd_duration": var((), float(times[-1] - times[0]), "duration T of the tracked "
                              "trajectories", tunits),
        "_lags": lags * spacing,
    }


def aging(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW,
          aging_times=None, tamsd_lags: int = DEFAULT_TAMSD_LAGS,
          tamsd_max_fraction: float = 0.5,
          significance: float = DEFAULT_SIGNIFICANCE) -> xr.Dataset:
    """Aging analysis: aged-MSD ratio, aged α, aging-form fit; TAMSD and EB from tracks.

    ``aging_times`` selects a subset of the stored aging times (each must be one of them and
    lie before the end of the run).  ``significance``: level of the goodness-of-fit test of
    the aging form (``aging_fit_verdict``; see :func:`fit_aging_form`).  Needs ``aged_msd`` or
    ``track_x``/``track_y``.
    """
    window = check_range("window", window, 0.05, 3.0)
    tamsd_lags = check_range("tamsd_lags", tamsd_lags, 2, 10_000, integer=True)
    tamsd_max_fraction = check_range("tamsd_max_fraction", tamsd_max_fraction, 0.0, 1.0,
                                     low_open=True, high_open=True)
    significance = check_range("significance", significance, 0.0, 1.0, low_open=True,
                               high_open=True)
    has_aged = "aged_msd" in ds.variables
    has_tracks = "track_x" in ds.variables and "track_y" in ds.variables
    if not (has_aged or has_tracks):
        require(ds, ["aged_msd", "track_x"], "aging")
    if aging_times is not None:
        if not has_aged:
            require(ds, ["aged_msd"], "aging (aging_times)")
        ds = _select_aging_times(ds, aging_times)
    tunits = time_units(ds)
    munits = msd_units(ds)

    def one(part):
        out = {}
        coords = {}
        if has_aged:
            out.update(_aged_part(part, window, tunits, munits, significance))
            coords.update(aging_time=part["aging_time"], lag=part["lag"])
        if has_tracks:
            tracked = _track_part(part, tamsd_lags, tamsd_max_fraction, tunits, munits)
            coords["tamsd_lag"] = xr.Variable(("tamsd_lag",), tracked.pop("_lags"),
                                              {"long_name": "lag of the time-averaged MSD",
                                               "units": tunits})
            coords["particle"] = part["particle"] if "particle" in part.coords else \
                np.arange(part.sizes["particle"])
            out.update(tracked)
        return xr.Dataset(out, coords=coords)

    return per_start(ds, one)


def _select_aging_times(ds, aging_times):
    values = np.atleast_1d(np.asarray(aging_times, dtype=np.float64))
    stored = ds["aging_time"].values
    t_end = float(ds["time"].values[-1]) if "time" in ds.variables else np.inf
    chosen = []
    for value in values:
        if not np.isfinite(value) or value < 0 or value >= t_end:
            raise InputDataError(f"aging time {value:g} is outside the run [0, {t_end:g}); "
                                 "aging times must leave room for lags")
        match = np.flatnonzero(np.isclose(stored, value, rtol=1e-9, atol=1e-12))
        if match.size == 0:
            raise InputDataError(f"aging time {value:g} was not recorded; this Dataset has "
                                 f"aging times {', '.join(f'{v:g}' for v in stored)} "
                                 "(set [aging] times in the study and rerun)")
        chosen.append(int(match[0]))
    return ds.isel(aging_time=chosen)
