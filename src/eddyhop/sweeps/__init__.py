"""Parameter sweeps: ``[sweep]`` schema, resumable execution, merging and scaling summaries.

One module per responsibility: ``axes`` (schema → points), ``manifest`` (the sweep folder),
``backends`` (serial, local processes, Dask), ``execute`` (the resumable loop), ``merge``
(points → one Dataset) and ``scaling`` (exponents across a Péclet sweep).  The public names are
re-exported by :mod:`eddyhop.sweep`.
"""
