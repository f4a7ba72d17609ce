"""Steady periodic flows given on a grid: a stream function interpolated inside the kernel.

A velocity field (or stream function) sampled on a regular periodic grid — a particle image
velocimetry map, a CFD snapshot, a field computed by the package itself — is turned into one
periodic stream function plus a uniform mean flow,

    ψ(x, y) = ψ̃(x, y) + ū (y − y₀) − v̄ (x − x₀),   u = ∂ψ/∂y,  v = −∂ψ/∂x,

and ψ̃ is interpolated inside numba.  Because the velocity is the exact curl of one
interpolated scalar, the interpolated field is divergence-free at every point, whatever the
data.  Two interpolants (``interpolation`` in the ``[flow]`` table):

* ``bicubic`` (default): periodic tensor-product cubic B-spline through the grid values of ψ̃
  (C², so the velocity is C¹ and its gradient continuous; interpolation error O(h⁴) in ψ and
  O(h³) in the velocity for smooth fields — de Boor (1978), *A Practical Guide to Splines*,
  Springer, ch. V and XVII; the periodic coefficients come from dividing the discrete Fourier
  transform by the B-spline symbol (2 + cos θ)/3, Unser, Aldroubi & Eden (1991), IEEE Trans.
  Signal Process. 39, 277–285 — common practice).  16 coefficients per evaluation.
* ``spectral``: the truncated Fourier series of ψ̃ (trigonometric interpolation; exact for a
  band-limited field; the Nyquist modes are dropped because their derivative is undefined).
  Costs O(nx·ny) operations per evaluation: use it to check the bicubic field, not for large
  ensembles.

Velocity input is made divergence-free by the periodic Helmholtz projection (common practice:
ψ̂ = ω̂/|k|² with ω = ∂v/∂x − ∂u/∂y); :func:`field_report` says how much divergence the data
had and how far the interpolated field departs from the data on the input grid.

Study parameters (``[flow] family = "gridded"``): ``file`` (netCDF path, relative to the working
directory; validation adds its ``file_sha256``, and a recorded digest that no longer matches
the file is an error), optional ``stream_function`` (variable name) or ``velocity`` (two
variable names), ``interpolation``, ``scale`` (multiplies the whole field, e.g. for Péclet
sweeps) and ``closure_tolerance``.  File conventions are in ``grid_file.py``.  Units:
lengths in the file's coordinate unit, times in the time unit of its velocity; ``U`` (the
velocity scale used for Péclet numbers) is the largest speed on the grid, ``k = 2π/Lx``.

Packed parameter vector (``pack``): header ``[mode, nx, ny, x0, y0, Lx, Ly, ū, v̄]`` then the
coefficients — bicubic: B-spline coefficients ``c[i, j]`` row-major (i along x); spectral: real
and imaginary parts of ψ̂[m, n]/(nx ny), m < nx, n ≤ ny/2.  Other families (obstacle lattices)
append the same block after their own header and call the ``grid_*`` functions with its offset.
"""

from __future__ import annotations

import math
import os
import warnings
from collections import OrderedDict

import numpy as np

from .._jit import jit
from ..errors import StudyError
from ._spectral import _wavenumbers, stream_function_from_velocity  # noqa: F401  (re-exported)
from .base import FlowFamily, Parameter

BICUBIC = 0
SPECTRAL = 1
INTERPOLATIONS = {"bicubic": BICUBIC, "spectral": SPECTRAL}
GRID_HEADER = 9  # mode, nx, ny, x0, y0, Lx, Ly, mean u, mean v


class GriddedFieldWarning(UserWarning):
    """The gridded field had a noticeable divergent part or interpolation error."""


# ---- compiled interpolation ---------------------------------------------------------------------
@jit
def _bspline_weights(t):
    """Cubic B-spline weights of nodes i−1, i, i+1, i+2 at offset t ∈ [0, 1) from node i, and
    their first and second derivatives (per unit of the node spacing)."""
    s = 1.0 - t
    t2 = t * t
    t3 = t2 * t
    w0 = s * s * s / 6.0
    w1 = (3.0 * t3 - 6.0 * t2 + 4.0) / 6.0
    w2 = (-3.0 * t3 + 3.0 * t2 + 3.0 * t + 1.0) / 6.0
    w3 = t3 / 6.0
    d0 = -0.5 * s * s
    d1 = 1.5 * t2 - 2.0 * t
    d2 = -1.5 * t2 + t + 0.5
    d3 = 0.5 * t2
    return w0, w1, w2, w3, d0, d1, d2, d3, s, 3.0 * t - 2.0, 1.0 - 3.0 * t, t


@jit
def _wrap_float(index, n):
    """Whole number ``index`` (a float) modulo ``n`` as an int in [0, n), without an integer
    division (the slowest operation of the stencil lookup)."""
    wrapped = int(index - n * math.floor(index / n))
    if wrapped >= n:
        wrapped -= n
    elif wrapped < 0:
        wrapped += n
    return wrapped


@jit
def _bicubic_sums(x, y, p, base):
    """(ψ̃, ψ̃_x, ψ̃_y, ψ̃_xx, ψ̃_xy, ψ̃_yy) of the periodic B-spline block at ``p[base:]``."""
    nx = int(p[base + 1])
    ny = int(p[base + 2])
    hx = p[base + 5] / nx
    hy = p[base + 6] / ny
    sx = (x - p[base + 3]) / hx
    sy = (y - p[base + 4]) / hy
    fx = math.floor(sx)
    fy = math.floor(sy)
    ax0, ax1, ax2, ax3, bx0, bx1, bx2, bx3, cx0, cx1, cx2, cx3 = _bspline_weights(sx - fx)
    ay0, ay1, ay2, ay3, by0, by1, by2, by3, cy0, cy1, cy2, cy3 = _bspline_weights(sy - fy)
    ix = _wrap_float(fx - 1.0, nx)
    iy = _wrap_float(fy - 1.0, ny)
    # column indices of the 4 x 4 stencil, wrapped once
    j0 = iy
    j1 = j0 + 1 if j0 + 1 < ny else j0 + 1 - ny
    j2 = j1 + 1 if j1 + 1 < ny else j1 + 1 - ny
    j3 = j2 + 1 if j2 + 1 < ny else j2 + 1 - ny
    start = base + GRID_HEADER
    val = 0.0
    gx = 0.0
    gy = 0.0
    gxx = 0.0
    gxy = 0.0
    gyy = 0.0
    row_index = ix
    for a in range(4):
        if a == 0:
            wa, da, ca = ax0, bx0, cx0
        elif a == 1:
            wa, da, ca = ax1, bx1, cx1
        elif a == 2:
            wa, da, ca = ax2, bx2, cx2
        else:
            wa, da, ca = ax3, bx3, cx3
        row = start + row_index * ny
        c0 = p[row + j0]
        c1 = p[row + j1]
        c2 = p[row + j2]
        c3 = p[row + j3]
        r0 = c0 * ay0 + c1 * ay1 + c2 * ay2 + c3 * ay3
        r1 = c0 * by0 + c1 * by1 + c2 * by2 + c3 * by3
        r2 = c0 * cy0 + c1 * cy1 + c2 * cy2 + c3 * cy3
        val += wa * r0
        gx += da * r0
        gy += wa * r1
        gxx += ca * r0
        gxy += da * r1
        gyy += wa * r2
        row_index += 1
        if row_index == nx:
            row_index = 0
    return val, gx / hx, gy / hy, gxx / (hx * hx), gxy / (hx * hy), gyy / (hy * hy)


@jit
def _spectral_sums(x, y, p, base):
    """(ψ̃, ψ̃_x, ψ̃_y, ψ̃_xx, ψ̃_xy, ψ̃_yy) of the truncated Fourier series at ``p[base:]``."""
    nx = int(p[base + 1])
    ny = int(p[base + 2])
    kx1 = 2.0 * math.pi / p[base + 5]
    ky1 = 2.0 * math.pi / p[base + 6]
    ex = complex(math.cos(kx1 * (x - p[base + 3])), math.sin(kx1 * (x - p[base + 3])))
    ey = complex(math.cos(ky1 * (y - p[base + 4])), math.sin(ky1 * (y - p[base + 4])))
    nyh = ny // 2 + 1
    start = base + GRID_HEADER
    val = 0.0
    gx = 0.0
    gy = 0.0
    gxx = 0.0
    gxy = 0.0
    gyy = 0.0
    phase_y = complex(1.0, 0.0)
    for n in range(nyh):
        ky = ky1 * n
        weight = 1.0 if n == 0 else 2.0
        # Σ_m c[m, n] e^{i m kx1 x} and its first and second x derivatives, m in FFT order
        s0 = complex(0.0, 0.0)
        s1 = complex(0.0, 0.0)
        s2 = complex(0.0, 0.0)
        phase_x = complex(1.0, 0.0)
        for m in range(nx // 2 + 1):
            for sign in range(2):
                if sign == 1 and (m == 0 or 2 * m == nx):
                    continue
                index = m if sign == 0 else nx - m
                kx = kx1 * m if sign == 0 else -kx1 * m
                ph = phase_x if sign == 0 else phase_x.conjugate()
                offset = start + 2 * (index * nyh + n)
                term = complex(p[offset], p[offset + 1]) * ph
                s0 += term
                s1 += term * complex(0.0, kx)
                s2 -= term * (kx * kx)
            phase_x *= ex
        t0 = s0 * phase_y
        t1 = s1 * phase_y
        t2 = s2 * phase_y
        val += weight * t0.real
        gx += weight * t1.real
        gy += weight * (t0 * complex(0.0, ky)).real
        gxx += weight * t2.real
        gxy += weight * (t1 * complex(0.0, ky)).real
        gyy -= weight * ky * ky * t0.real
        phase_y *= ey
    return val, gx, gy, gxx, gxy, gyy


@jit
def grid_sums(x, y, p, base):
    if p[base] == SPECTRAL:
        return _spectral_sums(x, y, p, base)
    return _bicubic_sums(x, y, p, base)


@jit
def grid_psi(x, y, p, base):
    sums = grid_sums(x, y, p, base)
    return sums[0] + p[base + 7] * (y - p[base + 4]) - p[base + 8] * (x - p[base + 3])


@jit
def grid_velocity(x, y, p, base):
    sums = grid_sums(x, y, p, base)
    return sums[2] + p[base + 7], -sums[1] + p[base + 8]


@jit
def grid_gradient(x, y, p, base):
    """(∂u/∂x, ∂u/∂y, ∂v/∂x, ∂v/∂y) = (ψ_xy, ψ_yy, −ψ_xx, −ψ_xy): trace zero exactly."""
    sums = grid_sums(x, y, p, base)
    return sums[4], sums[5], -sums[3], -sums[4]


@jit
def psi(x, y, t, p):
    return grid_psi(x, y, p, 0)


@jit
def velocity(x, y, t, p):
    return grid_velocity(x, y, p, 0)


@jit
def gradient(x, y, t, p):
    return grid_gradient(x, y, p, 0)


# ---- building the periodic field (plain NumPy) ------------------------------------------------
def _bspline_coefficients(psi_tilde):
    nx, ny = psi_tilde.shape
    theta_x = 2.0 * np.pi * np.fft.fftfreq(nx)
    theta_y = 2.0 * np.pi * np.fft.rfftfreq(ny)
    symbol = np.outer((2.0 + np.cos(theta_x)) / 3.0, (2.0 + np.cos(theta_y)) / 3.0)
    return np.fft.irfft2(np.fft.rfft2(psi_tilde) / symbol, s=(nx, ny))


def _spectral_coefficients(psi_tilde):
    nx, ny = psi_tilde.shape
    coef = np.fft.rfft2(psi_tilde) / (nx * ny)
    if nx % 2 == 0:
        coef[nx // 2, :] = 0.0
    if ny % 2 == 0:
        coef[:, ny // 2] = 0.0
    out = np.empty((*coef.shape, 2))
    out[..., 0] = coef.real
    out[..., 1] = coef.imag
    return out.ravel()


def pack_grid(psi_tilde, lx, ly, mean_u=0.0, mean_v=0.0, x0=0.0, y0=0.0,
              interpolation="bicubic", scale=1.0) -> np.ndarray:
    """Parameter block (header + coefficients) for periodic samples ``psi_tilde[i, j]`` at
    ``(x0 + i Lx/nx, y0 + j Ly/ny)``; ``scale`` multiplies the whole field."""
    psi_tilde = np.asarray(psi_tilde, dtype=np.float64)
    nx, ny = psi_tilde.shape
    if nx < 4 or ny < 4:
        raise StudyError(f"a periodic grid needs at least 4 intervals per direction, got "
                         f"{nx} x {ny}")
    mode = INTERPOLATIONS[interpolation]
    if mode == BICUBIC:
        coefficients = _bspline_coefficients(psi_tilde).ravel()
    else:
        coefficients = _spectral_coefficients(psi_tilde)
    header = [float(mode), float(nx), float(ny), float(x0), float(y0), float(lx), float(ly),
              scale * float(mean_u), scale * float(mean_v)]
    return np.concatenate([np.array(header), scale * coefficients])


@jit
def _evaluate_block(p, base, x, y, out):
    for i in range(x.size):
        u, v = grid_velocity(x[i], y[i], p, base)
        out[0, i] = u
        out[1, i] = v


def block_velocity(block, x, y):
    """(u, v) of a packed grid block at points (x, y) (arrays of equal shape)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    out = np.empty((2, x.size))
    _evaluate_block(np.ascontiguousarray(block, dtype=np.float64), 0, x.ravel(), y.ravel(), out)
    return out[0].reshape(x.shape), out[1].reshape(x.shape)


# ---- the family ----------------------------------------------------------------------------------
_FIELD_CACHE: OrderedDict = OrderedDict()
_FIELD_CACHE_SIZE = 8


def _file_key(path: str):
    try:
        stat = os.stat(path)
    except OSError:
        return (path, None, None)
    return (path, stat.st_mtime_ns, stat.st_size)


def file_digest(path: str) -> str:
    """SHA-256 of a field file (recorded in the parameters, hence in every output's
    provenance, so a result names the exact data it came from); cached by path, time, size."""
    key = ("sha256", *_file_key(os.path.abspath(path)))
    digest = _FIELD_CACHE.get(key)
    if digest is None:
        import hashlib

        hasher = hashlib.sha256()
        with open(path, "rb") as stream:
            for chunk in iter(lambda: stream.read(1 << 20), b""):
                hasher.update(chunk)
        digest = hasher.hexdigest()
        _FIELD_CACHE[key] = digest
    return digest


def load_field(values: dict):
    """The :class:`~eddyhop.flows.grid_file.GridField` a checked parameter dict refers to.

    Cached in memory (8 entries) by (absolute path, modification time, size, variables,
    closure tolerance), so evaluators that repack the parameters often do not re-read the file.
    """
    from .grid_file import read_grid_field

    path = os.path.abspath(values["file"])
    key = (_file_key(path), values.get("stream_function", ""),
           tuple(values.get("velocity", ())), values["closure_tolerance"])
    field = _FIELD_CACHE.get(key)
    if field is None:
        field = read_grid_field(path, stream_function=values.get("stream_function") or None,
                                velocity=tuple(values.get("velocity", ())) or None,
                                closure_tolerance=values["closure_tolerance"],
                                where="flow.file")
        _FIELD_CACHE[key] = field
        while len(_FIELD_CACHE) > _FIELD_CACHE_SIZE:
            _FIELD_CACHE.popitem(last=False)
    else:
        _FIELD_CACHE.move_to_end(key)
    return field


class GriddedFamily(FlowFamily):
    field_report_heading = "gridded field (the file's, before flow.scale)"
    spectral_hint = ("for a gridded flow choose flow.interpolation = 'spectral', which is a "
                     "finite Fourier series")

    def field_attributes(self, values: dict) -> dict:
        return field_attributes(values)

    """Periodic gridded field; see the module docstring."""

    TEXT_KEYS = ("file", "stream_function", "velocity", "interpolation", "file_sha256")

    def validate(self, values, where="flow"):
        values = dict(values)
        allowed = {p.name for p in self.parameters} | set(self.TEXT_KEYS)
        unknown = sorted(set(values) - allowed)
        if unknown:
            raise StudyError(f"{where}: unknown parameter(s) {', '.join(unknown)} for flow family "
                             f"'{self.name}'; allowed: {', '.join(sorted(allowed))}")
        text = {}
        for name in ("file", "stream_function", "interpolation"):
            if name in values:
                value = values.pop(name)
                if not isinstance(value, str) or not value:
                    raise StudyError(f"{where}.{name}: expected a non-empty string, got "
                                     f"{value!r}")
                text[name] = value
        velocity_names = values.pop("velocity", None)
        expected_digest = values.pop("file_sha256", None)
        checked = super().validate(values, where)
        if "file" not in text:
            raise StudyError(f"{where}.file is required for flow family 'gridded': the path of "
                             "a netCDF file with a periodic velocity field or stream function")
        interpolation = text.get("interpolation", "bicubic")
        if interpolation not in INTERPOLATIONS:
            raise StudyError(f"{where}.interpolation = {interpolation!r} is not allowed; choose "
                             "one of: " + ", ".join(INTERPOLATIONS))
        checked["file"] = text["file"]
        checked["interpolation"] = interpolation
        if velocity_names is not None:
            if "stream_function" in text:
                raise StudyError(f"{where}: give either stream_function or velocity, not both")
            if (not isinstance(velocity_names, list) or len(velocity_names) != 2
                    or not all(isinstance(n, str) and n for n in velocity_names)):
                raise StudyError(f"{where}.velocity: expected two variable names [u, v], got "
                                 f"{velocity_names!r}")
            checked["velocity"] = list(velocity_names)
        if "stream_function" in text:
            checked["stream_function"] = text["stream_function"]
        if os.path.exists(checked["file"]) and not os.path.isfile(checked["file"]):
            raise StudyError(f"{where}.file = {checked['file']!r} is not a regular file (a "
                             "folder or a device); give a netCDF file")
        if not os.path.isfile(checked["file"]):
            raise StudyError(f"{where}.file = {checked['file']!r} does not exist (a relative "
                             "path is looked up beside the study file, then in the working "
                             f"directory {os.getcwd()!r})")
        digest = file_digest(checked["file"])
        if expected_digest is not None and expected_digest != digest:
            raise StudyError(f"{where}.file_sha256 = {expected_digest!r} does not match the "
                             f"file {checked['file']!r} (sha256 {digest}): the field file "
                             "changed since these parameters were recorded")
        checked["file_sha256"] = digest
        field = load_field(checked)
        if field.divergent_energy_fraction > 0.01:
            warnings.warn(
                f"{where}.file: {100 * field.divergent_energy_fraction:.2g}% of the "
                "fluctuating kinetic energy of the gridded velocity is divergent (|div u| / "
                f"|grad u| = {field.divergence_ratio:.2g}); that part was removed by the "
                "Helmholtz projection, so the simulated flow differs from the data by that much "
                "(see eddyhop.flows.gridded.field_report)",
                GriddedFieldWarning, stacklevel=3)
        return checked

    def pack(self, values):
        field = load_field(values)
        return pack_grid(field.psi_tilde, field.lx, field.ly, field.mean_u, field.mean_v,
                         field.x0, field.y0, values["interpolation"], values["scale"])

    def velocity_scale(self, values):
        return values["scale"] * load_field(values).max_speed

    def wavenumber(self, values):
        return 2.0 * math.pi / load_field(values).lx

    def period(self, values):
        field = load_field(values)
        return (field.lx, field.ly)

    def describe(self) -> str:
        return (super().describe()
                + "\n    file   netCDF path (required); stream_function = name or velocity = "
                  "[u, v] (default: detected)\n    interpolation  bicubic (default) or spectral")


def field_report(values: dict) -> dict:
    """How faithful the simulated (interpolated, divergence-free) field is to the file.

    Keys: ``divergence_ratio`` ‖∇·u‖/‖∇u‖ of the data (spectral derivatives; 0 for a stream
    function); ``divergent_energy_fraction`` (share of the fluctuating kinetic energy in the
    divergent part, which the Helmholtz projection removes); ``node_error_max`` and
    ``node_error_rms``: |u_interp − u_data| at the input grid nodes over the largest data speed
    (the interpolation error on the input grid, including the removed divergent part);
    ``bicubic_vs_spectral_max``: the largest difference between the bicubic and the spectral
    (trigonometric) interpolants of the same data on a grid four times finer, over the largest
    speed — small when the grid resolves the field, large when it does not; ``interpolation``,
    ``shape`` (nx, ny), ``period`` (Lx, Ly), ``mean_velocity``, ``max_speed`` and the file's
    ``length_unit`` and ``time_unit``.
    """
    field = load_field(values)
    interpolation = values.get("interpolation", "bicubic")
    nx, ny = field.psi_tilde.shape
    block = pack_grid(field.psi_tilde, field.lx, field.ly, field.mean_u, field.mean_v,
                      field.x0, field.y0, interpolation)
    xs = field.x0 + np.arange(nx) * field.lx / nx
    ys = field.y0 + np.arange(ny) * field.ly / ny
    gx, gy = np.meshgrid(xs, ys, indexing="ij")
    u, v = block_velocity(block, gx, gy)
    speed = max(field.max_speed, 1e-300)
    error = np.hypot(u - field.u, v - field.v) / speed
    # trigonometric interpolant on a 4x finer grid by zero padding, against the bicubic one
    fine = 4
    fx, fy = _wavenumbers(fine * nx, fine * ny, field.lx, field.ly)
    spectrum = np.fft.rfft2(field.psi_tilde) / (nx * ny)
    padded = np.zeros(fx.shape, dtype=complex)
    half_x = (nx - 1) // 2  # |m| < nx/2 (Nyquist dropped, as in the spectral interpolant)
    half_y = (ny - 1) // 2
    padded[: half_x + 1, : half_y + 1] = spectrum[: half_x + 1, : half_y + 1]
    padded[-half_x:, : half_y + 1] = spectrum[-half_x:, : half_y + 1]
    size = fine * fine * nx * ny
    trig_u = np.fft.irfft2(1j * fy * padded, s=(fine * nx, fine * ny)) * size + field.mean_u
    trig_v = np.fft.irfft2(-1j * fx * padded, s=(fine * nx, fine * ny)) * size + field.mean_v
    cubic = pack_grid(field.psi_tilde, field.lx, field.ly, field.mean_u, field.mean_v,
                      field.x0, field.y0, "bicubic")
    fxs = field.x0 + np.arange(fine * nx) * field.lx / (fine * nx)
    fys = field.y0 + np.arange(fine * ny) * field.ly / (fine * ny)
    hx, hy = np.meshgrid(fxs, fys, indexing="ij")
    cu, cv = block_velocity(cubic, hx, hy)
    spread = float(np.max(np.hypot(cu - trig_u, cv - trig_v)) / speed)
    return {
        "interpolation": interpolation,
        "shape": (nx, ny),
        "period": (field.lx, field.ly),
        "mean_velocity": (field.mean_u, field.mean_v),
        "max_speed": field.max_speed,
        "divergence_ratio": field.divergence_ratio,
        "divergent_energy_fraction": field.divergent_energy_fraction,
        "node_error_max": float(error.max()),
        "node_error_rms": float(np.sqrt(np.mean(error**2))),
        "bicubic_vs_spectral_max": spread,
        "length_unit": field.length_unit,
        "time_unit": field.time_unit,
    }


def field_attributes(values: dict) -> dict:
    """:func:`field_report` as flat netCDF global attributes: ``field_<key>`` for every key, pairs
    split into ``field_<key>_x`` and ``field_<key>_y`` (``shape``, ``period``,
    ``mean_velocity``); values are plain Python numbers or strings.  They describe the file's
    field (before ``flow.scale``)."""
    out = {}
    for key, value in field_report(values).items():
        if isinstance(value, tuple):
            for axis, item in zip(("x", "y"), value):
                out[f"field_{key}_{axis}"] = _plain(item)
        else:
            out[f"field_{key}"] = _plain(value)
    return out


def _plain(value):
    if isinstance(value, str):
        return value
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return int(value)
    return float(value)


FAMILY = GriddedFamily(
    name="gridded",
    code=6,
    summary="steady periodic field from a netCDF grid (velocity or stream function), "
            "interpolated as a divergence-free stream function",
    parameters=(
        Parameter("scale", "factor multiplying the whole gridded field", "1", default=1.0,
                  low=0.0),
        Parameter("closure_tolerance", "largest allowed relative mismatch between the first "
                  "and the closing (repeated) grid sample", "1", default=1e-6, low=0.0,
                  high=0.1),
    ),
)
