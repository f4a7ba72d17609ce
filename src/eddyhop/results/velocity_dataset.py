"""Streamed velocity-pair sums → Dataset variables (see ``study/velocity_table.py``).

Per start region: ensemble means and per-batch means of u_i(X(t_r)) u_j(X(t_r + τ)) and of the
lagged velocity u_j(X(t_r + τ)) on (``reference_time``, ``correlation_lag``).  The analysis
(``analysis/velocity.py``) centres, integrates and transforms them.
"""

from __future__ import annotations

from ..engine.velocity_pairs import VELOCITY_COLUMNS

_COL = {name: i for i, name in enumerate(VELOCITY_COLUMNS)}
PAIRS = ("xx", "xy", "yx", "yy")
DIMS = ("reference_time", "correlation_lag")


def velocity_data(start) -> dict:
    """Data variables of one start region's velocity sums [B, R, L, 6]."""
    sums = start.velocity
    counts = start.batch_counts
    mean = sums.sum(axis=0) / counts.sum()
    batch = sums / counts[:, None, None, None]
    data = {}
    for pair in PAIRS:
        column = _COL["u" + pair[0] + "u" + pair[1]]
        data[f"velocity_correlation_{pair}"] = (DIMS, mean[:, :, column])
        data[f"batch_velocity_correlation_{pair}"] = (("batch", *DIMS), batch[:, :, :, column])
    for component in ("x", "y"):
        column = _COL["u" + component]
        data[f"lagged_velocity_{component}"] = (DIMS, mean[:, :, column])
        data[f"batch_lagged_velocity_{component}"] = (("batch", *DIMS), batch[:, :, :, column])
    return data


def velocity_coords(schedule) -> dict:
    return {"reference_time": schedule.vc_ref_steps * schedule.dt,
            "correlation_lag": schedule.vc_lag_steps * schedule.dt}


VARIABLE_ATTRS = {}
for _pair in PAIRS:
    _i, _j = _pair
    VARIABLE_ATTRS[f"velocity_correlation_{_pair}"] = (
        f"Lagrangian velocity correlation <u_{_i}(X(t_r)) u_{_j}(X(t_r+lag))> (not centred)",
        "L2 T-2")
    VARIABLE_ATTRS[f"batch_velocity_correlation_{_pair}"] = (
        f"batch mean of u_{_i}(X(t_r)) u_{_j}(X(t_r+lag))", "L2 T-2")
for _c in ("x", "y"):
    VARIABLE_ATTRS[f"lagged_velocity_{_c}"] = (
        f"mean Lagrangian velocity <u_{_c}(X(t_r+lag))>", "L T-1")
    VARIABLE_ATTRS[f"batch_lagged_velocity_{_c}"] = (
        f"batch mean of u_{_c}(X(t_r+lag))", "L T-1")

COORD_ATTRS = {
    "reference_time": ("reference time t_r of the velocity correlation", "T"),
    "correlation_lag": ("lag after the reference time (linear grid from 0)", "T"),
}

__all__ = ["COORD_ATTRS", "VARIABLE_ATTRS", "velocity_coords", "velocity_data"]
