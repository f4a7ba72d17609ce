"""Homogenized (effective) diffusivity of a steady periodic flow from the cell problem.

Physics (periodic homogenization; Bensoussan, Lions & Papanicolaou 1978, *Asymptotic Analysis for
Periodic Structures*, North-Holland, ch. 3; Majda & Kramer 1999, Phys. Rep. 314, 237–574, §2.1;
Pavliotis & Stuart 2008, *Multiscale Methods*, Springer, ch. 13): for the Itô tracer
``dX = b(X) dt + sqrt(2κ(X)) dW`` with ``b = u + ∇κ``, ``∇·u = 0``, whose generator is
``L = u·∇ + ∇·(κ∇)`` and whose invariant density on the cell is uniform, the corrector χ = (χ_x,
χ_y) solves the cell problem

    L χ_i = κ Δχ_i + u·∇χ_i (+ ∇κ·∇χ_i) = −(b_i − ⟨b_i⟩),   ⟨χ_i⟩ = 0,

and the effective diffusivity tensor is the symmetric, positive-definite

    D_ij = ⟨ κ (δ_ik + ∂_k χ_i)(δ_jk + ∂_k χ_j) ⟩      (summed over k; ⟨·⟩ = cell average),

so that the displacement variance grows as ``var(ΔX_i ΔX_j) ≈ 2 D_ij t`` at long times, around
the mean drift ``⟨u⟩ t``.  For constant κ this is ``D = κ I + κ ⟨∇χ ∇χᵀ⟩``.

Numerics: Fourier–Galerkin (``grids.py``) in the real basis, the gauge ⟨χ⟩ = 0 fixed by dropping
the mean mode, only the lattice components coupled to the right-hand side kept (the cellular
flow couples modes of equal parity of m_x + m_y, which halves the system), SuperLU with a
column-AMD ordering.  Resolution is refined by factors of √2 until two successive tensors agree
to ``rtol``; the returned tensor is the finer one and its ``relative_error`` is that change (with
spectral convergence the finer value is usually much better than this).  Boundary layers of
width ~ Pe^(-1/2) around separatrices set the resolution: about 3·Pe^(1/2) modes per direction
for 1e-6 in the cellular flow (see :func:`suggested_modes`).
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import connected_components

from ..errors import EddyhopError
from .fields import CellFields
from .grids import SpectralCell

DEFAULT_RTOL = 1e-6
DEFAULT_MAX_MODES = 512
GROWTH = math.sqrt(2.0)


class ReferenceConvergenceError(EddyhopError, ArithmeticError):
    """A reference solver did not reach the requested accuracy; nothing is returned."""


class ResolutionWarning(UserWarning):
    """The resolution given is too coarse for the requested accuracy (estimate included)."""


@dataclass(frozen=True)
class HomogenizedDiffusivity:
    """Effective diffusivity tensor (length²/time) with its resolution-convergence estimate.

    ``tensor[i, j]`` = D_ij (i, j ∈ {x, y}); ``drift`` = ⟨u⟩ (length/time); ``relative_error``
    = ‖D(M) − D(M')‖ / ‖D(M)‖ between the returned resolution ``modes`` = M and the previous one
    M' (Frobenius norms); ``converged`` says whether it is ≤ ``rtol``.  ``history`` lists every
    (modes, tensor) solved.  ``kappa`` is the cell-averaged molecular diffusivity.
    """

    tensor: np.ndarray
    drift: tuple
    kappa: float
    peclet_cell: float
    modes: int
    unknowns: int
    relative_error: float
    rtol: float
    converged: bool
    seconds: float
    history: tuple = field(default=())
    method: str = ("Fourier-Galerkin cell problem (real basis, sparse LU), resolution refined "
                   "by sqrt(2) until converged")

    @property
    def d_xx(self) -> float:
        return float(self.tensor[0, 0])

    @property
    def d_yy(self) -> float:
        return float(self.tensor[1, 1])

    @property
    def d_xy(self) -> float:
        return float(self.tensor[0, 1])

    @property
    def enhancement(self) -> np.ndarray:
        """D / κ (dimensionless)."""
        return self.tensor / self.kappa

    def summary(self) -> str:
        return (f"D_xx = {self.d_xx:.10g}, D_yy = {self.d_yy:.10g}, D_xy = {self.d_xy:.6g} "
                f"(kappa = {self.kappa:.6g}; D_xx/kappa = {self.d_xx / self.kappa:.8g}); "
                f"{self.modes} modes per direction, {self.unknowns} unknowns, estimated "
                f"relative error {self.relative_error:.1e}"
                + ("" if self.converged else f" (above rtol = {self.rtol:g})"))


def suggested_modes(fields: CellFields, rtol: float = DEFAULT_RTOL) -> int:
    """A-priori modes per direction for relative accuracy ``rtol``.

    Measured for the cellular flow at Pe = 10²…10⁴: the relative error of D depends on
    x = M/Pe^(1/2) alone and falls like exp(−(x + 0.4)²) (boundary layers of width
    ~Pe^(-1/2) resolved spectrally), so M ≈ Pe^(1/2) (ln(1/rtol)^(1/2) − 0.4); we use − 0.3
    for a margin.  Never fewer than 8 or than twice the highest mode of the flow plus two.
    """
    peclet = max(fields.peclet_cell, 1.0)
    need = math.sqrt(peclet) * (math.sqrt(math.log(1.0 / rtol)) - 0.3)
    return int(max(8, 2 * fields.highest_mode + 2, math.ceil(need)))


def _operators(fields: CellFields, cell: SpectralCell):
    """Real-basis generator L and right-hand sides −(b − ⟨b⟩) for χ_x, χ_y."""
    dx, dy = cell.derivative(0), cell.derivative(1)
    k_mult = cell.multiply(fields.kappa)
    generator = (cell.multiply(fields.u) @ dx + cell.multiply(fields.v) @ dy
                 + dx @ k_mult @ dx + dy @ k_mult @ dy)
    rhs = []
    for drift in (fields.drift_x, fields.drift_y):
        vector = -cell.vector(drift)
        vector[cell.index(0, 0)] = 0.0
        rhs.append(cell.real_vector(vector))
    return cell.real_operator(generator), rhs


def solve_cell_problem(fields: CellFields, modes: int) -> tuple[np.ndarray, int]:
    """(D tensor, number of unknowns) at one resolution; raises on a failed solve."""
    cell = SpectralCell(fields.lx, fields.ly, modes)
    matrix, rhs = _operators(fields, cell)
    # Unknowns: every real-basis mode except the mean (gauge), restricted to the lattice
    # components that the right-hand sides reach.
    pattern = abs(matrix)
    _, label = connected_components(pattern, directed=False)
    wanted = np.unique(np.concatenate([label[np.abs(r) > 0] for r in rhs]))
    keep = np.isin(label, wanted)
    keep[0] = False  # the real-basis mean a_0
    keep = np.nonzero(keep)[0]
    chi = [np.zeros(cell.size), np.zeros(cell.size)]
    if keep.size:
        system = matrix[keep][:, keep].tocsc()
        try:
            factor = spla.splu(system, permc_spec="COLAMD")
        except RuntimeError as exc:
            raise ReferenceConvergenceError(
                f"the cell problem matrix with {modes} modes is singular ({exc})") from None
        for i, r in enumerate(rhs):
            solution = factor.solve(r[keep])
            residual = np.linalg.norm(system @ solution - r[keep])
            if not np.all(np.isfinite(solution)) or residual > 1e-8 * max(
                    np.linalg.norm(r[keep]), 1e-300):
                raise ReferenceConvergenceError(
                    f"the sparse solve of the cell problem with {modes} modes is inaccurate "
                    f"(relative residual {residual / max(np.linalg.norm(r[keep]), 1e-300):.1e})")
            chi[i][keep] = solution
    return _tensor(fields, cell, chi), int(keep.size)


def _tensor(fields, cell, chi_real):
    """D_ij = Σ_k ⟨κ w_ik w_jk⟩ with w_ik = δ_ik + ∂_k χ_i (Parseval on the lattice)."""
    derivatives = (cell.derivative(0), cell.derivative(1))
    k_mult = cell.multiply(fields.kappa)
    unit = np.zeros(cell.size, dtype=complex)
    unit[cell.index(0, 0)] = 1.0
    w = [[None, None], [None, None]]
    for i in range(2):
        chi = cell.complex_vector(chi_real[i])
        for k in range(2):
            w[i][k] = derivatives[k] @ chi + (unit if i == k else 0.0)
    tensor = np.zeros((2, 2))
    for i in range(2):
        for j in range(i, 2):
            total = sum(np.vdot(w[j][k], k_mult @ w[i][k]) for k in range(2))
            tensor[i, j] = tensor[j, i] = float(np.real(total))
    return tensor


def homogenized_diffusivity(fields: CellFields, *, rtol: float = DEFAULT_RTOL,
                            modes: int | None = None,
                            max_modes: int = DEFAULT_MAX_MODES) -> HomogenizedDiffusivity:
    """Effective diffusivity of the cell fields, refined until converged to ``rtol``.

    With ``modes`` given, solves there and at modes/√2 for the error estimate and warns
    (:class:`ResolutionWarning`) when that estimate exceeds ``rtol``.  Without it, refines from
    an a-priori guess by √2 until two successive tensors agree to ``rtol``, raising
    :class:`ReferenceConvergenceError` if ``max_modes`` is reached first.
    """
    if not (0.0 < rtol < 1.0):
        raise ValueError(f"rtol = {rtol!r} must lie in (0, 1)")
    start = time.perf_counter()
    history = []

    def relative_change(a, b):
        return float(np.linalg.norm(a - b) / max(np.linalg.norm(a), 1e-300))

    if modes is not None:
        if int(modes) != modes or modes < 2:
            raise ValueError(f"modes = {modes!r} must be an integer ≥ 2")
        modes = int(modes)
        coarse = max(1, round(modes / GROWTH))
        coarse_tensor, _ = solve_cell_problem(fields, coarse)
        tensor, unknowns = solve_cell_problem(fields, modes)
        history = [(coarse, coarse_tensor), (modes, tensor)]
        error = relative_change(tensor, coarse_tensor)
        if error > rtol:
            warnings.warn(
                f"modes = {modes} is too coarse for this flow at cell Peclet number "
                f"{fields.peclet_cell:.3g}: estimated relative error of the effective "
                f"diffusivity {error:.1e} (change from modes = {coarse}), above rtol = "
                f"{rtol:g}; boundary layers of width ~Pe^(-1/2) need about "
                f"{suggested_modes(fields, rtol)} modes (or leave modes unset to refine "
                "automatically)", ResolutionWarning, stacklevel=3)
    else:
        # start one refinement below the a-priori estimate (the next pair then usually
        # brackets it), leaving room for at least one refinement within max_modes
        current = max(4, min(round(suggested_modes(fields, rtol) / GROWTH),
                             int(max_modes / GROWTH)))
        previous = None
        while True:
            tensor, unknowns = solve_cell_problem(fields, current)
            history.append((current, tensor))
            if previous is not None:
                error = relative_change(tensor, previous)
                if error <= rtol:
                    break
            previous = tensor
            following = math.ceil(current * GROWTH)
            if following > max_modes:
                last = "" if len(history) < 2 else (
                    f"; the last change, from {history[-2][0]} to {current} modes, was "
                    f"{relative_change(tensor, history[-2][1]):.1e}")
                raise ReferenceConvergenceError(
                    f"the effective diffusivity did not converge to rtol = {rtol:g} within "
                    f"max_modes = {max_modes} modes per direction (cell Peclet number "
                    f"{fields.peclet_cell:.3g}{last}). Raise max_modes (about "
                    f"{suggested_modes(fields, rtol)} are needed; cost grows like modes^3) "
                    "or loosen rtol")
            current = following
        modes = current
    return HomogenizedDiffusivity(
        tensor=tensor, drift=fields.mean_velocity, kappa=fields.kappa_mean,
        peclet_cell=fields.peclet_cell, modes=modes, unknowns=unknowns, relative_error=error,
        rtol=rtol, converged=error <= rtol, seconds=time.perf_counter() - start,
        history=tuple(history))


__all__ = ["HomogenizedDiffusivity", "ReferenceConvergenceError", "ResolutionWarning",
           "homogenized_diffusivity", "solve_cell_problem", "suggested_modes"]
