"""Start regions for obstacle lattices (flow family ``obstacles``), registered into ``starts``.

Every region lies in the fluid (outside the cylinders) and is sampled uniformly by area:

=========  ========================================================================================
kind       region (in one period cell, repeated periodically)
=========  ========================================================================================
uniform    all of the fluid; area fraction 1 − φ
wall       the fluid layer 0 ≤ d < ``thickness`` next to every cylinder, d the distance to the
           nearest surface (default thickness a/10, below half the narrowest gap)
wake       the downstream stagnation zones: the part of that layer, ``depth`` deep (default a),
           within ``half_angle`` degrees (default 45) of the mean-flow direction seen from each
           cylinder centre — where the flow past a cylinder slows to its rear stagnation point;
           needs a moving flow (U > 0)
box        the generic box, restricted to the fluid
point      the generic point, which must lie in the fluid
level_band the generic ψ band, restricted to the fluid
=========  ========================================================================================

The kinds built on eddy centres, saddles and separatrices (``centre``, ``hyperbolic``,
``separatrix``, ``jet``) are refused for obstacle flows with a clear message.  A region with no
fluid in it is an error.  Exact area fractions for ``uniform``, ``wall`` and ``wake``; the
restricted generic kinds are counted on the starts module's midpoint grid.

Importing this module registers the kinds; the ``eddyhop.starts`` package imports it.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import StudyError
from ..flows.obstacles import lattice_of
from .regions import RegionKind, get_region_kind, read_number, register_region_kind, reject_unknown

FAMILY_NAME = "obstacles"
REFUSED = ("centre", "hyperbolic", "separatrix", "jet")
RESTRICTED = ("box", "point", "level_band")


def _lattice(geo):
    return lattice_of(geo.values)


def _fluid(geo, x, y):
    return _lattice(geo).distance_to_solid(x, y) >= 0.0


def _centre_boxes(geo, reach):
    centres = _lattice(geo).centres
    return np.column_stack([centres[:, 0] - reach, centres[:, 0] + reach,
                            centres[:, 1] - reach, centres[:, 1] + reach])


def _polar(geo, x, y):
    """(r, θ) of points about their nearest cylinder centre (any periodic image)."""
    lattice = _lattice(geo)
    lx, ly = lattice.cell
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    best_r = np.full(np.broadcast(x, y).shape, np.inf)
    best_t = np.zeros(best_r.shape)
    for cx, cy in lattice.centres:
        dx = x - cx
        dy = y - cy
        dx = dx - lx * np.round(dx / lx)
        dy = dy - ly * np.round(dy / ly)
        r = np.hypot(dx, dy)
        closer = r < best_r
        best_r = np.where(closer, r, best_r)
        best_t = np.where(closer, np.arctan2(dy, dx), best_t)
    return best_r, best_t


# ---- uniform ------------------------------------------------------------------------------------
def _parse_uniform(table, geo, where):
    reject_unknown(table, (), "uniform", where)
    return {}


# ---- wall ---------------------------------------------------------------------------------------
def _parse_wall(table, geo, where):
    reject_unknown(table, ("thickness",), "wall", where)
    lattice = _lattice(geo)
    limit = 0.5 * lattice.gap
    thickness = read_number(table, "thickness", where, default=min(0.1 * lattice.radius,
                                                                   0.5 * limit),
                            low=0.0, high=limit, low_open=True, high_open=True)
    return {"thickness": thickness}


def _mask_wall(params, geo, x, y):
    distance = _lattice(geo).distance_to_solid(x, y)
    return (distance >= 0.0) & (distance < params["thickness"])


def _area_wall(params, geo):
    lattice = _lattice(geo)
    a = lattice.radius
    outer = a + params["thickness"]
    return lattice.n_cylinders * math.pi * (outer * outer - a * a) / geo.cell_area


# ---- wake ---------------------------------------------------------------------------------------
def _parse_wake(table, geo, where):
    reject_unknown(table, ("depth", "half_angle"), "wake", where)
    if geo.values["U"] <= 0.0:
        raise StudyError(f"{where}: start kind 'wake' needs a moving flow (flow.U > 0): with "
                         "U = 0 there is no downstream side and no stagnation zone")
    lattice = _lattice(geo)
    limit = 0.5 * lattice.spacing - lattice.radius
    depth = read_number(table, "depth", where, default=min(lattice.radius, limit), low=0.0,
                        high=limit, low_open=True)
    half_angle = read_number(table, "half_angle", where, default=45.0, low=0.0, high=180.0,
                             low_open=True)
    return {"depth": depth, "half_angle": half_angle}


def _mask_wake(params, geo, x, y):
    a = _lattice(geo).radius
    r, theta = _polar(geo, x, y)
    downstream = math.radians(geo.values["angle"])
    off = np.abs(np.angle(np.exp(1j * (theta - downstream))))
    return (r >= a) & (r < a + params["depth"]) & (off <= math.radians(params["half_angle"]))


def _area_wake(params, geo):
    lattice = _lattice(geo)
    a = lattice.radius
    outer = a + params["depth"]
    return (lattice.n_cylinders * math.radians(params["half_angle"]) * (outer * outer - a * a)
            / geo.cell_area)


# ---- generic kinds, restricted to the fluid or refused ---------------------------------------
def _restricted(name):
    generic = get_region_kind(name, "")  # no family is named "": this is the generic kind

    def parse(table, geo, where):
        params = generic.parse(table, geo, where)
        if name == "point":
            if not _fluid(geo, params["x"], params["y"]):
                raise StudyError(f"{where}: the start point ({params['x']:g}, {params['y']:g}) "
                                 "lies inside a cylinder; choose a point in the fluid")
            return params
        fraction = geo.grid_fraction(lambda x, y: mask(params, geo, x, y))
        if fraction <= 0.0:
            raise StudyError(f"{where}: start region {name!r} {params} has no fluid in it (it "
                             "lies inside the cylinders)")
        return params

    def mask(params, geo, x, y):
        inside = np.asarray(generic.mask(params, geo, x, y), dtype=bool)
        if name == "point":
            return inside
        return inside & _fluid(geo, x, y)

    return RegionKind(name, generic.summary + " (fluid only)", parse, mask,
                      proposal=generic.proposal,
                      area=generic.area if name == "point" else None,
                      sample=generic.sample if name == "point" else None,
                      family=FAMILY_NAME)


def _refused(name):
    def parse(table, geo, where):
        raise StudyError(f"{where}: start kind {name!r} is not defined for obstacle lattices "
                         "(their flow has no eddy centres or separatrix network); use uniform, "
                         "wall, wake, box, point or level_band")

    return RegionKind(name, "not defined for obstacle lattices", parse,
                      lambda params, geo, x, y: np.zeros(np.shape(x), dtype=bool),
                      family=FAMILY_NAME)


KINDS = (
    RegionKind("uniform", "all of the fluid between the cylinders", _parse_uniform,
               lambda params, geo, x, y: _fluid(geo, x, y),
               area=lambda params, geo: 1.0 - _lattice(geo).solid_fraction,
               family=FAMILY_NAME),
    RegionKind("wall", "fluid layer of given thickness (default a/10) next to the cylinders",
               _parse_wall, _mask_wall,
               proposal=lambda params, geo: _centre_boxes(
                   geo, _lattice(geo).radius + params["thickness"]),
               area=_area_wall, family=FAMILY_NAME),
    RegionKind("wake", "downstream stagnation zones: layer of given depth (default a) within "
               "half_angle (default 45 deg) of the mean-flow direction behind each cylinder",
               _parse_wake, _mask_wake,
               proposal=lambda params, geo: _centre_boxes(
                   geo, _lattice(geo).radius + params["depth"]),
               area=_area_wake, family=FAMILY_NAME),
    *(_restricted(name) for name in RESTRICTED),
    *(_refused(name) for name in REFUSED),
)

for _kind in KINDS:
    register_region_kind(_kind, replace=True)
