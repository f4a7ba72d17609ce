"""Deterministic reference solvers: noise-free answers computed without sampling.

* :func:`effective_diffusivity` — homogenized diffusivity tensor of a steady periodic flow from
  the periodic cell problem, with a resolution-convergence estimate (``cell_problem.py``).
* :func:`moment_evolution` — exact ensemble mean and MSD versus time for any start region, from
  the Fokker–Planck density and its first-moment fields on one period cell (``moments.py``),
  returned as a Dataset with the layout of a Monte Carlo run.

Imports are lazy so that ``import eddyhop`` stays fast.

Stage 7.  May import: core, flows, starts, engine (noise, schedule), study and results (the
Dataset layout it shares with Monte Carlo runs); never the API, sweeps, presentation or the CLI.
"""

from __future__ import annotations

_LAZY = {
    "effective_diffusivity": ("eddyhop.reference.api", "effective_diffusivity"),
    "moment_evolution": ("eddyhop.reference.api", "moment_evolution"),
    "HomogenizedDiffusivity": ("eddyhop.reference.cell_problem", "HomogenizedDiffusivity"),
    "ReferenceConvergenceError": ("eddyhop.reference.cell_problem",
                                  "ReferenceConvergenceError"),
    "ResolutionWarning": ("eddyhop.reference.cell_problem", "ResolutionWarning"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attribute = _LAZY[name]
        return getattr(importlib.import_module(module), attribute)
    raise AttributeError(f"module 'eddyhop.reference' has no attribute {name!r}")


def __dir__():
    return sorted([*globals(), *_LAZY])


__all__ = list(_LAZY)
