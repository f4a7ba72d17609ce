"""Stage 3 — the engine: from a flow, a noise model and start points to streamed moments.

Owns the counter-based random numbers (``rng``), the diffusivity models and Péclet conventions
(``noise``), the output/aging/tracking times as step-indexed events (``schedule``), the step
rules (``integrators``), the particle-major numba kernel (``kernel``), the coupled 2·dt step
check (``stepcheck``) and the runner that owns chunks, blocks, threads, seeds and blow-up
reports (``runner``).  Kernels are pure numba: no I/O, no xarray.

May import: core (``errors``, ``_jit``), ``flows`` and ``starts``; never the study schema (the
runner reads a validated study duck-typed), results, analysis or anything downstream.
"""
