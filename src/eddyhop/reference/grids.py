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

    def real_layout(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Mode (m_x, m_y) and part (0: a, the cosine/real part; 1: b, the sine/imaginary
        part) of every real-basis index."""
        half, _ = self._half()
        mx, my = self.mx[half], self.my[half]
        part = np.repeat([0, 0, 1], [1, half.size, half.size])
        return (np.concatenate([[0], mx, mx]), np.concatenate([[0], my, my]), part)

    def real_coefficients(self, coefficients: Modes) -> np.ndarray:
        """Real-basis vector of a real field given by its modes; the same as
        ``real_vector(vector(coefficients))`` without forming a complex lattice vector."""
        half, _ = self._half()
        position = np.full(self.size, -1, dtype=np.int64)
        position[half] = np.arange(half.size)
        out = np.zeros(self.size)
        for (px, py), value in coefficients.items():
            if abs(px) > self.modes or abs(py) > self.modes:
                continue
            value = complex(value)
            if px == 0 and py == 0:
                out[0] += value.real
            elif position[self.index(px, py)] >= 0:  # a_h = Re(ĉ_h + ĉ_−h)/2,
                # b_h = Im(ĉ_h − ĉ_−h)/2, as to_real, so unequal halves are averaged alike
                k = position[self.index(px, py)]
                out[1 + k] += 0.5 * value.real
                out[1 + half.size + k] += 0.5 * value.imag
            else:
                k = position[self.index(-px, -py)]
                out[1 + k] += 0.5 * value.real
                out[1 + half.size + k] -= 0.5 * value.imag
        return out

    def real_rows(self, rows: np.ndarray, terms) -> sp.csr_matrix:
        """Rows ``rows`` (real-basis indices) of the real-basis matrix of Σ ∂_l (f ∂_r ·).

        ``terms`` lists (f, l, r): f the modes of a real field, l and r an axis (0: x, 1: y)
        or None (no derivative), so (u, None, 0) is u ∂x and (κ, 0, 0) is ∂x κ ∂x.  Galerkin
        truncation as :meth:`multiply`: the complex entry at (n, m) is
        Σ f̂_(n−m) (i α_l n_l) (i α_r m_r) over |m| ≤ M.  The real basis takes the real part of
        the complex row n for an a-row and its imaginary part for a b-row; a column mode m in
        the half lattice enters as a_m + i b_m, its mirror as a_m − i b_m.  Built entry by
        entry, so only the rows asked for cost memory (``real_operator`` of the products
        forms the whole complex lattice operator three times over).
        """
        rows = np.asarray(rows, dtype=np.int64)
        half, _ = self._half()
        nh = half.size
        position = np.full(self.size, -1, dtype=np.int64)
        position[half] = np.arange(nh)
        layout_x, layout_y, layout_part = self.real_layout()
        nx, ny, part = layout_x[rows], layout_y[rows], layout_part[rows]
        imaginary_row = part == 1
        by_offset: dict = {}
        for coefficients, left, right in terms:
            for offset, value in coefficients.items():
                if value != 0:
                    by_offset.setdefault(offset, []).append((complex(value), left, right))
        alpha = self.alpha
        local = np.arange(rows.size)
        out_rows, out_cols, out_vals = [], [], []
        for (px, py), parts in by_offset.items():
            mx, my = nx - px, ny - py
            inside = np.nonzero(self.contains(mx, my))[0]
            mx, my = mx[inside], my[inside]
            n_mode = (nx[inside], ny[inside])
            z = np.zeros(inside.size, dtype=complex)
            for value, left, right in parts:
                factor = np.full(inside.size, value)
                if left is not None:
                    factor = factor * (1j * alpha[left] * n_mode[left])
                if right is not None:
                    factor = factor * (1j * alpha[right] * (mx if right == 0 else my))
                z += factor
            mean = (mx == 0) & (my == 0)
            flat = self.index(mx, my)
            mirror = self.index(-mx, -my)
            in_half = position[flat] >= 0
            k = np.where(in_half, position[flat], position[mirror])
            # coefficient of a_m is z, of b_m is i z (m in the half lattice) or −i z (mirror)
            on_b = np.where(in_half, 1j * z, -1j * z)
            take = imaginary_row[inside]
            on_a_value = np.where(take, z.imag, z.real)
            on_b_value = np.where(take, on_b.imag, on_b.real)
            out_rows += [local[inside], local[inside][~mean]]
            out_cols += [np.where(mean, 0, 1 + k), (1 + nh + k)[~mean]]
            out_vals += [on_a_value, on_b_value[~mean]]
        if not out_rows:
            return sp.csr_matrix((rows.size, self.size))
        out = sp.csr_matrix((np.concatenate(out_vals),
                             (np.concatenate(out_rows), np.concatenate(out_cols))),
                            shape=(rows.size, self.size))
        out.sum_duplicates()
        out.eliminate_zeros()
        return out

    # ---- symmetries of the cell --------------------------------------------------------------
    def real_symmetry(self, reflect: tuple[int, int],
                      shift: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
        """The map f ↦ f∘g, g(x, y) = (ρx x + sx Lx/2, ρy y + sy Ly/2), in the real basis.

        ``reflect`` = (ρx, ρy) ∈ {±1}², ``shift`` = (sx, sy) ∈ {0, 1}².  In Fourier space it
        is (S f)^_n = (−1)^(sx nx + sy ny) f̂_(ρx nx, ρy ny), which maps the lattice onto itself
        and real fields to real fields; in the real basis it is a signed permutation, returned
        as (``source``, ``sign``) with (S r)[i] = sign[i] · r[source[i]].  Every such map is an
        involution and any two of them commute.
        """
        half, _ = self._half()
        nh = half.size
        hx, hy = self.mx[half], self.my[half]
        sx, sy = (int(s) % 2 for s in shift)
        sign = np.where((sx * hx + sy * hy) % 2 == 0, 1.0, -1.0)
        tx, ty = reflect[0] * hx, reflect[1] * hy
        inside = (tx > 0) | ((tx == 0) & (ty > 0))  # the source mode lies in the half lattice
        position = np.full(self.size, -1, dtype=np.int64)
        position[half] = np.arange(nh)
        flat = np.where(inside, self.index(tx, ty), self.index(-tx, -ty))
        target = position[flat]
        # a mode taken from the other half is the conjugate of its mirror: b changes sign
        source = np.concatenate([[0], 1 + target, 1 + nh + target])
        signs = np.concatenate([[1.0], sign, np.where(inside, sign, -sign)])
        return source, signs


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
