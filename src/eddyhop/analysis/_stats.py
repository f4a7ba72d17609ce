"""Estimators shared by the analyses: local log-log slopes, late-time windows, jackknife.

Uncertainties come from the particle *batches* the engine writes (``batch_count``,
``batch_msd_x`` ...): contiguous, independent groups of particles.  For a derived quantity
θ = f(means) we form the delete-one-batch replicates θ₍b₎ from the pooled means of all other
batches and use the jackknife standard error
    se(θ) = sqrt((B − 1)/B · Σ_b (θ₍b₎ − θ̄)²)
(Quenouille–Tukey jackknife; Efron & Tibshirani 1993, *An Introduction to the Bootstrap*,
ch. 11, eq. 11.5 — equation number from memory), which handles nonlinear f (slopes of
logarithms, variances, intersections).
Without batch variables (e.g. deterministic reference results) replicates are ``None`` and
uncertainties are reported as NaN.
"""

from __future__ import annotations

import math

import numpy as np

# Dataset variable -> how to rebuild it from per-batch means
_BATCH_SOURCES = {
    "msd_x": ("batch_msd_x",),
    "msd_y": ("batch_msd_y",),
    "msd": ("batch_msd_x", "batch_msd_y"),
    "msd_xy": ("batch_msd_xy",),
    "mean_dx": ("batch_mean_dx",),
    "mean_dy": ("batch_mean_dy",),
    "aged_msd": ("batch_aged_msd",),
    "abs_moment": ("batch_abs_moment",),
}


def local_log_slope(t: np.ndarray, y: np.ndarray, window: float) -> np.ndarray:
    """d ln y / d ln t at every t by local linear regression of ln y on ln t.

    Tricube weights w = (1 − |Δ|³/h³)³ with Δ the distance in log10 t and h = window/2
    decades; where fewer than 3 valid points fall inside, h widens to reach the 3 nearest.
    At the ends the window is one-sided.  ``y`` may have leading dimensions (time last);
    non-positive or non-finite y are ignored.  Returns NaN where fewer than 3 points exist.
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        lt = np.log10(np.where(t > 0, t, np.nan))
        ly = np.where((y > 0) & np.isfinite(y), np.log(np.where(y > 0, y, 1.0)), np.nan)
    shape = y.shape
    rows = ly.reshape(-1, shape[-1])
    out = np.full(rows.shape, np.nan)
    half = 0.5 * window
    valid_t = np.isfinite(lt)
    for i in range(lt.size):
        if not valid_t[i]:
            continue
        distance = np.abs(lt - lt[i])
        distance[~valid_t] = np.inf
        order = np.sort(distance[np.isfinite(distance)])
        if order.size < 3:
            continue
        h = max(half, order[2] * (1 + 1e-9))
        inside = distance < h
        base = (1.0 - (distance[inside] / h) ** 3) ** 3
        x = lt[inside] * math.log(10.0)  # ln t
        yy = rows[:, inside]
        w = np.where(np.isfinite(yy), base[None, :], 0.0)
        yy = np.where(np.isfinite(yy), yy, 0.0)
        s0 = w.sum(axis=1)
        sx = (w * x).sum(axis=1)
        sy = (w * yy).sum(axis=1)
        sxx = (w * x * x).sum(axis=1)
        sxy = (w * x * yy).sum(axis=1)
        count = (w > 0).sum(axis=1)
        denominator = s0 * sxx - sx * sx
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (s0 * sxy - sx * sy) / denominator
        slope[(count < 3) | ~(np.abs(denominator) > 0)] = np.nan
        out[:, i] = slope
    return out.reshape(shape)


def batch_replicates(ds, name: str, dims=None):
    """Delete-one-batch replicates (B, …) of variable ``name`` (dims ``dims`` after
    ``batch``, default the batch variables' own order), or None without batches."""
    sources = _BATCH_SOURCES.get(name)
    if sources is None or "batch_count" not in ds.variables or any(
            s not in ds.variables for s in sources):
        return None
    counts = np.asarray(ds["batch_count"].values, dtype=np.float64)
    order = ("batch", ...) if dims is None else ("batch", *dims)
    means = sum(np.asarray(ds[s].transpose(*order).values, dtype=np.float64)
                for s in sources)
    return pooled_replicates(counts, means)


def pooled_replicates(counts, means):
    """Delete-one replicates of a pooled mean from per-batch ``counts`` (B,) and ``means``
    (B, …): (Σ n_c m_c − n_b m_b)/(N − n_b).  Empty batches are dropped; None if fewer than
    2 remain.  NaN entries (e.g. invalid aged lags) stay NaN."""
    counts = np.asarray(counts, dtype=np.float64)
    means = np.asarray(means, dtype=np.float64)
    keep = counts > 0
    counts = counts[keep]
    means = means[keep]
    if counts.size < 2:
        return None
    total = np.tensordot(counts, means, axes=(0, 0))
    n = counts.sum()
    shape = (-1,) + (1,) * (means.ndim - 1)
    return (total[None] - counts.reshape(shape) * means) / (n - counts.reshape(shape))


def jackknife_se(replicates, axis: int = 0):
    """Jackknife standard error from delete-one replicates (NaN where any replicate is)."""
    if replicates is None:
        return None
    replicates = np.asarray(replicates, dtype=np.float64)
    b = replicates.shape[axis]
    mean = replicates.mean(axis=axis, keepdims=True)
    return np.sqrt((b - 1) / b * ((replicates - mean) ** 2).sum(axis=axis))


def student_quantile(b: int, confidence: float) -> float:
    """Two-sided Student-t quantile for a jackknife with b replicates (ν = b − 1 d.o.f.).

    The t such that P(|T| < t) = ``confidence`` for T Student-distributed with integer ν.  For
    integer ν that probability has a closed form in θ = arctan(t/√ν) (Abramowitz & Stegun 1964,
    *Handbook of Mathematical Functions*, eqs. 26.7.3 and 26.7.4 — equation numbers from
    memory): a finite sum of positive terms in cos²θ, monotone in θ, which bisection inverts to
    the last bit.  The numbers agree with ``scipy.special.stdtrit`` to ~1e-13 relative
    (``tests/test_stats_quantile.py``); computing them here keeps SciPy, ≈ 0.15 s of imports,
    out of every ``eddyhop run`` (its step check quotes a D_eff interval)."""
    nu = max(int(b) - 1, 1)
    if not 0.0 <= confidence < 1.0:
        raise ValueError(f"confidence must be in [0, 1), got {confidence!r}")
    lo, hi = 0.0, 0.5 * math.pi
    while True:
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        if _t_central_probability(mid, nu) < confidence:
            lo = mid
        else:
            hi = mid
    return math.sqrt(nu) * math.tan(0.5 * (lo + hi))


def _t_central_probability(theta: float, nu: int) -> float:
    """P(|T| < √ν tan θ) for Student's t with integer ν ≥ 1 (A&S 26.7.3 odd ν, 26.7.4 even ν)."""
    c2 = math.cos(theta) ** 2
    s = math.sin(theta)
    if nu % 2 == 0:  # sinθ (1 + ½cos²θ + (1·3)/(2·4)cos⁴θ + … up to cos^(ν−2)θ)
        term, total = 1.0, 1.0
        for j in range(1, nu // 2):
            term *= c2 * (2 * j - 1) / (2 * j)
            total += term
        return s * total
    # odd: (2/π)(θ + sinθ cosθ (1 + (2/3)cos²θ + (2·4)/(3·5)cos⁴θ + … up to cos^(ν−3)θ))
    if nu == 1:
        return 2.0 * theta / math.pi
    term, total = 1.0, 1.0
    for j in range(1, (nu - 1) // 2):
        term *= c2 * (2 * j) / (2 * j + 1)
        total += term
    return 2.0 / math.pi * (theta + s * math.cos(theta) * total)


def late_window(t: np.ndarray, fit_decades: float, fit_start: float | None = None) -> np.ndarray:
    """Boolean mask of the late-time fit window: t ≥ fit_start, or the last ``fit_decades``
    decades of the time axis; at least the last 3 samples."""
    t = np.asarray(t, dtype=np.float64)
    t_last = t[-1]
    start = fit_start if fit_start is not None else t_last * 10.0 ** (-fit_decades)
    mask = t >= start
    if mask.sum() < 3:
        mask = np.zeros(t.size, dtype=bool)
        mask[-min(3, t.size):] = True
    return mask


def ols_slope(x: np.ndarray, y: np.ndarray):
    """Least-squares slope and intercept of y on x along the last axis (y may be batched)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    xm = x.mean()
    ym = y.mean(axis=-1, keepdims=True)
    sxx = ((x - xm) ** 2).sum()
    slope = ((x - xm) * (y - ym)).sum(axis=-1) / sxx
    return slope, ym[..., 0] - slope * xm
