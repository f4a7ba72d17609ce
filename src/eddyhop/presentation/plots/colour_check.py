"""How far apart colours stay under simulated colour-vision deficiency.

Method (named so that the figures' claims can be checked):

* simulation: Machado, Oliveira & Fernandes (2009), "A physiologically-based model for
  simulation of color vision deficiency", IEEE Trans. Vis. Comput. Graph. 15(6), 1291–1298,
  the severity-1.0 matrices for protanopia, deuteranopia and tritanopia, applied to linear
  sRGB (matrix values quoted from the paper's published table, from memory; each row sums
  to 1, which the tests check: white stays white);
* colour difference: CIEDE2000 (CIE 142-2001; formulae and test data of Sharma, Wu &
  Dalal 2005, "The CIEDE2000 color-difference formula: implementation notes, supplementary
  test data, and mathematical observations", Color Res. Appl. 30, 21–30), from sRGB through
  CIE XYZ (D65) to CIELAB.

A difference ΔE00 below about 1 is not seen at all; regime classes need several units to be
told apart at a glance in a legend, so the regime tints are required to keep ΔE00 ≥ 5 from
one another after blending and simulation (``tests/test_plots_colours.py``).
"""

from __future__ import annotations

import math

import numpy as np

MACHADO_2009 = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}


def hex_to_rgb(colour: str) -> np.ndarray:
    """'#rrggbb' → sRGB in [0, 1]."""
    from matplotlib.colors import to_rgb

    return np.asarray(to_rgb(colour), dtype=float)


def blend(colour, alpha: float, background="#ffffff") -> np.ndarray:
    """The sRGB colour seen when ``colour`` is drawn with opacity ``alpha`` on
    ``background`` (matplotlib composites in sRGB values)."""
    return alpha * hex_to_rgb(colour) + (1 - alpha) * hex_to_rgb(background)


def _to_linear(rgb):
    rgb = np.asarray(rgb, dtype=float)
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def _to_srgb(linear):
    linear = np.clip(linear, 0.0, 1.0)
    return np.where(linear <= 0.0031308, 12.92 * linear, 1.055 * linear ** (1 / 2.4) - 0.055)


def simulate(rgb, deficiency: str) -> np.ndarray:
    """sRGB colour as seen with ``deficiency`` (a key of MACHADO_2009), severity 1."""
    return _to_srgb(MACHADO_2009[deficiency] @ _to_linear(rgb))


def srgb_to_lab(rgb) -> np.ndarray:
    """sRGB in [0, 1] → CIELAB (D65 white; IEC 61966-2-1 matrix)."""
    linear = _to_linear(rgb)
    matrix = np.array([[0.4124564, 0.3575761, 0.1804375],
                       [0.2126729, 0.7151522, 0.0721750],
                       [0.0193339, 0.1191920, 0.9503041]])
    xyz = matrix @ linear / np.array([0.95047, 1.0, 1.08883])
    epsilon, kappa = 216 / 24389, 24389 / 27
    f = np.where(xyz > epsilon, np.cbrt(xyz), (kappa * xyz + 16) / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def ciede2000(lab1, lab2) -> float:
    """CIEDE2000 colour difference of two CIELAB colours (k_L = k_C = k_H = 1)."""
    l1, a1, b1 = (float(v) for v in lab1)
    l2, a2, b2 = (float(v) for v in lab2)
    c1, c2 = math.hypot(a1, b1), math.hypot(a2, b2)
    c_bar = (c1 + c2) / 2
    g = 0.5 * (1 - math.sqrt(c_bar ** 7 / (c_bar ** 7 + 25 ** 7)))
    a1p, a2p = (1 + g) * a1, (1 + g) * a2
    c1p, c2p = math.hypot(a1p, b1), math.hypot(a2p, b2)
    h1p = math.degrees(math.atan2(b1, a1p)) % 360 if c1p else 0.0
    h2p = math.degrees(math.atan2(b2, a2p)) % 360 if c2p else 0.0
    dl = l2 - l1
    dc = c2p - c1p
    if c1p * c2p == 0:
        dh = 0.0
    elif abs(h2p - h1p) <= 180:
        dh = h2p - h1p
    elif h2p - h1p > 180:
        dh = h2p - h1p - 360
    else:
        dh = h2p - h1p + 360
    dH = 2 * math.sqrt(c1p * c2p) * math.sin(math.radians(dh / 2))
    l_bar = (l1 + l2) / 2
    cp_bar = (c1p + c2p) / 2
    if c1p * c2p == 0:
        h_bar = h1p + h2p
    elif abs(h1p - h2p) <= 180:
        h_bar = (h1p + h2p) / 2
    elif h1p + h2p < 360:
        h_bar = (h1p + h2p + 360) / 2
    else:
        h_bar = (h1p + h2p - 360) / 2
    t = (1 - 0.17 * math.cos(math.radians(h_bar - 30)) + 0.24 * math.cos(math.radians(2 * h_bar))
         + 0.32 * math.cos(math.radians(3 * h_bar + 6))
         - 0.20 * math.cos(math.radians(4 * h_bar - 63)))
    d_theta = 30 * math.exp(-(((h_bar - 275) / 25) ** 2))
    r_c = 2 * math.sqrt(cp_bar ** 7 / (cp_bar ** 7 + 25 ** 7))
    s_l = 1 + 0.015 * (l_bar - 50) ** 2 / math.sqrt(20 + (l_bar - 50) ** 2)
    s_c = 1 + 0.045 * cp_bar
    s_h = 1 + 0.015 * cp_bar * t
    r_t = -math.sin(math.radians(2 * d_theta)) * r_c
    return math.sqrt((dl / s_l) ** 2 + (dc / s_c) ** 2 + (dH / s_h) ** 2
                     + r_t * (dc / s_c) * (dH / s_h))


def smallest_difference(colours, *, alpha: float = 1.0, deficiency: str | None = None):
    """(ΔE00, name a, name b) of the closest pair of ``colours`` ({name: '#rrggbb'}) drawn at
    opacity ``alpha`` on white and seen with ``deficiency`` (None: normal vision)."""
    labs = {}
    for name, colour in colours.items():
        rgb = blend(colour, alpha)
        if deficiency is not None:
            rgb = simulate(rgb, deficiency)
        labs[name] = srgb_to_lab(rgb)
    names = list(labs)
    best = (math.inf, "", "")
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            best = min(best, (ciede2000(labs[a], labs[b]), a, b))
    return best
