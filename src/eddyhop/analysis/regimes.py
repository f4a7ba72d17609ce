"""Regimes: the time axis cut into labelled intervals by the local exponent α(t).

Classes (tolerances ``ballistic_tolerance`` = b and ``diffusive_tolerance`` = d are options):

===================  ==========================  =====
label                rule                        code
===================  ==========================  =====
``super_ballistic``  α > 2 + b                   4
``ballistic``        |α − 2| ≤ b                 3
``superdiffusive``   1 + d < α < 2 − b           2
``diffusive``        |α − 1| ≤ d                 1
``subdiffusive``     α < 1 − d (trapped)         0
===================  ==========================  =====

Each output time gets a class; runs of equal class form segments; segments shorter than
``min_points`` samples (and times where α is undefined) are merged into the neighbour whose
mean α is closer, repeatedly, shortest first.  A regime reports its first and last sample
time, the mean α over its samples (with a jackknife error over particle batches) and its
label.  The α thresholds are conventions of the field (α = 2 ballistic, 1 diffusive).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from ._common import check_range, per_start, require, var
from ._stats import jackknife_se
from .exponents import DEFAULT_WINDOW, alpha_with_replicates

LABELS = ("subdiffusive", "diffusive", "superdiffusive", "ballistic", "super_ballistic")
DEFAULT_TOLERANCE = 0.2
DEFAULT_MIN_POINTS = 3


@dataclass(frozen=True)
class Segment:
    code: int
    first: int  # index of the first sample
    last: int  # index of the last sample (inclusive)

    @property
    def size(self) -> int:
        return self.last - self.first + 1


def classify(alpha: np.ndarray, ballistic_tolerance: float, diffusive_tolerance: float):
    """Class code per sample (−1 where α is not finite)."""
    b, d = ballistic_tolerance, diffusive_tolerance
    code = np.full(alpha.shape, -1, dtype=np.int64)
    finite = np.isfinite(alpha)
    a = np.where(finite, alpha, 0.0)
    code[finite & (a < 1 - d)] = 0
    code[finite & (np.abs(a - 1) <= d)] = 1
    code[finite & (a > 1 + d) & (a < 2 - b)] = 2
    code[finite & (np.abs(a - 2) <= b)] = 3
    code[finite & (a > 2 + b)] = 4
    # overlapping tolerances (d + b > 1 leaves no superdiffusive band): the nearer reference
    both = finite & (np.abs(a - 1) <= d) & (np.abs(a - 2) <= b)
    code[both] = np.where(np.abs(a[both] - 2) < np.abs(a[both] - 1), 3, 1)
    return code


def _runs(code) -> list[Segment]:
    segments = []
    start = 0
    for i in range(1, code.size + 1):
        if i == code.size or code[i] != code[start]:
            segments.append(Segment(int(code[start]), start, i - 1))
            start = i
    return segments


def _coalesce(segments):
    out = [segments[0]]
    for s in segments[1:]:
        if s.code == out[-1].code:
            out[-1] = Segment(s.code, out[-1].first, s.last)
        else:
            out.append(s)
    return out


def segment(alpha: np.ndarray, ballistic_tolerance=DEFAULT_TOLERANCE,
            diffusive_tolerance=DEFAULT_TOLERANCE, min_points=DEFAULT_MIN_POINTS):
    """Merged segments (list of :class:`Segment`) of a local-exponent series."""
    code = classify(alpha, ballistic_tolerance, diffusive_tolerance)
    if code.size == 0 or np.all(code < 0):
        return []
    # undefined α at the ends (e.g. t = 0) is left out; inside, it joins a neighbour
    defined = np.flatnonzero(code >= 0)
    segments = [Segment(s.code, s.first + defined[0], s.last + defined[0])
                for s in _runs(code[defined[0]:defined[-1] + 1])]

    def mean_alpha(s):
        values = alpha[s.first:s.last + 1]
        values = values[np.isfinite(values)]
        return values.mean() if values.size else np.nan

    def merge(index):
        s = segments[index]
        candidates = []
        for j in (index - 1, index + 1):
            if 0 <= j < len(segments):
                other = segments[j]
                if other.code < 0:
                    continue
                gap = abs(mean_alpha(other) - mean_alpha(s)) if s.code >= 0 else other.size
                candidates.append((gap if np.isfinite(gap) else np.inf, j))
        if not candidates:
            return False
        if s.code < 0:  # undefined α: join the longer neighbour
            _, j = max(candidates)
        else:
            _, j = min(candidates)
        target = segments[j]
        merged = Segment(target.code, min(s.first, target.first), max(s.last, target.last))
        segments[min(index, j)] = merged
        del segments[max(index, j)]
        return True

    # undefined samples first, then short segments (shortest first)
    while any(s.code < 0 for s in segments) and len(segments) > 1:
        index = next(i for i, s in enumerate(segments) if s.code < 0)
        if not merge(index):
            break
        segments[:] = _coalesce(segments)
    while len(segments) > 1:
        short = [(s.size, i) for i, s in enumerate(segments) if s.size < min_points]
        if not short:
            break
        _, index = min(short)
        if not merge(index):
            break
        segments[:] = _coalesce(segments)
    return [s for s in segments if s.code >= 0]


def check_options(ballistic_tolerance, diffusive_tolerance, min_points):
    return (check_range("ballistic_tolerance", ballistic_tolerance, 0.0, 1.0, low_open=True),
            check_range("diffusive_tolerance", diffusive_tolerance, 0.0, 1.0, low_open=True),
            check_range("min_points", min_points, 1, 10**6, integer=True))


def regime_table(part, window, ballistic_tolerance, diffusive_tolerance, min_points):
    """(segments, α, replicates) of one start (shared with the crossover analysis)."""
    alpha, replicates = alpha_with_replicates(part, "msd", window)
    return segment(alpha, ballistic_tolerance, diffusive_tolerance, min_points), alpha, \
        replicates


def regimes(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW,
            ballistic_tolerance: float = DEFAULT_TOLERANCE,
            diffusive_tolerance: float = DEFAULT_TOLERANCE,
            min_points: int = DEFAULT_MIN_POINTS) -> xr.Dataset:
    """The regime table on a ``regime`` dimension (see the module docstring)."""
    b, d, m = check_options(ballistic_tolerance, diffusive_tolerance, min_points)
    require(ds, ["time", "msd"], "regimes")
    units = str(ds["time"].attrs.get("units", "1"))

    def one(part):
        t = part["time"].values
        segments, alpha, replicates = regime_table(part, window, b, d, m)
        n = len(segments)
        start = np.array([t[s.first] for s in segments])
        end = np.array([t[s.last] for s in segments])
        mean = np.array([np.nanmean(alpha[s.first:s.last + 1]) for s in segments])
        if replicates is None:
            se = np.full(n, np.nan)
        else:
            reps = np.array([np.nanmean(replicates[:, s.first:s.last + 1], axis=1)
                             for s in segments]).reshape(n, -1)
            se = jackknife_se(reps, axis=1) if n else np.zeros(0)
        labels = np.array([LABELS[s.code] for s in segments], dtype=f"<U{16}")
        dims = ("regime",)
        out = {
            "regime_label": var(dims, labels, "transport regime (" + ", ".join(LABELS) + ")",
                                tolerances=f"ballistic |alpha-2| <= {b:g}; diffusive "
                                f"|alpha-1| <= {d:g}; min_points {m}"),
            "regime_start": var(dims, start, "first sample time of the regime", units),
            "regime_end": var(dims, end, "last sample time of the regime", units),
            "regime_alpha": var(dims, mean, "mean local exponent alpha over the regime", "1"),
            "regime_alpha_se": var(dims, se, "standard error of regime_alpha (jackknife over "
                                   "particle batches; NaN without batches)", "1"),
            "regime_points": var(dims, np.array([s.size for s in segments], dtype=np.int64),
                                 "number of output times in the regime", "1"),
            "regime_count": var((), np.int64(n), "number of regimes found", "1"),
        }
        return xr.Dataset(out, coords={"regime": np.arange(n)})

    out = per_start(ds, one)
    out = out.assign_coords(regime=np.arange(out.sizes.get("regime", 0)))
    out["regime"].attrs.update({"long_name": "index of a regime in time order", "units": "1"})
    return out
