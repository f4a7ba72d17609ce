"""Kernels specialised per study (family, scheme, noise model as compile-time constants) give
the numbers of the run-time-dispatch kernel they replaced, bit for bit."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

import eddyhop
from eddyhop.flows.compiled import CodeType, CompiledCode, _generate
from tests.conftest import make_study

# sha256 (first 16 hex digits) over the names and bytes of every float variable of the
# Dataset, recorded from the run-time-dispatch kernels (one switch over every family and
# scheme) on the development machine (x86-64, AVX-512) just before kernels were specialised.
# Same compiled arithmetic, no FMA contraction, same random numbers: must be equal, not close.
CASES = {
    "cellular_euler_maruyama": ({}, "a084332b42ca5e8d"),
    "cats_eye_strang_hopping_velocity": (dict(
        flow={"family": "cats_eye", "U": 1.0, "k": 1.0, "epsilon": 0.3, "_replace": True},
        run={"particles": 300, "integrator": "strang_rk2", "tracked": 3},
        aging={"times": [0.5], "lags": 4}, hopping={"enabled": True},
        velocity_correlation={"reference_times": [0.0, 0.5], "lag_max": 1.0, "lag_step": 0.1}),
        "2f0dcf03ebe51bd0"),
    "cellular_milstein_modulated": (dict(
        noise={"peclet": 10.0, "model": "modulated", "modulation": 0.5},
        run={"integrator": "milstein"}), "63ee12a50f8f8805"),
    "obstacles_euler_maruyama": (dict(
        flow={"family": "obstacles", "lattice": "hexagonal", "solid_fraction": 0.3, "k": 1.0,
              "U": 1.0, "_replace": True}), "1168a7402d8de802"),
    "oscillating_rk4": (dict(
        flow={"family": "oscillating_cellular", "_replace": True},
        noise={"kappa": 0.0, "_replace": True}, run={"integrator": "rk4"}), "8546b9e31759204a"),
    "cellular_projected_rk45": (dict(
        noise={"kappa": 0.0, "_replace": True}, run={"integrator": "projected_rk45"}),
        "2efcde819730bafe"),
}
# each case compiles its own kernel (10-20 s of CPU): two in the quick suite, all when slow
QUICK = ("cellular_euler_maruyama", "cats_eye_strang_hopping_velocity")


def _digest(ds) -> str:
    h = hashlib.sha256()
    for name in sorted(ds.data_vars):
        if ds[name].dtype.kind == "f":
            h.update(name.encode())
            h.update(np.ascontiguousarray(ds[name].values).tobytes())
    return h.hexdigest()[:16]


@pytest.mark.parametrize("name", [
    pytest.param(name, marks=() if name in QUICK else pytest.mark.slow) for name in CASES])
def test_specialised_kernel_reproduces_the_dispatching_kernel(name):
    sections, expected = CASES[name]
    ds = eddyhop.simulate(make_study(**sections), workers=1, progress=False)
    assert _digest(ds) == expected


def test_a_constant_code_compiles_one_family_without_a_test():
    from eddyhop.flows import registry

    codes = [code for code, _ in registry.registered_modules()]
    assert len(codes) > 1
    one = _generate("velocity", CodeType(codes[0]))
    every = _generate("velocity")
    assert one.__code__.co_names.count(f"family_{codes[0]}") == 1
    assert not any(f"family_{code}" in one.__code__.co_names for code in codes[1:])
    assert all(f"family_{code}" in every.__code__.co_names for code in codes)
    # an unregistered constant code gets the NaN fallback, never another family's field
    missing = _generate("velocity", CodeType(max(codes) + 1000))
    assert not any(name.startswith("family_") for name in missing.__code__.co_names)


def test_compiled_code_is_its_own_numba_type_per_value():
    from numba import typeof

    assert typeof(CompiledCode(3)) == CodeType(3)
    assert typeof(CompiledCode(3)) != typeof(CompiledCode(4))
