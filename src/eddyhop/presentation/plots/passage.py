"""Noise-free passage times across a period cell (``eddyhop.engine.passage.passage_times``).

Left: passage time T against the distance d of the entry from the separatrix, on a log axis in
d, with the two divergence forms of ``eddyhop.analysis.passage.passage_divergence`` drawn when
the Dataset holds them (solid when accepted, dashed and marked REJECTED otherwise — a rejected
form is never drawn as if it described the data).  Right: the flux-weighted distribution of T.
"""

from __future__ import annotations

import numpy as np

from ._style import PALETTE, caption, new_figure, provenance_line, require, title

PASSAGE_HINT = "compute them with eddyhop.engine.passage.passage_times(study, entries, ...)"
_FORM_WORDS = {0: "accepted", 1: "REJECTED", 2: "undetermined"}


def _value(ds, name):
    return float(ds[name].values) if name in ds.variables else float("nan")


def _verdict(ds, name):
    return _FORM_WORDS.get(int(ds[name].values), "undetermined") if name in ds.variables \
        else "undetermined"


def passage_figure(ds):
    """Figure of passage time against separatrix distance and its distribution."""
    require(ds, ("passage_time", "separatrix_distance"), "passage", PASSAGE_HINT)
    fig, (left, right) = new_figure(ncols=2, width=10.0, height=4.2)
    times = np.asarray(ds["passage_time"].values, dtype=float)
    distance = np.asarray(ds["separatrix_distance"].values, dtype=float)
    crossed = np.isfinite(times) & np.isfinite(distance) & (distance > 0)
    left.plot(distance[crossed], times[crossed], ls="none", marker="o", ms=4,
              color=PALETTE[0], label="passage times")
    if crossed.any() and "passage_log_slope" in ds.variables:
        low = _value(ds, "passage_fit_min_distance")
        high = _value(ds, "passage_fit_max_distance")
        if np.isfinite(low) and np.isfinite(high) and high > low:
            d = np.geomspace(low, high, 60)
            slope, offset = _value(ds, "passage_log_slope"), _value(ds, "passage_log_offset")
            verdict = _verdict(ds, "passage_log_verdict")
            left.plot(d, offset + slope * np.log(1.0 / d), color=PALETTE[1],
                      ls="-" if verdict == "accepted" else "--",
                      label=f"T = a + b ln(1/d), b = {slope:.4g} ({verdict})")
            beta = _value(ds, "passage_power_exponent")
            log_a = _value(ds, "passage_power_offset")
            verdict = _verdict(ds, "passage_power_verdict")
            left.plot(d, np.exp(log_a) * d ** -beta, color=PALETTE[2],
                      ls="-" if verdict == "accepted" else "--",
                      label=f"T = A d^(-β), β = {beta:.3g} ({verdict})")
    left.set_xscale("log")
    left.set_xlabel("distance d from the separatrix (model length units)")
    left.set_ylabel("passage time T (model time units)")
    left.legend(loc="upper right", frameon=False, fontsize="small")
    if "passage_time_pdf" in ds.variables and "passage_time_bin_edges" in ds.variables:
        edges = np.asarray(ds["passage_time_bin_edges"].values, dtype=float)
        pdf = np.asarray(ds["passage_time_pdf"].values, dtype=float)
        right.stairs(pdf, edges, color=PALETTE[0], fill=False)
        right.set_yscale("log")
    right.set_xlabel("passage time T (model time units)")
    right.set_ylabel("flux-weighted density (per model time unit)")
    form = int(ds["passage_divergence_form"].values) \
        if "passage_divergence_form" in ds.variables else None
    verdict = {0: "logarithmic (hyperbolic point)", 1: "power law (degenerate point or wall)",
               2: "UNDETERMINED"}.get(form, "not fitted (eddyhop.analysis.passage)")
    fig.suptitle(title(f"Passage times across one period cell — divergence at the "
                       f"separatrix: {verdict}"))
    caption(fig, provenance_line(ds))
    return fig


__all__ = ["passage_figure"]
