"""The flow-family registry: a family is one module, found or registered here, nowhere else.

A family module defines ``FAMILY`` (a :class:`~eddyhop.flows.base.FlowFamily` with a unique
``name`` and integer ``code``) and the scalar numba functions ``psi(x, y, t, p)``,
``velocity(x, y, t, p[, fast])`` and ``gradient(x, y, t, p)``; a family with solid walls adds
``confine(x_old, y_old, x, y, p)``.  Every such module inside ``eddyhop/flows/`` is registered
when the package is imported (:func:`discover`); a module elsewhere — a plugin, a test — is
registered with :func:`register_family` before the first simulation of the process.

From these declarations ``flows.compiled`` generates the compiled dispatch (ψ, velocity,
gradient, walls) and the kernel's fast tile loop: a ``velocity`` that takes ``fast`` gets the
inlined, vectorised tile path; ``confine`` marks the family as walled.
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
from pathlib import Path

from ..errors import EddyhopError, StudyError

REQUIRED = ("psi", "velocity", "gradient")
# infrastructure modules of the flows package: no family in them
_NOT_FAMILIES = {"base", "compiled", "registry", "grid_file", "stokes_lattice"}

FAMILIES: dict = {}  # name → FlowFamily, in code order
_MODULES: dict[int, object] = {}  # code → the module (or namespace) defining the family
_dispatch_built = False  # set by flows.compiled when it first generates the dispatch


class FamilyRegistrationError(EddyhopError):
    """A family module is incomplete, clashes with a registered family, or comes too late."""


def register_family(module, *, _builtin: bool = False):
    """Register the family that ``module`` defines (``FAMILY`` plus its compiled functions).

    ``module`` is a module or any object with those attributes.  Must happen before the first
    simulation of the process: the compiled dispatch is generated from the registry once.
    Returns the family.
    """
    family = getattr(module, "FAMILY", None)
    where = getattr(module, "__name__", repr(module))
    if family is None:
        raise FamilyRegistrationError(f"{where}: a flow family module must define FAMILY")
    missing = [name for name in REQUIRED if not hasattr(getattr(module, name, None), "py_func")]
    if missing:
        raise FamilyRegistrationError(
            f"{where}: flow family {family.name!r} needs numba functions "
            f"{', '.join(missing)} (decorated with eddyhop._jit.jit)")
    if not isinstance(family.code, int) or isinstance(family.code, bool) or family.code < 0:
        raise FamilyRegistrationError(
            f"{where}: FAMILY.code = {family.code!r} must be a non-negative integer")
    if family.name in FAMILIES or family.code in _MODULES:
        owner = FAMILIES.get(family.name) or next(
            f for f in FAMILIES.values() if f.code == family.code)
        raise FamilyRegistrationError(
            f"{where}: flow family {family.name!r} (code {family.code}) clashes with the "
            f"registered family {owner.name!r} (code {owner.code})")
    if not _builtin:
        _prepare_for_plugin(module, family)
    _MODULES[family.code] = module
    FAMILIES[family.name] = family
    ordered = sorted(FAMILIES.values(), key=lambda f: f.code)
    FAMILIES.clear()
    FAMILIES.update((f.name, f) for f in ordered)
    return family


def _prepare_for_plugin(module, family) -> None:
    from .. import _jit

    if _dispatch_built or _jit.any_compiled():
        raise FamilyRegistrationError(
            f"flow family {family.name!r} is registered after this process compiled or loaded "
            "its kernels; register families before the first simulation")
    # kernels compiled with this family must not be confused with kernels compiled without it
    source = inspect.getsourcefile(module) if inspect.ismodule(module) else None
    text = Path(source).read_text(encoding="utf-8") if source else repr(sorted(vars(module)))
    _jit.add_cache_key(f"{family.name}:{family.code}:{text}")


def get_family(name: str):
    """The family registered under ``name``; an unknown name lists the choices."""
    if not isinstance(name, str):
        raise StudyError(f"flow.family = {name!r} must be a text naming one flow family; "
                         "choose one of: " + ", ".join(FAMILIES))
    try:
        return FAMILIES[name]
    except KeyError:
        raise StudyError(
            f"flow.family = {name!r} is not a known flow family; choose one of: "
            + ", ".join(FAMILIES)
        ) from None


def family_module(code: int):
    """The module (or namespace) that defines the family with this code."""
    return _MODULES[code]


def registered_modules() -> list[tuple[int, object]]:
    """(code, module) of every registered family, in code order."""
    return sorted(_MODULES.items(), key=lambda item: item[0])


def has_fast_velocity(module) -> bool:
    """Whether the family's ``velocity`` takes ``fast`` (the kernel's inlined tile path)."""
    return "fast" in inspect.signature(module.velocity.py_func).parameters


def has_walls(module) -> bool:
    """Whether the family declares ``confine`` (solid walls the tracers reflect at)."""
    return hasattr(getattr(module, "confine", None), "py_func")


def discover() -> None:
    """Register every family module of the ``eddyhop.flows`` package (once)."""
    package = __name__.rsplit(".", 1)[0]
    for info in pkgutil.iter_modules([str(Path(__file__).parent)]):
        if info.name.startswith("_") or info.name in _NOT_FAMILIES:
            continue
        module = importlib.import_module(f"{package}.{info.name}")
        family = getattr(module, "FAMILY", None)
        if family is not None and FAMILIES.get(family.name) is not family:
            register_family(module, _builtin=True)
