"""engine.callee: helpers compiled only into their callers' machine code."""

from __future__ import annotations

import numba
import numpy as np
import pytest

from eddyhop.engine.callee import LinkedLibrary, callee


@callee
def _scaled_sum(values, scale):
    total = 0.0
    for v in values:
        total += v * scale
    return total


@callee
def _shifted(n, by):
    return n + by


@numba.njit
def _uses_both(values, n):
    # a literal and a variable argument of the same type: one compilation of _shifted
    return _scaled_sum(values, 2.0) + _shifted(n, 3) + _shifted(n, n)


def test_callee_computes_what_the_python_function_computes():
    values = np.array([0.5, 1.25, -3.0])
    expected = _scaled_sum.py_func(values, 2.0) + (2 + 3) + (2 + 2)
    assert _uses_both(values, 2) == expected
    # called from Python: an ordinary dispatcher of the same function
    assert _scaled_sum(values, 2.0) == _scaled_sum.py_func(values, 2.0)
    assert _shifted(4, 5) == 9


def test_callee_is_compiled_once_per_plain_signature_without_machine_code():
    _uses_both(np.ones(2), 1)
    assert list(_shifted._compiled) == [(numba.types.int64, numba.types.int64)]
    for compiled in (_shifted, _scaled_sum):
        [cres] = compiled._compiled.values()
        assert isinstance(cres.library, LinkedLibrary)
        assert cres.entry_point is None  # no CPython wrapper, nothing callable of its own
        with pytest.raises(RuntimeError, match="only into its callers"):
            cres.library.get_pointer_to_function(cres.fndesc.llvm_func_name)


def test_kernel_helpers_are_callees():
    from eddyhop.engine import kernel, stepcheck
    from eddyhop.engine.callee import Callee

    for helper in (kernel._record_event, kernel._add_moments, kernel._add_powers,
                   kernel._add_row, kernel._record_velocity, kernel._check_hop,
                   kernel._mark_hops, kernel._start_hops, kernel._tile_length,
                   kernel._log_bin, kernel.normal_pairs_per_step,
                   stepcheck._add):
        assert isinstance(helper, Callee), helper
