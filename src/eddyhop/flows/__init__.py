"""Flow families: registry by name.  See ``base.py`` for the shared conventions."""

from __future__ import annotations

from ..errors import StudyError
from .base import FlowFamily, Parameter
from .cats_eye import FAMILY as _CATS_EYE
from .cellular import FAMILY as _CELLULAR
from .drifting_cellular import FAMILY as _DRIFTING
from .fourier import FAMILY as _FOURIER
from .gridded import FAMILY as _GRIDDED
from .obstacles import FAMILY as _OBSTACLES
from .oscillating_cellular import FAMILY as _OSCILLATING
from .shear import FAMILY as _SHEAR

FAMILIES: dict[str, FlowFamily] = {
    f.name: f for f in (_CELLULAR, _CATS_EYE, _SHEAR, _DRIFTING, _OSCILLATING, _FOURIER,
                        _GRIDDED, _OBSTACLES)
}


def get_family(name: str) -> FlowFamily:
    """The family registered under ``name``; an unknown name lists the choices."""
    if not isinstance(name, str):
        raise StudyError(f"flow.family = {name!r} must be a text naming one flow family; "
                         "choose one of: " + ", ".join(FAMILIES))
    try:
        return FAMILIES[name]
    except KeyError:
        raise StudyError(
            f"flow.family = {name!r} is not a known flow family; choose one of: "
            + ", ".join(FAMILIES)
        ) from None


__all__ = ["FAMILIES", "FlowFamily", "Parameter", "get_family"]
