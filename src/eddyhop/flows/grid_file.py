"""Reading and writing periodic gridded flow fields as CF-style netCDF files.

What a file must hold (every rule below is checked, and a broken rule is a clear error):

* Two 1-D coordinate variables, one per grid dimension, recognised by ``axis = "X"/"Y"``, a
  ``standard_name`` ending in ``x_coordinate``/``y_coordinate``, or the names ``x``/``y``; each
  with a ``units`` attribute (the same length unit for both, or ``"1"`` for dimensionless data).
* A *closed* periodic grid: equally spaced coordinates (relative tolerance 1e-4) whose last
  sample repeats the first one a period later (``x_N = x_0 + Lx``), and field values on that
  closing row and column equal to those on the first (relative tolerance
  ``closure_tolerance``, default 1e-6 of the largest value).  A field whose first and last
  samples disagree is not periodic (or is an open grid): the error says which.
* Either a stream function (variable ``psi``, or ``standard_name``/name containing
  ``stream_function``/``streamfunction``; units length² per time, e.g. ``m2 s-1``) or two
  velocity components (``u`` and ``v``, or ``standard_name`` ending in ``x_velocity`` /
  ``y_velocity``; units length per time, e.g. ``m s-1`` or ``mm/s``), with the coordinates'
  length unit.  Names may be given explicitly in the study.  When both are present the velocity
  is used (it is what measurements give).
* Finite values only (fill values are read as missing and rejected); 2-D after dropping
  length-1 dimensions (one time level at most: steady fields only).

Decreasing coordinates (image rows counted downwards) are reversed.  The simulated field's
length unit is the coordinates' unit and its time unit the velocity's.

:func:`grid_dataset` writes any family's field on such a grid (the format this module reads),
e.g. to check the gridded interpolation against the closed form or to hand a field to others.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import InputDataError

SPACING_TOLERANCE = 1e-4
_STREAM_NAMES = ("psi", "stream_function", "streamfunction")
_X_NAMES = ("u", "ux", "u_x", "velocity_x", "vel_x")
_Y_NAMES = ("v", "uy", "u_y", "velocity_y", "vel_y")


@dataclass(frozen=True)
class GridField:
    """A checked periodic field on an open grid (closing samples dropped), arrays ``[i, j]``
    with i along x.  ``u``, ``v`` are the data velocity (for a stream function: its spectral
    derivatives); ``psi_tilde`` the periodic stream function of its divergence-free part."""

    path: str
    variables: tuple
    from_stream_function: bool
    x0: float
    y0: float
    lx: float
    ly: float
    u: np.ndarray
    v: np.ndarray
    psi_tilde: np.ndarray
    mean_u: float
    mean_v: float
    max_speed: float
    divergence_ratio: float
    divergent_energy_fraction: float
    length_unit: str
    time_unit: str


# ---- units ---------------------------------------------------------------------------------------
_TOKEN = re.compile(r"^([^\d\s+-]+)([+-]?\d+)?$")


def unit_powers(text: str) -> dict | None:
    """``"m s-1"``, ``"m/s"``, ``"m^2 s^-1"``, ``"m2.s-1"`` → {"m": 1, "s": -1}; ``"1"`` → {};
    None when the string cannot be read."""
    text = text.strip().replace("**", "").replace("^", "")
    for separator in ("·", "*", "."):
        text = text.replace(separator, " ")
    if text in ("1", ""):
        return {} if text == "1" else None
    parts = text.split("/")
    powers: dict = {}
    for index, part in enumerate(parts):
        tokens = part.split()
        if not tokens:
            return None
        for token in tokens:
            if token == "1":
                continue
            match = _TOKEN.match(token)
            if not match:
                return None
            power = int(match.group(2) or 1) * (1 if index == 0 else -1)
            powers[match.group(1)] = powers.get(match.group(1), 0) + power
    return {name: p for name, p in powers.items() if p != 0}


def _units_of(var, label, where):
    units = var.attrs.get("units")
    if not isinstance(units, str) or not units.strip():
        raise InputDataError(f"{where}: {label} {var.name!r} has no 'units' attribute; add one "
                             "(CF convention), e.g. 'm' for coordinates and 'm s-1' for "
                             "velocities, or '1' for dimensionless data")
    return units.strip()


def _time_unit(field_units, length_unit, length_power, label, where):
    expected = "length per time" if length_power == 1 else "length^2 per time"
    powers = unit_powers(field_units)
    if length_unit == "1":
        if powers == {}:
            return "1"
        raise InputDataError(f"{where}: {label} has units {field_units!r} but the coordinates "
                             "are dimensionless ('1'); use '1' for both or give the "
                             "coordinates a length unit")
    if powers is None or len(powers) != 2 or powers.get(length_unit) != length_power:
        raise InputDataError(f"{where}: {label} has units {field_units!r}; expected {expected} "
                             f"in the coordinates' length unit {length_unit!r} (e.g. "
                             f"'{length_unit}{'' if length_power == 1 else '2'} s-1'); convert "
                             "the file so coordinates and field use the same length unit")
    (time_unit, time_power), = [(n, p) for n, p in powers.items() if n != length_unit]
    if time_power != -1:
        raise InputDataError(f"{where}: {label} has units {field_units!r}; expected {expected}")
    return time_unit


# ---- reading -------------------------------------------------------------------------------------
def _axis_of(ds, dim):
    if dim not in ds.variables:
        return None
    var = ds[dim]
    axis = str(var.attrs.get("axis", "")).upper()
    standard = str(var.attrs.get("standard_name", "")).lower()
    if axis in ("X", "Y"):
        return axis
    if standard.endswith("x_coordinate"):
        return "X"
    if standard.endswith("y_coordinate"):
        return "Y"
    if dim.lower() in ("x", "y"):
        return dim.upper()
    return None


def _pick_variables(ds, stream_function, velocity, where):
    names = list(ds.data_vars)
    if stream_function:
        if stream_function not in ds.variables:
            raise InputDataError(f"{where}: no variable {stream_function!r} (stream function) "
                                 f"in the file; it has: {', '.join(names) or 'none'}")
        return (stream_function,), True
    if velocity:
        missing = [n for n in velocity if n not in ds.variables]
        if missing:
            raise InputDataError(f"{where}: no variable(s) {', '.join(map(repr, missing))} "
                                 f"(velocity) in the file; it has: {', '.join(names) or 'none'}")
        return tuple(velocity), False

    def standard(name):
        return str(ds[name].attrs.get("standard_name", "")).lower()

    xs = [n for n in names if n.lower() in _X_NAMES or standard(n).endswith("x_velocity")]
    ys = [n for n in names if n.lower() in _Y_NAMES or standard(n).endswith("y_velocity")]
    if len(xs) == 1 and len(ys) == 1:
        return (xs[0], ys[0]), False
    streams = [n for n in names if n.lower() in _STREAM_NAMES
               or "stream_function" in standard(n) or "streamfunction" in standard(n)]
    if len(streams) == 1:
        return (streams[0],), True
    raise InputDataError(
        f"{where}: cannot tell which variables hold the flow (found {', '.join(names) or 'none'})"
        "; name them u and v (velocity) or psi (stream function), or set flow.velocity = "
        "[\"u_name\", \"v_name\"] or flow.stream_function = \"name\" in the study")


def _coordinate(ds, dim, where):
    values = np.asarray(ds[dim].values, dtype=np.float64)
    if values.ndim != 1 or values.size < 5:
        raise InputDataError(f"{where}: coordinate {dim!r} needs at least 5 samples (4 "
                             f"intervals plus the closing sample), got {values.size}")
    if not np.all(np.isfinite(values)):
        raise InputDataError(f"{where}: coordinate {dim!r} contains NaN or infinite values")
    steps = np.diff(values)
    if not (np.all(steps > 0) or np.all(steps < 0)):
        raise InputDataError(f"{where}: coordinate {dim!r} is not strictly monotonic")
    reverse = bool(steps[0] < 0)
    if reverse:
        values = values[::-1]
        steps = np.diff(values)
    mean = steps.mean()
    worst = float(np.max(np.abs(steps - mean)) / mean)
    if worst > SPACING_TOLERANCE:
        raise InputDataError(
            f"{where}: coordinate {dim!r} is unevenly spaced (steps from {steps.min():.6g} to "
            f"{steps.max():.6g}, relative spread {worst:.2g} > {SPACING_TOLERANCE:g}); a "
            "periodic grid must be regular: resample the field onto equal steps")
    return values, reverse


def read_grid_field(path, stream_function=None, velocity=None, closure_tolerance=1e-6,
                    where=None) -> GridField:
    """Read and check a periodic field file; see the module docstring for the rules.

    Ctrl-C is held while the file is read (:func:`eddyhop.atomic.interrupts_deferred`): one
    raised inside xarray's read can leave its netCDF lock taken, and the close that follows
    then waits for it for ever."""
    from ..atomic import interrupts_deferred

    with interrupts_deferred():
        return _read_grid_field(path, stream_function, velocity, closure_tolerance, where)


def _read_grid_field(path, stream_function, velocity, closure_tolerance, where) -> GridField:
    import xarray as xr

    from ._spectral import _wavenumbers, stream_function_from_velocity

    where = f"{where} {str(path)!r}" if where else f"{str(path)!r}"
    try:
        ds = xr.open_dataset(path, engine="netcdf4", decode_times=False)
    except FileNotFoundError:
        raise InputDataError(f"{where} does not exist") from None
    except OSError as exc:
        raise InputDataError(f"{where} is not a readable netCDF file: {exc}") from None
    with ds:
        chosen, is_stream = _pick_variables(ds, stream_function, velocity, where)
        arrays = []
        dims = None
        for name in chosen:
            var = ds[name].squeeze(drop=True)
            if var.ndim != 2:
                raise InputDataError(
                    f"{where}: variable {name!r} has dimensions {ds[name].dims}; a steady 2-D "
                    "field is needed (at most one time level)")
            if dims is None:
                dims = var.dims
            elif var.dims != dims:
                raise InputDataError(f"{where}: variables {chosen} do not share dimensions")
            arrays.append(var)
        axes = {dim: _axis_of(ds, dim) for dim in dims}
        for dim, axis in axes.items():
            if dim not in ds.variables:
                raise InputDataError(f"{where}: dimension {dim!r} has no coordinate variable; "
                                     "add CF coordinate variables x and y (with units)")
            if axis is None:
                raise InputDataError(f"{where}: cannot tell whether coordinate {dim!r} is x or "
                                     "y; give it an axis attribute ('X' or 'Y')")
        if sorted(axes.values()) != ["X", "Y"]:
            raise InputDataError(f"{where}: the field's dimensions {dims} must be one x and one "
                                 f"y coordinate, found axes {list(axes.values())}")
        xdim = next(d for d, a in axes.items() if a == "X")
        ydim = next(d for d, a in axes.items() if a == "Y")
        xunit = _units_of(ds[xdim], "coordinate", where)
        yunit = _units_of(ds[ydim], "coordinate", where)
        if xunit != yunit:
            raise InputDataError(f"{where}: coordinates {xdim!r} ({xunit!r}) and {ydim!r} "
                                 f"({yunit!r}) must use the same length unit")
        length_powers = unit_powers(xunit)
        if length_powers != {} and (length_powers is None or list(length_powers.values()) != [1]):
            raise InputDataError(f"{where}: coordinate units {xunit!r} are not a length unit")
        time_unit = None
        for var in arrays:
            units = _units_of(var, "variable", where)
            found = _time_unit(units, xunit, 2 if is_stream else 1, f"variable {var.name!r}",
                               where)
            if time_unit is not None and found != time_unit:
                raise InputDataError(f"{where}: velocity components use different time units "
                                     f"({time_unit!r}, {found!r})")
            time_unit = found
        xs, xrev = _coordinate(ds, xdim, where)
        ys, yrev = _coordinate(ds, ydim, where)
        data = []
        for var in arrays:
            values = np.asarray(var.transpose(xdim, ydim).values, dtype=np.float64)
            bad = ~np.isfinite(values)
            if bad.any():
                i, j = np.argwhere(bad)[0]
                raise InputDataError(
                    f"{where}: variable {var.name!r} has {int(bad.sum())} NaN, missing or "
                    f"infinite value(s), the first at {xdim} = {ds[xdim].values[i]:.6g}, "
                    f"{ydim} = {ds[ydim].values[j]:.6g}; fill the gaps (e.g. interpolate the "
                    "measurement) before using the field")
            if xrev:
                values = values[::-1, :]
            if yrev:
                values = values[:, ::-1]
            data.append(values)
    for values, name in zip(data, chosen):
        scale = max(float(np.max(np.abs(values))), 1e-300)
        for axis, label, coords in ((0, "x", xs), (1, "y", ys)):
            first = np.take(values, 0, axis=axis)
            last = np.take(values, -1, axis=axis)
            mismatch = float(np.max(np.abs(last - first))) / scale
            if mismatch > closure_tolerance:
                hint = (" (a stream function with a mean flow is not periodic: give the "
                        "velocity components instead)" if name == chosen[0] and is_stream
                        else "")
                raise InputDataError(
                    f"{where}: variable {name!r} is not periodic along {label}: the closing "
                    f"sample at {label} = {coords[-1]:.6g} differs from the first at "
                    f"{label} = {coords[0]:.6g} by up to {mismatch:.3g} of the largest value "
                    f"(allowed: flow.closure_tolerance = {closure_tolerance:g}). The grid "
                    "must be closed: its last sample repeats the first one a period later"
                    + hint)
    lx = float(xs[-1] - xs[0])
    ly = float(ys[-1] - ys[0])
    trimmed = [values[:-1, :-1] for values in data]
    nx, ny = trimmed[0].shape
    if is_stream:
        psi_tilde = trimmed[0] - trimmed[0].mean()
        kx, ky = _wavenumbers(nx, ny, lx, ly)
        psih = np.fft.rfft2(psi_tilde)
        u = np.fft.irfft2(1j * ky * psih, s=(nx, ny))
        v = np.fft.irfft2(-1j * kx * psih, s=(nx, ny))
        mean_u = mean_v = 0.0
        ratio = fraction = 0.0
    else:
        u, v = trimmed
        psi_tilde, mean_u, mean_v, ratio, fraction = stream_function_from_velocity(u, v, lx, ly)
    return GridField(
        path=str(path), variables=tuple(chosen), from_stream_function=is_stream,
        x0=float(xs[0]), y0=float(ys[0]), lx=lx, ly=ly, u=u, v=v, psi_tilde=psi_tilde,
        mean_u=mean_u, mean_v=mean_v, max_speed=float(np.max(np.hypot(u, v))),
        divergence_ratio=ratio, divergent_energy_fraction=fraction, length_unit=xunit,
        time_unit=time_unit)


# ---- writing -------------------------------------------------------------------------------------
def grid_dataset(family, values, nx, ny=None, kind="velocity", length_unit="m",
                 time_unit="s", title=None):
    """An ``xarray.Dataset`` holding ``family``'s field on a closed periodic grid.

    ``nx × ny`` intervals over one period cell (plus the closing row and column), variables
    ``u, v`` (``kind="velocity"``) or ``psi`` (``kind="stream_function"``; the family's ψ must be
    periodic), dims ``(y, x)`` in CF order, units ``length_unit`` / ``time_unit``.
    """
    import xarray as xr

    from .. import __version__
    from .compiled import evaluate_psi, evaluate_velocity

    lx, ly = family.period(values)
    fallback = 2.0 * np.pi / family.wavenumber(values)
    lx, ly = lx or fallback, ly or fallback
    ny = nx if ny is None else ny
    xs = np.linspace(0.0, lx, nx + 1)
    ys = np.linspace(0.0, ly, ny + 1)
    gx, gy = np.meshgrid(xs, ys)  # (y, x)
    unit_rate = "1" if length_unit == "1" else f"{length_unit} {time_unit}-1"
    unit_psi = "1" if length_unit == "1" else f"{length_unit}2 {time_unit}-1"
    if kind == "velocity":
        u, v = evaluate_velocity(family, values, gx, gy, 0.0)
        data = {"u": (("y", "x"), u, {"units": unit_rate, "long_name": "velocity along x"}),
                "v": (("y", "x"), v, {"units": unit_rate, "long_name": "velocity along y"})}
    elif kind == "stream_function":
        psi = evaluate_psi(family, values, gx, gy, 0.0)
        data = {"psi": (("y", "x"), psi, {"units": unit_psi, "long_name":
                                          "stream function (u = dpsi/dy, v = -dpsi/dx)"})}
    else:
        raise ValueError(f"kind must be 'velocity' or 'stream_function', got {kind!r}")
    coords = {
        "x": ("x", xs, {"axis": "X", "units": length_unit,
                        "standard_name": "projection_x_coordinate", "long_name": "x"}),
        "y": ("y", ys, {"axis": "Y", "units": length_unit,
                        "standard_name": "projection_y_coordinate", "long_name": "y"}),
    }
    ds = xr.Dataset({k: xr.Variable(*spec) for k, spec in data.items()},
                    coords={k: xr.Variable(*spec) for k, spec in coords.items()})
    ds.attrs = {
        "Conventions": "CF-1.10",
        "title": title or f"'{family.name}' flow sampled on a closed periodic grid",
        "source": f"eddyhop {__version__}: flow family '{family.name}' with parameters "
                  + ", ".join(f"{k}={v}" for k, v in sorted(values.items())),
        "comment": "Closed periodic grid: the last row and column repeat the first ones.",
    }
    return ds
