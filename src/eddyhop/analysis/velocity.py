"""Lagrangian velocity statistics: covariance, autocorrelation, Green–Kubo integral, spectrum.

Input: the streamed pair means ``velocity_correlation_{xx,xy,yx,yy}`` = ⟨u_i(X(t_r)) u_j(X(t_r+τ))⟩
and ``lagged_velocity_{x,y}`` = ⟨u_j(X(t_r+τ))⟩ on (``reference_time``, ``correlation_lag``),
with their per-batch means (a study with a ``[velocity_correlation]`` table).

* Covariance C_ij(τ) = ⟨u_i(t_r) u_j(t_r+τ)⟩ − ⟨u_i(t_r)⟩⟨u_j(t_r+τ)⟩ (centred, so that a mean
  drift does not enter the integral or the spectrum).
* Normalised autocorrelation ρ_i(τ) = C_ii(τ)/C_ii(0).
* Running integral I_ij(τ) = ∫₀^τ ½(C_ij + C_ji)(s) ds (trapezoidal rule on the linear lag
  grid) and the Lagrangian integral time T_i = I_ii(τ_max)/C_ii(0).
* Green–Kubo diffusivity D_ij = κ δ_ij + ∫₀^τ_max ½(C_ij + C_ji) dτ with C averaged over the
  reference times (in a stationary ensemble every t_r estimates the same C, and averaging uses
  each particle's path several times; the jackknife accounts for their correlation) (Taylor
  1921, Proc. London Math. Soc. s2-20, 196, "Diffusion by continuous movements"; Kubo 1957,
  J. Phys. Soc. Jpn. 12, 570 — references from memory): the
  long-time diffusivity when the ensemble is stationary (uniform starts in a periodic
  incompressible flow: the uniform density is invariant), κ is constant and there are no
  walls; otherwise NaN with a ``comment``.  ``green_kubo_converged`` says whether the integral
  has reached its limit within the lag window: the tail ΔI = I(τ_max) − I(¾ τ_max) of the trace
  against its error s and ``green_kubo_tolerance`` × |D_xx + D_yy|: 1 converged when
  |ΔI| ≤ max(3s, tol·|trace|) and 3s ≤ tol·|trace|; 0 not converged when |ΔI| exceeds both;
  2 undetermined otherwise (too noisy to tell).
* Power spectrum S_i(ω) = ∫ w(|τ|/τ_max) C_ii(τ) e^{−iωτ} dτ over −τ_max … τ_max (two-sided,
  angular frequency ω, so S_i(0) ≈ 2(D_ii − κ) for a window flat near 0): the Wiener–Khinchin
  transform of the lag-windowed covariance — the Blackman–Tukey estimator (Blackman & Tukey
  1958, *The Measurement of Power Spectra*, Dover; window formulas from Priestley 1981,
  *Spectral Analysis and Time Series*, §6.2, quoted from memory).  Windows: ``parzen``
  (default; its transform is non-negative, so the estimate is never negative), ``bartlett``
  (Fejér kernel, non-negative) and ``hann`` (narrower main lobe, may dip below 0).
  Resolution ≈ 2π·(window factor)/τ_max.

Errors: delete-one-batch jackknife over the particle batches of the whole estimator.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ._common import AnalysisOptionError, check_range, per_start, per_time, require, var
from ._stats import jackknife_se, pooled_replicates

WINDOWS = ("parzen", "bartlett", "hann")
TIME_PERIODIC_FAMILIES = ("oscillating_cellular",)
CONVERGED, NOT_CONVERGED, UNDETERMINED = 1, 0, 2
_PAIRS = ("xx", "xy", "yx", "yy")
INPUTS = [f"velocity_correlation_{p}" for p in _PAIRS] + ["lagged_velocity_x",
                                                           "lagged_velocity_y"]
# a study with a [velocity_correlation] table, quoted in errors
SOURCE = ("a study with a [velocity_correlation] table (reference_times, lag_max, lag_step) "
          "run with eddyhop run")


def lag_window(name: str, u: np.ndarray) -> np.ndarray:
    """Lag window w(u), u = |τ|/τ_max ∈ [0, 1]; w(0) = 1, w(1) = 0."""
    u = np.clip(np.abs(u), 0.0, 1.0)
    if name == "parzen":
        return np.where(u <= 0.5, 1 - 6 * u**2 + 6 * u**3, 2 * (1 - u) ** 3)
    if name == "bartlett":
        return 1.0 - u
    if name == "hann":
        return 0.5 * (1.0 + np.cos(np.pi * u))
    raise AnalysisOptionError(f"option spectrum_window = {name!r} is not allowed; choose one "
                              f"of: {', '.join(WINDOWS)}")


def _cumulative_trapezoid(values, step):
    out = np.zeros_like(values)
    out[..., 1:] = np.cumsum(0.5 * step * (values[..., 1:] + values[..., :-1]), axis=-1)
    return out


def _estimates(corr, lagged, lag, window, n_freq):
    """All estimates from (pooled) means: ``corr`` pair → [..., R, L], ``lagged`` x/y → same."""
    step = lag[1] - lag[0]
    mean0 = {c: lagged[c][..., :1] for c in "xy"}  # ⟨u_i(t_r)⟩ is the lag-0 value
    cov = {p: corr[p] - mean0[p[0]] * lagged[p[1]] for p in _PAIRS}
    out = {f"cov_{p}": cov[p] for p in _PAIRS}
    sym = {"xx": cov["xx"], "yy": cov["yy"], "xy": 0.5 * (cov["xy"] + cov["yx"])}
    for p, values in sym.items():
        out[f"int_{p}"] = _cumulative_trapezoid(values, step)
    with np.errstate(divide="ignore", invalid="ignore"):
        for c in "xy":
            zero = cov[c + c][..., :1]
            out[f"rho_{c}"] = np.where(zero > 0, cov[c + c] / zero, np.nan)
            out[f"tl_{c}"] = np.where(zero[..., 0] > 0, out[f"int_{c}{c}"][..., -1]
                                      / zero[..., 0], np.nan)
    # Green–Kubo from the covariance averaged over the reference times (all estimate the same
    # C in a stationary ensemble; averaging uses every particle's data several times)
    pooled = {p: _cumulative_trapezoid(values.mean(axis=-2), step) for p, values in sym.items()}
    for p, values in pooled.items():
        out[f"gk_{p}"] = values[..., -1]
        out[f"gk_running_{p}"] = values
    quarter = lag.size - 1 - (lag.size - 1) // 4
    trace = pooled["xx"] + pooled["yy"]
    out["tail"] = trace[..., -1] - trace[..., quarter]
    out["half_trace"] = 0.5 * trace[..., -1]
    weights = lag_window(window, lag / lag[-1])
    n_fft = 2 * (n_freq - 1)
    for c in "xy":
        tapered = weights * cov[c + c]
        transform = np.fft.rfft(tapered, n=n_fft, axis=-1).real
        # Σ_{l=-L}^{L} w_l C_l cos(ω l Δτ) Δτ with C even: 2·Re(rfft) − the l = 0 term
        out[f"spec_{c}"] = step * (2.0 * transform - tapered[..., :1])
        out[f"spec_mean_{c}"] = out[f"spec_{c}"].mean(axis=-2)  # linear in C
    return out


def velocity_statistics(ds: xr.Dataset, *, spectrum_window: str = "parzen",
                        green_kubo_tolerance: float = 0.05) -> xr.Dataset:
    """Velocity covariance, autocorrelation, running integral, Green–Kubo D and spectrum
    (module docstring); Dataset → Dataset of the derived variables only."""
    if not isinstance(spectrum_window, str) or spectrum_window not in WINDOWS:
        raise AnalysisOptionError(f"option spectrum_window = {spectrum_window!r} is not "
                                  f"allowed; choose one of: {', '.join(WINDOWS)}")
    tolerance = check_range("green_kubo_tolerance", green_kubo_tolerance, 0.0, 1.0,
                            low_open=True)
    missing = [n for n in INPUTS if n not in ds.variables]
    if missing:
        from ..errors import InputDataError

        raise InputDataError(f"velocity_statistics needs variable(s) {', '.join(missing)}, "
                             f"which this Dataset lacks; they are written by {SOURCE}")
    require(ds, ["correlation_lag", "reference_time"], "velocity_statistics")
    return per_start(ds, lambda part: _one_start(part, spectrum_window, tolerance))


def green_kubo_applicable(ds) -> str:
    """"" when D = κδ + ∫C holds for this ensemble, else the reason it does not."""
    if str(ds.attrs.get("noise_model", "constant")) != "constant":
        return ("not computed: the Green–Kubo form D = kappa delta + integral of C needs a "
                "constant kappa (this run's noise is space-dependent)")
    if str(ds.attrs.get("flow_family", "")) == "obstacles":
        return ("not computed: with solid walls the molecular part of D is not kappa (the "
                "walls hinder diffusion), so D = kappa delta + integral of C does not hold")
    kappa = ds.attrs.get("kappa")
    try:
        if not math.isfinite(float(kappa)):
            raise ValueError
    except (TypeError, ValueError):
        return "not computed: the Dataset does not record kappa"
    return ""


def _one_start(part, window, tolerance):
    lag = np.asarray(part["correlation_lag"].values, dtype=float)
    n_freq = max(4 * lag.size, 256) + 1
    corr = {p: np.asarray(part[f"velocity_correlation_{p}"].transpose(
        "reference_time", "correlation_lag").values, float)[None] for p in _PAIRS}
    lagged = {c: np.asarray(part[f"lagged_velocity_{c}"].transpose(
        "reference_time", "correlation_lag").values, float)[None] for c in "xy"}
    full = {k: v[0] for k, v in _estimates(corr, lagged, lag, window, n_freq).items()}
    se = {k: np.full_like(v, np.nan) for k, v in full.items()}
    batch_names = [f"batch_velocity_correlation_{p}" for p in _PAIRS] + [
        f"batch_lagged_velocity_{c}" for c in "xy"]
    if "batch_count" in part.variables and all(n in part.variables for n in batch_names):
        counts = part["batch_count"].values
        order = ("batch", "reference_time", "correlation_lag")
        rep_corr = {p: pooled_replicates(counts, part[f"batch_velocity_correlation_{p}"]
                                         .transpose(*order).values) for p in _PAIRS}
        rep_lag = {c: pooled_replicates(counts, part[f"batch_lagged_velocity_{c}"]
                                        .transpose(*order).values) for c in "xy"}
        if all(v is not None for v in (*rep_corr.values(), *rep_lag.values())):
            reps = _estimates(rep_corr, rep_lag, lag, window, n_freq)
            se = {k: jackknife_se(v) for k, v in reps.items()}
    tunits = str(part["correlation_lag"].attrs.get("units", "1"))
    # the MSD's units are length²: velocity² is that per time squared
    lunits = str(part["msd"].attrs.get("units", "1")) if "msd" in part.variables else "1"
    vv = per_time(per_time(lunits, tunits), tunits)
    diffusivity = per_time(lunits, tunits)
    spectrum_units = per_time(lunits, tunits)  # velocity² × time
    dims = ("reference_time", "correlation_lag")
    frequency = 2.0 * np.pi * np.arange(n_freq) / (2 * (n_freq - 1) * (lag[1] - lag[0]))
    estimator = ("centred pair means; delete-one-batch jackknife standard error over the "
                 "particle batches")
    out = {}

    def put(name, key, dims_, long_name, units, **attrs):
        out[name] = var(dims_, full[key], long_name, units, estimator=estimator, **attrs)
        out[name + "_se"] = var(dims_, se[key], f"standard error of {name}", units)

    for p in _PAIRS:
        put(f"velocity_covariance_{p}", f"cov_{p}", dims,
            f"Lagrangian velocity covariance <u_{p[0]}(t_r) u_{p[1]}(t_r+lag)> - "
            f"<u_{p[0]}(t_r)><u_{p[1]}(t_r+lag)>", vv)
    for c in "xy":
        put(f"velocity_autocorrelation_{c}", f"rho_{c}", dims,
            f"normalised Lagrangian velocity autocorrelation C_{c}{c}(lag)/C_{c}{c}(0)", "1")
        put(f"lagrangian_integral_time_{c}", f"tl_{c}", ("reference_time",),
            f"Lagrangian integral time: integral of C_{c}{c} over the lag window / C_{c}{c}(0)",
            tunits)
    for p in ("xx", "yy", "xy"):
        put(f"velocity_correlation_integral_{p}", f"int_{p}", dims,
            f"running integral of the symmetrised velocity covariance C_{p} from 0 to lag "
            "(trapezoidal rule)", diffusivity)
    reason = green_kubo_applicable(part)
    kappa = float(part.attrs.get("kappa", math.nan)) if not reason else math.nan
    gk = {}
    nan = float("nan")
    for p in ("xx", "yy", "xy"):
        delta = kappa if p != "xy" else 0.0
        value = float(full[f"gk_{p}"]) + delta if not reason else nan
        error = float(se[f"gk_{p}"]) if not reason else nan
        gk[p] = (value, error)
        attrs = {"estimator": "kappa delta_ij + integral over the whole lag window of the "
                 "symmetrised velocity covariance averaged over the reference times (Taylor "
                 "1921; Kubo 1957); delete-one-batch jackknife se"}
        if reason:
            attrs["comment"] = reason
        elif str(part.get("start_kind", xr.DataArray("uniform")).values) != "uniform":
            attrs["comment"] = ("the start region is not the stationary (uniform) ensemble: "
                                "this integral need not equal the long-time diffusivity")
        elif str(part.attrs.get("flow_family", "")) in TIME_PERIODIC_FAMILIES:
            attrs["comment"] = ("time-periodic flow: the long-time diffusivity is this "
                                "integral averaged over reference times spread uniformly over "
                                "one flow period; other reference times only approximate it")
        out[f"green_kubo_D_{p}"] = var((), value,
                                       f"Green-Kubo diffusivity D_{p}", diffusivity, **attrs)
        out[f"green_kubo_D_{p}_se"] = var((), error,
                                          f"standard error of green_kubo_D_{p}", diffusivity)
    for p in ("xx", "yy", "xy"):
        delta = kappa if p != "xy" else 0.0
        running = full[f"gk_running_{p}"] + delta
        attrs = {"comment": reason} if reason else {}
        out[f"green_kubo_running_D_{p}"] = var(
            ("correlation_lag",), running if not reason else np.full(lag.size, np.nan),
            f"kappa delta + running integral of the symmetrised velocity covariance C_{p} "
            "averaged over the reference times (tends to the Green-Kubo D_{p})", diffusivity,
            **attrs)
        out[f"green_kubo_running_D_{p}_se"] = var(
            ("correlation_lag",), se[f"gk_running_{p}"] if not reason
            else np.full(lag.size, np.nan), f"standard error of green_kubo_running_D_{p}",
            diffusivity)
    eff = 0.5 * (gk["xx"][0] + gk["yy"][0])
    eff_se = float(se["half_trace"]) if not reason else nan
    out["green_kubo_D_eff"] = var((), eff,
                                  "Green-Kubo diffusivity (D_xx + D_yy)/2", diffusivity,
                                  **{k: v for k, v in out["green_kubo_D_xx"].attrs.items()
                                     if k in ("estimator", "comment")})
    out["green_kubo_D_eff_se"] = var((), eff_se,
                                     "standard error of green_kubo_D_eff", diffusivity)
    put("green_kubo_tail", "tail", (),
        "change of the integral of C_xx + C_yy (averaged over reference times) over the last "
        "quarter of the lag window", diffusivity)
    scale = tolerance * abs(2.0 * float(full["half_trace"]) + (0.0 if reason else 2 * kappa))
    tail = abs(float(full["tail"]))
    noise = 3.0 * float(np.nan_to_num(se["tail"], nan=np.inf))
    flag = np.int8(NOT_CONVERGED if tail > max(noise, scale)
                   else CONVERGED if noise <= scale else UNDETERMINED)
    if flag == NOT_CONVERGED and not reason:
        for p in ("xx", "yy", "xy", "eff"):
            out[f"green_kubo_D_{p}"].attrs["comment"] = (
                "NOT CONVERGED: the integral still changes over the last quarter of the lag "
                "window; this is not a long-time diffusivity (raise velocity_correlation."
                "lag_max)")
    out["green_kubo_converged"] = var(
        (), flag, "has the Green-Kubo integral converged within the lag "
        "window", None, flag_values=np.array([0, 1, 2], dtype=np.int8),
        flag_meanings="not_converged converged undetermined", tolerance=tolerance)
    fdims = ("reference_time", "angular_frequency")
    for c in "xy":
        put(f"velocity_spectrum_{c}", f"spec_{c}", fdims,
            f"power spectrum of the Lagrangian velocity u_{c} (two-sided, per unit angular "
            "frequency)", spectrum_units, window=window,
            method=f"Blackman-Tukey: Fourier transform of the {window}-windowed covariance on "
                   "the linear lag grid")
        put(f"velocity_spectrum_mean_{c}", f"spec_mean_{c}", ("angular_frequency",),
            f"power spectrum of the Lagrangian velocity u_{c} from the covariance averaged "
            "over the reference times (two-sided, per unit angular frequency)", spectrum_units,
            window=window, method=f"Blackman-Tukey: Fourier transform of the {window}-windowed "
                                  "covariance on the linear lag grid")
    derived = xr.Dataset(out)
    return derived.assign_coords(
        angular_frequency=("angular_frequency", frequency,
                           {"long_name": "angular frequency omega of the velocity spectrum",
                            "units": per_time("1", tunits)}),
        correlation_lag=part["correlation_lag"], reference_time=part["reference_time"])
