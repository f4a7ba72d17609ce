"""Stage 9 — parameter sweeps: resumable execution, merging and scaling summaries.

::

    study = eddyhop.load_study("studies/sweep_pan_rolls.toml")   # a study with a [sweep] table
    report = run_sweep(study, "pan_sweep/", backend="processes")  # resumable; writes pan_sweep/
    merged = merge_sweep("pan_sweep/")                            # swept parameters as dims
    summary = scaling_summary(merged)                             # exponents vs Pe with CIs

One module per responsibility: ``manifest`` (the sweep folder), ``backends`` (serial, local
processes, Dask), ``execute`` (the resumable loop), ``merge`` (points → one Dataset) and
``scaling`` (exponents across a Péclet sweep).  The ``[sweep]`` table itself (axes → points) is
part of the study schema, ``eddyhop.study.sweep_table``; its names are re-exported here.

May import: every stage below it (core, flows, starts, engine, study, results, analysis,
reference, ``eddyhop.api``); never presentation or the CLI.
"""

from __future__ import annotations

import importlib

from ..study.sweep_table import Axis, SweepPoint, SweepSpec, sweepable
from ..study.sweep_table import parse_sweep as _parse_sweep

# Names of the submodules, imported on first use: `eddyhop sweep` reaches its first kernel
# chunk without importing xarray and the analysis package (≈ 0.4 s of CPU), which it then
# imports while the chunks run; a resumed complete sweep never imports them.
_LAZY = {"SweepReport": "execute", "compute_point": "execute", "run_sweep": "execute",
         "warm_kernels": "execute", "Manifest": "manifest", "merge_sweep": "merge",
         "PowerLaw": "scaling", "fit_power_law": "scaling", "scaling_summary": "scaling",
         "time_scales": "scaling"}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def parse_sweep(table: dict, document: dict, source_path: str = "", *, parse_study=None):
    """:func:`eddyhop.study.sweep_table.parse_sweep` with the package's study parser."""
    if parse_study is None:
        from ..study.spec import parse_study
    return _parse_sweep(table, document, source_path, parse_study=parse_study)


__all__ = ["Axis", "Manifest", "PowerLaw", "SweepPoint", "SweepReport", "SweepSpec",
           "compute_point", "fit_power_law", "merge_sweep", "parse_sweep", "run_sweep",
           "scaling_summary", "sweepable", "time_scales", "warm_kernels"]
