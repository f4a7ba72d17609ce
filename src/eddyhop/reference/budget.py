"""What a reference solve will cost, known before it starts.

The noise-free solvers' work is set by the Fourier modes per direction M, which the solvers
choose from the cell Péclet number and ``rtol`` (``cell_problem.suggested_modes``) before any
solve.  The cell problem solves one sparse system per corrector (one for both when their
symmetries agree) with about (2M + 1)²/|G| real unknowns, |G| the number of cell symmetries
of the corrector (``cell_problem.cell_symmetries``; 8 for the cellular flow, 2 for a drifting
one, 1 without any); the moment evolution's shift-and-invert Krylov propagator works on
U ≈ (2M + 1)²/2.  Both costs grow steeply: sparse LU fills in like a 2-D grid's.

The constants below are fits through measured solves on the 2-vCPU development machine while
it was shared with other jobs (CPU time, which load does not inflate much; read them as within
a factor of about three).  Cell problem, automatic refinement at rtol 1e-6 (issue 18, after the
symmetry reduction), CPU time of the whole refinement and peak RSS above an interpreter with the
package imported (62 MB):

==================================  ======  ===================  ========  ==========
solve                               M       unknowns per system  CPU time  peak RSS
==================================  ======  ===================  ========  ==========
cellular, Pe = 10², 2 systems       51      1 325                0.50 s    +109 MB
cellular, Pe = 10³, 2 systems       155     12 089               0.83 s    +144 MB
cellular, Pe = 3·10³, 2 systems     268     36 045               1.76 s    +213 MB
cellular, Pe = 10⁴, 2 systems       486     118 340              4.91 s    +443 MB
drifting cellular, Pe = 10³, 1      177     63 012               2.19 s    +306 MB
drifting cellular, Pe = 3·10³, 1    303     184 224              10.2 s    +831 MB
==================================  ======  ===================  ========  ==========

Moment evolution (``studies/lattice_mixer.toml``, before issue 18): one start at M = 35,
U = 2 520: 1.8 s, +122 MB; at M = 109, U = 23 980: 207 s, +399 MB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import StudyError
from ..study.cost import format_bytes, format_seconds
from .cell_problem import DEFAULT_MAX_MODES, GROWTH, cell_symmetries, suggested_modes

# cell problem: time ≈ t₀ + (systems)·T·(n/n₀)^p, memory ≈ B + b·n, n the unknowns of the
# largest system (fits through the table above: every row within a factor of 2.1)
_CELL_OVERHEAD_SECONDS = 0.4
_CELL_TIME = (9.8, 184224, 1.6)
_CELL_MEMORY = (100e6, 4.0e3)
# moment evolution: time ≈ T·(U/U₀)^p, memory ≈ B + b·U
_EVOLUTION_TIME = (207.0, 23980, 2.1)
_EVOLUTION_MEMORY = (90e6, 12.9e3)


def unknowns(modes: int) -> int:
    """Real unknowns of the spectral cell with ``modes`` per direction (half the complex set)."""
    return (2 * int(modes) + 1) ** 2 // 2


def cell_systems(fields, modes: int) -> tuple[int, int]:
    """(unknowns of the largest system, number of systems) of the cell problem at ``modes``
    per direction: (2M + 1)²/|G| for the corrector with the fewest symmetries.  A corrector
    without a right-hand side is counted as a full system (an over-estimate)."""
    groups = cell_symmetries(fields)
    lattice = (2 * int(modes) + 1) ** 2
    systems = len({frozenset(group.items()) for group in groups})
    return lattice // (1 + len(min(groups, key=len))), systems


def _power(fit, count) -> float:
    seconds, reference, exponent = fit
    return seconds * (count / reference) ** exponent


@dataclass(frozen=True)
class ReferenceCost:
    """Modes, unknowns and estimated peak memory (bytes) and CPU time (s) of a reference solve."""

    modes: int  # per direction, the a-priori choice (or the user's)
    unknowns: int
    starts: int  # moment evolutions (0: cell problem only)
    memory_bytes: int
    cpu_seconds: float

    def work_line(self) -> str:
        what = (f"{self.starts} moment evolution{'s' if self.starts != 1 else ''} "
                "(each checked at modes/√2) and " if self.starts else "")
        return (f"work: {what}the cell problem with {self.modes} Fourier modes per direction "
                f"({self.unknowns:,} unknowns per linear system)")

    def estimate_line(self) -> str:
        return (f"estimate: peak memory {format_bytes(self.memory_bytes)}, CPU time "
                f"{format_seconds(self.cpu_seconds)} (fitted to measured solves; within a "
                "factor of about three)")


def reference_cost(fields, starts: int, *, modes: int | None = None,
                   rtol: float = 1e-6) -> ReferenceCost:
    """Cost of ``moment_evolution`` for ``starts`` regions (0: ``effective_diffusivity`` only).

    The automatic cell-problem refinement usually ends one √2 step above the a-priori modes;
    the estimate assumes it does.  Raises StudyError when the a-priori modes for ``rtol``
    exceed the solvers' ``DEFAULT_MAX_MODES`` (the automatic solve could only fail, after
    hours).
    """
    chosen = suggested_modes(fields, rtol) if modes is None else int(modes)
    if modes is None and chosen > DEFAULT_MAX_MODES:
        raise StudyError(
            f"rtol = {rtol:g} at cell Peclet number {fields.peclet_cell:.3g} needs about "
            f"{chosen} Fourier modes per direction, above the limit of {DEFAULT_MAX_MODES}; "
            "loosen rtol or give the modes explicitly (the error estimate then says how "
            "far off they are)")
    # the fits are through whole automatic refinements, indexed by their final resolution
    cell_modes = chosen if modes is not None else math.ceil(chosen * GROWTH)
    cell_unknowns, systems = cell_systems(fields, cell_modes)
    seconds = _CELL_OVERHEAD_SECONDS + systems * _power(_CELL_TIME, cell_unknowns)
    memory = _CELL_MEMORY[0] + _CELL_MEMORY[1] * cell_unknowns
    if starts:
        evolution_unknowns = unknowns(chosen)
        seconds += starts * _power(_EVOLUTION_TIME, evolution_unknowns)
        memory = max(memory, _EVOLUTION_MEMORY[0] + _EVOLUTION_MEMORY[1] * evolution_unknowns)
    return ReferenceCost(modes=chosen, unknowns=cell_systems(fields, chosen)[0], starts=starts,
                         memory_bytes=int(memory), cpu_seconds=seconds)


__all__ = ["ReferenceCost", "cell_systems", "reference_cost", "unknowns"]
