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
# # A Péclet sweep with aging in the cellular flow
#
# We sweep Pe = U/(κk) over two decades, merge the points into one Dataset with `peclet` as a
# dimension, and look at (1) D_eff/κ against Pe with its low- and high-Pe asymptotes,
# (2) the local exponent α(t, Pe) as a map, and (3) aging: the MSD measured from a later
# reference time t_a, ⟨|X(t_a + τ) − X(t_a)|²⟩, compared with the MSD from release.
#
# Low Pe: D/κ ≈ 1 + Pe²/8 (leading order of the homogenization cell problem, see
# `eddyhop.presentation.plots.asymptotes`); high Pe: D/κ ≈ 2ν Pe^{1/2}, 2ν ≈ 1.0654 (Soward 1987,
# J. Fluid Mech. 180, 267, as quoted by Haynes & Vanneste 2014, J. Fluid Mech. 745, 351 —
# value from memory; `eddyhop.presentation.plots.asymptotes.CELLULAR_HIGH_PE`).
#
# Research estimate from a model flow: not for the design of real equipment.
# `EDDYHOP_QUICK=1` runs a small ensemble (as the test suite does).

# %%
# %matplotlib inline
import os
import tempfile
import warnings

import numpy as np
from IPython.display import display

import eddyhop
from eddyhop.analysis.verdicts import flag_meaning
from eddyhop.presentation import plots
from eddyhop.presentation.text import scaling_lines
from eddyhop.sweeps import run_sweep

QUICK = os.environ.get("EDDYHOP_QUICK") == "1"
PARTICLES = 192 if QUICK else 3000
T_END = 60.0 if QUICK else 500.0
PECLETS = [1.0, 10.0, 100.0] if QUICK else [0.5, 1.0, 3.0, 10.0, 30.0, 100.0, 300.0]

# %%
study_text = f"""
schema_version = 1
title = "Cellular flow: Péclet sweep with aging"

[flow]
family = "cellular"

[noise]
peclet = 10.0

[start]
kind = "uniform"
label = "uniform"

[run]
particles = {PARTICLES}
dt = 0.01
t_end = {T_END}
n_times = 50
integrator = "strang_rk2"
seed = 77
progress = false

[aging]
times = [1.0, 10.0, 40.0]
lags = 20

[sweep]
"noise.peclet" = {PECLETS}
"""
study = eddyhop.parse_study_text(study_text, "peclet_sweep_aging (notebook)")
folder = tempfile.mkdtemp(prefix="eddyhop-sweep-")
with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # step-size and short-run notes are kept in the file
    report = run_sweep(study, folder, backend="serial", progress=False)
merged = eddyhop.open_result(os.path.join(folder, "sweep.nc"))
print(merged["peclet"].values, "→", sorted(merged.sizes.items()))

# %% [markdown]
# ## D_eff against Pe
# Error bars are the analysis's 95 % confidence intervals (jackknife over particle batches).

# %%
display(plots.deff_peclet_figure(merged))

# %%
ratio = merged["D_eff"] / merged["kappa"]
for pe, value, flag in zip(merged["peclet"].values, ratio.values,
                           merged["deff_converged"].values):
    verdict = flag_meaning(merged["deff_converged"], flag)  # the flag's own spelling
    print(f"Pe = {pe:7.3g}: D_eff/κ = {value:7.3f}   deff_converged: {verdict}")
# the fit with its verdict and how many of its points are undetermined (1/2 expected at
# large Pe)
print("\n".join(scaling_lines(merged)))

# %% [markdown]
# ## α(t, Pe)
# Orange: faster than diffusive (α > 1), purple: slower (trapping in eddies).

# %%
display(plots.exponent_map_figure(merged))

# %% [markdown]
# ## Aging at one Péclet number
# Select one point of the sweep; at large Pe the aged MSD differs from the MSD from release,
# because tracers released uniformly first redistribute between eddy cores and edges.

# %%
one = merged.sel(peclet=max(PECLETS))
display(plots.aging_figure(one))
ratio = (one["aged_msd"] / np.interp(one["lag"].values, one["time"].values,
                                     one["msd"].values))
print("aged MSD / MSD at the same lag, per t_a (median over lags):",
      np.round(np.nanmedian(ratio.values, axis=1), 3))
