"""Creeping flow through a periodic array of solid circular cylinders, with reflecting walls.

Geometry: a square or hexagonal lattice of cylinders with centre distance (spacing)
``L = 2π/k`` and solid (area) fraction ``solid_fraction`` = φ, below close packing (π/4 square,
π/(2√3) ≈ 0.9069 hexagonal).  Square cell ``L × L`` with one cylinder at (L/2, L/2); hexagonal
cell ``L × √3 L`` with cylinders at (L/4, √3L/4) and (3L/4, 3√3L/4).  Radius
``a = L (φ/π)^{1/2}`` (square) or ``L (√3 φ/(2π))^{1/2}`` (hexagonal).

Flow: Stokes flow with no slip on the cylinders, driven by a mean pressure gradient chosen so
that the superficial mean velocity (averaged over the whole cell, solids included) has speed
``U`` along ``angle`` (degrees from the x axis).  Computed by Fourier–Brinkman penalisation
(``stokes_lattice.py``, which names its sources and accuracy), cached, and carried into the
kernel as a gridded periodic stream function plus the mean flow (``gridded.py``): the
interpolated velocity is divergence-free everywhere.  With ``U = 0`` there is no flow and no
solve (pure diffusion among obstacles).  ``resolution`` is the number of grid steps per spacing.

Walls (the compiled :func:`confine`, applied after every step of every integrator): a step whose
end point lies inside a cylinder is mirrored across the cylinder wall along its normal, the
radius r of the end point (from the cylinder centre) becoming 2a − r.  For a flat wall this is
specular reflection of the part of the step that crossed the wall; for the curved wall it is
the *symmetrized Euler scheme* of Bossy, Gobet & Talay (2004), "A symmetrized Euler scheme for
an efficient approximation of reflected diffusions", J. Appl. Probab. 41, 877–889, who prove
weak order 1 for reflected diffusions in smooth domains (projecting the end point onto the wall
instead would give weak order 1/2 — Gobet (2001), ESAIM: Probab. Stat. 5, 261–297; that order
quoted from memory).  Measured here (``tests/test_obstacles.py::test_wall_reflection_weak_order``:
free diffusion among cylinders from uniform starts, whose exact law stays uniform, with a
smooth observable of the distance to the wall): weak order 0.89 ± 0.08 for rms steps
0.21a…0.11a, consistent with 1 (at rms step 0.3a the error ratios per halving are 1.86,
pre-asymptotic).  The mirrored point is checked again (a
narrow gap may send it into a neighbour) up to 8 times; if it still lies in a solid the step is
rejected and the particle stays at its previous (fluid) position.  So no step ever ends inside
a solid.  Only end points are tested: a step longer than a cylinder could in principle jump
across one; keep ``sqrt(2 κ dt)`` and ``U dt`` well below the radius (say below a/10).

Packed parameter vector: ``[U, k, lattice (0 square, 1 hexagonal), a, Lx, Ly, n, c0x, c0y, c1x,
c1y, flow_on]`` followed by the gridded block of ``gridded.py``.
"""

from __future__ import annotations

import math
from collections import OrderedDict

import numpy as np

from .._jit import jit
from ..errors import StudyError
from .base import FlowFamily, Parameter
from .gridded import (
    grid_gradient,
    grid_psi,
    grid_velocity,
    pack_grid,
    stream_function_from_velocity,
)
from .stokes_lattice import (
    LATTICES,
    MIN_GAP_CELLS,
    CylinderLattice,
    close_packing,
    velocity_samples,
)

HEADER = 12
MAX_MIRRORS = 8
_LATTICE_CODES = {"square": 0, "hexagonal": 1}


# ---- compiled field and walls ------------------------------------------------------------------
@jit
def psi(x, y, t, p):
    if p[11] == 0.0:
        return 0.0
    return grid_psi(x, y, p, HEADER)


@jit
def velocity(x, y, t, p):
    if p[11] == 0.0:
        return 0.0, 0.0
    return grid_velocity(x, y, p, HEADER)


@jit
def gradient(x, y, t, p):
    if p[11] == 0.0:
        return 0.0, 0.0, 0.0, 0.0
    return grid_gradient(x, y, p, HEADER)


@jit
def nearest_centre(x, y, p):
    """(cx, cy, squared distance) of the cylinder centre nearest to (x, y), any periodic image."""
    lx = p[4]
    ly = p[5]
    best_x = 0.0
    best_y = 0.0
    best = math.inf
    for c in range(int(p[6])):
        ox = p[7 + 2 * c]
        oy = p[8 + 2 * c]
        cx = ox + lx * math.floor((x - ox) / lx + 0.5)
        cy = oy + ly * math.floor((y - oy) / ly + 0.5)
        d2 = (x - cx) * (x - cx) + (y - cy) * (y - cy)
        if d2 < best:
            best = d2
            best_x = cx
            best_y = cy
    return best_x, best_y, best


@jit
def confine(x_old, y_old, x, y, p):
    """End point of a step from (x_old, y_old) (in the fluid) to (x, y), mirrored out of any
    cylinder it entered (r → 2a − r about the cylinder centre); see the module docstring."""
    if not (math.isfinite(x) and math.isfinite(y)):
        return x, y  # left to the kernel's blow-up check
    a = p[3]
    floor_radius = a * (1.0 + 1e-12)
    for _ in range(MAX_MIRRORS):
        cx, cy, d2 = nearest_centre(x, y, p)
        if d2 >= a * a:
            return x, y
        r = math.sqrt(d2)
        if r == 0.0:
            return x_old, y_old
        target = 2.0 * a - r
        if target < floor_radius:
            target = floor_radius
        factor = target / r
        x = cx + (x - cx) * factor
        y = cy + (y - cy) * factor
    cx, cy, d2 = nearest_centre(x, y, p)
    if d2 >= a * a:
        return x, y
    return x_old, y_old


# ---- the family -----------------------------------------------------------------------------
def lattice_of(values: dict) -> CylinderLattice:
    """The :class:`CylinderLattice` (in the flow's length unit) of checked parameters."""
    return CylinderLattice(values["lattice"], values["solid_fraction"],
                           2.0 * math.pi / values["k"])


_PACKED: OrderedDict = OrderedDict()


class ObstacleLattice(FlowFamily):
    """Stokes flow through a periodic cylinder array; see the module docstring."""

    def validate(self, values, where="flow"):
        values = dict(values)
        allowed = {p.name for p in self.parameters} | {"lattice"}
        unknown = sorted(set(values) - allowed)
        if unknown:
            raise StudyError(f"{where}: unknown parameter(s) {', '.join(unknown)} for flow family "
                             f"'{self.name}'; allowed: {', '.join(sorted(allowed))}")
        lattice = values.pop("lattice", "square")
        if lattice not in LATTICES:
            raise StudyError(f"{where}.lattice = {lattice!r} is not allowed; choose one of: "
                             + ", ".join(LATTICES))
        fraction = values.get("solid_fraction")
        limit = close_packing(lattice)
        if (isinstance(fraction, (int, float)) and not isinstance(fraction, bool)
                and fraction >= limit):
            name = "pi/4" if lattice == "square" else "pi/(2 sqrt 3)"
            raise StudyError(
                f"{where}.solid_fraction = {fraction:g} is at or above close packing for a "
                f"{lattice} lattice ({name} = {limit:.4f}): the cylinders would touch or "
                "overlap")
        checked = super().validate(values, where)
        checked["lattice"] = lattice
        resolution = checked["resolution"]
        if resolution != int(resolution) or int(resolution) % 2:
            raise StudyError(f"{where}.resolution = {resolution:g} must be an even whole number "
                             "(grid steps per lattice spacing)")
        checked["resolution"] = int(resolution)
        geometry = lattice_of(checked)
        gap_cells = geometry.gap / geometry.spacing * resolution
        if checked["U"] > 0.0 and gap_cells < MIN_GAP_CELLS:
            needed = 2 * math.ceil(MIN_GAP_CELLS * geometry.spacing / geometry.gap / 2)
            raise StudyError(
                f"{where}: the narrowest gap between cylinders ({geometry.gap:.4g}) spans only "
                f"{gap_cells:.2g} grid steps at flow.resolution = {resolution}; the Stokes "
                f"solver needs at least {MIN_GAP_CELLS:g}: raise flow.resolution to {needed} "
                "or more, or lower flow.solid_fraction")
        return checked

    def pack(self, values):
        key = tuple(sorted(values.items()))
        cached = _PACKED.get(key)
        if cached is None:
            cached = self._pack(values)
            _PACKED[key] = cached
            while len(_PACKED) > 8:
                _PACKED.popitem(last=False)
        else:
            _PACKED.move_to_end(key)
        return cached.copy()

    def _pack(self, values):
        geometry = lattice_of(values)
        lx, ly = geometry.cell
        centres = np.zeros((2, 2))
        centres[: geometry.n_cylinders] = geometry.centres
        flow_on = values["U"] > 0.0
        header = [values["U"], values["k"], float(_LATTICE_CODES[geometry.kind]),
                  geometry.radius, lx, ly, float(geometry.n_cylinders), *centres.ravel(),
                  1.0 if flow_on else 0.0]
        if flow_on:
            u, v = velocity_samples(geometry.kind, geometry.solid_fraction,
                                    values["resolution"], values["U"], values["angle"],
                                    geometry.spacing)
            psi_tilde, mean_u, mean_v, _, _ = stream_function_from_velocity(u, v, lx, ly)
            block = pack_grid(psi_tilde, lx, ly, mean_u, mean_v)
        else:
            block = pack_grid(np.zeros((4, 4)), lx, ly)
        return np.concatenate([np.array(header, dtype=np.float64), block])

    def period(self, values):
        return lattice_of(values).cell

    def eddy_size(self, values):
        """One lattice spacing L: the cell unit in which hops between pores are counted."""
        return 2.0 * math.pi / values["k"]

    def describe(self) -> str:
        return (super().describe()
                + "\n    lattice  square (default) or hexagonal")


FAMILY = ObstacleLattice(
    name="obstacles",
    code=7,
    summary="Stokes flow through a square or hexagonal array of solid cylinders "
            "(no slip, reflecting walls), mean superficial speed U along angle",
    parameters=(
        Parameter("U", "superficial mean speed (flux per unit width) through the array",
                  "velocity", default=1.0, low=0.0),
        Parameter("k", "wavenumber; the lattice spacing (centre distance) is 2 pi/k",
                  "wavenumber", default=1.0, low=0.0, low_open=True),
        Parameter("solid_fraction", "area fraction of the cylinders (below close packing)",
                  "1", default=None, low=0.0, high=1.0, low_open=True, high_open=True),
        Parameter("angle", "direction of the mean flow, degrees from the x axis", "1",
                  default=0.0, low=-360.0, high=360.0),
        Parameter("resolution", "Stokes-solver grid steps per lattice spacing (even)", "1",
                  default=128.0, low=32.0, high=1024.0),
    ),
)
