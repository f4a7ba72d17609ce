"""A flow family is one file: a family defined only here runs through the whole pipeline.

This module is itself the family module — ``FAMILY`` and the numba ``psi``/``velocity``/
``gradient`` below — and nothing else in the package names it: the registry, the compiled
dispatch, the kernel's fast tile loop, the reference solver and the analysis follow from
:func:`eddyhop.flows.register_family`.  Registration must precede the first simulation of a
process (the dispatch is generated once), so the pipeline runs in a fresh interpreter.

The family, "stripes": ψ = (U/k) cos(kx), so u = 0 and v = U sin(kx) — a shear flow along y.
Its effective diffusivity is exact (Taylor dispersion in a sinusoidal shear by homogenization;
Majda & Kramer 1999, Phys. Rep. 314, 237–574, from memory):
D_xx = κ, D_yy = κ + U²/(2κk²), D_xy = 0.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from eddyhop._jit import jit
from eddyhop.flows._trig import sincos
from eddyhop.flows.base import FlowFamily


@jit
def psi(x, y, t, p):
    _, c = sincos(p[1] * x)
    return p[0] / p[1] * c


@jit(inline="always")
def velocity(x, y, t, p, fast=False):
    s, _ = sincos(p[1] * x, fast)
    return 0.0, p[0] * s


@jit
def gradient(x, y, t, p):
    _, c = sincos(p[1] * x)
    return 0.0, 0.0, p[0] * p[1] * c, 0.0


FAMILY = FlowFamily(name="stripes", code=100,
                    summary="test-only shear along y, psi = (U/k) cos kx")

RUN = r"""
import importlib.util, json, sys
import numpy as np
spec = importlib.util.spec_from_file_location("stripes_family", sys.argv[1])
plugin = importlib.util.module_from_spec(spec)
spec.loader.exec_module(plugin)

import eddyhop
from eddyhop.flows import FAMILIES, register_family
register_family(plugin)

from eddyhop.flows.compiled import evaluate_velocity
from eddyhop.reference import effective_diffusivity
from eddyhop.study.spec import parse_study

study = parse_study({
    "title": "stripes", "flow": {"family": "stripes", "U": 1.0, "k": 1.0},
    "noise": {"peclet": 4.0}, "start": {"kind": "uniform"},
    "run": {"particles": 512, "dt": 0.05, "t_end": 40.0, "n_times": 16, "seed": 5,
            "step_check": False, "progress": False, "workers": 1}})
ds = eddyhop.simulate(study)
analysed = eddyhop.analyse(ds)
reference = effective_diffusivity(study)
x = np.linspace(0.0, 6.0, 7)
u, v = evaluate_velocity(FAMILIES["stripes"], study.flow.params, x, 0.3 * x)
print(json.dumps({
    "families": list(FAMILIES),
    "msd_finite": bool(np.isfinite(ds["msd"].values).all()),
    "msd_last": float(ds["msd"].isel(time=-1).mean()),
    "analysed_variables": len(analysed.data_vars), "input_variables": len(ds.data_vars),
    "d_xx": reference.d_xx, "d_yy": reference.d_yy, "d_xy": reference.d_xy,
    "kappa": study.noise.kappa,
    "u": u.tolist(), "v": v.tolist(), "v_exact": np.sin(x).tolist(),
}))
"""


@pytest.mark.slow  # a fresh process compiles the kernel for the new family (cached afterwards)
def test_a_family_defined_in_one_file_runs_through_the_pipeline():
    src = Path(__file__).resolve().parents[1] / "src"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(src), env.get("PYTHONPATH", "")])
    done = subprocess.run([sys.executable, "-c", RUN, __file__], capture_output=True,
                          text=True, env=env, timeout=1800, check=False)
    assert done.returncode == 0, done.stderr[-3000:]
    out = json.loads(done.stdout.strip().splitlines()[-1])
    assert out["families"][-1] == "stripes"
    # the compiled dispatch returns the module's own field
    assert out["u"] == [0.0] * 7
    assert out["v"] == pytest.approx(out["v_exact"], rel=1e-14, abs=1e-15)
    assert out["msd_finite"] and out["msd_last"] > 0.0
    assert out["analysed_variables"] > out["input_variables"]
    # the reference solver on the new family against the exact Taylor result (the field is a
    # single Fourier mode, so the spectral solve is exact to rounding: 1e-8 relative)
    kappa = out["kappa"]
    assert out["d_xx"] == pytest.approx(kappa, rel=1e-8)
    assert out["d_yy"] == pytest.approx(kappa + 1.0 / (2.0 * kappa), rel=1e-8)
    assert abs(out["d_xy"]) < 1e-10


def test_a_family_module_must_be_complete():
    import types

    from eddyhop.flows.registry import FamilyRegistrationError, register_family

    incomplete = types.SimpleNamespace(FAMILY=FAMILY, psi=psi)
    with pytest.raises(FamilyRegistrationError, match="velocity, gradient"):
        register_family(incomplete)
    clash = types.SimpleNamespace(FAMILY=FlowFamily(name="cellular", code=100, summary="x"),
                                  psi=psi, velocity=velocity, gradient=gradient)
    with pytest.raises(FamilyRegistrationError, match="clashes"):
        register_family(clash)
