"""The flow and the noise of a study as Fourier modes on one period cell.

The velocity is read off an FFT of samples of the package's own compiled velocity
(``eddyhop.flows.compiled.evaluate_velocity``), the diffusivity off samples of
``eddyhop.engine.noise.diffusivity``; so the reference solvers see exactly the fields the Monte
Carlo kernel integrates.  Sampling doubles the grid until the spectrum has no content in its outer
quarter (the field is a trigonometric polynomial, represented exactly); a field that never
passes this test is refused rather than silently truncated.

Which flows qualify: steady (time-independent) flows without solid walls whose velocity is a
finite Fourier series — every family except the time-periodic and obstacle ones, and the
gridded family only with ``interpolation = "spectral"``.  Conventions: ``u = ∂ψ/∂y``,
``v = −∂ψ/∂x``; Itô noise ``sqrt(2κ) dW`` with drift ``∇κ`` (see ``eddyhop.engine.noise``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import StudyError
from .grids import Modes, add_modes, derivative_modes, fft_modes, max_mode

FIRST_GRID = 32
LARGEST_GRID = 512
BAND_LIMIT = 1e-11
MOST_MODES = 600  # nonzero velocity modes; beyond this the Galerkin matrices get dense


@dataclass(frozen=True)
class CellFields:
    """Velocity (u, v) and diffusivity κ of one period cell as Fourier modes.

    ``drift_x``/``drift_y`` are the modes of the total Itô drift b = u + ∇κ.  ``speed`` is the
    largest sampled speed; ``peclet_cell = speed / (κ_min · min(2π/Lx, 2π/Ly))`` sizes the
    boundary layers (width ~ peclet_cell^(-1/2) in units of the cell length / 2π).
    """

    family: str
    lx: float
    ly: float
    u: Modes
    v: Modes
    kappa: Modes
    kappa_min: float
    kappa_mean: float
    speed: float

    @property
    def alpha(self) -> tuple[float, float]:
        return 2.0 * math.pi / self.lx, 2.0 * math.pi / self.ly

    @property
    def drift_x(self) -> Modes:
        return add_modes(self.u, derivative_modes(self.kappa, 0, self.alpha))

    @property
    def drift_y(self) -> Modes:
        return add_modes(self.v, derivative_modes(self.kappa, 1, self.alpha))

    @property
    def mean_velocity(self) -> tuple[float, float]:
        return float(np.real(self.u.get((0, 0), 0.0))), float(np.real(self.v.get((0, 0), 0.0)))

    @property
    def highest_mode(self) -> int:
        return max_mode(self.u, self.v, self.kappa)

    @property
    def peclet_cell(self) -> float:
        return self.speed / (self.kappa_min * min(self.alpha))


def _sampled_modes(function, lx, ly, what, family):
    n = FIRST_GRID
    while True:
        gx, gy = np.meshgrid(np.arange(n) * lx / n, np.arange(n) * ly / n, indexing="ij")
        values = np.asarray(function(gx, gy), dtype=float)
        if not np.all(np.isfinite(values)):
            raise StudyError(f"the {what} of flow family {family.name!r} is not finite on the "
                             "period cell; check the flow parameters")
        modes, tail = fft_modes(values)
        if tail <= BAND_LIMIT:
            return modes, values
        if n >= LARGEST_GRID:
            hint = f" ({family.spectral_hint})" if family.spectral_hint else ""
            raise StudyError(
                f"the {what} of flow family {family.name!r} is not a finite Fourier series "
                f"resolvable with {LARGEST_GRID // 4} modes (relative spectral tail "
                f"{tail:.1e}){hint}; the spectral reference solvers need one. Use the Monte "
                "Carlo ensemble (eddyhop run / eddyhop.simulate) for this flow")
        n *= 2


def cell_fields(family, params: dict, kappa: float, noise_model: str = "constant",
                modulation: float = 0.0, what: str = "the reference solvers") -> CellFields:
    """Fourier modes of a steady flow and its noise; clear errors for unsupported input.

    ``what`` names the calling solver in error messages.
    """
    from ..engine.noise import MODEL_CODES, diffusivity
    from ..flows.compiled import evaluate_velocity

    if not family.steady:
        raise StudyError(
            f"flow family {family.name!r} is time-dependent; {what} need a steady flow. "
            "Use the Monte Carlo ensemble instead (eddyhop run / eddyhop.simulate): its "
            "long-time MSD slope gives the effective diffusivity (eddyhop analyse)")
    if family.has_walls:  # tracers reflect at walls: the whole-cell Fourier problem does not apply
        raise StudyError(
            f"flow family {family.name!r} has solid walls; {what} solve on the whole period "
            "cell without walls. Use the Monte Carlo ensemble (eddyhop run / eddyhop.simulate)")
    if not (kappa > 0.0 and math.isfinite(kappa)):
        raise StudyError(f"noise.kappa = {kappa!r}: {what} need a positive molecular "
                         "diffusivity (without noise the long-time dispersion is not diffusive)")
    if noise_model not in MODEL_CODES:
        raise StudyError(f"noise.model = {noise_model!r} is not known; choose one of: "
                         + ", ".join(MODEL_CODES))
    lx, ly = family.period(params)
    fallback = 2.0 * math.pi / family.wavenumber(params)
    lx, ly = (lx or fallback), (ly or fallback)

    def velocity_u(x, y):
        return evaluate_velocity(family, params, x, y, 0.0)[0]

    def velocity_v(x, y):
        return evaluate_velocity(family, params, x, y, 0.0)[1]

    code = MODEL_CODES[noise_model]
    q = np.array([kappa, modulation, family.wavenumber(params)], dtype=float)

    def kappa_field(x, y):
        flat = [diffusivity(code, float(a), float(b), q)[0] for a, b in zip(x.ravel(),
                                                                             y.ravel())]
        return np.reshape(flat, x.shape)

    u, u_samples = _sampled_modes(velocity_u, lx, ly, "velocity u", family)
    v, v_samples = _sampled_modes(velocity_v, lx, ly, "velocity v", family)
    if code == MODEL_CODES["constant"]:
        k_modes, k_samples = {(0, 0): complex(kappa)}, np.array([kappa])
    else:
        k_modes, k_samples = _sampled_modes(kappa_field, lx, ly, "diffusivity", family)
    if k_samples.min() <= 0.0:
        raise StudyError("the diffusivity κ(x, y) is not positive everywhere on the cell")
    if len(set(u) | set(v)) > MOST_MODES:
        raise StudyError(
            f"flow {family.name!r} has {len(set(u) | set(v))} Fourier modes; the spectral "
            f"reference solvers handle up to {MOST_MODES}. Use the Monte Carlo ensemble")
    speed = float(np.sqrt(u_samples**2 + v_samples**2).max())
    return CellFields(family=family.name, lx=float(lx), ly=float(ly), u=u, v=v, kappa=k_modes,
                      kappa_min=float(k_samples.min()), kappa_mean=float(np.mean(k_samples)),
                      speed=speed)


def study_fields(study, what: str = "the reference solvers") -> CellFields:
    """:func:`cell_fields` of a validated study."""
    noise = study.noise
    return cell_fields(study.flow.model, study.flow.params, noise.kappa, noise.model,
                       noise.modulation, what)
