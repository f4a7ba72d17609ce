"""eddyhop: noisy tracer ensembles in cellular and jet flows.

Public API (imports are lazy, so ``import eddyhop`` and ``eddyhop --help`` stay fast)::

    study = eddyhop.load_study("studies/x.toml")
    ds = eddyhop.simulate(study)          # xarray.Dataset: msd, msd_x, ... on `time`
    eddyhop.write_netcdf(ds, "x.nc")
"""

from __future__ import annotations

__version__ = "0.1.0"

from . import _compat

_compat.install()

_LAZY = {
    "load_study": ("eddyhop.study.spec", "load_study"),
    "parse_study": ("eddyhop.study.spec", "parse_study"),
    "parse_study_text": ("eddyhop.study.spec", "parse_study_text"),
    "Study": ("eddyhop.study.spec", "Study"),
    "simulate": ("eddyhop.api", "simulate"),
    "run_study": ("eddyhop.api", "run_study"),
    "write_netcdf": ("eddyhop.results.io", "write_netcdf"),
    "open_result": ("eddyhop.results.io", "open_result"),
    "run_sweep": ("eddyhop.sweeps", "run_sweep"),
    "merge_sweep": ("eddyhop.sweeps", "merge_sweep"),
    "analyse": ("eddyhop.analysis", "analyse"),
    "get_family": ("eddyhop.flows", "get_family"),
    "FAMILIES": ("eddyhop.flows", "FAMILIES"),
    "StudyError": ("eddyhop.errors", "StudyError"),
    "BlowUpError": ("eddyhop.errors", "BlowUpError"),
    "EddyhopError": ("eddyhop.errors", "EddyhopError"),
    "StepSizeWarning": ("eddyhop.engine.runner", "StepSizeWarning"),
    "StepBiasWarning": ("eddyhop.engine.runner", "StepBiasWarning"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attribute = _LAZY[name]
        return getattr(importlib.import_module(module), attribute)
    raise AttributeError(f"module 'eddyhop' has no attribute {name!r}")


def __dir__():
    return sorted([*globals(), *_LAZY])


__all__ = ["__version__", *_LAZY]
