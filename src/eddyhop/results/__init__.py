"""Stage 5 — results: engine sums → a labelled ``xarray.Dataset`` → files.

Owns building the Dataset with CF-style attributes (``dataset``), provenance attributes,
atomic netCDF writes and reading results back (``io``), and the output-path rules every
command applies before computing (``outputs``).

May import: core, ``flows``, ``starts``, ``engine`` and ``study``; never analysis, reference,
sweeps, presentation or the CLI.
"""
