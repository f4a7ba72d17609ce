"""Which second moment carries the transport: the displacement variance (centred moment).

:func:`transport_curve` is the one place the analyses (local exponent, regimes, crossovers,
D_eff) get the curve whose growth they interpret, with its delete-one-batch replicates.

Decision rule: **always centre** when the Dataset has the mean displacement (``mean_dx``,
``mean_dy``; every Monte Carlo and reference result has them): the curve is the variance
Var Δx = msd_x − mean_dx², Var Δy, their sum, or Cov(Δx, Δy) = msd_xy − mean_dx·mean_dy.
Each delete-one-batch replicate is centred with its own mean (from ``batch_mean_dx`` …), so
the jackknife sees the sampling error of the mean as well.  Only a Dataset without the mean
(e.g. a hand-made one holding ``msd`` alone) falls back to the raw MSD.

Why always, and not after a significance test on the mean: a test is a discontinuous switch
(runs near its threshold would flip between the two curves from seed to seed), and below the
threshold it leaves an uncorrected bias of up to z² Var/N; always centring costs nothing when
the true mean is zero.  There the sample mean m of N particles has E[m²] = Var/N, so the
centred curve sits a relative 1/N below the MSD, while the MSD's own relative standard error
is √((K − 1)/N) (K = E d⁴/(E d²)², 3 for a Gaussian, 2.25 for the early ballistic spread of
uniform starts in the cellular flow): the shift is 1/√((K − 1)N) of a standard error (about
0.06 se at N = 200 and 0.02 se at N = 2000 for K = 2.25).  The local exponent, a log-slope,
sees only the change of m²/MSD across its window, which is O(1/N) against an se O(1/√N):
measured on cellular ensembles of 1000 particles, a median of 0.02 se and at most 0.13 se
over 40 output times.  The test ``tests/test_analysis_drift.py`` checks these bounds.
When the mean does move (a drift, or a coherent release such as a point or an off-centre box),
the raw MSD mixes the motion of the cloud's centre (∝ t² for a drift) with its spreading, and
only the variance measures dispersion.  For the same reason D_eff has always been fitted to
the covariances.

The moment used is recorded per start in the variable ``transport_moment`` ("variance" or
"msd"; :func:`transport_moment_variable`) so figures and reports can name it.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ._stats import _BATCH_SOURCES, batch_replicates, pooled_replicates

COMPONENTS = ("total", "x", "y", "xy")
# component → the raw-moment variable it is built from, and the mean displacements it needs
_SOURCES = {"total": ("msd", ("mean_dx", "mean_dy")), "x": ("msd_x", ("mean_dx",)),
            "y": ("msd_y", ("mean_dy",)), "xy": ("msd_xy", ("mean_dx", "mean_dy"))}
# component → name returned when centred
_CENTRED_NAMES = {"total": "variance", "x": "var_x", "y": "var_y", "xy": "cov_xy"}

VARIANCE, MSD = "variance", "msd"


def _has(part, name) -> bool:
    return name in part.variables


def is_centred(part) -> bool:
    """True when :func:`transport_curve` returns centred moments for this Dataset (it has the
    mean displacements)."""
    return _has(part, "mean_dx") and _has(part, "mean_dy")


def _centre(raw, means, component):
    """raw second moment minus the product of the means (broadcast over replicates)."""
    if component == "total":
        return raw - means[0] * means[0] - means[1] * means[1]
    if component == "xy":
        return raw - means[0] * means[1]
    return raw - means[0] * means[0]


def transport_curve(part, component: str = "total"):
    """(values (T,), delete-one-batch replicates (B, T) or None, name of the moment used)
    of one start region's second moment of the displacement along ``component``.

    ``component``: "total" (Var Δx + Var Δy), "x", "y", or "xy" (the covariance).  Centred
    (see the module docstring) when the Dataset has ``mean_dx`` and ``mean_dy``; the name is
    then "variance", "var_x", "var_y" or "cov_xy", otherwise the raw variable's name ("msd",
    "msd_x", "msd_y", "msd_xy").  Units: length².  Replicates are None without batch
    variables.
    """
    if component not in _SOURCES:
        from ._common import AnalysisOptionError

        raise AnalysisOptionError(f"transport_curve: component = {component!r} is not one of "
                                  + ", ".join(COMPONENTS))
    source, mean_names = _SOURCES[component]
    if component == "total" and not _has(part, "msd") and _has(part, "msd_x") \
            and _has(part, "msd_y"):
        raw = np.asarray(part["msd_x"].values + part["msd_y"].values, dtype=np.float64)
    else:
        raw = np.asarray(part[source].values, dtype=np.float64)
    raw_reps = batch_replicates(part, source)
    if not is_centred(part):
        return raw, raw_reps, source
    means = [np.asarray(part[m].values, dtype=np.float64) for m in mean_names]
    values = _centre(raw, means, component)
    replicates = None
    if raw_reps is not None:
        mean_reps = [batch_replicates(part, m) for m in mean_names]
        # each replicate centred with its own mean; a file without the batch means (none
        # written by eddyhop lacks them) falls back to the pooled mean
        mean_reps = [m if r is None else r for m, r in zip(means, mean_reps)]
        replicates = _centre(raw_reps, mean_reps, component)
    return values, replicates, _CENTRED_NAMES[component]


def transport_moment(part) -> str:
    """"variance" if :func:`transport_curve` centres this (single-start) Dataset, else "msd"."""
    return VARIANCE if is_centred(part) else MSD


def transport_moment_variable(ds) -> xr.DataArray:
    """``transport_moment`` per start (a string label; scalar without a ``start`` dimension):
    which second moment the exponents, regimes, crossovers and D_eff interpreted."""
    value = transport_moment(ds)
    attrs = {"long_name": "second moment whose growth the analyses interpret: variance "
                          "(centred on the ensemble mean) or msd (raw mean square displacement)"}
    if "start" in ds.dims:
        return xr.DataArray(np.array([value] * ds.sizes["start"]), dims=("start",),
                            coords={"start": ds["start"].values}, attrs=attrs)
    return xr.DataArray(value, attrs=attrs)


class BatchResampler:
    """The curve of :func:`transport_curve` for ensembles made of chosen particle batches
    (indices into ``batch``, repeats allowed, as in a bootstrap resample), with its
    delete-one-batch replicates: the same moments, pooled as count-weighted means of the
    chosen batches (the weighting of the replicates) and centred in the same way, in NumPy
    alone (a resample costs ≈ 0.2 ms, not the ≈ 5 ms of a Dataset).
    ``available`` is False when ``part`` lacks the batch variables."""

    def __init__(self, part, component: str = "total"):
        source, mean_names = _SOURCES[component]
        self.component = component
        self.centred = is_centred(part)
        names = [source] + (list(mean_names) if self.centred else [])
        self.available = "batch_count" in part.variables and all(
            all(s in part.variables for s in _BATCH_SOURCES[n]) for n in names)
        if not self.available:
            return
        self.counts = np.asarray(part["batch_count"].values, dtype=np.float64)

        def stacked(name):
            return sum(np.asarray(part[s].transpose("batch", ...).values, dtype=np.float64)
                       for s in _BATCH_SOURCES[name])

        self.raw = stacked(source)
        self.means = [stacked(m) for m in mean_names] if self.centred else []

    def filled(self) -> np.ndarray:
        """Indices of the batches holding particles."""
        return np.flatnonzero(self.counts > 0)

    def curve(self, batches):
        """(values (T,), delete-one replicates (len(batches), T)) for the chosen batches."""
        counts = self.counts[batches]
        raw = self.raw[batches]
        values = counts @ raw / counts.sum()
        replicates = pooled_replicates(counts, raw)
        if not self.centred:
            return values, replicates
        means = [m[batches] for m in self.means]
        return (_centre(values, [counts @ m / counts.sum() for m in means], self.component),
                _centre(replicates, [pooled_replicates(counts, m) for m in means],
                        self.component))
