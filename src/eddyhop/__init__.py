"""eddyhop: noisy tracer ensembles in cellular and jet flows.

Public API (imports are lazy, so ``import eddyhop`` and ``eddyhop --help`` stay fast)::

    study = eddyhop.load_study("studies/x.toml")
    ds = eddyhop.simulate(study)          # xarray.Dataset: msd, msd_x, ... on `time`
    eddyhop.write_netcdf(ds, "x.nc")
"""

from __future__ import annotations

__version__ = "0.1.0"

_LAZY = {
    "load_study": ("eddyhop.spec", "load_study"),
    "parse_study": ("eddyhop.spec", "parse_study"),
    "parse_study_text": ("eddyhop.spec", "parse_study_text"),
    "Study": ("eddyhop.spec", "Study"),
    "simulate": ("eddyhop.api", "simulate"),
    "run_study": ("eddyhop.api", "run_study"),
    "write_netcdf": ("eddyhop.io", "write_netcdf"),
    "open_result": ("eddyhop.io", "open_result"),
    "run_sweep": ("eddyhop.sweep", "run_sweep"),
    "merge_sweep": ("eddyhop.sweep", "merge_sweep"),
    "analyse": ("eddyhop.analysis", "analyse"),
    "get_family": ("eddyhop.flows", "get_family"),
    "FAMILIES": ("eddyhop.flows", "FAMILIES"),
    "StudyError": ("eddyhop.errors", "StudyError"),
    "BlowUpError": ("eddyhop.errors", "BlowUpError"),
    "EddyhopError": ("eddyhop.errors", "EddyhopError"),
    "StepSizeWarning": ("eddyhop.runner", "StepSizeWarning"),
    "StepBiasWarning": ("eddyhop.runner", "StepBiasWarning"),
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
