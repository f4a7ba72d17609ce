"""Initial densities of the start regions as Fourier coefficients on the period cell.

The coefficients are those of the *characteristic function* of the start position X₀,
``p̂_m = E[exp(−i (αx m_x X₀ + αy m_y Y₀))]`` (so p̂_0 = 1), i.e. the density times the cell
area.  Choices, matching what the Monte Carlo sampler draws:

* ``uniform``: p̂_m = δ_m0 (exact).
* ``point``: an exact Dirac delta at (x, y), p̂_m = exp(−i α·m x₀) — not a narrow Gaussian and
  not a grid cell: every particle of the Monte Carlo run starts exactly there too.
* ``box``: the exact integrals of the exponentials over the rectangle (it may extend beyond
  one cell; the density is then its periodic wrap, as for the sampler).
* every other kind (centre, separatrix, hyperbolic, jet, level_band, and kinds registered by
  other modules): uniform over the region, by midpoint quadrature of ``region_mask`` on a
  ``quadrature × quadrature`` grid of the cell (the density is exactly uniform on the grid
  points inside; the quadrature error of a smooth boundary is far below Monte Carlo noise).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import StudyError

DEFAULT_QUADRATURE = 2048


def _box_factor(low, high, alpha, m):
    """(1/(high − low)) ∫_low^high exp(−i α m x) dx for integer array m."""
    width = high - low
    out = np.ones(m.shape, dtype=complex)
    nonzero = m != 0
    w = alpha * m[nonzero]
    out[nonzero] = (np.exp(-1j * w * high) - np.exp(-1j * w * low)) / (-1j * w * width)
    return out


def initial_modes(region, family, params, lx: float, ly: float, modes: int,
                  quadrature: int = DEFAULT_QUADRATURE) -> np.ndarray:
    """Complex array [2M+1, 2M+1] of p̂ at (m_x, m_y) = (i − M, j − M)."""
    m = np.arange(-modes, modes + 1)
    ax, ay = 2.0 * math.pi / lx, 2.0 * math.pi / ly
    kind, p = region.kind, region.params
    if kind == "uniform":
        out = np.zeros((m.size, m.size), dtype=complex)
        out[modes, modes] = 1.0
        return out
    if kind == "point":
        return np.exp(-1j * ax * m * p["x"])[:, None] * np.exp(-1j * ay * m * p["y"])[None, :]
    if kind == "box":
        return (_box_factor(p["x_min"], p["x_max"], ax, m)[:, None]
                * _box_factor(p["y_min"], p["y_max"], ay, m)[None, :])
    return _mask_modes(region, family, params, lx, ly, modes, quadrature)


def _mask_modes(region, family, params, lx, ly, modes, quadrature):
    from ..starts import region_mask

    n = max(int(quadrature), 4 * modes + 4)
    x = (np.arange(n) + 0.5) * lx / n
    y = (np.arange(n) + 0.5) * ly / n
    mask = np.zeros((n, n))
    rows = max(1, (1 << 20) // n)  # about a million points at a time
    for first in range(0, n, rows):
        gx, gy = np.meshgrid(x[first:first + rows], y, indexing="ij")
        mask[first:first + rows] = region_mask(region, family, params, gx, gy)
    count = mask.sum()
    if count == 0:
        raise StudyError(f"start region {region.label!r} ({region.kind}) covers no point of a "
                         f"{n} x {n} grid of the period cell; it is empty or too thin for the "
                         "reference solver (raise the quadrature)")
    spectrum = np.fft.fft2(mask) / count
    index = np.arange(-modes, modes + 1)
    block = spectrum[np.ix_(index % n, index % n)]
    # cell-centred points: shift the phase by half a grid step in each direction
    shift_x = np.exp(-1j * 2.0 * math.pi * index * 0.5 / n)
    return block * shift_x[:, None] * shift_x[None, :]
