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
the mean mode.  Each corrector is solved exactly in the subspace its symmetries fix
(:func:`cell_symmetries`: the reflections and half-period shifts of the cell that commute with
L and map the right-hand side to ± itself; for the cellular flow χ_x is odd in x, even in y and
unchanged by the shift (π, π), which leaves a quarter of the unknowns), restricted to the
lattice components coupled to its right-hand side, and factorised by SuperLU with a column-AMD
ordering.  Only the rows of L at one index per symmetry orbit are assembled, entry by entry.
Measured at Pe = 10⁴ (486 modes): 118 340 unknowns per corrector instead of 473 364, LU fill
15·10⁶ entries per corrector (the unreduced system had 75·10⁶ already at 343 modes); on the
reduced system COLAMD and MMD(AᵀA) fill alike, reverse Cuthill–McKee fills 3.4× more.
Resolution is refined by factors of √2 until two successive tensors agree to ``rtol``; the
returned tensor is the finer one and its ``relative_error`` is that change (with spectral
convergence the finer value is usually much better than this).  Boundary layers of width
~ Pe^(-1/2) around separatrices set the resolution: about 3·Pe^(1/2) modes per direction
for 1e-6 in the cellular flow (see :func:`suggested_modes`).
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
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

    ``tensor[i, j]`` = D_ij (i, j ∈ {x, y}); ``drift`` = ⟨u⟩ (length/time); ``unknowns`` = size
    of the largest linear system solved at the final resolution; ``relative_error``
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
    method: str = ("Fourier-Galerkin cell problem (real basis, reduced by the cell's symmetries, "
                   "sparse LU), resolution refined by sqrt(2) until converged")

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


def _generator_terms(fields: CellFields) -> list:
    """L = u ∂x + v ∂y + ∂x κ ∂x + ∂y κ ∂y as terms of :meth:`SpectralCell.real_rows`."""
    return [(fields.u, None, 0), (fields.v, None, 1), (fields.kappa, 0, 0),
            (fields.kappa, 1, 1)]


def _right_hand_sides(fields: CellFields, cell: SpectralCell) -> list[np.ndarray]:
    """Real-basis −(b − ⟨b⟩) for χ_x and χ_y."""
    out = []
    for drift in (fields.drift_x, fields.drift_y):
        vector = -cell.real_coefficients(drift)
        vector[0] = 0.0
        out.append(vector)
    return out


def _operators(fields: CellFields, cell: SpectralCell):
    """Real-basis generator L (all rows) and right-hand sides −(b − ⟨b⟩) for χ_x, χ_y."""
    every_row = np.arange(cell.size)
    return cell.real_rows(every_row, _generator_terms(fields)), _right_hand_sides(fields, cell)


# f ↦ f∘g for the reflections x → −x, y → −y and the half-period shifts of the cell (with
# their compositions: 15 maps besides the identity), as (reflect, shift) of SpectralCell
_CELL_MAPS = tuple(((rx, ry), (sx, sy)) for rx in (1, -1) for ry in (1, -1)
                   for sx in (0, 1) for sy in (0, 1) if (rx, ry, sx, sy) != (1, 1, 0, 0))
_IDENTITY = ((1, 1), (0, 0))
# relative size of a discrepancy still read as round-off when testing a symmetry (the fields
# come from FFTs of sampled velocities: their coefficients carry errors of ~1e-16)
_SYMMETRY_TOL = 1e-12


def _compose(a, b):
    """The cell map g_a ∘ g_b (the maps commute and reflections keep shifts by L/2)."""
    (ra, sa), (rb, sb) = a, b
    return ((ra[0] * rb[0], ra[1] * rb[1]), ((sa[0] + sb[0]) % 2, (sa[1] + sb[1]) % 2))


def _signed_permutation(source, sign) -> sp.csr_matrix:
    size = source.size
    return sp.csr_matrix((sign, (np.arange(size), source)), shape=(size, size))


def cell_symmetries(fields: CellFields) -> list[dict]:
    """Symmetries of each corrector, one dict {(reflect, shift): ±1} per χ_x, χ_y.

    A cell map S (f ↦ f∘g for g among the reflections and half-period shifts) that commutes
    with the generator L and maps the right-hand side r to σ r (σ = ±1) maps the corrector to
    σ χ as well (L is invertible on mean-free fields), so χ lies in the subspace where every
    such map acts as its σ, and the cell problem can be solved there exactly, with a fraction
    of the unknowns: a quarter for the cellular flow (χ_x odd in x and even in y, at modes of
    even m_x + m_y: sin(m_x x) cos(m_y y) only).

    Tested exactly on a small lattice (M = 2·highest mode + 2): each entry of S L S − L at
    Fourier offset p is a polynomial of degree ≤ 2 in the mode index, so it vanishes at every
    resolution once it vanishes on a lattice with three modes per direction at each offset.
    A set of maps that is not closed under composition (round-off at the tolerance) is not
    used.
    """
    cell = SpectralCell(fields.lx, fields.ly, max(4, 2 * fields.highest_mode + 2))
    matrix, rhs = _operators(fields, cell)
    scale = float(abs(matrix).max()) if matrix.nnz else 0.0
    found: list[dict] = [{} for _ in rhs]
    for cell_map in _CELL_MAPS:
        operator = _signed_permutation(*cell.real_symmetry(*cell_map))
        commutator = operator @ matrix - matrix @ operator
        if commutator.nnz and abs(commutator).max() > _SYMMETRY_TOL * scale:
            continue
        for i, r in enumerate(rhs):
            size = np.abs(r).max()
            if size == 0.0:
                continue
            image = operator @ r
            for character in (1.0, -1.0):
                if np.abs(image - character * r).max() <= _SYMMETRY_TOL * size:
                    found[i][cell_map] = character
    for i, group in enumerate(found):
        group = {**group, _IDENTITY: 1.0}
        closed = all(group.get(_compose(a, b)) == group[a] * group[b]
                     for a in group for b in group)
        if not closed:
            found[i] = {}
    return found


def _invariant_basis(cell: SpectralCell, group: dict):
    """(Q, i, w): Q an orthonormal sparse basis (columns) of the real-basis vectors v with
    S v = σ v for every (S, σ) in ``group``, the mean a_0 excluded (gauge).  Column j is
    Π e_i / ‖Π e_i‖ with i = ``chosen[j]`` the smallest index of its orbit under the group and
    Π = mean over the group of σ S, the orthogonal projector on that subspace.  Because Π
    commutes with L, Qᵀ L Q = diag(w) · L[i, :] · Q with w = 1/‖Π e_i‖ = √(orbit size): only
    the chosen rows of L are needed."""
    elements = [(_IDENTITY, 1.0), *group.items()]
    index = np.arange(cell.size)
    smallest = index.copy()
    stabiliser = np.zeros(cell.size)  # Σ σ sign over the maps fixing i: > 0 iff Π e_i ≠ 0
    maps = []
    for cell_map, character in elements:
        source, sign = cell.real_symmetry(*cell_map)
        np.minimum(smallest, source, out=smallest)
        fixed = source == index
        stabiliser[fixed] += character * sign[fixed]
        maps.append((source, character * sign))
    chosen = np.nonzero((smallest == index) & (stabiliser > 0.5))[0]
    chosen = chosen[chosen != 0]
    del smallest, stabiliser, index
    # row i of Π (= column i, Π is symmetric) has σ·sign_g(i) at source_g(i) for every g
    rows = np.concatenate([source[chosen] for source, _ in maps])
    values = np.concatenate([signs[chosen] for _, signs in maps])
    columns = np.tile(np.arange(chosen.size), len(maps))
    basis = sp.csc_matrix((values, (rows, columns)), shape=(cell.size, chosen.size))
    basis.sum_duplicates()
    norms = np.sqrt(np.asarray(basis.multiply(basis).sum(axis=0)).ravel())
    # the raw column sums every map: ‖Π e_i‖ = norm / (number of maps)
    return (basis @ sp.diags(1.0 / norms)).tocsc(), chosen, len(maps) / norms


def solve_cell_problem(fields: CellFields, modes: int, *,
                       symmetry: bool = True) -> tuple[np.ndarray, int]:
    """(D tensor, unknowns of the largest linear system solved) at one resolution; raises on
    a failed solve.

    Each corrector is solved in the subspace fixed by its symmetries (:func:`cell_symmetries`;
    ``symmetry=False`` ignores them, for checks; the two correctors share one factorisation
    when their symmetries agree), restricted to the lattice
    components its right-hand side reaches (the cellular flow couples modes of equal parity of
    m_x + m_y); the mean mode is dropped (gauge ⟨χ⟩ = 0).
    """
    cell = SpectralCell(fields.lx, fields.ly, modes)
    rhs = _right_hand_sides(fields, cell)
    terms = _generator_terms(fields)
    classes: dict = {}
    groups = cell_symmetries(fields) if symmetry else [{}, {}]
    for i, group in enumerate(groups):
        classes.setdefault(frozenset(group.items()), []).append(i)
    chi = [np.zeros(cell.size), np.zeros(cell.size)]
    largest = 0
    for group, members in classes.items():
        basis, chosen, weights = _invariant_basis(cell, dict(group))
        reduced = (sp.diags(weights) @ (cell.real_rows(chosen, terms) @ basis)).tocsr()
        loads = [basis.T @ rhs[i] for i in members]
        _, label = connected_components(abs(reduced), directed=False)
        wanted = np.unique(np.concatenate([label[np.abs(load) > 0] for load in loads]))
        keep = np.nonzero(np.isin(label, wanted))[0]
        if not keep.size:
            continue
        system = reduced[keep][:, keep].tocsc()
        del reduced
        largest = max(largest, int(keep.size))
        try:
            factor = spla.splu(system, permc_spec="COLAMD")
        except RuntimeError as exc:
            raise ReferenceConvergenceError(
                f"the cell problem matrix with {modes} modes is singular ({exc})") from None
        for i, load in zip(members, loads):
            r = load[keep]
            solution = factor.solve(r)
            scale = max(np.linalg.norm(r), 1e-300)
            residual = np.linalg.norm(system @ solution - r)
            if not np.all(np.isfinite(solution)) or residual > 1e-8 * scale:
                raise ReferenceConvergenceError(
                    f"the sparse solve of the cell problem with {modes} modes is inaccurate "
                    f"(relative residual {residual / scale:.1e})")
            chi[i] = basis[:, keep] @ solution
        del factor, system
    return _tensor(fields, cell, chi), largest


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
