"""Spectral helpers shared by the gridded family and the grid-file reader (plain NumPy).

The periodic Helmholtz projection turning sampled velocities into one stream function, and the
angular wavenumbers on NumPy's ``rfft2`` layout.  Kept apart so that ``grid_file`` (reading) and
``gridded`` (the family) both use them without importing each other.
"""

from __future__ import annotations

import numpy as np


def _wavenumbers(nx, ny, lx, ly):
    """Angular wavenumbers on the rfft2 layout (x full, y half), Nyquist derivatives zeroed."""
    kx = 2.0 * np.pi * np.fft.fftfreq(nx, lx / nx)
    ky = 2.0 * np.pi * np.fft.rfftfreq(ny, ly / ny)
    if nx % 2 == 0:
        kx[nx // 2] = 0.0
    if ny % 2 == 0:
        ky[ny // 2] = 0.0
    return np.meshgrid(kx, ky, indexing="ij")


def stream_function_from_velocity(u, v, lx, ly):
    """Periodic Helmholtz projection of samples ``u[i, j] = u(x_i, y_j)`` (open periodic grid).

    Returns ``(psi_tilde, mean_u, mean_v, divergence_ratio, divergent_energy_fraction)``:
    ψ̃ with ``∂ψ̃/∂y = u − ū``, ``−∂ψ̃/∂x = v − v̄`` for the divergence-free part, and two
    measures of the data's own divergence: ‖∇·u‖ / ‖∇u‖ (spectral derivatives) and the share of
    the fluctuating kinetic energy in the gradient (divergent) part that the projection removes.
    """
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    nx, ny = u.shape
    uh = np.fft.rfft2(u)
    vh = np.fft.rfft2(v)
    kx, ky = _wavenumbers(nx, ny, lx, ly)
    k2 = kx * kx + ky * ky
    safe = np.where(k2 > 0, k2, 1.0)
    vorticity = 1j * kx * vh - 1j * ky * uh
    psih = np.where(k2 > 0, vorticity / safe, 0.0)
    psi_tilde = np.fft.irfft2(psih, s=(nx, ny))
    weight = np.full(k2.shape, 2.0)
    weight[:, 0] = 1.0
    if ny % 2 == 0:
        weight[:, -1] = 1.0
    divergence = 1j * kx * uh + 1j * ky * vh
    grad_norm = np.sum(weight * k2 * (np.abs(uh) ** 2 + np.abs(vh) ** 2))
    div_norm = np.sum(weight * np.abs(divergence) ** 2)
    energy = np.sum(weight * (np.abs(uh) ** 2 + np.abs(vh) ** 2) * (k2 > 0))
    divergent = np.sum(weight * np.abs(divergence) ** 2 / safe * (k2 > 0))
    ratio = float(np.sqrt(div_norm / grad_norm)) if grad_norm > 0 else 0.0
    fraction = float(divergent / energy) if energy > 0 else 0.0
    return psi_tilde, float(u.mean()), float(v.mean()), ratio, fraction
