"""``_jit.jit(inline_in_llvm=True)`` functions are inlined by LLVM into ``llvm_inlines`` kernels
(the kernel's tile stepper, ``_jit._install_llvm_inlining``): no call
is left in the kernel, a plain caller keeps its call, and the numbers are the same."""

from __future__ import annotations

import math

import numpy as np

from eddyhop._jit import _mangled_prefix, jit


def _spread_rows(a, b, out):
    # long enough that LLVM's own inliner keeps it a call from a plain caller
    for i in range(out.size):
        out[i] = math.sqrt(a[i] * a[i] + 1.0) / (b[i] + 2.0)
    for i in range(out.size):
        out[i] = out[i] * math.exp(-a[i]) + math.log(b[i] + 3.0)
    for i in range(out.size):
        out[i] = out[i] - math.atan2(a[i], b[i] + 1.0) * math.cos(out[i])
    for i in range(out.size):
        out[i] = out[i] + math.sinh(out[i] * 0.1) / (1.0 + a[i] * b[i] * b[i])


_spread = jit(inline_in_llvm=True, cache=False)(_spread_rows)


@jit(llvm_inlines=True, cache=False)
def _inlining_kernel(a, b, out):
    _spread(a, b, out)
    _spread(b, a, out)


@jit(cache=False)
def _plain_kernel(a, b, out):  # the same body, an ordinary caller
    _spread(a, b, out)
    _spread(b, a, out)


def _calls(dispatcher, prefix: str) -> int:
    dispatcher = dispatcher.get_dispatcher()
    text = dispatcher.inspect_llvm(dispatcher.signatures[0])
    return sum(1 for line in text.splitlines() if " call " in line and prefix in line)


def test_inline_in_llvm_function_is_inlined_into_an_llvm_inlines_kernel_only():
    rng = np.random.default_rng(5)
    a, b = rng.random(37), rng.random(37)
    inlined, plain, python = np.zeros(37), np.zeros(37), np.zeros(37)
    _inlining_kernel(a, b, inlined)
    _plain_kernel(a, b, plain)
    _spread_rows(a, b, python)
    _spread_rows(b, a, python)
    prefix = _mangled_prefix(f"{__name__}._spread_rows")
    assert _calls(_inlining_kernel, prefix) == 0
    assert _calls(_plain_kernel, prefix) >= 1
    # inlining moves no floating-point operation: bit for bit the plain caller's numbers
    assert inlined.tobytes() == plain.tobytes()
    np.testing.assert_allclose(inlined, python, rtol=1e-12)
