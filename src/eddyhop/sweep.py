"""Parameter sweeps over a study (public entry points; the work is in ``eddyhop.sweeps``).

::

    study = eddyhop.load_study("studies/sweep_pan_rolls.toml")   # a study with a [sweep] table
    report = run_sweep(study, "pan_sweep/", backend="processes")  # resumable; writes pan_sweep/
    merged = merge_sweep("pan_sweep/")                            # swept parameters as dims
    summary = scaling_summary(merged)                             # exponents vs Pe with CIs

``spec.parse_study`` calls :func:`parse_sweep` for a study's ``[sweep]`` table.
"""

from __future__ import annotations

from .sweeps.axes import Axis, SweepPoint, SweepSpec, parse_sweep, sweepable
from .sweeps.execute import SweepReport, compute_point, run_sweep, warm_kernels
from .sweeps.manifest import Manifest
from .sweeps.merge import merge_sweep
from .sweeps.scaling import PowerLaw, fit_power_law, scaling_summary, time_scales

__all__ = ["Axis", "Manifest", "PowerLaw", "SweepPoint", "SweepReport", "SweepSpec",
           "compute_point", "fit_power_law", "merge_sweep", "parse_sweep", "run_sweep",
           "scaling_summary", "sweepable", "time_scales", "warm_kernels"]
