"""One BLAS thread where BLAS threads only cost CPU.

NumPy's and SciPy's OpenBLAS keep worker threads that busy-wait between calls.  Two places
gain nothing from them and lose CPU to them: the regime segmentation repeated on every batch
resample (dozens of calls on matrices of a few hundred elements each), and a sweep's points
being analysed in the main thread while the pool's threads run kernels (measured, a 4-point
sweep at -j 2: 14.0–14.6 s wall and 27–28 s CPU with the default BLAS threads, 13.05 s and
24.7 s with one; the README example's regimes: 0.62 s of CPU for 0.31 s of wall time, 0.53 s
with one).
"""

from __future__ import annotations


def one_blas_thread():
    """Context manager: every loaded BLAS library (NumPy's and SciPy's, which is loaded
    first: a limit reaches only the libraries already loaded) on one thread, the previous
    counts restored on exit (threadpoolctl)."""
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")
