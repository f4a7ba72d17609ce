"""Stage 2 — start regions: where an ensemble begins, sampled uniformly by area.

Owns the start-region registry and samplers (``regions``), the flow geometry the ψ-based
kinds are built on — eddy centres, corners, separatrix levels (``geometry``) — and the
fluid-only, wall and wake regions of obstacle lattices (``obstacles``, registered on import).

May import: ``eddyhop.flows`` and the core modules (``errors``, ``_jit``); never the engine,
the study schema or anything downstream.  The names below are the public face of the stage.
"""

from __future__ import annotations

from . import obstacles as _obstacles  # noqa: F401  (registers the obstacle kinds)
from .geometry import FlowGeometry
from .regions import (
    RegionKind,
    StartRegion,
    area_fraction,
    flow_geometry,
    get_region_kind,
    kind_names,
    parse_start,
    parse_starts,
    period_cell,
    read_number,
    region_mask,
    register_region_kind,
    reject_unknown,
    sample_starts,
    unregister_region_kind,
)


def __getattr__(name):
    # ``KINDS`` is a live view (kinds registered later by other modules count); any other name
    # of the old single-module ``eddyhop.starts`` is still found in ``regions``.
    from . import regions

    if name == "KINDS":
        return regions.kind_names()
    try:
        return getattr(regions, name)
    except AttributeError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None


__all__ = ["FlowGeometry", "RegionKind", "StartRegion", "area_fraction", "flow_geometry",
           "get_region_kind", "kind_names", "parse_start", "parse_starts", "period_cell",
           "read_number", "region_mask", "register_region_kind", "reject_unknown",
           "sample_starts", "unregister_region_kind"]
