"""Analysis layer: functions Dataset → Dataset deriving what the user came for.

Each function returns only the variables it derives (every one labelled with ``long_name``
and ``units``); :func:`analyse` runs all that the Dataset supports and returns the input plus
every derived variable.  Works on Monte Carlo results (with error bars from particle batches)
and on deterministic reference results (same ``msd``… on ``time``; no error bars), with or
without a ``start`` dimension.  Knows nothing of numba or the engine.

Stage 6.  May import: core (``errors``) and, where a result needs it, the stages before it
(flows, starts, engine, study, results); in practice it reads everything from the Dataset.
Never reference, sweeps, presentation or the CLI.
"""

from __future__ import annotations

import inspect
import json

import xarray as xr

from ._common import AnalysisOptionError, merge_into, require
from .aging import aging
from .crossovers import crossover_times
from .deff import BoundedVarianceWarning, ShortRunWarning, effective_diffusivity
from .drift_frame import drift_frame, drift_frame_variance, has_drift
from .exponents import local_exponent
from .hopping import fit_tails, hopping
from .moments import displacement_pdf, moment_spectrum
from .regimes import regimes
from .stepcheck import has_step_check, step_check
from .velocity import velocity_statistics
from .walk_models import walk_model_exponents

# (function, predicate on the Dataset: run it within analyse?)
STEPS = (
    (local_exponent, lambda ds: True),
    (regimes, lambda ds: True),
    (crossover_times, lambda ds: True),
    (effective_diffusivity, lambda ds: "msd_x" in ds.variables and "msd_y" in ds.variables),
    (aging, lambda ds: "aged_msd" in ds.variables or "track_x" in ds.variables),
    (moment_spectrum, lambda ds: "abs_moment" in ds.variables),
    (displacement_pdf, lambda ds: "track_x" in ds.variables),
    (hopping, lambda ds: "residence_count" in ds.variables),
    (step_check, has_step_check),
    (velocity_statistics, lambda ds: "velocity_correlation_xx" in ds.variables),
    (drift_frame, has_drift),
    (walk_model_exponents, lambda ds: "residence_count" in ds.variables),
)


def option_names() -> dict[str, list[str]]:
    """Every option :func:`analyse` accepts → the analyses that use it."""
    names: dict[str, list[str]] = {}
    for function, _ in STEPS:
        for name, parameter in inspect.signature(function).parameters.items():
            if parameter.kind is inspect.Parameter.KEYWORD_ONLY:
                names.setdefault(name, []).append(function.__name__)
    return names


def analyse(ds: xr.Dataset, **options) -> xr.Dataset:
    """``ds`` plus every analysis the Dataset supports (see the module docstring).

    Options are passed to every analysis that takes them (e.g. ``window`` to the local
    exponent, regimes and crossovers alike); unknown options raise
    :class:`AnalysisOptionError`.  Re-analysing an analysed Dataset replaces the derived
    variables.
    """
    known = option_names()
    unknown = sorted(set(options) - set(known))
    if unknown:
        raise AnalysisOptionError(f"unknown analysis option(s) {', '.join(unknown)}; "
                                  f"allowed: {', '.join(sorted(known))}")
    require(ds, ["time", "msd"], "analyse")
    steps = [function for function, applies in STEPS if applies(ds)]
    for name, value in options.items():  # an option no applicable step takes is an error
        if not any(name in inspect.signature(f).parameters for f in steps):
            takers = [f.__name__ for f, _ in STEPS if name in inspect.signature(f).parameters]
            raise AnalysisOptionError(
                f"option {name} = {value!r} has no effect on this file: it is used by "
                f"{', '.join(takers)}, which need(s) data the file does not hold (see "
                "docs/analysis.md for what each analysis needs)")
    out = ds
    ran = []
    for function in steps:
        accepted = inspect.signature(function).parameters
        kwargs = {k: v for k, v in options.items() if k in accepted}
        out = merge_into(out, function(ds, **kwargs))
        ran.append(function.__name__)
    out.attrs = dict(ds.attrs)
    out.attrs["analysis_steps"] = " ".join(ran)
    out.attrs["analysis_options"] = json.dumps(options, default=str, sort_keys=True)
    return out


__all__ = [
    "AnalysisOptionError",
    "BoundedVarianceWarning",
    "ShortRunWarning",
    "aging",
    "analyse",
    "crossover_times",
    "displacement_pdf",
    "drift_frame_variance",
    "effective_diffusivity",
    "fit_tails",
    "hopping",
    "local_exponent",
    "moment_spectrum",
    "option_names",
    "regimes",
    "step_check",
    "velocity_statistics",
    "walk_model_exponents",
]
