"""Readers of measured trajectories: CSV tables and CF Discrete Sampling Geometries netCDF.

A reader is a :class:`TrackSource`: it knows the file and yields the tracks in chunks
(:meth:`TrackSource.chunks`), so the statistics can stream over a file without holding it.
Each :class:`Track` carries its identifier, times, positions, optional velocities, and the
row number of every sample in the file, so every complaint can name the track and the row.

Formats
-------
* **CSV** with a header naming the columns ``id, t, x, y`` (optionally ``u, v``: velocities);
  extra columns are ignored.  A column may carry its unit in brackets (``x [mm]``); otherwise
  the units are those given by the options.  Rows of one track need not be adjacent (frame-
  major tables are common), but within a track the times must increase.  Rows are numbered
  as in a text editor (the header is row 1).  The table is read into memory.
* **netCDF**, CF conventions ch. 9 (Discrete Sampling Geometries), ``featureType =
  "trajectory"``: the contiguous ragged array (a count variable with ``sample_dimension``),
  the indexed ragged array (an index variable with ``instance_dimension``), and the
  orthogonal or incomplete multidimensional arrays (positions on (trajectory, obs), time on
  (trajectory, obs) or on (obs) alone; missing samples are fill values).  The trajectory
  identifier is the variable with ``cf_role = "trajectory_id"`` (the trajectory index
  otherwise).  Positions are the variables with ``standard_name`` projection_x_coordinate /
  projection_y_coordinate, or ``axis`` X / Y, or named ``x`` / ``y``; longitude/latitude
  are refused (project them to lengths first).  Rows are the index along the sample
  dimension (0-based).  Contiguous ragged and multidimensional files are read a chunk of
  trajectories at a time; an indexed ragged file's index variable is read whole.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputDataError


class TrackFileError(InputDataError):
    """A trajectory file is unreadable or its content breaks a rule; the message names the
    file, the track, the row, the field and the value."""


@dataclass
class Track:
    """One trajectory as read: ``t`` (file time units), ``x``, ``y`` (file length units),
    optional velocities ``u``, ``v`` (length/time), ``rows``: row of each sample in the file."""

    ident: str
    t: np.ndarray
    x: np.ndarray
    y: np.ndarray
    rows: np.ndarray
    u: np.ndarray | None = None
    v: np.ndarray | None = None


@dataclass
class TrackSource:
    """A file of trajectories.  ``chunks(size)`` yields lists of :class:`Track` (file order);
    ``length_unit``/``time_unit`` are the units found in the file (None when it states none);
    ``layout`` names the file layout; ``has_velocity`` whether velocities are given."""

    path: str
    layout: str
    length_unit: str | None
    time_unit: str | None
    has_velocity: bool
    _chunks: object = None

    def chunks(self, size: int = 2000):
        return self._chunks(size)

    @property
    def name(self) -> str:
        return shown(self.path)


def shown(path) -> str:
    text = str(path)
    return repr(text if len(text) <= 80 else text[:60] + "…" + text[-15:])


def open_tracks(path, *, file_format: str | None = None) -> TrackSource:
    """The :class:`TrackSource` of ``path``; ``file_format`` "csv" or "netcdf" (default: from
    the first bytes of the file)."""
    path = Path(path)
    name = shown(path)
    try:
        if path.is_dir():
            raise TrackFileError(f"track file {name} is a directory")
        with open(path, "rb") as stream:
            head = stream.read(8)
    except FileNotFoundError:
        raise TrackFileError(f"track file {name} does not exist") from None
    except OSError as exc:
        raise TrackFileError(f"track file {name} cannot be read ({exc.strerror})") from None
    if not head:
        raise TrackFileError(f"track file {name} is empty (0 bytes)")
    if file_format is None:
        file_format = "netcdf" if head.startswith((b"CDF", b"\x89HDF")) else "csv"
    if file_format == "netcdf":
        return _open_netcdf(path)
    if file_format == "csv":
        return _open_csv(path)
    raise TrackFileError(f"file format {file_format!r} is not one of csv, netcdf")


# ---- CSV --------------------------------------------------------------------------------------
_HEADER = re.compile(r"^\s*([A-Za-z_]+)\s*(?:\[\s*([^\]]*?)\s*\])?\s*$")


def _open_csv(path: Path) -> TrackSource:
    import csv

    name = shown(path)
    try:
        with open(path, newline="", encoding="utf-8") as stream:
            reader = csv.reader(stream)
            header = next(reader, None)
            rows = list(reader)
    except UnicodeDecodeError:
        raise TrackFileError(f"track file {name} is neither netCDF nor UTF-8 text; give a "
                             "CSV table (id,t,x,y) or a CF trajectory netCDF file") from None
    if header is None:
        raise TrackFileError(f"track file {name} has no header row; the first row must name "
                             "the columns id,t,x,y")
    columns, units = {}, {}
    for index, text in enumerate(header):
        match = _HEADER.match(text)
        if not match:
            continue
        key = match.group(1).lower()
        if key in ("id", "t", "x", "y", "u", "v"):
            if key in columns:
                raise TrackFileError(f"track file {name}: column {key!r} appears twice in the "
                                     "header")
            columns[key] = index
            if match.group(2):
                units[key] = match.group(2)
    missing = [k for k in ("id", "t", "x", "y") if k not in columns]
    if missing:
        raise TrackFileError(f"track file {name}: header {','.join(header)!r} lacks column(s) "
                             f"{', '.join(missing)}; a CSV track table needs id,t,x,y (u,v "
                             "optional)")
    if ("u" in columns) != ("v" in columns):
        raise TrackFileError(f"track file {name}: give both velocity columns u and v, or "
                             "neither")
    length_unit = _one_unit(units, ("x", "y"), name, "length")
    if "u" in columns:
        velocity_unit = _one_unit(units, ("u", "v"), name, "velocity")
        time_unit = units.get("t")
        if velocity_unit and length_unit and time_unit and \
                velocity_unit.replace(" ", "") not in (f"{length_unit}/{time_unit}",
                                                       f"{length_unit}{time_unit}-1"):
            raise TrackFileError(f"track file {name}: mixed units: velocity in "
                                 f"{velocity_unit!r}, positions in {length_unit!r} and times "
                                 f"in {time_unit!r}; velocities must be in "
                                 f"{length_unit}/{time_unit}")
    width = max(columns.values()) + 1
    ids = []
    values = np.empty((len(rows), 6))
    values[:, 4:] = np.nan
    fields = [k for k in ("t", "x", "y", "u", "v") if k in columns]
    for r, row in enumerate(rows):
        line = r + 2
        if len(row) < width:
            raise TrackFileError(f"track file {name}: row {line} has {len(row)} field(s), the "
                                 f"header {len(header)}")
        ident = row[columns["id"]].strip()
        if not ident:
            raise TrackFileError(f"track file {name}: row {line}: the id is empty")
        ids.append(ident)
        for k in fields:
            text = row[columns[k]].strip()
            try:
                values[r, "txyuv".index(k)] = float(text)
            except ValueError:
                raise TrackFileError(f"track file {name}: row {line} (track {ident}): {k} = "
                                     f"{text[:40]!r} is not a number") from None
    if not rows:
        raise TrackFileError(f"track file {name} has a header but no rows")
    ids = np.asarray(ids)
    unique, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")  # tracks in order of first appearance
    line_numbers = np.arange(len(rows)) + 2
    by_track = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[by_track], np.arange(unique.size + 1))
    has_velocity = "u" in columns

    def chunks(size):
        batch = []
        for k in order:
            take = by_track[bounds[k]:bounds[k + 1]]
            part = values[take]
            batch.append(Track(str(unique[k]), part[:, 0].copy(), part[:, 1].copy(),
                               part[:, 2].copy(), line_numbers[take],
                               part[:, 3].copy() if has_velocity else None,
                               part[:, 4].copy() if has_velocity else None))
            if len(batch) >= size:
                yield batch
                batch = []
        if batch:
            yield batch

    return TrackSource(str(path), "csv", length_unit, units.get("t"), has_velocity, chunks)


def _one_unit(units, keys, name, what):
    found = {units[k] for k in keys if k in units}
    if len(found) > 1:
        pairs = ", ".join(f"{k} in {units[k]!r}" for k in keys if k in units)
        raise TrackFileError(f"track file {name}: mixed {what} units ({pairs}); give both "
                             "in the same unit")
    return found.pop() if found else None


# ---- netCDF (CF discrete sampling geometries) ----------------------------------------------------
def _find(handle, *, standard_names=(), axis=None, names=()):
    for var in handle.variables.values():
        if getattr(var, "standard_name", None) in standard_names:
            return var
    if axis is not None:
        for var in handle.variables.values():
            if str(getattr(var, "axis", "")).upper() == axis:
                return var
    for want in names:
        if want in handle.variables:
            return handle.variables[want]
    return None


def _time_unit(var):
    units = getattr(var, "units", None)
    if units is None:
        return None
    return str(units).split(" since ")[0].strip() or None


def _open_netcdf(path: Path) -> TrackSource:
    import netCDF4

    name = shown(path)
    try:
        handle = netCDF4.Dataset(path, "r")
    except OSError as exc:
        raise TrackFileError(f"track file {name} is not a readable netCDF file "
                             f"({exc.strerror or exc})") from None
    try:
        feature = str(getattr(handle, "featureType", ""))
        if feature.lower() != "trajectory":
            raise TrackFileError(f"track file {name} is not a trajectory file: its global "
                                 f"attribute featureType = {feature or '(absent)'!r}; a CF "
                                 "discrete sampling geometry file with featureType = "
                                 "\"trajectory\" is needed")
        x = _find(handle, standard_names=("projection_x_coordinate",), axis="X", names=("x",))
        y = _find(handle, standard_names=("projection_y_coordinate",), axis="Y", names=("y",))
        lon = _find(handle, standard_names=("longitude",))
        if (x is None or y is None) and lon is not None:
            raise TrackFileError(f"track file {name} gives positions as longitude/latitude; "
                                 "project them to lengths (x, y with standard_name "
                                 "projection_x_coordinate / projection_y_coordinate) first")
        if x is None or y is None:
            raise TrackFileError(f"track file {name}: no x/y position variables (standard_name "
                                 "projection_x_coordinate / projection_y_coordinate, axis X/Y, "
                                 "or named x, y)")
        t = _find(handle, standard_names=("time",), axis="T", names=("time", "t"))
        if t is None:
            raise TrackFileError(f"track file {name}: no time variable (standard_name time or "
                                 "axis T)")
        ux = _find(handle, standard_names=("platform_speed_wrt_ground_x",
                                           "eastward_sea_water_velocity"), names=("u",))
        vy = _find(handle, standard_names=("platform_speed_wrt_ground_y",
                                           "northward_sea_water_velocity"), names=("v",))
        if (ux is None) != (vy is None):
            ux = vy = None
        x_unit, y_unit = getattr(x, "units", None), getattr(y, "units", None)
        if x_unit is not None and y_unit is not None and str(x_unit) != str(y_unit):
            raise TrackFileError(f"track file {name}: mixed units: {x.name} in {x_unit!r}, "
                                 f"{y.name} in {y_unit!r}; give both in the same unit")
        length_unit = str(x_unit if x_unit is not None else y_unit) \
            if (x_unit or y_unit) is not None else None
        count = index = None
        for var in handle.variables.values():
            if hasattr(var, "sample_dimension"):
                count = var
            if hasattr(var, "instance_dimension"):
                index = var
        ident = None
        for var in handle.variables.values():
            if getattr(var, "cf_role", None) == "trajectory_id":
                ident = var
        layout = ("contiguous ragged" if count is not None else
                  "indexed ragged" if index is not None else
                  "multidimensional")
        if layout == "multidimensional" and x.ndim != 2:
            raise TrackFileError(f"track file {name}: featureType trajectory but no ragged "
                                 "count (sample_dimension) or index (instance_dimension) "
                                 f"variable, and {x.name} is not 2-D (trajectory, obs)")
        time_unit = _time_unit(t)
        names = {"x": x.name, "y": y.name, "t": t.name,
                 "u": None if ux is None else ux.name, "v": None if vy is None else vy.name,
                 "id": None if ident is None else ident.name,
                 "count": None if count is None else count.name,
                 "index": None if index is None else index.name}
    finally:
        handle.close()

    def chunks(size):
        with netCDF4.Dataset(path, "r") as nc:
            nc.set_auto_mask(True)
            yield from _NETCDF_CHUNKS[layout](nc, names, size, name)

    return TrackSource(str(path), layout, length_unit, time_unit, ux is not None, chunks)


def _values(var, key=slice(None)):
    data = var[key]
    if np.ma.isMaskedArray(data):
        if data.dtype.kind in "fc":
            return np.ma.filled(data.astype(np.float64), np.nan)
        return np.ma.filled(data, -1)
    return np.asarray(data)


def _identifiers(nc, names, start, stop):
    if names["id"] is None:
        return [str(i) for i in range(start, stop)]
    var = nc.variables[names["id"]]
    data = var[start:stop]
    if var.dtype == "S1" or (hasattr(data, "dtype") and data.dtype.kind == "S"
                             and data.ndim == 2):
        import netCDF4

        data = netCDF4.chartostring(np.asarray(data))
    if np.ma.isMaskedArray(data):
        data = data.filled(-1)
    return [str(v.decode() if isinstance(v, bytes) else v).strip() for v in np.ravel(data)]


def _track(ident, nc, names, key, rows):
    def get(k):
        return None if names[k] is None else _values(nc.variables[names[k]], key) \
            .astype(np.float64).ravel()

    return Track(ident, get("t"), get("x"), get("y"), rows, get("u"), get("v"))


def _contiguous_chunks(nc, names, size, name):
    counts = _values(nc.variables[names["count"]]).astype(np.int64)
    if np.any(counts < 0):
        bad = int(np.flatnonzero(counts < 0)[0])
        raise TrackFileError(f"track file {name}: {names['count']}[{bad}] = {counts[bad]} is "
                             "negative")
    offsets = np.concatenate([[0], np.cumsum(counts)])
    n_obs = nc.variables[names["x"]].shape[0]
    if offsets[-1] != n_obs:
        raise TrackFileError(f"track file {name}: the counts in {names['count']} sum to "
                             f"{offsets[-1]} but the sample dimension has {n_obs} rows")
    for start in range(0, counts.size, size):
        stop = min(start + size, counts.size)
        ids = _identifiers(nc, names, start, stop)
        lo, hi = offsets[start], offsets[stop]
        block = {k: (None if names[k] is None else
                     _values(nc.variables[names[k]], slice(lo, hi)).astype(np.float64))
                 for k in ("t", "x", "y", "u", "v")}
        out = []
        for i in range(start, stop):
            a, b = offsets[i] - lo, offsets[i + 1] - lo
            out.append(Track(ids[i - start], block["t"][a:b], block["x"][a:b],
                             block["y"][a:b], np.arange(offsets[i], offsets[i + 1]),
                             None if block["u"] is None else block["u"][a:b],
                             None if block["v"] is None else block["v"][a:b]))
        yield out


def _indexed_chunks(nc, names, size, name):
    index = _values(nc.variables[names["index"]]).astype(np.int64)
    dim = nc.variables[names["index"]].instance_dimension
    if dim not in nc.dimensions:
        raise TrackFileError(f"track file {name}: {names['index']}:instance_dimension = "
                             f"{dim!r} is not a dimension of the file")
    n_tracks = len(nc.dimensions[dim])
    bad = np.flatnonzero((index < 0) | (index >= n_tracks))
    if bad.size:
        raise TrackFileError(f"track file {name}: row {int(bad[0])}: {names['index']} = "
                             f"{int(index[bad[0]])} is not a trajectory index (0 … "
                             f"{n_tracks - 1})")
    order = np.argsort(index, kind="stable")
    bounds = np.searchsorted(index[order], np.arange(n_tracks + 1))
    full = {k: (None if names[k] is None else
                _values(nc.variables[names[k]]).astype(np.float64))
            for k in ("t", "x", "y", "u", "v")}
    for start in range(0, n_tracks, size):
        stop = min(start + size, n_tracks)
        ids = _identifiers(nc, names, start, stop)
        out = []
        for i in range(start, stop):
            rows = order[bounds[i]:bounds[i + 1]]
            if rows.size == 0:
                continue
            out.append(Track(ids[i - start], full["t"][rows], full["x"][rows],
                             full["y"][rows], rows,
                             None if full["u"] is None else full["u"][rows],
                             None if full["v"] is None else full["v"][rows]))
        yield out


def _multidimensional_chunks(nc, names, size, name):
    x = nc.variables[names["x"]]
    n_tracks, n_obs = x.shape
    t_var = nc.variables[names["t"]]
    shared_time = t_var.ndim == 1
    times = _values(t_var).astype(np.float64) if shared_time else None
    for start in range(0, n_tracks, size):
        stop = min(start + size, n_tracks)
        ids = _identifiers(nc, names, start, stop)
        block = {k: (None if names[k] is None else
                     _values(nc.variables[names[k]], slice(start, stop)).astype(np.float64))
                 for k in ("x", "y", "u", "v")}
        tblock = (np.broadcast_to(times, (stop - start, n_obs)) if shared_time else
                  _values(t_var, slice(start, stop)).astype(np.float64))
        out = []
        for i in range(stop - start):
            # incomplete layout: a sample is missing where its time or both positions are fill
            present = np.isfinite(tblock[i]) & ~(np.isnan(block["x"][i])
                                                 & np.isnan(block["y"][i]))
            rows = np.flatnonzero(present)
            if rows.size == 0:
                continue
            out.append(Track(ids[i], tblock[i][rows].copy(), block["x"][i][rows],
                             block["y"][i][rows], rows,
                             None if block["u"] is None else block["u"][i][rows],
                             None if block["v"] is None else block["v"][i][rows]))
        yield out


_NETCDF_CHUNKS = {"contiguous ragged": _contiguous_chunks, "indexed ragged": _indexed_chunks,
                  "multidimensional": _multidimensional_chunks}


# ---- checks and preparation ------------------------------------------------------------
def check_track(track: Track, name: str) -> None:
    """Refuse unsorted or repeated times and non-finite times/positions/velocities, naming
    the track, the row, the field and the value."""
    for field in ("t", "x", "y", "u", "v"):
        values = getattr(track, field)
        if values is None:
            continue
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            i = int(bad[0])
            raise TrackFileError(f"track file {name}: track {track.ident}, row "
                                 f"{int(track.rows[i])}: {field} = {values[i]} is not finite")
    steps = np.diff(track.t)
    bad = np.flatnonzero(steps <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        what = "repeats the time" if steps[i - 1] == 0 else "goes back in time"
        raise TrackFileError(f"track file {name}: track {track.ident}, row "
                             f"{int(track.rows[i])}: t = {track.t[i]:.10g} {what} of row "
                             f"{int(track.rows[i - 1])} (t = {track.t[i - 1]:.10g}); times "
                             "within a track must increase (duplicate (id, t) or unsorted "
                             "rows)")


def unwrap(values: np.ndarray, period: float) -> np.ndarray:
    """Positions folded into a periodic domain of length ``period`` made continuous: each
    step is taken as the image of least length (so a true step must stay below period/2)."""
    if values.size < 2:
        return values
    steps = np.diff(values)
    steps -= period * np.rint(steps / period)
    return np.concatenate([values[:1], values[0] + np.cumsum(steps)])


def frames(track: Track, origin: float, interval: float, tolerance: float,
           name: str) -> np.ndarray:
    """Sample index k of each time on the grid t = origin + k·interval, refusing times off it
    by more than ``tolerance``·interval."""
    position = (track.t - origin) / interval
    index = np.rint(position)
    off = np.abs(position - index)
    bad = np.flatnonzero(off > tolerance)
    if bad.size:
        i = int(bad[0])
        raise TrackFileError(
            f"track file {name}: track {track.ident}, row {int(track.rows[i])}: t = "
            f"{track.t[i]:.10g} is not on the sampling grid {origin:.10g} + k·{interval:.6g} "
            f"(off by {off[i]:.3g} intervals; allowed {tolerance:g}); tracks must share one "
            "sampling interval (give --interval if it is not the smallest time step)")
    return index.astype(np.int64)


def period_pair(period) -> tuple[float, float] | None:
    """``period``: None, one number (square domain) or (Lx, Ly); values must be positive."""
    if period is None:
        return None
    values = np.atleast_1d(np.asarray(period, dtype=np.float64))
    if values.size == 1:
        values = np.repeat(values, 2)
    if values.size != 2 or not np.all(np.isfinite(values)) or np.any(values <= 0):
        raise TrackFileError(f"period = {list(np.atleast_1d(period))} must be one or two "
                             "positive finite lengths (Lx, Ly)")
    return float(values[0]), float(values[1])


def is_finite_positive(value) -> bool:
    return isinstance(value, (int, float)) and math.isfinite(value) and value > 0
