"""Regimes: the time axis cut into power-law intervals, chosen and labelled statistically.

Method: segmented power-law regression — a continuous broken line fitted to ln MSD against
ln t (the MSD is a power law t^α on each segment and continuous at the breakpoints), with
the number of breakpoints chosen by the Bayesian information criterion (G. Schwarz,
"Estimating the dimension of a model", Annals of Statistics 6(2), 461–464, 1978).  "MSD"
means the second moment :func:`eddyhop.analysis.centring.transport_curve` hands the
analyses (the raw MSD, or the variance when the ensemble mean moves).

Noise model.  The covariance of y = ln MSD across output times is
    Σ = Ĉ + f² I,
Ĉ the delete-one-batch jackknife covariance of y over the particle batches
(Ĉ = (B − 1)/B Σ_b (y₍b₎ − ȳ)(y₍b₎ − ȳ)ᵀ; zero without batches) and f the *model-misfit
floor* ``misfit_floor`` (default 0.05 in ln MSD): a power law is accepted as a description
of the MSD to within about 5 %.  The floor makes the criterion well defined on noise-free
curves (deterministic reference results, where Ĉ = 0) and applies unchanged to Monte Carlo
data; it also regularises Ĉ, whose rank is at most B − 1.  Every fit is generalised least
squares under Σ, so errors common to all times (the same particles are followed) are not
mistaken for structure.

Criterion.  For k breakpoints at output times, χ²(k) = rᵀ Σ⁻¹ r of the best fit and
BIC(k) = χ²(k) + (2 + 2k) ln n (intercept, first exponent, and per breakpoint its position
and the change of exponent; n output times with t > 0).  Every segment must span at least
``min_span`` decades of t (default 0.5) and ``min_points`` output times (3).  The breakpoints
for each k come from greedy forward selection with coordinate-wise refinement (each
breakpoint moved to its best position given the others until none moves) — the exact
search over all placements is not tractable with correlated errors; k runs up to 12.

Labels from confidence intervals.  Each segment's exponent α̂ is the slope of its piece of
the fit, with the interval α̂ ± z·s (z the two-sided normal quantile of ``confidence``,
default 0.95; s the generalised-least-squares standard error under Σ, so it includes the
floor).  Reference exponents 0 (the moment stays bounded), 1 (diffusive) and 2 (ballistic)
have bands of half-width ``bounded_tolerance``, ``diffusive_tolerance`` and
``ballistic_tolerance`` (0.2 each; the bounded band also takes every α below it: a
shrinking moment is bounded).  A segment whose interval meets exactly one band gets that
reference label (the data are consistent with it) — except ``bounded``, the claim that the
moment stops growing, which needs the whole interval within its band (an interval
straddling its top is ``subdiffusive``); an interval meeting two bands is
``undetermined``; an interval meeting none lies wholly in a gap between bands and gets the
gap's anomalous label: ``subdiffusive`` (between bounded and diffusive, trapped),
``superdiffusive`` or ``super_ballistic`` (wholly above 2 + tolerance).  :data:`LABELS` is
the one spelling of the labels for the whole package (index = ``code``).

Regimes and crossovers.  Adjacent segments with the same label are one regime (their
breakpoint is removed and the fit repeated).  An interior segment whose exponent lies
strictly between its neighbours' is the MSD passing *through* a class on its way from one
regime to the next (α crossing 1 between ballistic and trapped spreading) unless a power
law of its own describes it clearly better than a smooth crossover between its neighbours'
power laws, MSD = A t^p + B t^q (p, q the neighbours' exponents, A, B fitted): the
crossover's χ² over the segment (same covariance) must exceed the power law's by more than
ln n, one BIC parameter's worth (both models have two free parameters) — and its exponent
does not drift: the exponent fitted to its second half in ln t may not differ from that of
its first half in the direction of the passage by more than z times their combined
standard error (an exponential approach, e.g. to a bounded moment, is sharper than any
sum of two power laws and is caught by this drift).  A passage is a
crossover interval, not a regime, and is left out of the table (the crossover between its
neighbours is located inside it, :mod:`eddyhop.analysis.crossovers`).

Transient or final.  The last regime is *final* (``regime_final`` = 1) when it reaches the
last output time and the exponent fitted to its later half in log time alone gets the same
label: the latest data on their own support the regime the run ends in.  Every other regime
is transient (0).

Standard errors: ``regime_alpha_se`` is the spread of the exponent over bootstrap resamples
of the particle batches with the whole segmentation repeated on each, so that it includes
where the regime's ends fall (:func:`resampled_spread`; ``regime_resamples`` resamples,
default 50); ``regime_support`` is the share of those resamples that find a regime of the
same label over the regime's middle.  ``regime_alpha_lower``/``_upper`` are the interval
above, which decides the label: it holds the breakpoints where this sample put them, and
on sampled data it can be several times narrower than the standard error (measured in
``tests/test_analysis_regimes.py``), so it is shown only where it explains a label.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
import xarray as xr

from .._blas import one_blas_thread
from ._common import check_range, per_start, require, var
from .centring import BatchResampler, transport_curve

LABELS = ("bounded", "subdiffusive", "diffusive", "superdiffusive", "ballistic",
          "super_ballistic", "undetermined")
CODES = {name: code for code, name in enumerate(LABELS)}
UNDETERMINED = CODES["undetermined"]
DEFAULT_TOLERANCE = 0.2
DEFAULT_BOUNDED_TOLERANCE = 0.2
DEFAULT_MIN_SPAN = 0.5
DEFAULT_MIN_POINTS = 3
DEFAULT_MISFIT_FLOOR = 0.05
DEFAULT_CONFIDENCE = 0.95
DEFAULT_RESAMPLES = 50
MAX_BREAKPOINTS = 12
# seed of the batch resampling: fixed, so the same file always gives the same errors
RESAMPLE_SEED = 20261205


@dataclass(frozen=True)
class Options:
    """Validated regime options (see the module docstring)."""

    ballistic_tolerance: float = DEFAULT_TOLERANCE
    diffusive_tolerance: float = DEFAULT_TOLERANCE
    bounded_tolerance: float = DEFAULT_BOUNDED_TOLERANCE
    min_span: float = DEFAULT_MIN_SPAN
    min_points: int = DEFAULT_MIN_POINTS
    misfit_floor: float = DEFAULT_MISFIT_FLOOR
    confidence: float = DEFAULT_CONFIDENCE
    resamples: int = DEFAULT_RESAMPLES

    @functools.cached_property
    def z(self) -> float:
        from scipy import stats

        return float(stats.norm.ppf(0.5 + 0.5 * self.confidence))

    def describe(self) -> str:
        return (f"bands: bounded alpha <= {self.bounded_tolerance:g}, diffusive "
                f"|alpha-1| <= {self.diffusive_tolerance:g}, ballistic |alpha-2| <= "
                f"{self.ballistic_tolerance:g}; label from the {self.confidence:g} interval; "
                f"min span {self.min_span:g} decades and {self.min_points} times; misfit "
                f"floor {self.misfit_floor:g} in ln MSD; breakpoints by BIC")


def check_options(ballistic_tolerance=DEFAULT_TOLERANCE, diffusive_tolerance=DEFAULT_TOLERANCE,
                  bounded_tolerance=DEFAULT_BOUNDED_TOLERANCE, min_span=DEFAULT_MIN_SPAN,
                  min_points=DEFAULT_MIN_POINTS, misfit_floor=DEFAULT_MISFIT_FLOOR,
                  confidence=DEFAULT_CONFIDENCE, resamples=DEFAULT_RESAMPLES) -> Options:
    """:class:`Options` from raw values; out-of-range values raise AnalysisOptionError.
    Tolerances are at most 0.5 so that the bands of 0, 1 and 2 do not overlap."""
    return Options(
        check_range("ballistic_tolerance", ballistic_tolerance, 0.0, 0.5, low_open=True),
        check_range("diffusive_tolerance", diffusive_tolerance, 0.0, 0.5, low_open=True),
        check_range("bounded_tolerance", bounded_tolerance, 0.0, 0.5, low_open=True),
        check_range("min_span", min_span, 0.0, 10.0, low_open=True),
        check_range("min_points", min_points, 2, 10**6, integer=True),
        check_range("misfit_floor", misfit_floor, 0.0, 10.0, low_open=True),
        check_range("confidence", confidence, 0.0, 1.0, low_open=True, high_open=True),
        check_range("regime_resamples", resamples, 0, 100000, integer=True))


def class_edges(options: Options):
    """(lower, upper) α edge of every determined class, indexed by code (0 … 5)."""
    bt, d, b = options.bounded_tolerance, options.diffusive_tolerance, \
        options.ballistic_tolerance
    return ((-math.inf, bt), (bt, 1 - d), (1 - d, 1 + d), (1 + d, 2 - b), (2 - b, 2 + b),
            (2 + b, math.inf))


def representative_exponent(code: int, options: Options) -> float:
    """The exponent a class stands for: 0, 1, 2 for bounded, diffusive, ballistic; the
    centre of the gap for subdiffusive and superdiffusive; 2 + 2·ballistic_tolerance for
    super_ballistic (as far above the band as its centre is above 2); NaN if undetermined."""
    if code == UNDETERMINED:
        return math.nan
    if code == CODES["super_ballistic"]:
        return 2.0 + 2.0 * options.ballistic_tolerance
    if code in (CODES["bounded"], CODES["diffusive"], CODES["ballistic"]):
        return float(code // 2)
    low, high = class_edges(options)[code]
    return 0.5 * (low + high)


def label_code(alpha: float, lower: float, upper: float, options: Options) -> int:
    """Class code of an exponent α̂ with interval [lower, upper] (module docstring rule)."""
    if not (np.isfinite(alpha) and np.isfinite(lower) and np.isfinite(upper)):
        return UNDETERMINED
    edges = class_edges(options)
    met = [code for code in (CODES["bounded"], CODES["diffusive"], CODES["ballistic"])
           if upper >= edges[code][0] and lower <= edges[code][1]]
    if len(met) > 1:
        return UNDETERMINED
    if met == [CODES["bounded"]]:
        # bounded is the claim that the moment stops growing: the whole interval must lie
        # at or below the band's top; an interval straddling it is (weakly) subdiffusive
        return CODES["bounded"] if upper <= edges[CODES["bounded"]][1] else \
            CODES["subdiffusive"]
    if met:
        return met[0]
    return next(code for code, (low, high) in enumerate(edges) if low < alpha <= high)


# ---- generalised least squares under Σ = Ĉ + f² I ---------------------------------------------
class _Whitener:
    """Σ = Ĉ + f² I over the selected output times and the whitened (L⁻¹·, Σ = LLᵀ) data,
    columns 1 and x, and hinge (x − x_c)₊ of every candidate breakpoint c, computed once."""

    def __init__(self, x, y, replicates, floor):
        from scipy.linalg import lapack, solve_triangular

        self._lapack = lapack
        self._compatible = None
        n = y.size
        cov = np.zeros((n, n))
        if replicates is not None:
            b = replicates.shape[0]
            deviation = replicates - replicates.mean(axis=0)
            cov = (b - 1) / b * deviation.T @ deviation
        self.sigma = cov + floor**2 * np.eye(n)
        factor = np.linalg.cholesky(self.sigma)
        self.solve = lambda a: solve_triangular(factor, a, lower=True, check_finite=False)
        self.base = self.solve(np.stack([np.ones(n), x], axis=1))
        self.hinges = self.solve(np.maximum(x[:, None] - x[None, :], 0.0))
        self.y = self.solve(y)

    def design(self, breaks):
        """Whitened design of the continuous broken line with the given breakpoints."""
        return np.concatenate([self.base, self.hinges[:, list(breaks)]], axis=1)

    def orthonormal(self, breaks):
        """Q of the reduced QR decomposition of :meth:`design` (LAPACK dgeqrf and dorgqr,
        which ``numpy.linalg.qr`` calls too, without its per-call checks: a segmentation
        makes dozens of these, and every bootstrap resample repeats it)."""
        design = self.design(breaks)
        if design.shape[0] < design.shape[1]:  # fewer times than columns: dorgqr needs m ≥ n
            return np.linalg.qr(design)[0]
        factored, tau, _, _ = self._lapack.dgeqrf(design)
        q, _, _ = self._lapack.dorgqr(factored, tau)
        return q[:, :design.shape[1]]

    def allowed(self, x, breaks, min_ln, min_points):
        """Output-time indices where a further breakpoint keeps every segment ≥ the minimum
        span (ln t) and ≥ min_points times (a breakpoint time ends its left segment); the
        pairwise table is built once per whitener."""
        if self._compatible is None or self._compatible[0] != (min_ln, min_points):
            index = np.arange(x.size)
            free = (x - x[0] >= min_ln) & (x[-1] - x >= min_ln)
            free &= (index >= min_points - 1) & (index <= x.size - 1 - min_points)
            pairs = (np.abs(x[:, None] - x[None, :]) >= min_ln) & (
                np.abs(index[:, None] - index[None, :]) >= min_points)
            self._compatible = ((min_ln, min_points), free, pairs)
        _, free, pairs = self._compatible
        if not breaks:
            return free
        return free & pairs[list(breaks)].all(axis=0)


def _residual_norm(whiten, breaks):
    q = whiten.orthonormal(breaks)
    r = whiten.y - q @ (q.T @ whiten.y)
    return float(r @ r)


def _best_addition(x, whiten, breaks, min_ln, min_points):
    """(index, χ²) of the single breakpoint whose addition lowers χ² most, or (None, inf)."""
    candidates = np.flatnonzero(whiten.allowed(x, breaks, min_ln, min_points))
    if candidates.size == 0:
        return None, math.inf
    q = whiten.orthonormal(breaks)
    residual = whiten.y - q @ (q.T @ whiten.y)
    hinges = whiten.hinges[:, candidates]
    hinges = hinges - q @ (q.T @ hinges)
    norm = (hinges * hinges).sum(axis=0)
    projected = residual @ hinges
    gain = np.zeros_like(norm)
    np.divide(projected * projected, norm, out=gain, where=norm > 1e-300)
    best = int(np.argmax(gain))
    return int(candidates[best]), float(residual @ residual - gain[best])


def _refine(x, whiten, breaks, min_ln, min_points, passes=10):
    """Move each breakpoint to its best position given the others, until none moves."""
    breaks = sorted(breaks)
    current = _residual_norm(whiten, breaks)
    for _ in range(passes):
        moved = False
        for j in range(len(breaks)):
            others = breaks[:j] + breaks[j + 1:]
            index, cost = _best_addition(x, whiten, others, min_ln, min_points)
            if index is not None and index != breaks[j] and cost < current * (1 - 1e-12):
                breaks = sorted([*others, index])
                current = cost
                moved = True
        if not moved:
            break
    return breaks, current


def choose_breakpoints(x, whiten, min_ln, min_points):
    """(breakpoint indices, table of (k, χ², BIC)) minimising BIC over k = 0 … 12 (the
    search stops at the first k whose penalty alone, (2 + 2k) ln n, reaches the lowest BIC
    so far: with χ² ≥ 0 no larger k can win, so the choice is the same)."""
    n = x.size
    breaks: list[int] = []
    table = [(0, _residual_norm(whiten, breaks))]
    fits = {0: []}
    lowest = table[0][1] + 2 * math.log(n)
    for k in range(1, MAX_BREAKPOINTS + 1):
        if (2 + 2 * k) * math.log(n) >= lowest:
            break  # χ² ≥ 0: the penalty alone already exceeds the best BIC, for every k on
        index, _ = _best_addition(x, whiten, breaks, min_ln, min_points)
        if index is None:
            break
        breaks, chi2 = _refine(x, whiten, [*breaks, index], min_ln, min_points)
        table.append((k, chi2))
        fits[k] = breaks
        lowest = min(lowest, chi2 + (2 + 2 * k) * math.log(n))
    scored = [(k, chi2, chi2 + (2 + 2 * k) * math.log(n)) for k, chi2 in table]
    best = min(scored, key=lambda row: row[2])[0]
    return list(fits[best]), scored


def _broken_line(whiten, breaks):
    """Exponents of the segments of the GLS broken line (k + 1,) and their GLS standard
    errors under Σ."""
    xw = whiten.design(breaks)
    pinv = np.linalg.pinv(xw)
    cumulative = np.tril(np.ones((len(breaks) + 1,) * 2))
    slopes = cumulative @ (pinv @ whiten.y)[1:]
    covariance = np.linalg.inv(xw.T @ xw)[1:, 1:]
    se = np.sqrt(np.diag(cumulative @ covariance @ cumulative.T))
    return slopes, se


def _line(x, sigma, y, index):
    """GLS slope and its standard error of one straight line through the times ``index``."""
    sub = sigma[np.ix_(index, index)]
    factor = np.linalg.cholesky(sub)
    from scipy.linalg import solve_triangular

    xw = solve_triangular(factor, np.stack([np.ones(index.size), x[index]], axis=1), lower=True)
    yw = solve_triangular(factor, y[index], lower=True)
    beta, *_ = np.linalg.lstsq(xw, yw, rcond=None)
    return float(beta[1]), float(math.sqrt(np.linalg.inv(xw.T @ xw)[1, 1]))


def _halves(x, sigma, y, first, last, min_points):
    """Exponents (and se) of the first and second halves in ln t of samples first…last, or
    None when a half has fewer than ``min_points`` samples."""
    middle = 0.5 * (x[first] + x[last])
    index = np.arange(first, last + 1)
    early, late = index[x[index] <= middle], index[x[index] > middle]
    if early.size < max(min_points, 2) or late.size < max(min_points, 2):
        return None
    return _line(x, sigma, y, early), _line(x, sigma, y, late)


def _passage(x, sigma, y, first, last, p, q) -> bool:
    """True when the samples first…last are explained about as well by a smooth crossover
    between the neighbouring power laws, MSD = A t^p + B t^q (A, B ≥ 0 free; p, q the
    neighbours' exponents), as by a power law of their own: χ²(crossover) − χ²(power law)
    ≤ ln n under the covariance Σ restricted to these samples (both models have two free
    parameters; a regime must win by one BIC parameter's worth, ln n, n = all output
    times)."""
    from scipy.linalg import solve_triangular
    from scipy.optimize import least_squares

    index = np.arange(first, last + 1)
    factor = np.linalg.cholesky(sigma[np.ix_(index, index)])
    xs, ys = x[index], y[index]
    line = solve_triangular(factor, np.stack([np.ones(index.size), xs], axis=1), lower=True)
    target = solve_triangular(factor, ys, lower=True)
    basis, _ = np.linalg.qr(line)
    rest = target - basis @ (basis.T @ target)
    power_law = float(rest @ rest)

    def residual(params):
        low, high = params[0] + p * xs, params[1] + q * xs  # ln A t^p, ln B t^q
        top = np.maximum(low, high)
        model = top + np.log(np.exp(low - top) + np.exp(high - top))
        return solve_triangular(factor, model - ys, lower=True, check_finite=False)

    start = np.array([ys[0] - p * xs[0], ys[-1] - q * xs[-1]])
    crossover = least_squares(residual, start, method="lm").fun
    return float(crossover @ crossover) - power_law <= math.log(y.size)


@dataclass(frozen=True)
class Segment:
    """One regime: class ``code`` (index in :data:`LABELS`), samples first…last (indices
    into the start's time axis, inclusive), exponent, the ends of the interval that decided
    its label, final flag (the standard error comes from :func:`resampled_spread`)."""

    code: int
    first: int
    last: int
    alpha: float = math.nan
    lower: float = math.nan
    upper: float = math.nan
    final: bool = False

    @property
    def size(self) -> int:
        return self.last - self.first + 1

    @property
    def label(self) -> str:
        return LABELS[self.code]


def segment_curve(t, values, replicates, options: Options):
    """Regimes (list of :class:`Segment`) of one second-moment curve ``values`` on times
    ``t`` with delete-one-batch replicates (B, T) or None, and a dict describing the fit
    (``breakpoints_bic``: the count BIC chose; ``bic``: rows (k, χ², BIC))."""
    t = np.asarray(t, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        usable = (t > 0) & np.isfinite(values) & (values > 0)
        if replicates is not None:
            replicates = np.asarray(replicates, dtype=np.float64)
            usable &= np.all(np.isfinite(replicates) & (replicates > 0), axis=0)
    index = np.flatnonzero(usable)
    info = {"breakpoints_bic": 0, "bic": []}
    if index.size < max(options.min_points, 2):
        return [], info
    x = np.log(t[index])
    y = np.log(values[index])
    reps = None if replicates is None else np.log(replicates[:, index])
    if reps is not None and reps.shape[0] < 2:
        reps = None
    whiten = _Whitener(x, y, reps, options.misfit_floor)
    min_ln = options.min_span * math.log(10.0)
    breaks, table = choose_breakpoints(x, whiten, min_ln, options.min_points)
    info = {"breakpoints_bic": len(breaks), "bic": table}
    z = options.z

    def fitted(breaks):
        slopes, model_se = _broken_line(whiten, breaks)
        codes = [label_code(a, a - z * s, a + z * s, options) for a, s in zip(slopes, model_se)]
        return slopes, model_se, codes

    slopes, model_se, codes = fitted(breaks)
    # adjacent segments with one label are one regime
    while True:
        same = [j for j in range(len(codes) - 1) if codes[j] == codes[j + 1]
                and codes[j] != UNDETERMINED]
        if not same:
            break
        del breaks[same[0]]
        slopes, model_se, codes = fitted(breaks)
    bounds = [(0 if j == 0 else breaks[j - 1] + 1, breaks[j] if j < len(breaks) else x.size - 1)
              for j in range(len(breaks) + 1)]
    # interior segments passing through a class between their neighbours are crossovers
    passing = set()
    for j in range(1, len(slopes) - 1):
        rising = slopes[j - 1] < slopes[j] < slopes[j + 1]
        falling = slopes[j - 1] > slopes[j] > slopes[j + 1]
        if not (rising or falling):
            continue
        first, last = bounds[j]
        if _passage(x, whiten.sigma, y, first, last, slopes[j - 1], slopes[j + 1]):
            passing.add(j)
            continue
        halves = _halves(x, whiten.sigma, y, first, last, options.min_points)
        if halves is None:
            passing.add(j)
            continue
        (early, early_se), (late, late_se) = halves
        if (late - early if rising else early - late) > z * math.hypot(early_se, late_se):
            passing.add(j)
    out = []
    for j, (first, last) in enumerate(bounds):
        if j in passing:
            continue
        out.append(Segment(codes[j], int(index[first]), int(index[last]), float(slopes[j]),
                           float(slopes[j] - z * model_se[j]),
                           float(slopes[j] + z * model_se[j])))
    if out and out[-1].last == index[-1]:
        first = int(np.searchsorted(index, out[-1].first))
        halves = _halves(x, whiten.sigma, y, first, x.size - 1, options.min_points)
        if halves is not None:
            late, late_se = halves[1]
            if label_code(late, late - z * late_se, late + z * late_se, options) == \
                    out[-1].code:
                last = out[-1]
                out[-1] = Segment(last.code, last.first, last.last, last.alpha, last.lower,
                                  last.upper, True)
    return out, info


def regime_segments(part, options: Options):
    """(segments, fit info, name of the moment used) of one start region."""
    values, replicates, name = transport_curve(part, "total")
    segments, info = segment_curve(part["time"].values, values, replicates, options)
    return segments, info, name


def resampled_spread(part, segments, options: Options):
    """Per regime of ``segments`` (from :func:`regime_segments`): the standard error of its
    exponent over bootstrap resamples of the particle batches with the whole segmentation
    repeated on each (breakpoints re-chosen), and its support, the share of resamples in
    which a regime of the same label covers its middle (in ln t).

    Each resample draws as many batches as there are, with replacement (Efron & Tibshirani
    1993, *An Introduction to the Bootstrap*, Chapman & Hall, ch. 6: the bootstrap standard
    error), from a generator seeded with :data:`RESAMPLE_SEED`, so a file always gives the
    same errors.  The standard error is the spread (``ddof`` 1) of the exponent of the
    resample's regime over the regime's middle, whatever its label: a regime whose label the
    resamples do not keep (an exponent near the edge of a band) has the spread of the
    exponent fitted there, not only that of the resamples that agree.  NaN without batches,
    with ``resamples`` = 0, or when fewer than two resamples have a regime there (a passage
    in most of them).  Why not the delete-one jackknife: where a regime ends moves with the
    sample, a discontinuous choice, and the jackknife, which perturbs the sample by one batch
    at a time, misses that movement (Efron & Tibshirani 1993, §11.6: the jackknife fails for
    non-smooth statistics such as the median)."""
    count = len(segments)
    nan = np.full(count, np.nan)
    resampler = BatchResampler(part)
    if count == 0 or options.resamples == 0 or not resampler.available:
        return nan, nan.copy()
    filled = resampler.filled()
    if filled.size < 2:
        return nan, nan.copy()
    t = np.asarray(part["time"].values, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_t = np.log(t)
    middles = [0.5 * (log_t[s.first] + log_t[s.last]) for s in segments]
    generator = np.random.default_rng(RESAMPLE_SEED)
    exponents = [[] for _ in segments]
    same_label = np.zeros(count)
    with one_blas_thread():  # tiny matrices: BLAS threads would only busy-wait
        for _ in range(options.resamples):
            batches = filled[generator.integers(0, filled.size, filled.size)]
            trial, _ = segment_curve(t, *resampler.curve(batches), options)
            for j, (segment, middle) in enumerate(zip(segments, middles)):
                for other in trial:
                    if log_t[other.first] <= middle <= log_t[other.last]:
                        exponents[j].append(other.alpha)
                        same_label[j] += other.code == segment.code
                        break
    spread = np.array([np.std(a, ddof=1) if len(a) >= 2 else np.nan for a in exponents])
    return spread, same_label / options.resamples


def regimes(ds: xr.Dataset, *, ballistic_tolerance: float = DEFAULT_TOLERANCE,
            diffusive_tolerance: float = DEFAULT_TOLERANCE,
            bounded_tolerance: float = DEFAULT_BOUNDED_TOLERANCE,
            min_span: float = DEFAULT_MIN_SPAN, min_points: int = DEFAULT_MIN_POINTS,
            misfit_floor: float = DEFAULT_MISFIT_FLOOR,
            confidence: float = DEFAULT_CONFIDENCE,
            regime_resamples: int = DEFAULT_RESAMPLES) -> xr.Dataset:
    """The regime table on a ``regime`` dimension (see the module docstring for the method,
    criterion, labels and the meaning of every option; ``regime_resamples``: the batch
    resamples behind ``regime_alpha_se`` and ``regime_support``, 0 to skip them, see
    :func:`resampled_spread`).  Times in the Dataset's time units; exponents dimensionless."""
    options = check_options(ballistic_tolerance, diffusive_tolerance, bounded_tolerance,
                            min_span, min_points, misfit_floor, confidence, regime_resamples)
    require(ds, ["time", "msd"], "regimes")
    units = str(ds["time"].attrs.get("units", "1"))
    criterion = ("segmented power-law regression of ln MSD on ln t, breakpoints by BIC "
                 "(Schwarz 1978) under the covariance jackknife(ln MSD) + misfit_floor^2 I")

    def one(part):
        t = part["time"].values
        segments, info, moment = regime_segments(part, options)
        n = len(segments)
        spread, support = resampled_spread(part, segments, options)

        def column(name):
            return np.array([getattr(s, name) for s in segments], dtype=np.float64)

        labels = np.array([s.label for s in segments], dtype="<U16")
        dims = ("regime",)
        out = {
            "regime_label": var(dims, labels, "transport regime (" + ", ".join(LABELS) + ")",
                                tolerances=options.describe(), criterion=criterion,
                                labels=" ".join(LABELS), moment=moment),
            "regime_start": var(dims, np.array([t[s.first] for s in segments], dtype=float),
                                "first sample time of the regime", units),
            "regime_end": var(dims, np.array([t[s.last] for s in segments], dtype=float),
                              "last sample time of the regime", units),
            "regime_alpha": var(dims, column("alpha"), "exponent of the power law fitted over "
                                "the regime (segmented regression of ln MSD on ln t)", "1"),
            "regime_alpha_se": var(dims, spread, "standard error of regime_alpha from "
                                   "sampling, where the regime ends included (bootstrap over "
                                   "particle batches, breakpoints re-chosen on every "
                                   "resample; NaN without batches)", "1",
                                   resamples=options.resamples),
            "regime_support": var(dims, support, "share of the batch resamples in which a "
                                  "regime of the same label covers this regime's middle "
                                  "(in ln t); NaN without batches", "1",
                                  resamples=options.resamples),
            "regime_alpha_lower": var(dims, column("lower"), f"lower end of the "
                                      f"{options.confidence:g} interval of regime_alpha "
                                      "(sampling covariance plus misfit floor); decides the "
                                      "label", "1"),
            "regime_alpha_upper": var(dims, column("upper"), f"upper end of the "
                                      f"{options.confidence:g} interval of regime_alpha", "1"),
            "regime_points": var(dims, np.array([s.size for s in segments], dtype=np.int64),
                                 "number of output times in the regime", "1"),
            "regime_final": var(dims, np.array([int(s.final) for s in segments],
                                               dtype=np.int64),
                                "1 for the regime the run ends in when the later half of "
                                "it alone gets the same label (final), 0 for a transient "
                                "regime", "1", flag_values=[0, 1],
                                flag_meanings="transient final"),
            "regime_count": var((), np.int64(n), "number of regimes found", "1"),
            "regime_breakpoints_bic": var((), np.int64(info["breakpoints_bic"]),
                                          "number of breakpoints chosen by BIC before equal "
                                          "labels were joined and passages through a class "
                                          "removed", "1"),
        }
        return xr.Dataset(out, coords={"regime": np.arange(n)})

    out = per_start(ds, one)
    out = out.assign_coords(regime=np.arange(out.sizes.get("regime", 0)))
    out["regime"].attrs.update({"long_name": "index of a regime in time order", "units": "1"})
    return out
