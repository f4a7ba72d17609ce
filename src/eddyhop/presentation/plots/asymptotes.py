"""Low- and high-Péclet asymptotes of the effective diffusivity, for the D_eff(Pe) figure.

All formulas use the package's default convention Pe = U/(κ k) and return D/κ; callers convert a
``cell_side`` Péclet number (π times larger) first with :func:`eddyhop.engine.noise.convert_peclet`.

Low Pe (every family without mean drift): the homogenization cell problem
``−κΔχ − u·∇χ = u`` expanded in powers of Pe gives, at leading order, ``−κΔχ = u`` and
``D_ij = κ δ_ij + ⟨u_i χ_j⟩``.  For ψ = (U/k) Σ_j [c_j cos θ_j + s_j sin θ_j] with
θ_j = k(m_j x + n_j y) each mode solves this separately (distinct wavevectors are orthogonal), so

    D_xx/κ = 1 + Pe² Σ_j n_j² (c_j² + s_j²) / (2 (m_j² + n_j²)),
    D_yy/κ = 1 + Pe² Σ_j m_j² (c_j² + s_j²) / (2 (m_j² + n_j²)),
    D_xy/κ =   − Pe² Σ_j m_j n_j (c_j² + s_j²) / (2 (m_j² + n_j²)),

(derived here from the cell problem of homogenization theory; see Majda & Kramer 1999,
"Simplified models for turbulent diffusion", Phys. Rep. 314, 237, Sec. 2.1 for the cell
problem).  Cellular flow: D/κ = 1 + Pe²/8.  For a flow made of one shear mode the cell problem
is solved exactly by this χ, so the formula is exact at every Pe (periodic shear:
D_xx/κ = 1 + Pe²/2, Taylor dispersion; cat's-eye at ε = 1: D_xx/κ = 1 + Pe²/4).

High Pe, cellular flow ψ = (U/k) sin kx sin ky: boundary-layer transport along the separatrices
gives D/κ → C Pe^{1/2} with C = 2ν, ν ≈ 0.5327 (Soward 1987, "Fast dynamo action in a steady
flow", J. Fluid Mech. 180, 267; the value of ν as quoted by Haynes & Vanneste 2014,
"Dispersion in the large-deviation regime. Part 2: cellular flow at large Péclet number",
J. Fluid Mech. 745, 351 — title and value from memory), so C ≈ 1.0654 in this convention (U the
velocity amplitude, Pe = U/(κk), cell side π/k).  Under the cell-side convention
Pe_ℓ = U(π/k)/κ = π Pe the same law reads D/κ → (C/√π) Pe_ℓ^{1/2} ≈ 0.6011 Pe_ℓ^{1/2}.
The package's own cell-problem solver, extrapolated from Pe = 10²…3·10³, agrees with C to
about 1e-4 (``tests/test_reference_cell_problem.py``).
"""

from __future__ import annotations

import numpy as np

SOWARD_NU = 0.5327  # ν of the module docstring (Soward 1987, quoted from memory)
CELLULAR_HIGH_PE = 2.0 * SOWARD_NU  # C in D/κ → C Pe^{1/2}, Pe = U/(κk); the one copy


def _modes(family_name, params):
    """Fourier modes [[m, n, c, s], ...] of ψ/(U/k) for families that are finite mode sums."""
    if family_name == "cellular":
        return [[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.0]]
    if family_name == "cats_eye":
        eps = params["epsilon"]
        # sin kx sin ky + ε cos kx cos ky = ½(1+ε) cos k(x−y) − ½(1−ε) cos k(x+y)
        return [[1, -1, 0.5 * (1 + eps), 0.0], [1, 1, -0.5 * (1 - eps), 0.0]]
    if family_name == "shear":
        return [[0, 1, -1.0, 0.0]]  # ψ = −(U/k) cos ky
    if family_name == "fourier":
        return [list(mode) for mode in params["modes"]]
    return None


def _merged(modes):
    """Combine modes with wavevectors ±(m, n) (the same Fourier component)."""
    merged = {}
    for m, n, c, s in modes:
        m, n = int(m), int(n)
        if (m, n) < (-m, -n):
            m, n, s = -m, -n, -s  # cos(−θ) = cos θ, sin(−θ) = −sin θ
        cc, ss = merged.get((m, n), (0.0, 0.0))
        merged[(m, n)] = (cc + c, ss + s)
    return {key: value for key, value in merged.items() if value != (0.0, 0.0)}


def low_peclet_coefficients(family_name, params):
    """(a_xx, a_yy, a_xy) with D_ij/κ ≈ δ_ij + a_ij Pe² at small Pe; ``None`` if unknown."""
    modes = _modes(family_name, params)
    if modes is None:
        return None
    a_xx = a_yy = a_xy = 0.0
    for (m, n), (c, s) in _merged(modes).items():
        weight = (c * c + s * s) / (2.0 * (m * m + n * n))
        a_xx += n * n * weight
        a_yy += m * m * weight
        a_xy -= m * n * weight
    return a_xx, a_yy, a_xy


def is_exact_shear(family_name, params) -> bool:
    """True when ψ is a single Fourier component, so the low-Pe formula is exact at all Pe."""
    modes = _modes(family_name, params)
    return modes is not None and len(_merged(modes)) == 1


def asymptotes(family_name, params, peclet, component="xx"):
    """Reference curves of D_component/κ against Pe (wavenumber convention).

    Returns a list of ``(label, D/κ array, kind)`` with ``kind`` one of "low", "high",
    "exact"; empty when nothing is known for the family.
    """
    peclet = np.asarray(peclet, dtype=float)
    curves = []
    coefficients = low_peclet_coefficients(family_name, params)
    if coefficients is not None:
        index = {"xx": 0, "yy": 1, "xy": 2}[component]
        a = coefficients[index]
        base = 0.0 if component == "xy" else 1.0
        if is_exact_shear(family_name, params):
            curves.append((f"exact: {base:g} + {a:.4g} Pe²", base + a * peclet**2, "exact"))
        else:
            curves.append((f"low Pe: {base:g} + {a:.4g} Pe²", base + a * peclet**2, "low"))
    elif component != "xy":
        curves.append(("low Pe: D = κ", np.ones_like(peclet), "low"))
    if family_name == "cellular" and component in ("xx", "yy"):
        curves.append((f"high Pe: {CELLULAR_HIGH_PE:.4f} Pe^½", CELLULAR_HIGH_PE * np.sqrt(peclet),
                       "high"))
    return curves
