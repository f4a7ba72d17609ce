"""Noise models: molecular diffusivity κ and the Péclet-number conventions.

The tracer obeys the Itô SDE ``dX = [u(X, t) + ∇κ(X)] dt + sqrt(2 κ(X)) dW`` with independent
standard Wiener processes per component.  For constant κ the ∇κ term vanishes and the noise is
additive.  The ``modulated`` model, κ(x, y) = κ0 (1 + a sin kx sin ky), makes the noise
multiplicative, which is where Milstein differs from Euler–Maruyama; the drift ∇κ keeps the
uniform density stationary (the Itô form of a divergence-form diffusion ∇·(κ∇c)).

Péclet conventions (``Dataset.attrs['peclet_convention']`` records which one a run used):

* ``wavenumber`` (default): Pe = U / (κ k).
* ``cell_side``: Pe_ℓ = U ℓ / κ with the eddy side ℓ = π/k, so Pe_ℓ = π · Pe.
"""

from __future__ import annotations

import math

import numpy as np

from .._jit import jit

CONSTANT = 0
MODULATED = 1
MODEL_CODES = {"constant": CONSTANT, "modulated": MODULATED}

_CONVENTION_FACTOR = {"wavenumber": 1.0, "cell_side": math.pi}
PECLET_DEFINITIONS = {
    "wavenumber": "Pe = U/(kappa k)",
    "cell_side": "Pe = U (pi/k)/kappa  (= pi U/(kappa k))",
}


def peclet_from_kappa(velocity: float, wavenumber: float, kappa: float,
                      convention: str = "wavenumber") -> float | None:
    """Péclet number of a run: 0 for a flow at rest, ``None`` (infinite) when κ = 0."""
    if kappa == 0.0:
        return None
    if velocity == 0.0:
        return 0.0
    return _CONVENTION_FACTOR[convention] * velocity / (kappa * wavenumber)


def kappa_from_peclet(velocity: float, wavenumber: float, peclet: float,
                      convention: str = "wavenumber") -> float:
    """Diffusivity κ giving Péclet number ``peclet`` under ``convention``."""
    return _CONVENTION_FACTOR[convention] * velocity / (peclet * wavenumber)


def convert_peclet(peclet: float, from_convention: str, to_convention: str) -> float:
    """Convert a Péclet number between conventions (they differ by the factor π)."""
    return peclet * _CONVENTION_FACTOR[to_convention] / _CONVENTION_FACTOR[from_convention]


def pack_noise(noise, wavenumber: float) -> tuple[int, np.ndarray]:
    """(model code, parameter vector [κ0, a, k]) for the kernels."""
    return MODEL_CODES[noise.model], np.array([noise.kappa, noise.modulation, wavenumber])


@jit
def diffusivity(model, x, y, q):
    """(κ, ∂κ/∂x, ∂κ/∂y) at (x, y) for noise model ``model`` with parameters ``q``."""
    if model == CONSTANT:
        return q[0], 0.0, 0.0
    k = q[2]
    amp = q[0] * q[1]
    sx = math.sin(k * x)
    sy = math.sin(k * y)
    return (q[0] + amp * sx * sy, amp * k * math.cos(k * x) * sy,
            amp * k * sx * math.cos(k * y))
