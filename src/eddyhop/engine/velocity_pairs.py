"""The kernel's side of the ``[velocity_correlation]`` table: which steps pair velocities.

The table itself is parsed and validated by ``study/velocity_table.py``; the engine only needs
the column layout of the streamed sums and the step indices, computed here from the table's
attributes (so that the engine does not import the study stage).
"""

from __future__ import annotations

import numpy as np

# per (reference time, lag): u_x(t_r)u_x(t_r+τ), u_x u_y, u_y u_x, u_y u_y, u_x(t_r+τ), u_y(t_r+τ)
VELOCITY_COLUMNS = ("uxux", "uxuy", "uyux", "uyuy", "ux", "uy")


def velocity_steps(spec, dt: float):
    """(reference steps, lag steps) of the kernel: lags 0, Δ, …, on whole steps."""
    if not spec.enabled:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty
    refs = np.array([round(t / dt) for t in spec.reference_times], dtype=np.int64)
    stride = round(spec.lag_step / dt)
    count = round(spec.lag_max / dt) // stride
    return refs, np.arange(count + 1, dtype=np.int64) * stride


__all__ = ["VELOCITY_COLUMNS", "velocity_steps"]
