"""Python API of the reference solvers (the CLI command ``eddyhop reference`` calls these).

``effective_diffusivity(...)`` → :class:`HomogenizedDiffusivity` (tensor + convergence
estimate); ``moment_evolution(study, times=...)`` → Dataset laid out like a Monte Carlo run.
"""

from __future__ import annotations

import math
import time
import warnings

import numpy as np

from ..errors import StudyError
from ._threads import single_threaded_blas
from .cell_problem import (
    DEFAULT_MAX_MODES,
    DEFAULT_RTOL,
    ReferenceConvergenceError,
    ResolutionWarning,
    homogenized_diffusivity,
    suggested_modes,
)
from .fields import cell_fields, study_fields

METHOD = ("method of moments on one period cell (Aris 1956; Brenner 1980): Fokker-Planck "
          "density and first-moment fields, Fourier-Galerkin in space, shift-and-invert "
          "Krylov matrix exponential in time")


def effective_diffusivity(source, params: dict | None = None, kappa: float | None = None, *,
                          peclet: float | None = None, noise_model: str = "constant",
                          modulation: float = 0.0, rtol: float = DEFAULT_RTOL,
                          modes: int | None = None, max_modes: int = DEFAULT_MAX_MODES):
    """Homogenized diffusivity tensor of a steady periodic flow, with a convergence estimate.

    ``source`` is a validated :class:`~eddyhop.study.spec.Study` (its flow and noise are used), or a
    flow family (object or name) with ``params`` (checked by the family) and either ``kappa``
    (length²/time) or ``peclet`` (Pe = U/(κk), the package's default convention).  Optional
    ``noise_model = "modulated"`` with ``modulation`` a: κ(x, y) = κ (1 + a sin kx sin ky).

    Resolution: refined automatically until two successive tensors agree to ``rtol`` (error
    :class:`ReferenceConvergenceError` if ``max_modes`` per direction is not enough); with
    ``modes`` fixed, a :class:`ResolutionWarning` gives the estimated error if it exceeds
    ``rtol``.  Time-dependent flows and flows with walls raise :class:`StudyError` naming the
    alternative (the Monte Carlo ensemble).
    """
    from ..study.spec import Study

    if isinstance(source, Study):
        if params is not None or kappa is not None or peclet is not None:
            raise TypeError("give either a Study or (family, params, kappa or peclet), not both")
        fields = study_fields(source, what="the homogenized-diffusivity solver")
    else:
        from ..engine.noise import kappa_from_peclet
        from ..flows import get_family

        family = get_family(source) if isinstance(source, str) else source
        checked = family.validate(dict(params or {}))
        if (kappa is None) == (peclet is None):
            raise StudyError("give exactly one of kappa (molecular diffusivity) or peclet "
                             "(Pe = U/(kappa k))")
        if peclet is not None:
            if not (peclet > 0 and math.isfinite(peclet)):
                raise StudyError(f"peclet = {peclet!r} must be a positive number")
            velocity = family.velocity_scale(checked)
            if velocity == 0.0:
                raise StudyError("peclet needs a moving flow (U > 0); give kappa instead")
            kappa = kappa_from_peclet(velocity, family.wavenumber(checked), peclet)
        fields = cell_fields(family, checked, float(kappa), noise_model, modulation,
                             what="the homogenized-diffusivity solver")
    with single_threaded_blas():
        return homogenized_diffusivity(fields, rtol=rtol, modes=modes, max_modes=max_modes)


def _check_times(times) -> np.ndarray:
    values = np.asarray(times, dtype=float)
    if values.ndim != 1 or values.size == 0:
        raise StudyError(f"times: expected a non-empty 1-D sequence of times, got {times!r}")
    if not np.all(np.isfinite(values)) or np.any(values < 0):
        raise StudyError("times must be finite and non-negative")
    if np.any(np.diff(values) <= 0):
        raise StudyError("times must be strictly increasing")
    return values


def study_times(study) -> np.ndarray:
    """The output times of the study's Monte Carlo run (identical coordinates for overlays)."""
    from ..engine.schedule import output_steps

    run = study.run
    return output_steps(run.dt, run.t_end, run.n_times, run.spacing, run.t_first,
                        run.times) * run.dt


def moment_evolution(study, times=None, *, modes: int | None = None, check: bool = True,
                     rtol: float = DEFAULT_RTOL, tol: float = 1e-10,
                     homogenized: bool = True, quadrature: int | None = None,
                     progress: bool = False):
    """Exact (noise-free) mean and MSD versus time for every start region of ``study``.

    Returns an ``xarray.Dataset`` with the Monte Carlo layout: ``msd, msd_x, msd_y, msd_xy,
    mean_dx, mean_dy, var_x, var_y`` on ``time`` (and ``start`` with several regions), CF
    attributes and provenance (``eddyhop_kind = "reference"``).  ``times`` default to the
    study's own output times.  ``modes`` (Fourier modes per direction) default to an a-priori
    choice for ``rtol``; with ``check`` the run is repeated at modes/√2 and the largest relative
    change of the MSD is stored as ``msd_resolution_error`` (a :class:`ResolutionWarning` is
    issued when it exceeds ``rtol`` for fixed ``modes``, or √rtol for automatic ones).  ``tol``
    is the tolerance of the time propagation.  With ``homogenized`` the cell-problem tensor is
    added (``homogenized_dxx`` …), the long-time limit the MSD slope must approach.
    ``progress`` shows a bar of output times solved (both resolutions, every start).
    """
    from ..starts import area_fraction
    from .initial import DEFAULT_QUADRATURE, initial_modes
    from .moments import moment_curves

    fields = study_fields(study, what="the moment evolution")
    values = study_times(study) if times is None else _check_times(times)
    positive = values > 0
    if not positive.any():
        raise StudyError("times: at least one time must be positive")
    family, params = study.flow.model, study.flow.params
    quadrature = DEFAULT_QUADRATURE if quadrature is None else int(quadrature)
    started = time.perf_counter()
    curves = []
    bar = None
    if progress:
        from tqdm.auto import tqdm

        passes = len(study.starts) * (2 if check else 1)
        bar = tqdm(total=passes * int(positive.sum()), unit="time", desc="reference solve",
                   leave=False, dynamic_ncols=True)
    with single_threaded_blas():
        for region in study.starts:
            resolution = suggested_modes(fields, rtol) if modes is None else int(modes)
            if resolution < 2:
                raise StudyError(f"modes = {modes!r} must be at least 2")
            initial = initial_modes(region, family, params, fields.lx, fields.ly, resolution,
                                    quadrature)
            curve = moment_curves(fields, initial, values[positive], modes=resolution,
                                  check=check, tol=tol, rtol=rtol,
                                  on_outputs=None if bar is None else bar.update)
            curves.append(_with_zero_times(curve, values, positive))
            limit = rtol if modes is not None else math.sqrt(rtol)
            if check and curve.relative_error > limit:
                warnings.warn(
                    f"start {region.label!r}: modes = {resolution} may be too coarse at cell "
                    f"Peclet number {fields.peclet_cell:.3g}: the MSD changed by up to "
                    f"{curve.relative_error:.1e} (relative) from modes = {curve.check_modes}; "
                    "raise modes for a tighter reference", ResolutionWarning, stacklevel=2)
        tensor = None
        if bar is not None:
            bar.set_description("cell problem")
        if homogenized:
            try:
                tensor = homogenized_diffusivity(fields, rtol=rtol)
            except ReferenceConvergenceError as exc:
                warnings.warn(f"the homogenized tensor is omitted: {exc}", ResolutionWarning,
                              stacklevel=2)
    if bar is not None:
        bar.close()
    fractions = [area_fraction(r, family, params) for r in study.starts]
    extra = _provenance(curves, tensor, tol, quadrature, time.perf_counter() - started)
    from .dataset import build_reference_dataset

    return build_reference_dataset(study, values, study.starts, curves, fractions, tensor,
                                   extra)


def _with_zero_times(curve, values, positive):
    """Insert exact zeros at requested t = 0."""
    if positive.all():
        return curve
    from dataclasses import replace

    def full(array):
        out = np.zeros(values.size)
        out[positive] = array
        return out

    return replace(curve, times=values, mean_dx=full(curve.mean_dx),
                   mean_dy=full(curve.mean_dy), msd_x=full(curve.msd_x),
                   msd_y=full(curve.msd_y), msd_xy=full(curve.msd_xy))


def _provenance(curves, tensor, tol, quadrature, seconds) -> dict:
    errors = [c.relative_error for c in curves]
    extra = {
        "source": "eddyhop deterministic reference: exact ensemble moments without sampling "
                  "(no particles, no random numbers)",
        "integrator": "none (deterministic reference solver)",
        "reference_method": METHOD,
        "reference_modes": ",".join(str(c.modes) for c in curves),
        "reference_check_modes": ",".join(str(c.check_modes) for c in curves),
        "reference_relative_error": float(np.nanmax(errors)) if np.isfinite(errors).any()
        else "not estimated",
        "reference_time_tolerance": tol,
        "reference_point_start": "exact Dirac delta (all Monte Carlo particles start there "
                                 "too)",
        "reference_region_quadrature": f"{quadrature} x {quadrature} midpoint grid of "
                                       "region_mask (uniform, box and point are exact)",
        "reference_seconds": round(seconds, 3),
    }
    if tensor is not None:
        extra.update({
            "homogenized_method": tensor.method,
            "homogenized_modes": tensor.modes,
            "homogenized_converged": int(tensor.converged),
        })
    return extra


__all__ = ["ResolutionWarning", "effective_diffusivity", "moment_evolution", "study_times"]
