"""Write ``convection_tank_piv.nc``: invented demo data for ``convection_tank_piv.toml``.

An imagined particle-image-velocimetry map of steady convection rolls in a shallow heated tank:
a 4 cm x 4 cm periodic window holding four counter-rotating rolls (peak speed about 1 mm/s), a
weaker second harmonic, and seeded "measurement noise" that is not divergence-free (as real PIV
noise is not).  Every number here is made up.  Run from the repository root:

    python studies/make_convection_tank_piv.py

It takes about 3 s (mostly imports) and rewrites the same bytes each time (fixed seed).
"""

from pathlib import Path

import numpy as np
import xarray as xr

from eddyhop.results.io import write_netcdf

N = 48  # intervals per direction; the file holds N + 1 samples (closed periodic grid)
L = 0.04  # m
U = 1.0e-3  # m/s


def main(path=Path(__file__).with_name("convection_tank_piv.nc")):
    k = 2 * np.pi / L
    s = np.arange(N) * L / N
    x, y = np.meshgrid(s, s)  # dims (y, x)
    u = U * (np.sin(k * x) * np.cos(k * y) + 0.15 * np.sin(2 * k * x) * np.cos(k * y))
    v = U * (-np.cos(k * x) * np.sin(k * y) - 0.3 * np.cos(2 * k * x) * np.sin(k * y))
    rng = np.random.default_rng(2024)
    u += 0.02 * U * rng.standard_normal(u.shape)
    v += 0.02 * U * rng.standard_normal(v.shape)
    # close the grid: the last row and column repeat the first ones
    u = np.pad(u, ((0, 1), (0, 1)), mode="wrap")
    v = np.pad(v, ((0, 1), (0, 1)), mode="wrap")
    coords = np.linspace(0.0, L, N + 1)
    axis = {"units": "m", "long_name": "position in the measurement window"}
    ds = xr.Dataset(
        {"u": (("y", "x"), u, {"units": "m s-1", "long_name": "horizontal velocity"}),
         "v": (("y", "x"), v, {"units": "m s-1", "long_name": "vertical velocity"})},
        coords={"x": ("x", coords, {**axis, "axis": "X"}),
                "y": ("y", coords, {**axis, "axis": "Y"})},
        attrs={"Conventions": "CF-1.10",
               "title": "Invented PIV map of convection rolls (demo data)",
               "comment": "Made-up demo data; closed periodic grid (last sample repeats the "
                          "first)."})
    write_netcdf(ds, path)
    return path


if __name__ == "__main__":
    print(main())
