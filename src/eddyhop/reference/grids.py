"""Fourier–Galerkin discretisation on one period cell, shared by the reference solvers.

A real periodic field on the cell ``[0, Lx) × [0, Ly)`` is written

    f(x, y) = Σ_m f̂_m exp(i (αx m_x x + αy m_y y)),   αx = 2π/Lx,  αy = 2π/Ly,

with the truncation |m_x|, |m_y| ≤ M ("modes").  ``f̂_m`` is the cell average of
``f · exp(−i …)``.  Products of fields are Galerkin-truncated convolutions, derivatives are
diagonal.  Because the flows of the package are trigonometric polynomials, every operator built
here is sparse and the discretisation converges spectrally in M (common practice: Canuto,
Hussaini, Quarteroni & Zang, *Spectral Methods*, Springer 2006, ch. 2).

Real fields have conjugate-symmetric coefficients, f̂_{−m} = conj(f̂_m).  Solvers work in the
equivalent *real* basis ``r = [a_0, a_h…, b_h…]`` (h over the half lattice m_x > 0 or
m_x = 0 < m_y) with f̂_0 = a_0, f̂_h = a_h + i b_h, f̂_{−h} = a_h − i b_h, so sparse LU and Krylov
work in real arithmetic with as many unknowns as complex modes.

Plain NumPy/SciPy: nothing here knows of flows, studies or xarray.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

Modes = dict  # {(m_x, m_y): complex coefficient}: a field given by its nonzero Fourier modes


@dataclass(frozen=True)
class SpectralCell:
    """Fourier modes |m_x|, |m_y| ≤ ``modes`` on the period cell ``lx × ly``."""

    lx: float
    ly: float
    modes: int
    _cache: dict = field(default_factory=dict, compare=False, repr=False)

    # ---- lattice -----------------------------------------------------------------------------
    @property
    def side(self) -> int:
        return 2 * self.modes + 1

    @property
    def size(self) -> int:
        """Number of (complex) modes, equal to the number of real unknowns."""
        return self.side**2

    @property
    def alpha(self) -> tuple[float, float]:
        """Fundamental wavenumbers (2π/Lx, 2π/Ly)."""
        return 2.0 * math.pi / self.lx, 2.0 * math.pi / self.ly

    @property
    def mx(self) -> np.ndarray:
        return np.repeat(np.arange(-self.modes, self.modes + 1), self.side)

    @property
    def my(self) -> np.ndarray:
        return np.tile(np.arange(-self.modes, self.modes + 1), self.side)

    def index(self, mx, my):
        """Flat index of mode (mx, my) (arrays allowed); modes must be inside the lattice."""
        return (np.asarray(mx) + self.modes) * self.side + (np.asarray(my) + self.modes)

    def contains(self, mx, my):
        return (np.abs(mx) <= self.modes) & (np.abs(my) <= self.modes)

    # ---- complex operators -------------------------------------------------------------------
    def derivative(self, axis: int) -> sp.csr_matrix:
        """∂/∂x (axis 0) or ∂/∂y (axis 1): diagonal i α m."""
        alpha = self.alpha[axis]
        m = self.mx if axis == 0 else self.my
        return sp.diags(1j * alpha * m).tocsr()

    def multiply(self, coefficients: Modes) -> sp.csr_matrix:
        """Galerkin-truncated multiplication by the field with the given modes:
        (f g)^_m = Σ_p f̂_p ĝ_{m−p} over |m|, |m − p| ≤ M."""
        rows, cols, vals = [], [], []
        mx, my = self.mx, self.my
        everything = np.arange(self.size)
        for (px, py), value in coefficients.items():
            if value == 0:
                continue
            sx, sy = mx - px, my - py
            inside = self.contains(sx, sy)
            rows.append(everything[inside])
            cols.append(self.index(sx[inside], sy[inside]))
            vals.append(np.full(int(inside.sum()), complex(value)))
        if not rows:
            return sp.csr_matrix((self.size, self.size), dtype=complex)
        return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                             shape=(self.size, self.size))

    def vector(self, coefficients: Modes) -> np.ndarray:
        """Full complex coefficient vector of a field (modes outside the lattice dropped)."""
        out = np.zeros(self.size, dtype=complex)
        for (px, py), value in coefficients.items():
            if abs(px) <= self.modes and abs(py) <= self.modes:
                out[self.index(px, py)] += value
        return out

    def average_against(self, coefficients: Modes) -> np.ndarray:
        """Row r with r · ĝ = ⟨f g⟩ (cell average of the product, Parseval): r_m = f̂_{−m}."""
        out = np.zeros(self.size, dtype=complex)
        for (px, py), value in coefficients.items():
            if abs(px) <= self.modes and abs(py) <= self.modes:
                out[self.index(-px, -py)] += value
        return out

    # ---- real basis --------------------------------------------------------------------------
    def _half(self):
        if "half" not in self._cache:
            mx, my = self.mx, self.my
            half = np.nonzero((mx > 0) | ((mx == 0) & (my > 0)))[0]
            mirror = self.index(-mx[half], -my[half])
            self._cache["half"] = (half, mirror)
        return self._cache["half"]

    def to_complex(self) -> sp.csr_matrix:
        """T: real vector → conjugate-symmetric complex coefficients."""
        if "T" not in self._cache:
            half, mirror = self._half()
            nh = half.size
            zero = self.index(0, 0)
            a = 1 + np.arange(nh)
            b = 1 + nh + a - 1
            rows = np.concatenate([[zero], half, mirror, half, mirror])
            cols = np.concatenate([[0], a, a, b, b])
            vals = np.concatenate([[1.0 + 0j], np.ones(nh), np.ones(nh), 1j * np.ones(nh),
                                   -1j * np.ones(nh)])
            self._cache["T"] = sp.csr_matrix((vals, (rows, cols)), shape=(self.size, self.size))
        return self._cache["T"]

    def to_real(self) -> sp.csr_matrix:
        """Left inverse of :meth:`to_complex` (a_h = Re ĉ_h, b_h = Im ĉ_h via ĉ_h and ĉ_{−h})."""
        if "Ti" not in self._cache:
            half, mirror = self._half()
            nh = half.size
            zero = self.index(0, 0)
            a = 1 + np.arange(nh)
            b = 1 + nh + a - 1
            rows = np.concatenate([[0], a, a, b, b])
            cols = np.concatenate([[zero], half, mirror, half, mirror])
            vals = np.concatenate([[1.0 + 0j], 0.5 * np.ones(nh), 0.5 * np.ones(nh),
                                   -0.5j * np.ones(nh), 0.5j * np.ones(nh)])
            self._cache["Ti"] = sp.csr_matrix((vals, (rows, cols)), shape=(self.size, self.size))
        return self._cache["Ti"]

    def real_operator(self, operator) -> sp.csr_matrix:
        """The real-basis matrix of a complex operator that maps real fields to real fields."""
        product = (self.to_real() @ operator @ self.to_complex()).tocsr()
        if product.nnz:
            imaginary = np.abs(product.data.imag).max()
            scale = max(np.abs(product.data).max(), 1e-300)
            if imaginary > 1e-9 * scale:
                raise ArithmeticError("operator does not map real fields to real fields "
                                      f"(relative imaginary part {imaginary / scale:.2e})")
        out = sp.csr_matrix(product.real)
        out.eliminate_zeros()
        return out

    def real_row(self, row: np.ndarray) -> np.ndarray:
        """Real-basis version of a row acting on complex coefficients of real fields."""
        return np.asarray(row @ self.to_complex()).ravel().real

    def real_vector(self, coefficients: np.ndarray) -> np.ndarray:
        """Real-basis vector of conjugate-symmetric complex coefficients."""
        return np.asarray(self.to_real() @ coefficients).ravel().real

    def complex_vector(self, real: np.ndarray) -> np.ndarray:
        return np.asarray(self.to_complex() @ real).ravel()


def fft_modes(samples: np.ndarray, keep_below: float = 1e-13) -> tuple[Modes, float]:
    """Nonzero Fourier modes of a periodic field sampled on an ``n × n`` (or ``nx × ny``) grid
    of points ``(i Lx/nx, j Ly/ny)``, and the size of the largest coefficient at the outer
    quarter of the spectrum relative to the largest overall (the band-limit indicator).

    Coefficients below ``keep_below`` × (largest) are dropped as round-off.
    """
    nx, ny = samples.shape
    spectrum = np.fft.fft2(samples) / samples.size
    fx = np.fft.fftfreq(nx, 1.0 / nx).astype(int)
    fy = np.fft.fftfreq(ny, 1.0 / ny).astype(int)
    magnitude = np.abs(spectrum)
    scale = magnitude.max()
    if scale == 0.0:
        return {}, 0.0
    outer = (np.abs(fx)[:, None] >= nx // 4) | (np.abs(fy)[None, :] >= ny // 4)
    tail = float(magnitude[outer].max() / scale) if outer.any() else 0.0
    modes = {}
    for i, j in zip(*np.nonzero(magnitude > keep_below * scale)):
        modes[(int(fx[i]), int(fy[j]))] = complex(spectrum[i, j])
    return modes, tail


def derivative_modes(coefficients: Modes, axis: int, alpha: tuple[float, float]) -> Modes:
    """Modes of ∂f/∂x (axis 0) or ∂f/∂y (axis 1)."""
    out = {}
    for (px, py), value in coefficients.items():
        factor = 1j * alpha[axis] * (px if axis == 0 else py)
        if factor != 0:
            out[(px, py)] = value * factor
    return out


def add_modes(*fields: Modes) -> Modes:
    out: Modes = {}
    for f in fields:
        for key, value in f.items():
            out[key] = out.get(key, 0.0) + value
    return out


def max_mode(*fields: Modes) -> int:
    """Largest |m_x| or |m_y| among the given fields (0 for constants)."""
    return max((max(abs(px), abs(py)) for f in fields for (px, py) in f), default=0)
