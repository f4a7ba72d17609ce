"""Exponential propagation of a linear, autonomous, block lower-triangular ODE system.

The system (plain sparse matrices, no physics here)::

    f_0' = A f_0
    f_b' = A f_b + C_b f_0          (b = 1 … B−1)
    s'   = Σ_b R_b f_b              (a few scalar outputs that only accumulate)

is integrated exactly up to a tolerance by *shift-and-invert Krylov* approximations of the
matrix exponential: with Z = (I − γJ)⁻¹ and the Arnoldi relation Z V_m = V_{m+1} H̄_m,
``exp(τJ) y ≈ ‖y‖ V_m exp(τ (I − H_m⁻¹)/γ) e_1`` for every τ in a window at once (van den Eshof &
Hochbruck 2006, SIAM J. Sci. Comput. 27, 1438–1457; Moret & Novati 2004, BIT 44, 595–615).  Applying
Z needs one sparse LU of (I − γA) per window, reused by every block thanks to the triangular
structure, so the cost is a few LU factorizations and a few hundred sparse solves per decade of
time.  Windows grow geometrically in time (each ends at about ``growth`` × its start), which
suits log-spaced output times; the Krylov dimension is raised until the outputs at the window's
times and its end state change by less than ``tol``, and a window that does not converge within
``max_dimension`` is split.  The scalar outputs restart from zero in each window and are added to
the running totals, so the accuracy of an output is relative to its own growth.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .cell_problem import ReferenceConvergenceError

CHECKPOINTS = (8, 12, 16, 24, 32, 48, 64, 80, 96, 128, 160)


@dataclass
class TriangularSystem:
    """Blocks of the system above: ``A`` (N × N), ``couplings`` [C_1 … C_{B−1}] (N × N each),
    ``outputs`` R (n_s × B·N), all real sparse."""

    A: sp.spmatrix
    couplings: list
    outputs: sp.spmatrix
    stats: dict = field(default_factory=lambda: {"factorizations": 0, "solves": 0,
                                                 "windows": 0, "largest_dimension": 0})

    @property
    def n(self) -> int:
        return self.A.shape[0]

    @property
    def blocks(self) -> int:
        return 1 + len(self.couplings)

    @property
    def n_outputs(self) -> int:
        return self.outputs.shape[0]

    def shifted_inverse(self, gamma: float):
        """The function v ↦ (I − γJ)⁻¹ v on stacked vectors (f_0, …, f_{B−1}, s), by block
        forward substitution with one sparse LU of (I − γA)."""
        n = self.n
        matrix = (sp.identity(n, format="csc") - gamma * self.A).tocsc()
        factor = spla.splu(matrix, permc_spec="COLAMD")
        self.stats["factorizations"] += 1
        couplings = self.couplings
        outputs = self.outputs

        def apply(vector):
            fields = vector[:n * self.blocks].reshape(self.blocks, n)
            out = np.empty_like(vector)
            first = factor.solve(fields[0])
            out[:n] = first
            for b, coupling in enumerate(couplings, start=1):
                out[b * n:(b + 1) * n] = factor.solve(fields[b] + gamma * (coupling @ first))
            self.stats["solves"] += self.blocks
            out[n * self.blocks:] = vector[n * self.blocks:] + gamma * (
                outputs @ out[:n * self.blocks])
            return out

        return apply


def _exponential_columns(generator, taus):
    """Rows exp(τ G) e_1 for every τ (dense, small)."""
    stacked = np.asarray(taus, dtype=float)[:, None, None] * generator[None]
    return sla.expm(stacked)[:, :, 0]


def _window(system: TriangularSystem, state, taus, gamma, tol, max_dimension):
    """(outputs at taus [K, n_s], end state, dimension) or None if not converged."""
    n_fields = system.n * system.blocks
    vector = np.concatenate([state, np.zeros(system.n_outputs)])
    beta = float(np.linalg.norm(vector))
    if beta == 0.0:
        return np.zeros((len(taus), system.n_outputs)), state.copy(), 0
    apply = system.shifted_inverse(gamma)
    row_size = float(abs(system.outputs).sum(axis=1).max()) if system.outputs.nnz else 0.0
    roundoff = 1e2 * np.finfo(float).eps * beta * row_size * (1.0 + taus[-1])
    basis = np.zeros((max_dimension + 1, vector.size))
    hessenberg = np.zeros((max_dimension + 1, max_dimension))
    basis[0] = vector / beta
    previous = None
    # convergence is judged on a few probe times (first, middle, last); all at the end
    probe = np.asarray(taus)[sorted({0, len(taus) // 2, len(taus) - 1})]
    checkpoints = [c for c in CHECKPOINTS if c < max_dimension] + [max_dimension]
    for j in range(max_dimension):
        w = apply(basis[j])
        for _ in range(2):  # classical Gram–Schmidt, twice (keeps the basis orthonormal)
            h = basis[:j + 1] @ w
            w -= h @ basis[:j + 1]
            hessenberg[:j + 1, j] += h
        norm = float(np.linalg.norm(w))
        hessenberg[j + 1, j] = norm
        dimension = j + 1
        breakdown = norm <= 1e-14 * max(np.abs(hessenberg[:j + 2, j]).max(), 1e-300)
        if not breakdown:
            basis[j + 1] = w / norm
        if dimension not in checkpoints and not breakdown:
            continue
        small = hessenberg[:dimension, :dimension]
        try:
            generator = (np.eye(dimension) - np.linalg.inv(small)) / gamma
        except np.linalg.LinAlgError:
            return None
        coefficients = beta * _exponential_columns(generator, probe)  # [P, m]
        outputs = coefficients @ basis[:dimension, n_fields:]
        end = coefficients[-1] @ basis[:dimension, :n_fields]
        if not (np.all(np.isfinite(outputs)) and np.all(np.isfinite(end))):
            return None
        if breakdown:  # invariant subspace: exact
            system.stats["largest_dimension"] = max(system.stats["largest_dimension"],
                                                    dimension)
            every = beta * _exponential_columns(generator, taus)
            return every @ basis[:dimension, n_fields:], end, dimension
        if previous is not None:
            old_outputs, old_end = previous
            # accept when every output changed by less than tol relative to its own size
            # (outputs far smaller than the largest one: relative to 1e-3 of that), or by
            # less than the round-off level of the Krylov sums
            scale = np.abs(outputs).max(axis=0)
            allowed = tol * np.maximum(scale, 1e-3 * scale.max()) + roundoff
            end_allowed = tol * np.linalg.norm(end) + 1e2 * np.finfo(float).eps * beta
            if np.all(np.abs(outputs - old_outputs) <= allowed) and \
                    np.linalg.norm(end - old_end) <= end_allowed:
                system.stats["largest_dimension"] = max(system.stats["largest_dimension"],
                                                        dimension)
                every = beta * _exponential_columns(generator, taus)
                return every @ basis[:dimension, n_fields:], end, dimension
        previous = (outputs, end)
    return None


def propagate(system: TriangularSystem, initial: np.ndarray, times, *, tol: float = 1e-10,
              growth: float = 3.0, max_dimension: int = 160,
              shift: float = 0.1, on_outputs=None) -> np.ndarray:
    """Scalar outputs s(t) [len(times), n_s] for the initial field state ``initial`` (length
    B·N; the outputs start at zero).  ``times`` must be positive and strictly increasing.

    ``tol``: accepted change of outputs and end state between Krylov dimensions; ``growth``:
    each window ends near ``growth`` × its start time; ``shift``: γ = ``shift`` × window length
    (measured best for the cellular flow among 0.1, 0.25, 0.5 with growth 2, 3, 5).
    ``on_outputs(count)``, if given, is called after each window with the number of output
    times it completed (for a progress display).
    """
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or times.size == 0 or np.any(times <= 0) or np.any(np.diff(times) <= 0):
        raise ValueError("times must be a non-empty, positive, strictly increasing sequence")
    state = np.asarray(initial, dtype=float).copy()
    totals = np.zeros(system.n_outputs)
    results = np.zeros((times.size, system.n_outputs))
    t0 = 0.0
    i = 0
    span = math.inf  # longest window to try, shrunk after failures and regrown after successes
    while i < times.size:
        limit = min(t0 * growth, t0 + span) if t0 > 0.0 else min(times[i], span)
        if times[i] <= limit * (1.0 + 1e-12):
            last = int(np.searchsorted(times, limit * (1.0 + 1e-12), side="right"))
            end_time = times[last - 1]
            chosen = list(range(i, last))
        else:  # no output time in this window: carry the state to its end
            end_time = limit
            chosen = []
        while True:
            taus = np.append(times[chosen] - t0, end_time - t0) if not chosen or \
                times[chosen[-1]] != end_time else times[chosen] - t0
            window = _window(system, state, taus, (end_time - t0) * shift, tol,
                             max_dimension)
            system.stats["windows"] += 1
            if window is not None:
                break
            # split: stop a third of the way and carry the state across
            system.stats["failed_windows"] = system.stats.get("failed_windows", 0) + 1
            span = (end_time - t0) / 3.0
            end_time = t0 + span
            chosen = [j for j in chosen if times[j] <= end_time]
            if span <= 1e-12 * max(end_time, 1e-300):
                raise ReferenceConvergenceError(
                    f"the moment evolution did not converge near t = {t0:g}: the Krylov "
                    f"propagator needs more than {max_dimension} dimensions even on a tiny "
                    "window; lower the resolution or loosen the tolerance")
        outputs, state, dimension = window
        if dimension <= max_dimension // 2:
            span *= 2.0
        for row, j in enumerate(chosen):
            results[j] = totals + outputs[row]
        if on_outputs is not None and chosen:
            on_outputs(len(chosen))
        totals = totals + outputs[-1]
        t0 = end_time
        i = chosen[-1] + 1 if chosen else i
    return results


__all__ = ["TriangularSystem", "propagate"]
