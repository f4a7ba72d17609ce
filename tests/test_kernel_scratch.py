"""What the runner hands the kernel so that the kernel compiles only what a study uses: the
scratch arrays (fresh, aligned, None for unused work), the integer moment orders and the
moment plan."""

from __future__ import annotations

import inspect

import numpy as np
from numba import types

import eddyhop
from eddyhop.engine.kernel import (
    HOP_ROWS,
    PLAN_POW,
    SCRATCH_ALIGNMENT,
    TILE,
    moment_plan,
    product_orders,
    run_particles,
    tile_scratch,
)
from tests.conftest import make_study


def test_product_orders_and_the_moment_plan():
    # integer orders 1 … 8 are running products, the others pow
    assert product_orders([1.0, 2.5, 3.0, 8.0, 9.0, 0.5]).tolist() == [1, 0, 3, 8, 0, 0]
    # the power pass is the highest product order rounded up to an even count
    assert moment_plan(product_orders([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])) == 6
    assert moment_plan(product_orders([1.0])) == 2
    assert moment_plan(product_orders([3.0])) == 4
    assert moment_plan(product_orders([2.0, 0.5, 8.0])) == 8 + PLAN_POW
    assert moment_plan(product_orders([0.5, 2.5])) == PLAN_POW
    assert moment_plan(product_orders([])) == 0


def test_tile_scratch_is_fresh_aligned_and_none_for_unused_work():
    plain = tile_scratch(0, False, 0)
    full = tile_scratch(3, True, 2)
    assert plain["hop"] is None and plain["vref"] is None and plain["tile_uv"] is None
    assert full["hop"].shape == (HOP_ROWS, TILE)
    assert full["ref"].shape == (TILE, 3, 2) and plain["ref"].shape == (TILE, 1, 2)
    assert full["vref"].shape == (2, 2, TILE) and full["tile_uv"].shape == (2, TILE)
    assert full["words"].dtype == np.uint64
    for array in full.values():
        assert array.ctypes.data % SCRATCH_ALIGNMENT == 0
        assert array.flags.c_contiguous and array.flags.writeable
    for name in ("z", "moment_rows", "hop"):  # read before they are written
        assert not full[name].any()
    # one set per call: concurrent chunks never share a buffer
    assert not any(np.shares_memory(plain[n], full[n]) for n in plain if plain[n] is not None)
    # the arrays of one set are carved from one buffer: none overlaps another
    carved = [a for a in full.values() if a is not None]
    assert not any(np.shares_memory(a, b) for i, a in enumerate(carved) for b in carved[i + 1:])


def test_step_check_scratch_is_aligned_zeroed_and_disjoint():
    from eddyhop.engine.stepcheck import check_scratch

    scratch = list(check_scratch().values())
    assert all(a.ctypes.data % SCRATCH_ALIGNMENT == 0 and not a.any() for a in scratch)
    assert not any(np.shares_memory(a, b) for i, a in enumerate(scratch) for b in scratch[i + 1:])


def _argument_type(signature, name):
    return signature[list(inspect.signature(run_particles.py_func).parameters).index(name)]


def test_a_study_without_hops_or_velocities_compiles_neither():
    eddyhop.simulate(make_study(run={"particles": 64, "t_end": 0.2, "n_times": 3,
                                     "step_check": False}),
                     progress=False)
    signatures = run_particles.signatures
    assert any(_argument_type(s, "hop") == types.none and _argument_type(s, "vref") == types.none
               for s in signatures)
