"""What a reference solve will cost, known before it starts.

The noise-free solvers' work is set by the Fourier modes per direction M, which the solvers
choose from the cell Péclet number and ``rtol`` (``cell_problem.suggested_modes``) before any
solve.  Both scale steeply with the number of real unknowns U ≈ (2M + 1)²/2: the sparse LU of
the cell problem and of the shift-and-invert Krylov propagator fill in like a 2-D grid's.

The constants below are fits through runs of ``studies/lattice_mixer.toml`` at Pe = 10², 10³
and 3·10³ on the 2-vCPU development machine while it was shared with other jobs (so the times
are on the high side; read them as within a factor of about three):

==============================  ======  ========  ========  ==========
solve                            M       U         time      peak RSS
==============================  ======  ========  ========  ==========
cell problem (auto refinement)   51      5 304     0.3 s     +61 MB
cell problem (auto refinement)   155     48 360    2.0 s     +236 MB
cell problem (auto refinement)   268     144 184   22.9 s    +712 MB
moment evolution, one start      35      2 520     1.8 s     +122 MB
moment evolution, one start      109     23 980    207 s     +399 MB
==============================  ======  ========  ========  ==========
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import StudyError
from ..study.cost import format_bytes, format_seconds
from .cell_problem import DEFAULT_MAX_MODES, GROWTH, suggested_modes

# time ≈ T·(U/U₀)^p, memory ≈ B + b·U (fits through the table above)
_CELL_TIME = (22.9, 144184, 2.2)
_CELL_MEMORY = (40e6, 4.7e3)
_EVOLUTION_TIME = (207.0, 23980, 2.1)
_EVOLUTION_MEMORY = (90e6, 12.9e3)


def unknowns(modes: int) -> int:
    """Real unknowns of the spectral cell with ``modes`` per direction (half the complex set)."""
    return (2 * int(modes) + 1) ** 2 // 2


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
                f"({self.unknowns:,} unknowns)")

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
    cell_modes = chosen if modes is not None else math.ceil(chosen * GROWTH)
    cell_unknowns = unknowns(cell_modes)
    seconds = _power(_CELL_TIME, cell_unknowns) * (1 + GROWTH ** -4)  # + the coarser solve
    memory = _CELL_MEMORY[0] + _CELL_MEMORY[1] * cell_unknowns
    if starts:
        evolution_unknowns = unknowns(chosen)
        seconds += starts * _power(_EVOLUTION_TIME, evolution_unknowns)
        memory = max(memory, _EVOLUTION_MEMORY[0] + _EVOLUTION_MEMORY[1] * evolution_unknowns)
    return ReferenceCost(modes=chosen, unknowns=unknowns(chosen), starts=starts,
                         memory_bytes=int(memory), cpu_seconds=seconds)


__all__ = ["ReferenceCost", "reference_cost", "unknowns"]
