# ---
# jupyter:
#   jupytext:
#     formats: py:percent
#     text_representation:
#       extension: .py
#       format_name: percent
#   kernelspec:
#     display_name: Python 3
#     language: python
#     name: python3
# ---

# %% [markdown]
# # Where a tracer starts matters: eddy centres, separatrices and uniform release
#
# A cellular flow ψ = (U/k) sin kx sin ky at Pe = U/(κk) = 100.  Three ensembles start
# (a) at eddy centres, (b) in a thin band around the separatrices (the cell edges) and
# (c) uniformly.  We compare how they spread, read the regimes and crossover times from the
# analysis, and check that all three reach the same long-time effective diffusivity,
# close to the boundary-layer prediction D_eff ≈ C κ Pe^{1/2}, C = 2ν ≈ 1.0654 (Soward 1987,
# J. Fluid Mech. 180, 267, as quoted by Haynes & Vanneste 2014, J. Fluid Mech. 745, 351 —
# value from memory; the constant is `eddyhop.presentation.plots.asymptotes.CELLULAR_HIGH_PE`).
#
# Research estimate from a model flow: not for the design of real equipment; use validated
# methods and the applicable codes for that.
#
# Set the environment variable `EDDYHOP_QUICK=1` for a small ensemble (the test suite does):
# the numbers are then noisy, but every cell runs in a few seconds.

# %%
# %matplotlib inline
import os
import warnings

import numpy as np
from IPython.display import display

import eddyhop
from eddyhop.analysis import analyse
from eddyhop.presentation import plots
from eddyhop.presentation.plots.asymptotes import CELLULAR_HIGH_PE

QUICK = os.environ.get("EDDYHOP_QUICK") == "1"
PARTICLES = 256 if QUICK else 4000
T_END = 100.0 if QUICK else 600.0
PECLET = 100.0

# %% [markdown]
# ## The study, written inline
# The same text could live in a `.toml` file and be run with `eddyhop run`.

# %%
study_text = f"""
schema_version = 1
title = "Start positions in the cellular flow, Pe = {PECLET:g}"

[flow]
family = "cellular"
U = 1.0
k = 1.0

[noise]
peclet = {PECLET}

[[start]]
kind = "centre"
label = "centres"
radius = 0.15

[[start]]
kind = "separatrix"
label = "separatrices"
delta = 0.03

[[start]]
kind = "uniform"
label = "uniform"

[run]
particles = {PARTICLES}
dt = 0.01
t_end = {T_END}
n_times = 60
integrator = "strang_rk2"
seed = 2024
tracked = 4
track_samples = 400
progress = false
"""
study = eddyhop.parse_study_text(study_text, "start_positions (notebook)")
ds = eddyhop.simulate(study)
print(ds["msd"].sizes, "particles per start:", int(ds["n_particles"].values[0]))

# %% [markdown]
# ## MSD and apparent diffusivity by start region
# The separatrix release spreads quickly from the start; the centre release first diffuses
# inside its eddy and only speeds up once tracers reach the cell edge.

# %%
display(plots.starts_figure(ds))

# %% [markdown]
# ## Analysis: local exponent, regimes, crossovers, D_eff

# %%
with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # a quick run may be flagged as too short; see below
    analysed = analyse(ds)
display(plots.exponent_figure(analysed))

# %%
for start in analysed["start"].values:
    part = analysed.sel(start=start)
    labels = [str(v) for v in part["regime_label"].values if str(v)]
    spans = [f"{label} [{a:.3g}, {b:.3g}]" for label, a, b in
             zip(labels, part["regime_start"].values, part["regime_end"].values)]
    print(f"{start:>13}: " + " → ".join(spans))

# %%
kappa = analysed.attrs["kappa"]
predicted = CELLULAR_HIGH_PE * np.sqrt(PECLET)
print(f"high-Pe prediction D_eff/κ ≈ {predicted:.2f}")
for start in analysed["start"].values:
    part = analysed.sel(start=start)
    low, high = float(part["D_eff_lower"]) / kappa, float(part["D_eff_upper"]) / kappa
    converged = {1: "yes", 2: "undetermined (too noisy to tell)"}.get(
        int(part["deff_converged"]), "no (run longer)")
    print(f"{start:>13}: D_eff/κ = {float(part['D_eff']) / kappa:6.2f}  "
          f"95% CI [{low:.2f}, {high:.2f}]  diffusive regime reached: {converged}")

# %% [markdown]
# ## Tracked tracers over the stream function
# Vermillion lines are the separatrices ψ = 0; dots mark eddy centres, crosses the
# hyperbolic corners.

# %%
display(plots.trajectories_figure(analysed))
