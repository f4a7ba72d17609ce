"""Plain-language warnings when a run's time step is large against the flow's time scales.

Apart from the runner so that ``eddyhop validate`` can give the same advice without loading
the kernels: nothing here imports numba unless a field must be evaluated (``_peak_speed``, only
when the step check is off).
"""

from __future__ import annotations

import math

import numpy as np


def _peak_speed(family, params, n: int = 64) -> float:
    """Largest |u| at t = 0 on an n × n grid over one period cell."""
    from ..flows.compiled import evaluate_velocity

    lx, ly = family.period(params)
    fallback = 2.0 * math.pi / family.wavenumber(params)
    gx, gy = np.meshgrid(np.arange(n) * (lx or fallback) / n, np.arange(n) * (ly or fallback) / n)
    u, v = evaluate_velocity(family, params, gx.ravel(), gy.ravel(), 0.0)
    speed = np.hypot(u, v)
    return float(np.max(speed[np.isfinite(speed)], initial=0.0))


# dt·U·k beyond which a scheme's static warning fires when no step check measures the bias:
# Euler-type steps (weak order 1) bias the cellular-flow D_eff by ≈ 0.8 % per 0.01 of dt·U·k
# at Pe = 10 and far more at high Pe (measured: +48 % at dt·U·k = 0.05, Pe = 100); the
# splitting scheme is unbiased within 1 % at dt·U·k = 0.2, Pe = 10 (docs/performance.md).
STATIC_ADVECTIVE_LIMIT = {"euler_maruyama": 0.01, "milstein": 0.01, "strang_rk2": 0.25,
                          "rk4": 0.5,
                          # adaptive substeps: dt is the output resolution, not the step
                          "projected_rk45": math.inf}


def step_size_warnings(study) -> list[str]:
    """Plain-language warnings when dt is large against the run's time scales.

    With the step check on (``run.step_check``) the accuracy of dt is *measured*
    (``stepcheck.py``, ``analysis.step_check``), so the static accuracy rules give way to it and
    only the flow-period resolution is checked here.  Without it the rules depend on the scheme:
    dt·U·k above ``STATIC_ADVECTIVE_LIMIT[integrator]`` at the peak speed, and, for the
    Euler-type schemes, dt·κ·k² above 0.01.
    """
    family = study.flow.model
    params = study.flow.params
    run = study.run
    dt = run.dt
    kappa = study.noise.kappa
    messages = []
    if not run.step_check:
        # the fastest speed on a grid over one period, so that a strong drift or large Fourier
        # amplitudes count, not only the nominal scale U
        velocity_scale = max(family.velocity_scale(params), _peak_speed(family, params))
        k = family.wavenumber(params)
        scheme = run.integrator
        limit = STATIC_ADVECTIVE_LIMIT[scheme]
        euler_type = scheme in ("euler_maruyama", "milstein")
        advective = dt * velocity_scale * k
        if velocity_scale > 0 and advective > limit:
            why = ("Euler-type steps distort eddy orbits: the D_eff bias is about 1% per 0.01 "
                   "of dt·U·k at Pe = 10 and grows with Pe" if euler_type else
                   f"{scheme} loses accuracy on eddy orbits beyond that")
            measure = (" — or turn on run.step_check to measure the bias" if kappa > 0
                       else "")
            messages.append(
                f"run.dt = {dt:g} is {advective:.3g} advective times 1/(U k) at the peak speed "
                f"{velocity_scale:.3g}; with {scheme} keep dt·U·k below {limit:g} ({why})"
                f"{measure}")
        if euler_type and kappa > 0 and dt * kappa * k * k > 0.01:
            messages.append(
                f"run.dt = {dt:g} is {dt * kappa * k * k:.3g} cell diffusion times "
                f"1/(kappa k^2); with {scheme} keep it below 0.01 — or turn on run.step_check "
                "to measure the bias")
    period = family.time_period(params)
    if period is not None and dt > period / 50:
        messages.append(f"run.dt = {dt:g} resolves the flow period {period:.4g} with fewer than "
                        "50 steps")
    return messages
