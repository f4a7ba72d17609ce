"""Figures of eddyhop results: every function takes a Dataset and returns a matplotlib Figure.

No function calls ``pyplot`` or shows a window; save with :func:`save_figure` (PNG, PDF, SVG) or
``figure.savefig``.  A Dataset lacking a needed variable raises
:class:`eddyhop.errors.InputDataError` naming what is missing and which command makes it.
"""

from __future__ import annotations

from ._style import PALETTE, save_figure
from .aging import aging_figure
from .catalogue import available_figures, figures_for
from .msd import exponent_figure, msd_figure, starts_figure
from .residence import residence_figure
from .sweep import deff_peclet_figure, exponent_map_figure
from .trajectories import trajectories_figure
from .velocity import velocity_correlation_figure, velocity_spectrum_figure

__all__ = [
    "PALETTE",
    "aging_figure",
    "available_figures",
    "deff_peclet_figure",
    "exponent_figure",
    "exponent_map_figure",
    "figures_for",
    "msd_figure",
    "residence_figure",
    "save_figure",
    "starts_figure",
    "trajectories_figure",
    "velocity_correlation_figure",
    "velocity_spectrum_figure",
]
