"""The ``[velocity_correlation]`` study table: Lagrangian velocity pairs streamed by the kernel.

For each reference time t_r and each lag τ of a *linear* grid 0, Δτ, 2Δτ, …, τ_max the kernel
adds, per particle, the products u_i(X(t_r), t_r) · u_j(X(t_r + τ), t_r + τ) (i, j ∈ {x, y}) and
the lagged velocity u_j(X(t_r + τ)) to block sums (no stored paths).  ``u`` is the flow velocity
at the tracer (the drift term of the SDE, not the noise).  The analysis turns these into the
velocity covariance C_ij(τ), its running integral (Green–Kubo) and a power spectrum
(``analysis/velocity.py``).

Validation (one line naming the field): reference times inside [0, run.t_end) on distinct
steps; lags that stay inside the run (t_r + τ_max ≤ run.t_end for every t_r); a lag step of at
least run.dt and fine enough for the spectrum: its Nyquist angular frequency π/Δτ must be at
least ``NYQUIST_MARGIN`` times the flow's fastest Lagrangian frequency, ω_max = k·|u|_max (+ the
flow's own angular frequency 2π/T for time-periodic flows), with |u|_max the family's speed
bound.  The lag step is rounded to a whole number of run.dt.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

from ..engine.velocity_pairs import VELOCITY_COLUMNS, velocity_steps  # noqa: F401
from ..errors import StudyError
from .readers import _number, _number_list, _reject_unknown, _table

# Nyquist angular frequency π/Δτ over the fastest advective frequency ω_max: 4 keeps the first
# harmonic 2ω_max below Nyquist with room for the window's leakage.
NYQUIST_MARGIN = 4.0
MAX_LAGS = 100_000  # lags per reference time (memory: 6 float64 sums per lag and block)
MAX_REFERENCES = 64


@dataclass(frozen=True)
class VelocityCorrelationSpec:
    """Reference times t_r and the linear lag grid (model time units) of the streamed velocity
    correlation ⟨u_i(X(t_r)) u_j(X(t_r + τ))⟩; ``enabled`` is False without the table."""

    enabled: bool = False
    reference_times: tuple = (0.0,)
    lag_max: float = 0.0
    lag_step: float = 0.0


def fastest_frequency(family, params) -> float:
    """ω_max = k·|u|_max (+ 2π/T for a time-periodic flow), angular frequency; NaN if the
    family has no single wavenumber or speed bound (e.g. gridded data)."""
    try:
        k = float(family.wavenumber(params))
        speed = float(family.speed_bound(params)[0])
    except (KeyError, TypeError, ValueError, AttributeError):
        return math.nan
    omega = k * speed
    period = family.time_period(params)
    if period:
        omega += 2.0 * math.pi / period
    return omega


def parse_velocity_correlation(document, flow, run) -> VelocityCorrelationSpec:
    """Validate the ``[velocity_correlation]`` table against the flow and the run."""

    where = "velocity_correlation"
    if where not in document:
        return VelocityCorrelationSpec()
    table = _table(document, where)
    _reject_unknown(table, {"enabled", "reference_times", "lag_max", "lag_step"}, where)
    enabled = table.get("enabled", True)
    if not isinstance(enabled, bool):
        raise StudyError(f"{where}.enabled: expected true or false, got {enabled!r}")
    if not enabled:
        return VelocityCorrelationSpec()
    dt, t_end = run.dt, run.t_end
    references = (_number_list(table, "reference_times", where, low=0.0)
                  if "reference_times" in table else (0.0,))
    if not references:
        raise StudyError(f"{where}.reference_times is empty; give at least one time in "
                         f"[0, {t_end:g})")
    if len(references) > MAX_REFERENCES:
        raise StudyError(f"{where}.reference_times has {len(references)} times; allowed: at "
                         f"most {MAX_REFERENCES}")
    steps = [round(t / dt) for t in references]
    if any(b <= a for a, b in itertools.pairwise(steps)):
        raise StudyError(f"{where}.reference_times = {list(references)} must be strictly "
                         f"increasing and at least run.dt = {dt:g} apart")
    if references[-1] >= t_end:
        raise StudyError(f"{where}.reference_times contains {references[-1]:g}, which is not "
                         f"before run.t_end = {t_end:g}; allowed: [0, {t_end:g})")
    room = t_end - references[-1]
    lag_max = _number(table, "lag_max", where, default=room, low=0.0, low_open=True)
    if round(lag_max / dt) > round(t_end / dt) - steps[-1]:
        raise StudyError(f"{where}.lag_max = {lag_max:g} reaches beyond the run: from the "
                         f"reference time {references[-1]:g} it ends after run.t_end = "
                         f"{t_end:g}; allowed: at most {room:g} (run.t_end − the last "
                         "reference time)")
    omega = fastest_frequency(flow.model, flow.params)
    finest_needed = (math.pi / (NYQUIST_MARGIN * omega)
                     if math.isfinite(omega) and omega > 0 else math.inf)
    if "lag_step" in table:
        lag_step = _number(table, "lag_step", where, low=0.0, low_open=True)
    elif math.isfinite(finest_needed):  # the coarsest whole number of steps the spectrum
        # allows (fewest sums), ≥ dt
        lag_step = dt * max(1, math.floor(min(finest_needed, lag_max / 8) / dt))
    else:  # no frequency scale known (e.g. gridded data): about 1000 lags
        lag_step = dt * max(1, math.ceil(lag_max / dt / 1000))
    lag_steps = round(lag_step / dt)
    if lag_steps < 1:
        raise StudyError(f"{where}.lag_step = {lag_step:g} is below run.dt = {dt:g}; allowed: "
                         "a whole number of steps (at least run.dt)")
    if lag_steps * dt > finest_needed * (1 + 1e-9):
        raise StudyError(
            f"{where}.lag_step = {lag_step:g} is too coarse for the spectrum: the flow's "
            f"fastest frequency k·|u|max = {omega:.4g} needs a Nyquist frequency π/lag_step at "
            f"least {NYQUIST_MARGIN:g} times higher; allowed: lag_step ≤ {finest_needed:.4g}")
    count = round(lag_max / dt) // lag_steps
    if count < 8:
        raise StudyError(f"{where}.lag_max = {lag_max:g} holds {count} lag steps of "
                         f"{lag_steps * dt:g}; allowed: at least 8 (raise lag_max or lower "
                         "lag_step)")
    if count + 1 > MAX_LAGS:
        raise StudyError(f"{where}.lag_max / lag_step = {count} lags; allowed: at most "
                         f"{MAX_LAGS - 1} (raise lag_step or lower lag_max)")
    return VelocityCorrelationSpec(enabled=True, reference_times=tuple(float(t) for t in
                                                                       references),
                                   lag_max=count * lag_steps * dt, lag_step=lag_steps * dt)
