"""Stage 4 — the study: what a study file may say, checked once, and what it will cost.

Owns the study schema and its validation (``spec``: TOML → frozen dataclasses; every error
names the field, the value and the allowed range), the ``[sweep]`` table of a study
(``sweep_table``: axes → points, each point a plain study) and the cost estimate made before
anything is allocated (``cost``).

May import: core (``errors``, ``_jit``), ``flows``, ``starts`` and ``engine`` (the vocabulary it
validates: families, start kinds, noise models, the output schedule); never results, analysis
or anything downstream.  The schema sits above the parts it configures.
"""
