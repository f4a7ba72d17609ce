"""What every flow family declares: parameters, geometry and its compiled field functions.

Conventions shared by all families (state them again in each family's docstring):

* Incompressible 2-D flows from a stream function ψ(x, y, t): ``u = ∂ψ/∂y``, ``v = -∂ψ/∂x``.
* ``U`` is the velocity scale (length/time) and ``k`` the wavenumber (1/length).  One eddy (cell)
  of the cellular pattern has side ``π/k``; the spatial period is ``2π/k``.
* Compiled functions take scalars ``(x, y, t, p)`` where ``p`` is the float64 parameter vector
  returned by :meth:`FlowFamily.pack`; this vector is the only thing kernels know of a flow.
* sin/cos of positions come from ``_trig.sincos`` (or ``_trig.sincos2`` for two arguments at
  once: the same bits, faster in tile loops); a closed-form family's ``velocity`` takes a last
  argument ``fast=False`` that it passes on to them (the kernel's tile loop calls it with
  ``True``; see ``integrators.tile_velocity``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import StudyError, range_text


@dataclass(frozen=True)
class Parameter:
    """One numeric parameter of a flow family, with its allowed closed/open range."""

    name: str
    description: str
    units: str  # "velocity", "wavenumber", "length", "frequency", "1"
    default: float | None = None  # None means required
    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    high_open: bool = False

    def allowed(self) -> str:
        return range_text(self.low, self.high, self.low_open, self.high_open)

    def check(self, value: Any, where: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise StudyError(f"{where}.{self.name}: expected a number, got {value!r}")
        value = float(value)
        too_low = value <= self.low if self.low_open else value < self.low
        too_high = value >= self.high if self.high_open else value > self.high
        if not math.isfinite(value) or too_low or too_high:
            raise StudyError(
                f"{where}.{self.name} = {value:g} is outside the allowed range {self.allowed()}"
            )
        return value


VELOCITY = Parameter("U", "velocity scale (max speed of the cellular part)", "velocity",
                     default=1.0, low=0.0)
WAVENUMBER = Parameter("k", "wavenumber; one eddy has side pi/k", "wavenumber",
                       default=1.0, low=0.0, low_open=True)


# Representable wavenumbers: (2 pi/k)^2 stays a normal double (≈ 2e-308 … 1.8e308) inside.
K_LIMITS = (1e-150, 1e150)


@dataclass(frozen=True)
class FlowFamily:
    """Description of a flow family; subclasses add geometry and the compiled field functions.

    ``code`` is the integer the compiled dispatcher switches on (see ``flows/compiled.py``).
    """

    name: str
    code: int
    summary: str
    parameters: tuple[Parameter, ...] = (VELOCITY, WAVENUMBER)
    steady: bool = True
    # Names of the scalar numba functions in the family module (psi, velocity, gradient).
    extra: dict = field(default_factory=dict)

    # ---- parameters -------------------------------------------------------------------------
    def validate(self, values: dict, where: str = "flow") -> dict:
        """Return a complete, checked parameter dict; unknown keys and bad values raise."""
        known = {p.name for p in self.parameters}
        unknown = sorted(set(values) - known)
        if unknown:
            raise StudyError(
                f"{where}: unknown parameter(s) {', '.join(unknown)} for flow family "
                f"'{self.name}'; allowed: {', '.join(sorted(known)) or 'none'}"
            )
        checked = {}
        for p in self.parameters:
            if p.name in values:
                checked[p.name] = p.check(values[p.name], where)
            elif p.default is None:
                raise StudyError(f"{where}.{p.name} is required for flow family '{self.name}'")
            else:
                checked[p.name] = float(p.default)
        if "k" in checked and not K_LIMITS[0] <= checked["k"] <= K_LIMITS[1]:
            # the cell side pi/k, the period 2 pi/k and the cell area (2 pi/k)^2 must all be
            # ordinary doubles (neither overflow to inf nor underflow to 0)
            raise StudyError(f"{where}.k = {checked['k']:g} is outside the allowed range "
                             f"[{K_LIMITS[0]:g}, {K_LIMITS[1]:g}] (the eddy size pi/k and the "
                             "cell area must be representable numbers)")
        return checked

    def pack(self, values: dict) -> np.ndarray:
        """Parameter vector handed to the compiled functions (order of ``parameters``)."""
        return np.array([float(values[p.name]) for p in self.parameters], dtype=np.float64)

    # ---- scales and geometry ----------------------------------------------------------------
    def velocity_scale(self, values: dict) -> float:
        return float(values["U"])

    def speed_bound(self, values: dict) -> tuple[float, str]:
        """An upper bound (velocity units, within a factor of order one) on the flow's speed,
        and the parameter contributing most to it; used only to refuse amplitudes whose step
        would overflow or leave the accurate range of the flow's sine and cosine.  Sum of the
        velocity parameters plus (length parameter) × (frequency parameter) for moving cells.
        Computed in floating point: an overflowing product comes out infinite."""
        parts = {p.name: abs(float(values[p.name])) for p in self.parameters
                 if p.units == "velocity" and p.name in values}
        frequency = sum(abs(float(values[p.name])) for p in self.parameters
                        if p.units == "frequency" and p.name in values)
        for p in self.parameters:
            if p.units == "length" and p.name in values:
                parts[p.name] = abs(float(values[p.name])) * frequency
        if not parts:
            return 0.0, ""
        return sum(parts.values()), max(parts, key=parts.get)

    def wavenumber(self, values: dict) -> float:
        return float(values["k"])

    def eddy_size(self, values: dict) -> float:
        """Side of one eddy (cell), π/k: the unit in which cell hopping is counted."""
        return math.pi / self.wavenumber(values)

    def period(self, values: dict) -> tuple[float | None, float | None]:
        """Spatial period (Lx, Ly) of the velocity field; ``None`` along an unbounded direction."""
        length = 2.0 * math.pi / self.wavenumber(values)
        return (length, length)

    def time_period(self, values: dict) -> float | None:
        """Period of a time-periodic flow, ``None`` for steady flows."""
        return None

    def stagnation_points(self, values: dict) -> dict[str, np.ndarray]:
        """Stagnation points in one period cell ``[0, Lx) × [0, Ly)`` known in closed form.

        Returns ``{"elliptic": (n, 2) array, "hyperbolic": (m, 2) array}``; empty arrays where
        the family has none or none is known in closed form.
        """
        empty = np.zeros((0, 2))
        return {"elliptic": empty, "hyperbolic": empty}

    def separatrix_levels(self, values: dict) -> tuple[float, ...]:
        """Values of ψ on the separatrices (empty if the family has none)."""
        return ()

    def psi_range(self, values: dict) -> tuple[float, float]:
        """(min, max) of ψ over one period cell; numerical for families without a formula."""
        from .compiled import evaluate_psi

        lx, ly = self.period(values)
        lx = lx or 2 * math.pi / self.wavenumber(values)
        ly = ly or 2 * math.pi / self.wavenumber(values)
        gx, gy = np.meshgrid(np.linspace(0, lx, 257), np.linspace(0, ly, 257))
        values_psi = evaluate_psi(self, values, gx.ravel(), gy.ravel(), 0.0)
        return float(values_psi.min()), float(values_psi.max())

    # ---- family hooks -----------------------------------------------------------------------
    @property
    def has_walls(self) -> bool:
        """Whether tracers reflect at solid walls: the family module declares ``confine``."""
        from .registry import family_module, has_walls

        return has_walls(family_module(self.code))

    # heading of the field report ``eddyhop validate`` prints (see :meth:`field_attributes`)
    field_report_heading = "flow field"
    # Family-specific advice appended to general error messages (a family hook, so that
    # general code never tests family names): when the spectral reference solvers cannot
    # resolve the flow, and when a 'jet' start region is empty.
    spectral_hint = ""
    empty_jet_hint = ""

    def field_attributes(self, values: dict) -> dict:
        """How faithful the simulated field is to its source data, as flat ``field_*``
        attributes (plain numbers or strings) for the Dataset, the report and ``validate``;
        empty for families given by a formula."""
        return {}

    def describe(self) -> str:
        lines = [f"{self.name}: {self.summary}"]
        for p in self.parameters:
            default = "required" if p.default is None else f"default {p.default:g}"
            lines.append(f"    {p.name:<6} {p.description} ({default}; allowed {p.allowed()})")
        return "\n".join(lines)
