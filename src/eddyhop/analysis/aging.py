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

import numpy as np
import xarray as xr

from ..errors import InputDataError
from ._common import check_range, msd_units, per_start, require, time_units, var
from ._stats import batch_replicates, jackknife_se, local_log_slope
from .exponents import DEFAULT_WINDOW

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


def fit_aging_form(aging_time, lag, aged, aged_se, replicates=None):
    """Weighted least squares of ln aged MSD against ln(A[(t_a+τ)^β − t_a^β]).

    Residuals are weighted by the relative standard error of each point (or equally without
    errors).  Returns dict with beta, amplitude, their standard errors, how these were
    obtained (``se_method``) and the reduced χ².  With delete-one-batch ``replicates`` of the
    aged MSD (B, aging_time, lag) the fit is repeated on every replicate (same points and
    weights) and the errors are the jackknife spread — honest although the points share
    particles.  Without them the errors come from the Jacobian scaled by the reduced χ²,
    which treats the points as independent (they are not: indicative only).
    """
    ta, tau = np.meshgrid(aging_time, lag, indexing="ij")
    good = np.isfinite(aged) & (aged > 0)
    if aged_se is not None:
        good &= np.isfinite(aged_se) & (aged_se > 0)
    if replicates is not None:
        good &= np.all(np.isfinite(replicates) & (replicates > 0), axis=0)
    result = {"beta": np.nan, "amplitude": np.nan, "beta_se": np.nan, "amplitude_se": np.nan,
              "reduced_chi2": np.nan, "points": int(good.sum()),
              "se_method": "no fit (fewer than 3 points)"}
    if good.sum() < 3:
        return result
    ta, tau = ta[good], tau[good]
    sigma = aged_se[good] / aged[good] if aged_se is not None else np.ones(ta.size)
    fit = _fit_form(ta, tau, np.log(aged[good]), sigma)
    dof = max(ta.size - 2, 1)
    chi2 = float((fit.fun ** 2).sum() / dof)
    amplitude = float(np.exp(fit.x[0]))
    if replicates is not None:
        reps = np.array([_fit_form(ta, tau, np.log(r[good]), sigma, fit.x).x
                         for r in replicates])
        beta_se = float(jackknife_se(reps[:, 1]))
        amplitude_se = float(jackknife_se(np.exp(reps[:, 0])))
        method = "jackknife over particle batches (the fit repeated on every replicate)"
    else:
        try:
            cov = np.linalg.inv(fit.jac.T @ fit.jac) * max(chi2, 1.0)
            errors = np.sqrt(np.diag(cov))
        except np.linalg.LinAlgError:
            errors = np.array([np.nan, np.nan])
        beta_se, amplitude_se = float(errors[1]), float(amplitude * errors[0])
        method = ("least squares, scaled by the reduced chi-square; treats points that share "
                  "particles as independent (indicative only; no batches)")
    result.update(beta=float(fit.x[1]), amplitude=amplitude, beta_se=beta_se,
                  amplitude_se=amplitude_se, reduced_chi2=chi2, se_method=method)
    return result


def _fit_form(ta, tau, y, sigma, start=None):
    from scipy.optimize import least_squares

    def residual(p):
        return (y - p[0] - np.log((ta + tau) ** p[1] - ta ** p[1])) / sigma

    if start is None:
        start = np.array([np.median(y - np.log(tau)), 1.0])  # β = 1: (t_a + τ) − t_a = τ
    return least_squares(residual, start, bounds=([-np.inf, 1e-3], [np.inf, 3.0]),
                         x_scale=[1.0, 0.1])


def _aged_part(part, window, tunits, munits):
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
    fit = fit_aging_form(ta, lag, aged, aged_se, aged_reps)
    beta = fit["beta"]
    amp_units = munits if tunits == "1" or not np.isfinite(beta) else \
        f"{munits} {tunits}-{beta:.4g}"
    text = "A [(t_a + lag)^beta - t_a^beta]"
    out["aging_exponent"] = var((), beta, f"exponent beta of the aging form {text} fitted to "
                                "aged_msd (1: no aging)", "1")
    out["aging_exponent_se"] = var((), fit["beta_se"], "standard error of aging_exponent",
                                   "1", estimator=fit["se_method"])
    out["aging_amplitude"] = var((), fit["amplitude"], f"amplitude A of the aging form {text}",
                                 amp_units)
    out["aging_amplitude_se"] = var((), fit["amplitude_se"], "standard error of "
                                    "aging_amplitude", amp_units, estimator=fit["se_method"])
    out["aging_fit_reduced_chi2"] = var((), fit["reduced_chi2"], "reduced chi-square of the "
                                        "aging-form fit (about 1 when the form fits)", "1")
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
          tamsd_max_fraction: float = 0.5) -> xr.Dataset:
    """Aging analysis: aged-MSD ratio, aged α, aging-form fit; TAMSD and EB from tracks.

    ``aging_times`` selects a subset of the stored aging times (each must be one of them and
    lie before the end of the run).  Needs ``aged_msd`` or ``track_x``/``track_y``.
    """
    window = check_range("window", window, 0.05, 3.0)
    tamsd_lags = check_range("tamsd_lags", tamsd_lags, 2, 10_000, integer=True)
    tamsd_max_fraction = check_range("tamsd_max_fraction", tamsd_max_fraction, 0.0, 1.0,
                                     low_open=True, high_open=True)
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
            out.update(_aged_part(part, window, tunits, munits))
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
