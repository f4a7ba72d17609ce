"""Which figures a Dataset supports, by name; used by ``eddyhop plot`` and the HTML report.

Each entry is (figure function, variables it needs, one-line description).  A figure is
*available* when its variables are present; asking for one that is not raises
:class:`InputDataError` from the figure function itself, naming the command that makes them.
"""

from __future__ import annotations

from .aging import aging_figure
from .distributions import (
    collapse_figure,
    displacement_pdf_figure,
    kurtosis_figure,
    moment_spectrum_figure,
)
from .msd import exponent_figure, msd_figure, starts_figure
from .passage import passage_figure
from .residence import residence_figure
from .sweep import deff_peclet_figure, exponent_map_figure, sweep_dimension
from .trajectories import trajectories_figure
from .velocity import velocity_correlation_figure, velocity_spectrum_figure

FIGURES = {
    "msd": (msd_figure, ("msd",), "MSD on log-log axes with regimes and reference slopes"),
    "starts": (starts_figure, ("msd", "var_x", "var_y"),
               "start regions compared: MSD and apparent diffusivity"),
    "exponent": (exponent_figure, ("alpha",), "local exponent α(t) with the regimes"),
    "aging": (aging_figure, ("aged_msd",), "aged MSD against lag for each aging time"),
    "trajectories": (trajectories_figure, ("track_x", "track_y"),
                     "tracked tracers over ψ contours and separatrices"),
    "residence": (residence_figure, ("residence_count",),
                  "cell residence-time and flight-length distributions"),
    "displacement_pdf": (displacement_pdf_figure, ("displacement_pdf_x", "displacement_pdf_y"),
                         "densities of the scaled displacement against a Gaussian"),
    "kurtosis": (kurtosis_figure, ("kurtosis_x", "kurtosis_y"),
                 "kurtosis of the displacements against time"),
    "moment_spectrum": (moment_spectrum_figure, ("moment_exponent_over_order",),
                        "moment spectrum ν(q)/q against the order q"),
    "velocity": (velocity_correlation_figure, ("velocity_correlation_xx",),
                 "Lagrangian velocity autocorrelation and its running (Green-Kubo) integral"),
    "velocity_spectrum": (velocity_spectrum_figure, ("velocity_correlation_xx",),
                          "power spectrum of the Lagrangian velocity (Blackman-Tukey)"),
    "passage": (passage_figure, ("passage_time", "separatrix_distance"),
                "noise-free passage time against separatrix distance, with both divergence "
                "fits, and its distribution"),
    "deff_peclet": (deff_peclet_figure, (), "D_eff against Pe with low/high-Pe asymptotes"),
    "exponent_map": (exponent_map_figure, ("alpha",),
                     "local exponent α(t, Pe) as a map over a sweep"),
    "collapse": (collapse_figure, ("msd",),
                 "a sweep's MSD curves against the boundary-layer time"),
}

SWEEP_ONLY = ("deff_peclet", "exponent_map", "collapse")


def _has(ds, names):
    return all(n in ds.variables for n in names)


def available_figures(ds) -> list[str]:
    """Names of the figures this Dataset has the variables for, in a sensible reading order."""
    sweep = sweep_dimension(ds) is not None
    names = []
    for name, (_function, needs, _text) in FIGURES.items():
        if name in SWEEP_ONLY:
            if sweep and _has(ds, needs) and (name != "deff_peclet" or _has_deff(ds)):
                names.append(name)
            continue
        if sweep:
            continue  # per-run figures of a sweep are drawn from its single-run files
        if name == "starts" and "start" not in ds.dims:
            continue
        if _has(ds, needs):
            names.append(name)
    return names


def _has_deff(ds):
    from .sweep import deff_variables

    return bool(deff_variables(ds))


def figures_for(ds, names=None):
    """Yield ``(name, Figure)`` for ``names`` (default: every available figure)."""
    chosen = available_figures(ds) if names is None else list(names)
    for name in chosen:
        if name not in FIGURES:
            from ...errors import EddyhopError

            raise EddyhopError(f"unknown figure {name!r}; choose from: " + ", ".join(FIGURES))
        yield name, FIGURES[name][0](ds)
