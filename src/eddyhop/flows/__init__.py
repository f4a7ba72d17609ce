"""Stage 1 — flows: the velocity fields tracers are advected by, one module per family.

Owns the families (``cellular``, ``cats_eye``, ``shear``, …; each module declares ``FAMILY``
and its numba ``psi``/``velocity``/``gradient``), the registry that finds them
(``registry``), the shared conventions (``base``), the compiled dispatch and the kernel's
tile loop generated from the registry (``compiled``), and the helpers of the data-driven
families (``grid_file``, ``stokes_lattice``, ``_spectral``, ``_trig``).  Adding a family is
adding one module here (see ``registry.py``).

May import: only the core modules (``errors``, ``_jit``, ``atomic``); every other stage
builds on this one.
"""

from __future__ import annotations

from .base import FlowFamily, Parameter
from .registry import FAMILIES, discover, get_family, register_family

discover()

__all__ = ["FAMILIES", "FlowFamily", "Parameter", "get_family", "register_family"]
