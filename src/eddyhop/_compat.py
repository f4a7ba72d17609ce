"""Old module paths (before the stage layout) kept importable for one release.

``import eddyhop.spec`` still works and gives the very module now at ``eddyhop.study.spec``
(same object: monkeypatching either name patches both), with a :class:`DeprecationWarning`
naming the new path.  Installed by ``eddyhop/__init__.py``; it imports nothing of the package
until an old path is asked for, so it takes no part in the stage order.  Remove after 0.2.
"""

from __future__ import annotations

import importlib
import importlib.abc
import importlib.util
import sys
import warnings  # stacklevel 2: the importing line (import machinery frames are skipped)

# old path → new path (a package alias also covers its submodules, e.g. eddyhop.plots.msd)
MOVED = {
    "eddyhop.spec": "eddyhop.study.spec",
    "eddyhop.cost": "eddyhop.study.cost",
    "eddyhop.sweeps.axes": "eddyhop.study.sweep_table",
    "eddyhop.sweep": "eddyhop.sweeps",
    "eddyhop.rng": "eddyhop.engine.rng",
    "eddyhop.noise": "eddyhop.engine.noise",
    "eddyhop.schedule": "eddyhop.engine.schedule",
    "eddyhop.integrators": "eddyhop.engine.integrators",
    "eddyhop.kernel": "eddyhop.engine.kernel",
    "eddyhop.stepcheck": "eddyhop.engine.stepcheck",
    "eddyhop.runner": "eddyhop.engine.runner",
    "eddyhop.start_geometry": "eddyhop.starts.geometry",
    "eddyhop.obstacle_starts": "eddyhop.starts.obstacles",
    "eddyhop.dataset": "eddyhop.results.dataset",
    "eddyhop.io": "eddyhop.results.io",
    "eddyhop.outputs": "eddyhop.results.outputs",
    "eddyhop.report": "eddyhop.presentation.report",
    "eddyhop.plots": "eddyhop.presentation.plots",
}


def new_path(name: str) -> str | None:
    """The current path of the old module ``name``, or None if ``name`` did not move."""
    if not name.startswith("eddyhop."):  # the finder is asked about every import
        return None
    if name in MOVED:
        return MOVED[name]
    for old, new in MOVED.items():
        if name.startswith(old + "."):
            return new + name[len(old):]
    return None


class _Alias(importlib.abc.Loader):
    def __init__(self, target: str):
        self.target = target

    def create_module(self, spec):
        module = importlib.import_module(self.target)
        self.own_spec = module.__spec__
        return module

    def exec_module(self, module):
        # the target module is already executed; the import system has just set its __spec__
        # to the old name's: restore its own, or its relative imports would warn that
        # __package__ != __spec__.parent
        module.__spec__ = self.own_spec


class _MovedModuleFinder(importlib.abc.MetaPathFinder):
    def find_spec(self, fullname, path=None, target=None):
        new = new_path(fullname)
        if new is None:
            return None
        warnings.warn(f"{fullname} moved to {new}; the old path works until the next release",
                      DeprecationWarning, stacklevel=2)
        return importlib.util.spec_from_loader(fullname, _Alias(new))


def install() -> None:
    if not any(isinstance(f, _MovedModuleFinder) for f in sys.meta_path):
        sys.meta_path.insert(0, _MovedModuleFinder())
