"""Make the invented measured-track demo set (INVENTED DATA, not a measurement).

Scenario (invented): a shallow tank with a lattice of counter-rotating vortices (cell side
10 mm, peak speed 2 mm/s), filmed at 1 frame per second; neutrally buoyant tracer beads
(diffusivity 0.05 mm²/s, Pe = U/(κk) ≈ 127) are detected and linked into tracks.  Beads
enter and leave the field of view, so tracks have unequal lengths and start times, and 3 %
of the detections are missed (gaps).  The positions come from a plain Euler–Maruyama
integration of dX = u dt + sqrt(2κ) dW in ψ = (U/k) sin kx sin ky (20 sub-steps per frame),
written independently of eddyhop's engine.

Writes, next to this script:
  vortex_tank_tracks.csv  header id,t,x,y; t in s, x and y in mm (give the units as options)
  vortex_tank_tracks.nc   the same tracks as a CF trajectory file (contiguous ragged arrays)

    python studies/tracks/make_vortex_tank_tracks.py
"""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np

U = 2.0                  # mm/s
SIDE = 10.0              # mm, one vortex
K = np.pi / SIDE         # 1/mm
KAPPA = 0.05             # mm²/s
FRAME = 1.0              # s
SUBSTEPS = 20
TRACKS = 60
SEED = 2026


def main() -> None:
    rng = np.random.default_rng(SEED)
    lengths = rng.integers(100, 301, TRACKS)
    starts = rng.integers(0, 200, TRACKS)
    frames = int((starts + lengths).max())
    x = rng.uniform(0, 4 * SIDE, TRACKS)
    y = rng.uniform(0, 4 * SIDE, TRACKS)
    dt = FRAME / SUBSTEPS
    path = np.empty((frames, 2, TRACKS))
    for frame in range(frames):
        path[frame] = x, y
        for _ in range(SUBSTEPS):
            u = U * np.sin(K * x) * np.cos(K * y)
            v = -U * np.cos(K * x) * np.sin(K * y)
            noise = rng.standard_normal((2, TRACKS)) * np.sqrt(2 * KAPPA * dt)
            x = x + u * dt + noise[0]
            y = y + v * dt + noise[1]
    rows = []
    for i in range(TRACKS):
        seen = np.arange(starts[i], starts[i] + lengths[i])
        seen = seen[(rng.random(seen.size) > 0.03) | (seen == starts[i])]
        for f in seen:
            rows.append((f"bead{i:02d}", f * FRAME, path[f, 0, i], path[f, 1, i]))
    here = Path(__file__).parent
    with open(here / "vortex_tank_tracks.csv", "w") as stream:
        stream.write("id,t,x,y\n")
        for ident, t, px, py in rows:
            stream.write(f"{ident},{t:g},{px:.4f},{py:.4f}\n")
    ids = [r[0] for r in rows]
    unique = list(dict.fromkeys(ids))
    with netCDF4.Dataset(here / "vortex_tank_tracks.nc", "w") as nc:
        nc.Conventions = "CF-1.8"
        nc.featureType = "trajectory"
        nc.title = "INVENTED demo data: tracer beads in a vortex-lattice tank"
        nc.comment = "Invented data made by make_vortex_tank_tracks.py; not a measurement."
        nc.createDimension("trajectory", len(unique))
        nc.createDimension("obs", len(rows))
        name = nc.createVariable("trajectory", str, ("trajectory",))
        name.cf_role = "trajectory_id"
        name.long_name = "bead"
        for i, u in enumerate(unique):
            name[i] = u
        size = nc.createVariable("row_size", "i4", ("trajectory",))
        size.sample_dimension = "obs"
        size.long_name = "number of detections of this bead"
        size[:] = [ids.count(u) for u in unique]
        for key, column, attrs in (
                ("time", 1, {"standard_name": "time", "units": "s since 2026-01-01 00:00:00",
                             "axis": "T"}),
                ("x", 2, {"standard_name": "projection_x_coordinate", "units": "mm",
                          "axis": "X"}),
                ("y", 3, {"standard_name": "projection_y_coordinate", "units": "mm",
                          "axis": "Y"})):
            var = nc.createVariable(key, "f8", ("obs",))
            var.setncatts(attrs)
            var[:] = np.round([r[column] for r in rows], 4)


if __name__ == "__main__":
    main()
