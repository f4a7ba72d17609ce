"""Creeping (Stokes) flow through periodic arrays of circular cylinders.

Method: **Fourier–Brinkman volume penalisation**.  The solids are replaced by a porous medium
of vanishing permeability η, and the penalised Stokes problem is solved on the whole periodic
cell with Fourier (pseudo-spectral) derivatives:

    −μ ∇²u + ∇p + (μ/η) χ(x) u = f,   ∇·u = 0,   u periodic,

with χ the solid mask and f a uniform body force (the mean pressure gradient).  As η → 0 the
solution tends to no-slip Stokes flow past the solids, with errors O(η^{1/2}) near the walls
(Angot, Bruneau & Fabrie 1999, Numer. Math. 81, 497–520; Carbou & Fabrie 2003, Adv. Differential
Equations 8, 1453–1480; Fourier implementation: Kolomenskiy & Schneider 2009, J. Comput. Phys.
228, 5687–5709).  Here μ/η = 16 μ/h² (penalisation length h/4, h the grid step) and χ is a
tanh profile of half-width h/2 across the circle, so every error is O(h) and smooth in h.

Linear solver (our own): the operator A u = −μ∇²u + P[(μ/η)χu] on divergence-free periodic
fields (P the Leray projection, exact in Fourier space) is symmetric positive definite, and is
solved by conjugate gradients preconditioned with (μ|k|² + (μ/η)⟨χ⟩)⁻¹; each iteration costs
four real FFTs.  Pressure never appears.

Drag: with a uniform body force f over the whole cell (fluid and solid), the momentum balance
of one cell gives the force per unit length on each cylinder exactly as F = f A_cell / n
(n cylinders per cell), and the superficial mean velocity U = ⟨u⟩ over the cell is the
(0, 0) Fourier mode.  :func:`drag_estimate` reports F/(μU) at two resolutions N/2, N and the
Richardson extrapolation for first-order convergence, 2 K_N − K_{N/2}; the solver claims
|K_N − K_{N/2}| as the accuracy of the extrapolated value (checked against Sangani & Acrivos
1982 in the tests).

Geometry (lengths in units of the lattice spacing L, the nearest-neighbour centre distance):
square lattice: cell L × L, one cylinder at (L/2, L/2), close packing π/4; hexagonal lattice:
cell L × √3 L, cylinders at (L/4, √3L/4) and (3L/4, 3√3L/4), close packing π/(2√3).

Caching: solutions for a unit force along x and along y (from which any direction and speed
follow by linearity) are kept in memory and on disk as ``.npz`` files under
``<eddyhop cache>/fields`` (the directory next to the compiled-kernel cache, see
``eddyhop._jit.kernel_cache_dir``), keyed by lattice, solid fraction, resolution and a hash of
this module's source, so an edited solver never reuses stale fields.

Research estimate only: for the design of real heat exchangers, filters or columns use
validated correlations and the applicable codes.
"""

from __future__ import annotations

import hashlib
import math
import os
from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..atomic import atomic_path

PENALTY = 16.0  # (μ/η) h² / μ
MASK_HALF_WIDTH = 0.5  # tanh half-width of the mask, in grid steps
TOLERANCE = 1e-9  # relative residual of the conjugate-gradient solve
MAX_ITERATIONS = 50_000
LATTICES = ("square", "hexagonal")
MIN_GAP_CELLS = 4.0  # the narrowest gap must span this many grid steps


def close_packing(kind: str) -> float:
    """Largest solid fraction of touching cylinders: π/4 (square), π/(2√3) (hexagonal)."""
    return math.pi / 4.0 if kind == "square" else math.pi / (2.0 * math.sqrt(3.0))


@dataclass(frozen=True)
class CylinderLattice:
    """A periodic array of equal circular cylinders; ``spacing`` is the centre distance L."""

    kind: str
    solid_fraction: float
    spacing: float = 1.0

    def __post_init__(self):
        if self.kind not in LATTICES:
            raise ValueError(f"lattice must be one of {LATTICES}, got {self.kind!r}")
        if not 0.0 < self.solid_fraction < close_packing(self.kind):
            raise ValueError(f"solid fraction {self.solid_fraction} outside (0, "
                             f"{close_packing(self.kind):.4f})")

    @property
    def cell(self) -> tuple[float, float]:
        """(Lx, Ly) of the periodic cell."""
        factor = 1.0 if self.kind == "square" else math.sqrt(3.0)
        return (self.spacing, factor * self.spacing)

    @property
    def n_cylinders(self) -> int:
        return 1 if self.kind == "square" else 2

    @property
    def radius(self) -> float:
        lx, ly = self.cell
        return math.sqrt(self.solid_fraction * lx * ly / (self.n_cylinders * math.pi))

    @property
    def gap(self) -> float:
        """Narrowest fluid gap between neighbouring cylinders, L − 2a."""
        return self.spacing - 2.0 * self.radius

    @property
    def centres(self) -> np.ndarray:
        lx, ly = self.cell
        if self.kind == "square":
            return np.array([[0.5 * lx, 0.5 * ly]])
        return np.array([[0.25 * lx, 0.25 * ly], [0.75 * lx, 0.75 * ly]])

    def grid_shape(self, resolution: int) -> tuple[int, int]:
        """(nx, ny): ``resolution`` steps per spacing along x, the nearest even count along y."""
        lx, ly = self.cell
        return resolution, 2 * max(2, round(resolution * ly / lx / 2))

    def distance_to_solid(self, x, y) -> np.ndarray:
        """Signed distance to the nearest cylinder surface (negative inside a solid)."""
        lx, ly = self.cell
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        best = np.full(np.broadcast(x, y).shape, np.inf)
        for cx, cy in self.centres:
            dx = x - cx
            dy = y - cy
            dx = dx - lx * np.round(dx / lx)
            dy = dy - ly * np.round(dy / ly)
            best = np.minimum(best, np.hypot(dx, dy) - self.radius)
        return best


@dataclass(frozen=True)
class UnitSolution:
    """Dimensionless penalised Stokes flow (spacing 1, μ = 1) for unit body forces.

    ``velocity[j]`` is (u, v) on the grid (``[i, l]`` at x = i/nx·Lx, y = l/ny·Ly) for the
    force along axis j; ``mobility[i, j]`` the superficial mean velocity ⟨u_i⟩ for a unit force
    along j (the permeability tensor over μ).
    """

    lattice: CylinderLattice
    velocity: np.ndarray  # (2, 2, nx, ny)
    mobility: np.ndarray  # (2, 2)
    iterations: int

    @property
    def shape(self) -> tuple[int, int]:
        return self.velocity.shape[2], self.velocity.shape[3]

    def dimensionless_drag(self) -> float:
        """F/(μU): force per unit length on one cylinder over μ × superficial speed."""
        lx, ly = self.lattice.cell
        isotropic = 0.5 * (self.mobility[0, 0] + self.mobility[1, 1])
        return lx * ly / (self.lattice.n_cylinders * isotropic)


def _mask(lattice: CylinderLattice, nx: int, ny: int) -> tuple[np.ndarray, float]:
    lx, ly = lattice.cell
    x = np.arange(nx) * (lx / nx)
    y = np.arange(ny) * (ly / ny)
    gx, gy = np.meshgrid(x, y, indexing="ij")
    h = math.sqrt(lx / nx * ly / ny)
    chi = np.zeros((nx, ny))
    for cx, cy in lattice.centres:
        dx = gx - cx
        dy = gy - cy
        dx -= lx * np.round(dx / lx)
        dy -= ly * np.round(dy / ly)
        chi += 0.5 * (1.0 - np.tanh((np.hypot(dx, dy) - lattice.radius) / (MASK_HALF_WIDTH * h)))
    return np.minimum(chi, 1.0), h


def solve_penalised_stokes(lattice: CylinderLattice, resolution: int, force=(1.0, 0.0),
                           tolerance: float = TOLERANCE):
    """Velocity (u, v) on the grid for body force ``force`` (spacing 1 units, μ = 1).

    Returns ``(u, v, iterations)``; raises ``RuntimeError`` if CG does not converge.
    """
    nx, ny = lattice.grid_shape(resolution)
    lx, ly = lattice.cell
    chi, h = _mask(lattice, nx, ny)
    sigma = PENALTY / (h * h)
    penalty = sigma * chi
    kx = 2.0 * np.pi * np.fft.fftfreq(nx, lx / nx)
    ky = 2.0 * np.pi * np.fft.rfftfreq(ny, ly / ny)
    kx, ky = np.meshgrid(kx, ky, indexing="ij")
    k2 = kx * kx + ky * ky
    inv_k2 = np.where(k2 > 0, 1.0 / np.where(k2 > 0, k2, 1.0), 0.0)
    precondition = 1.0 / (k2 + sigma * chi.mean())
    weight = np.full(k2.shape, 2.0)
    weight[:, 0] = 1.0
    if ny % 2 == 0:
        weight[:, -1] = 1.0

    def apply(w):
        physical = np.fft.irfft2(w, s=(nx, ny), axes=(1, 2))
        drag = np.fft.rfft2(penalty * physical, axes=(1, 2))
        along = (kx * drag[0] + ky * drag[1]) * inv_k2
        drag[0] -= kx * along
        drag[1] -= ky * along
        drag += k2 * w
        return drag

    def dot(a, b):
        return float(np.sum(weight * (a.real * b.real + a.imag * b.imag)))

    rhs = np.zeros((2, *k2.shape), dtype=complex)
    rhs[0, 0, 0] = force[0] * nx * ny
    rhs[1, 0, 0] = force[1] * nx * ny
    solution = np.zeros_like(rhs)
    residual = rhs.copy()
    z = precondition * residual
    direction = z.copy()
    rz = dot(residual, z)
    target = tolerance * tolerance * dot(rhs, rhs)
    iterations = 0
    while dot(residual, residual) > target:
        if iterations >= MAX_ITERATIONS:
            raise RuntimeError(f"penalised Stokes solve did not converge in {MAX_ITERATIONS} "
                               "iterations")
        image = apply(direction)
        alpha = rz / dot(direction, image)
        solution += alpha * direction
        residual -= alpha * image
        z = precondition * residual
        rz_next = dot(residual, z)
        direction = z + (rz_next / rz) * direction
        rz = rz_next
        iterations += 1
    velocity = np.fft.irfft2(solution, s=(nx, ny), axes=(1, 2))
    return velocity[0], velocity[1], iterations


# ---- caching -------------------------------------------------------------------------------------
_MEMORY: OrderedDict = OrderedDict()
_MEMORY_SIZE = 6


def fields_cache_dir() -> str:
    """Directory of cached Stokes fields: ``fields`` next to the compiled-kernel cache."""
    from .._jit import kernel_cache_dir

    return os.path.normpath(os.path.join(kernel_cache_dir(), "..", "fields"))


def _solver_digest() -> str:
    return hashlib.sha256(Path(__file__).read_bytes()).hexdigest()[:12]


def _cache_name(lattice: CylinderLattice, resolution: int) -> str:
    key = f"{lattice.kind}|{lattice.solid_fraction!r}|{resolution}|{_solver_digest()}"
    digest = hashlib.sha256(key.encode()).hexdigest()[:20]
    return f"stokes-{lattice.kind}-{resolution}-{digest}.npz"


def _write_atomic(path: str, **arrays) -> None:
    directory = os.path.dirname(path)
    os.makedirs(directory, exist_ok=True)
    with atomic_path(path) as temporary, open(temporary, "wb") as stream:
        np.savez(stream, **arrays)


def unit_solution(kind: str, solid_fraction: float, resolution: int,
                  use_disk: bool = True) -> UnitSolution:
    """Unit-force solutions for a lattice (spacing 1), from memory, disk or a fresh solve."""
    lattice = CylinderLattice(kind, float(solid_fraction))
    key = (kind, float(solid_fraction), int(resolution))
    cached = _MEMORY.get(key)
    if cached is not None:
        _MEMORY.move_to_end(key)
        return cached
    path = os.path.join(fields_cache_dir(), _cache_name(lattice, resolution))
    solution = None
    if use_disk and os.path.exists(path):
        try:
            with np.load(path) as stored:
                velocity = stored["velocity"]
                iterations = int(stored["iterations"])
            if velocity.shape[2:] == lattice.grid_shape(resolution):
                solution = velocity, iterations
        except (OSError, ValueError, KeyError):
            solution = None  # unreadable cache entry: solve again and overwrite it
    if solution is None:
        u_x, v_x, iterations = solve_penalised_stokes(lattice, resolution, (1.0, 0.0))
        if kind == "square":
            # The square cell and its mask are symmetric under x <-> y: the response to a force
            # along y is the transposed, component-swapped response to a force along x.
            u_y, v_y = v_x.T.copy(), u_x.T.copy()
        else:
            u_y, v_y, more = solve_penalised_stokes(lattice, resolution, (0.0, 1.0))
            iterations += more
        velocity = np.array([[u_x, v_x], [u_y, v_y]])
        solution = velocity, iterations
        if use_disk:
            try:
                _write_atomic(path, velocity=velocity, iterations=np.array(iterations))
            except OSError:
                pass  # a read-only cache only costs a re-solve next time
    velocity, iterations = solution
    mobility = velocity.mean(axis=(2, 3)).T  # [component, force]
    result = UnitSolution(lattice=lattice, velocity=velocity, mobility=mobility,
                          iterations=iterations)
    _MEMORY[key] = result
    while len(_MEMORY) > _MEMORY_SIZE:
        _MEMORY.popitem(last=False)
    return result


def velocity_samples(kind: str, solid_fraction: float, resolution: int, speed: float,
                     angle_degrees: float, spacing: float):
    """(u, v) on the grid of a lattice with spacing ``spacing`` whose superficial mean velocity
    is ``speed`` along ``angle_degrees`` (from the x axis).  Stokes flow is linear, so the field
    is the combination of the two unit-force solutions whose mean is the requested one."""
    solution = unit_solution(kind, solid_fraction, resolution)
    angle = math.radians(angle_degrees)
    target = speed * np.array([math.cos(angle), math.sin(angle)])
    force = np.linalg.solve(solution.mobility, target)
    u = force[0] * solution.velocity[0, 0] + force[1] * solution.velocity[1, 0]
    v = force[0] * solution.velocity[0, 1] + force[1] * solution.velocity[1, 1]
    return u, v


@dataclass(frozen=True)
class DragEstimate:
    """F/(μU) per cylinder at resolutions N/2 and N, extrapolated, and the claimed accuracy."""

    coarse: float
    fine: float
    extrapolated: float
    error: float


def drag_estimate(kind: str, solid_fraction: float, resolution: int = 128) -> DragEstimate:
    """Dimensionless drag F/(μU) (U the superficial speed) with a Richardson error estimate."""
    fine = unit_solution(kind, solid_fraction, resolution).dimensionless_drag()
    coarse = unit_solution(kind, solid_fraction, resolution // 2).dimensionless_drag()
    return DragEstimate(coarse=coarse, fine=fine, extrapolated=2.0 * fine - coarse,
                        error=abs(fine - coarse))
