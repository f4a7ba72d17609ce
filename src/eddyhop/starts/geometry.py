"""Stream-function geometry that start regions are defined by (eddy centres, saddles, levels).

Everything is evaluated on the flow at ``t = 0`` and on the *periodic part* of ψ:

    ψ_p(x, y) = ψ(x, y, 0) − a x − b y,

where the linear part ``a x + b y`` is a uniform mean flow (as in the drifting cellular family,
whose ψ is not periodic).  ``a`` and ``b`` are measured from ψ itself, so the same code serves
every family, including user Fourier flows and families added later.  Eddy centres (elliptic
points, where the Hessian of ψ_p is definite) and saddles (hyperbolic points, indefinite
Hessian) come from the family's closed form when it gives one, else from Newton's method on
∇ψ_p = 0 started from a grid.  Separatrix levels are the family's closed-form levels, else the
values of ψ_p at the hyperbolic points.

Plain NumPy on top of the vectorised field evaluators; no xarray, no kernels.
"""

from __future__ import annotations

import math
from functools import cached_property

import numpy as np

from ..flows.base import FlowFamily

_NEWTON_GRID = 48  # Newton starts per period and direction
_NEWTON_STEPS = 40
_AREA_GRID = 1024  # midpoint grid (per direction) for numerical area fractions


class FlowGeometry:
    """Geometry of one flow (family + checked parameter values) at t = 0; cached, read-only.

    Attributes are computed on first use: ``period`` (Lx, Ly) of one period cell (2π/k along
    an unbounded direction), ``elliptic`` and ``hyperbolic`` ((n, 2) arrays of points inside
    the period cell), ``separatrix_levels`` (tuple of ψ_p values), ``psi_span`` ((min, max) of
    ψ_p over the cell).  Lengths are in the flow's length unit, ψ in velocity × length.
    """

    def __init__(self, family: FlowFamily, values: dict):
        self.family = family
        self.values = values

    # ---- scales ------------------------------------------------------------------------------
    @cached_property
    def period(self) -> tuple[float, float]:
        lx, ly = self.family.period(self.values)
        fallback = 2.0 * math.pi / self.family.wavenumber(self.values)
        return (lx or fallback, ly or fallback)

    @property
    def eddy_side(self) -> float:
        return self.family.eddy_size(self.values)

    @property
    def cell_area(self) -> float:
        return self.period[0] * self.period[1]

    # ---- periodic part of psi ----------------------------------------------------------------
    @cached_property
    def mean_gradient(self) -> tuple[float, float]:
        """(a, b): ψ(x + Lx, y) − ψ(x, y) = a Lx and ψ(x, y + Ly) − ψ(x, y) = b Ly."""
        from ..flows.compiled import evaluate_psi  # numba only when a field is evaluated

        lx, ly = self.period
        px = evaluate_psi(self.family, self.values, np.array([0.0, lx, 0.0]),
                          np.array([0.0, 0.0, ly]), 0.0)
        a = (px[1] - px[0]) / lx
        b = (px[2] - px[0]) / ly
        scale = self.velocity_scale
        # Round-off in a periodic psi must not read as a drift.
        a = 0.0 if abs(a) < 1e-12 * scale else float(a)
        b = 0.0 if abs(b) < 1e-12 * scale else float(b)
        return a, b

    @property
    def velocity_scale(self) -> float:
        return max(self.family.velocity_scale(self.values), 1e-300)

    def psi(self, x, y) -> np.ndarray:
        """ψ_p at points (x, y) (periodic part of the stream function at t = 0)."""
        from ..flows.compiled import evaluate_psi

        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        a, b = self.mean_gradient
        value = evaluate_psi(self.family, self.values, x, y, 0.0)
        if a or b:
            value = value - a * x - b * y
        return value

    def _gradient(self, x, y):
        """∇ψ_p = (−v − a, u − b) (from u = ∂ψ/∂y, v = −∂ψ/∂x)."""
        from ..flows.compiled import evaluate_velocity

        a, b = self.mean_gradient
        u, v = evaluate_velocity(self.family, self.values, x, y, 0.0)
        return -v - a, u - b

    def _grad_hessian(self, x, y):
        """∇ψ_p and its Hessian (ψ_xx, ψ_xy, ψ_yy) by central differences of the velocity."""
        h = 1e-5 / self.family.wavenumber(self.values)
        gx, gy = self._gradient(x, y)
        gx_e, gy_e = self._gradient(x + h, y)
        gx_w, gy_w = self._gradient(x - h, y)
        gx_n, gy_n = self._gradient(x, y + h)
        gx_s, gy_s = self._gradient(x, y - h)
        hxx = (gx_e - gx_w) / (2 * h)
        hyy = (gy_n - gy_s) / (2 * h)
        hxy = 0.5 * ((gy_e - gy_w) + (gx_n - gx_s)) / (2 * h)
        return (gx, gy), (hxx, hxy, hyy)

    # ---- critical points ---------------------------------------------------------------------
    @cached_property
    def _closed_form_points(self):
        # A family's closed-form stagnation points are those of its full velocity; with a mean
        # drift they are not the critical points of ψ_p that start regions are built on.
        if self.mean_gradient != (0.0, 0.0):
            return {}
        return self.family.stagnation_points(self.values)

    @cached_property
    def _numerical_points(self) -> dict:
        lx, ly = self.period
        n = _NEWTON_GRID
        gx, gy = np.meshgrid((np.arange(n) + 0.25) * lx / n, (np.arange(n) + 0.25) * ly / n)
        x = gx.ravel().copy()
        y = gy.ravel().copy()
        max_step = 0.5 * min(lx, ly) / n
        for _ in range(_NEWTON_STEPS):
            (gx_, gy_), (hxx, hxy, hyy) = self._grad_hessian(x, y)
            det = hxx * hyy - hxy * hxy
            with np.errstate(divide="ignore", invalid="ignore"):
                sx = np.where(det != 0, (hyy * gx_ - hxy * gy_) / det, 0.0)
                sy = np.where(det != 0, (hxx * gy_ - hxy * gx_) / det, 0.0)
            length = np.hypot(sx, sy)
            shrink = np.where(length > max_step, max_step / np.maximum(length, 1e-300), 1.0)
            x = x - sx * shrink
            y = y - sy * shrink
        (gx_, gy_), (hxx, hxy, hyy) = self._grad_hessian(x, y)
        k = self.family.wavenumber(self.values)
        scale = self.velocity_scale
        converged = np.hypot(gx_, gy_) < 1e-9 * scale
        det = hxx * hyy - hxy * hxy
        definite = det > 1e-6 * (scale * k) ** 2
        indefinite = det < -1e-6 * (scale * k) ** 2
        return {"elliptic": _unique_points(x[converged & definite], y[converged & definite],
                                           lx, ly),
                "hyperbolic": _unique_points(x[converged & indefinite],
                                             y[converged & indefinite], lx, ly)}

    def _points(self, kind: str) -> np.ndarray:
        closed = self._closed_form_points.get(kind, np.zeros((0, 2)))
        if closed.size:
            return np.asarray(closed, dtype=np.float64)
        return self._numerical_points[kind]

    @cached_property
    def elliptic(self) -> np.ndarray:
        """Eddy centres (elliptic stagnation points of ψ_p) in one period cell, shape (n, 2)."""
        return self._points("elliptic")

    @cached_property
    def hyperbolic(self) -> np.ndarray:
        """Saddles (hyperbolic stagnation points of ψ_p) in one period cell, shape (m, 2)."""
        return self._points("hyperbolic")

    @cached_property
    def separatrix_levels(self) -> tuple[float, ...]:
        """Sorted distinct ψ_p values of the separatrices (empty if there are none)."""
        levels = tuple(self.family.separatrix_levels(self.values))
        if not levels and self.hyperbolic.size:
            levels = tuple(self.psi(self.hyperbolic[:, 0], self.hyperbolic[:, 1]))
        if not levels:
            return ()
        span = self.psi_span[1] - self.psi_span[0]
        out = []
        for level in sorted(float(v) for v in levels):
            if not out or level - out[-1] > 1e-9 * max(span, 1e-300):
                out.append(level)
        return tuple(out)

    @cached_property
    def psi_span(self) -> tuple[float, float]:
        """(min, max) of ψ_p over a period cell."""
        if type(self.family).psi_range is not FlowFamily.psi_range:
            low, high = self.family.psi_range(self.values)
            return float(low), float(high)
        lx, ly = self.period
        gx, gy = np.meshgrid(np.linspace(0, lx, 257), np.linspace(0, ly, 257))
        values = self.psi(gx.ravel(), gy.ravel())
        extra = [values]
        for points in (self.elliptic, self.hyperbolic):
            if points.size:
                extra.append(self.psi(points[:, 0], points[:, 1]))
        values = np.concatenate(extra)
        return float(values.min()), float(values.max())

    # ---- helpers for masks ---------------------------------------------------------------------
    def periodic_offset(self, x, y, points: np.ndarray):
        """Offsets (dx, dy) of (x, y) from each of ``points`` to the nearest periodic image;
        shapes (len(points), *x.shape)."""
        lx, ly = self.period
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        px = points[:, 0].reshape((-1,) + (1,) * x.ndim)
        py = points[:, 1].reshape((-1,) + (1,) * y.ndim)
        dx = x[None] - px
        dy = y[None] - py
        dx -= lx * np.round(dx / lx)
        dy -= ly * np.round(dy / ly)
        return dx, dy

    def grid_fraction(self, mask_function, n: int = _AREA_GRID) -> float:
        """Fraction of the period cell where ``mask_function(x, y)`` holds (n × n midpoints).

        Evaluated in row blocks to keep memory bounded.
        """
        lx, ly = self.period
        xs = (np.arange(n) + 0.5) * lx / n
        total = 0
        rows = max(1, 2**18 // n)
        for start in range(0, n, rows):
            ys = (np.arange(start, min(n, start + rows)) + 0.5) * ly / n
            gx, gy = np.meshgrid(xs, ys)
            total += int(np.count_nonzero(mask_function(gx.ravel(), gy.ravel())))
        return total / (n * n)


def _unique_points(x, y, lx, ly, tolerance=1e-6) -> np.ndarray:
    """Distinct points modulo the period, wrapped into [0, Lx) × [0, Ly), sorted."""
    if x.size == 0:
        return np.zeros((0, 2))
    x = np.mod(x, lx)
    y = np.mod(y, ly)
    kept: list[tuple[float, float]] = []
    for px, py in zip(x, y):
        for qx, qy in kept:
            dx = abs(px - qx)
            dy = abs(py - qy)
            if min(dx, lx - dx) < tolerance * lx and min(dy, ly - dy) < tolerance * ly:
                break
        else:
            kept.append((float(px), float(py)))
    snapped = [(0.0 if abs(px - lx) < tolerance * lx else px,
                0.0 if abs(py - ly) < tolerance * ly else py) for px, py in kept]
    return np.array(sorted(snapped))
