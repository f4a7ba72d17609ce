"""Exact ensemble mean and MSD versus time: the method of moments for periodic media.

Physics (Aris 1956, Proc. R. Soc. A 235, 67–77; Brenner 1980, Phil. Trans. R. Soc. A 297,
81–133): follow the tracer's position folded into the period cell, Y(t), together with its
unwrapped displacement D(t) = X(t) − X(0).  For the Itô tracer ``dX = b dt + sqrt(2κ) dW``
(``b = u + ∇κ``) the joint density of (Y, D) gives, on the cell, the density p(y, t) and the
first-moment fields g_i(y, t) = E[D_i ; Y = y], which obey

    ∂p/∂t   = A p,                     A g = −∇·(u g) + ∇·(κ ∇g)   (Fokker–Planck, periodic)
    ∂g_i/∂t = A g_i + u_i p − κ ∂_i p − ∂_i(κ p),          g_i(·, 0) = 0,

and the ensemble moments follow by quadrature over the cell:

    d⟨D_i⟩/dt     = ∫ b_i p,
    d⟨D_i D_j⟩/dt = ∫ (b_i g_j + b_j g_i) + 2 δ_ij ∫ κ p.

So the exact mean and MSD for any initial density p(·, 0) need only three periodic fields — no
sampling, no unbounded domain.  (For constant κ the last term is 2κ δ_ij; the derivation is the
d-moment hierarchy of the joint Fokker–Planck equation, integrated by parts over d.)

Numerics: the fields are Fourier–Galerkin vectors in the real basis (``grids.py``); the linear
system is block lower-triangular with A on the diagonal and is propagated exactly to a tolerance
by the shift-and-invert Krylov exponential of ``propagator.py``.  A point start is an exact
Dirac delta in Fourier space; the Galerkin answer converges spectrally for t > 0 because the
outputs are smooth functionals (the truncated delta is paired with a smooth backward solution).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .cell_problem import GROWTH, suggested_modes
from .fields import CellFields
from .grids import SpectralCell
from .propagator import TriangularSystem, propagate

OUTPUTS = ("mean_dx", "mean_dy", "msd_x", "msd_y", "msd_xy")
DEFAULT_TOL = 1e-10
DEFAULT_RTOL = 1e-6


def assemble(fields: CellFields, modes: int) -> tuple[TriangularSystem, SpectralCell]:
    """The moment system at ``modes`` Fourier modes per direction (real basis)."""
    cell = SpectralCell(fields.lx, fields.ly, modes)
    dx, dy = cell.derivative(0), cell.derivative(1)
    k_mult = cell.multiply(fields.kappa)
    u_mult, v_mult = cell.multiply(fields.u), cell.multiply(fields.v)
    transport = -(dx @ u_mult + dy @ v_mult) + dx @ k_mult @ dx + dy @ k_mult @ dy
    source_x = u_mult - k_mult @ dx - dx @ k_mult
    source_y = v_mult - k_mult @ dy - dy @ k_mult
    n = cell.size
    bx = cell.real_row(cell.average_against(fields.drift_x))
    by = cell.real_row(cell.average_against(fields.drift_y))
    kappa_row = cell.real_row(cell.average_against(fields.kappa))
    zero = np.zeros(n)
    rows = np.array([
        np.concatenate([bx, zero, zero]),                      # mean_dx
        np.concatenate([by, zero, zero]),                      # mean_dy
        np.concatenate([2 * kappa_row, 2 * bx, zero]),         # msd_x
        np.concatenate([2 * kappa_row, zero, 2 * by]),         # msd_y
        np.concatenate([zero, by, bx]),                        # msd_xy
    ])
    outputs = sp.csr_matrix(np.where(np.abs(rows) > 1e-300, rows, 0.0))
    system = TriangularSystem(
        A=cell.real_operator(transport),
        couplings=[cell.real_operator(source_x), cell.real_operator(source_y)],
        outputs=outputs)
    return system, cell


def evolve(fields: CellFields, initial: np.ndarray, times, modes: int,
           tol: float = DEFAULT_TOL, on_outputs=None) -> tuple[np.ndarray, dict]:
    """Outputs [len(times), 5] (columns ``OUTPUTS``) at one resolution.

    ``initial`` is the [2K+1, 2K+1] array of start coefficients p̂ (K ≥ modes) from
    :func:`eddyhop.reference.initial.initial_modes`.
    """
    system, cell = assemble(fields, modes)
    half = (initial.shape[0] - 1) // 2
    if half < modes:
        raise ValueError(f"initial coefficients cover {half} modes, fewer than {modes}")
    trimmed = initial[half - modes:half + modes + 1, half - modes:half + modes + 1]
    density = cell.real_vector(trimmed.ravel())
    state = np.concatenate([density, np.zeros(2 * cell.size)])
    start = time.perf_counter()
    values = propagate(system, state, times, tol=tol, on_outputs=on_outputs)
    stats = dict(system.stats, seconds=time.perf_counter() - start, unknowns=3 * cell.size)
    return values, stats


@dataclass(frozen=True)
class MomentCurves:
    """Mean and second moments of the displacement of one start region versus time.

    Arrays on ``times`` (model time units; lengths in the flow's length unit).
    ``relative_error`` is max over times of |MSD(M) − MSD(M')| / MSD(M) between the resolution
    ``modes`` = M and the check resolution ``check_modes`` = M' ≈ M/√2 (NaN without a check).
    """

    times: np.ndarray
    mean_dx: np.ndarray
    mean_dy: np.ndarray
    msd_x: np.ndarray
    msd_y: np.ndarray
    msd_xy: np.ndarray
    modes: int
    check_modes: int | None
    relative_error: float
    seconds: float
    krylov: dict

    @property
    def msd(self) -> np.ndarray:
        return self.msd_x + self.msd_y

    @property
    def var_x(self) -> np.ndarray:
        return self.msd_x - self.mean_dx**2

    @property
    def var_y(self) -> np.ndarray:
        return self.msd_y - self.mean_dy**2


def moment_curves(fields: CellFields, initial: np.ndarray, times, *, modes: int | None = None,
                  check: bool = True, tol: float = DEFAULT_TOL,
                  rtol: float = DEFAULT_RTOL, on_outputs=None) -> MomentCurves:
    """Moments of one start region; ``modes`` defaults to the a-priori choice for ``rtol``.

    With ``check`` the curves are also computed at modes/√2 and the largest relative change of
    the MSD is reported as the resolution error estimate.  ``on_outputs`` is passed to the
    propagator (progress: output times completed, by both resolutions).
    """
    start = time.perf_counter()
    if modes is None:
        modes = suggested_modes(fields, rtol)
    values, stats = evolve(fields, initial, times, modes, tol, on_outputs)
    check_modes = None
    error = float("nan")
    if check:
        check_modes = max(fields.highest_mode + 1, round(modes / GROWTH))
        if check_modes < modes:
            coarse, _ = evolve(fields, initial, times, check_modes, tol, on_outputs)
            msd = values[:, 2] + values[:, 3]
            change = np.abs(msd - (coarse[:, 2] + coarse[:, 3]))
            error = float(np.max(change / np.maximum(np.abs(msd), 1e-300)))
        else:
            check_modes = None
    columns = dict(zip(OUTPUTS, values.T))
    return MomentCurves(times=np.asarray(times, dtype=float), **columns, modes=modes,
                        check_modes=check_modes, relative_error=error,
                        seconds=time.perf_counter() - start, krylov=stats)


def default_modes(fields: CellFields, rtol: float = DEFAULT_RTOL) -> int:
    """Modes per direction used when none are given (see :func:`suggested_modes`)."""
    return suggested_modes(fields, rtol)


__all__ = ["OUTPUTS", "MomentCurves", "assemble", "default_modes", "evolve", "moment_curves"]
