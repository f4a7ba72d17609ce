"""Which second moment carries the transport: the raw MSD or the centred one (variance).

:func:`transport_curve` is the one place the analyses (local exponent, regimes, crossovers,
D_eff) get the curve whose growth they interpret, with its delete-one-batch replicates.
"""

from __future__ import annotations

import numpy as np

from ._stats import batch_replicates

# component → the MSD variable it is built from
_SOURCES = {"total": "msd", "x": "msd_x", "y": "msd_y"}


def transport_curve(part, component: str = "total"):
    """(values (T,), delete-one-batch replicates (B, T) or None, name of the moment used)
    of one start region's second moment of the displacement along ``component``
    ("total", "x" or "y")."""
    source = _SOURCES[component]
    values = np.asarray(part[source].values, dtype=np.float64)
    return values, batch_replicates(part, source), source
