"""Full garbage collections are postponed while numba compiles and while a command runs, and
the collector's thresholds come back afterwards (eddyhop._jit.rare_full_collections)."""

import gc
import threading

import pytest

from eddyhop._jit import FULL_COLLECTION_SPACING, jit, rare_full_collections


def test_thresholds_raised_inside_and_restored_after_nesting_and_errors():
    before = gc.get_threshold()
    with rare_full_collections():
        inside = gc.get_threshold()
        with rare_full_collections():
            assert gc.get_threshold() == inside
        assert gc.get_threshold() == inside  # the inner exit keeps the outer's setting
    assert inside[:2] == before[:2]  # young generations untouched
    assert inside[2] >= FULL_COLLECTION_SPACING
    assert gc.isenabled()
    assert gc.get_threshold() == before
    with pytest.raises(RuntimeError), rare_full_collections():
        raise RuntimeError("a compile that fails")
    assert gc.get_threshold() == before


def test_overlapping_threads_restore_once_the_last_one_leaves():
    before = gc.get_threshold()
    entered, release = threading.Barrier(3), threading.Event()

    def body():
        with rare_full_collections():
            entered.wait()
            release.wait()

    threads = [threading.Thread(target=body) for _ in range(2)]
    for t in threads:
        t.start()
    entered.wait()
    assert gc.get_threshold()[2] >= FULL_COLLECTION_SPACING
    release.set()
    for t in threads:
        t.join()
    assert gc.get_threshold() == before


def test_numba_compiles_with_rare_full_collections(monkeypatch):
    from numba.core.dispatcher import Dispatcher

    seen = []
    numba_compile = Dispatcher.compile

    def observed_compile(self, sig):  # numba's own compile, as the package's wrapper calls it
        seen.append(gc.get_threshold())
        return numba_compile(self, sig)

    monkeypatch.setattr(Dispatcher, "compile", observed_compile)

    @jit(cache=False)
    def twice(x):
        return 2 * x

    before = gc.get_threshold()
    assert twice(3) == 6
    assert seen and all(t[2] >= FULL_COLLECTION_SPACING for t in seen)
    assert gc.get_threshold() == before
