"""Measured trajectories: read CSV / CF trajectory files, analyse them like a run, write a
run's tracked particles as a CF trajectory file.

* :func:`read_tracks` — a :class:`~eddyhop.tracks.readers.TrackSource` for a file;
* :func:`tracks_from_arrays` — the same for arrays in memory (id, t, x, y[, u, v]);
* :func:`track_statistics` — streamed statistics → a Dataset in the layout of a run;
* :func:`analyse_tracks` — statistics plus :func:`eddyhop.analysis.analyse`;
* :func:`write_trajectories` — a run's ``track_x``/``track_y`` → CF contiguous ragged file.
"""

from __future__ import annotations

import numpy as np

from .cf_out import trajectories_dataset, write_trajectories
from .readers import Track, TrackFileError, TrackSource, open_tracks
from .statistics import ERROR_METHOD, TrackOptionError, track_statistics

read_tracks = open_tracks


def tracks_from_arrays(ids, t, x, y, u=None, v=None, *, length_unit=None, time_unit=None,
                       name="<arrays>") -> TrackSource:
    """A :class:`TrackSource` over rows (id, t, x, y[, u, v]) held in memory, in row order
    (rows of one track need not be adjacent; they keep their order)."""
    ids = np.asarray(ids).astype(str)
    columns = [np.asarray(c, dtype=np.float64) for c in (t, x, y)]
    velocity = None if u is None else (np.asarray(u, dtype=np.float64),
                                       np.asarray(v, dtype=np.float64))
    unique, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")
    by_track = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[by_track], np.arange(unique.size + 1))

    def chunks(size):
        batch = []
        for k in order:
            rows = by_track[bounds[k]:bounds[k + 1]]
            batch.append(Track(str(unique[k]), columns[0][rows], columns[1][rows],
                               columns[2][rows], rows,
                               None if velocity is None else velocity[0][rows],
                               None if velocity is None else velocity[1][rows]))
            if len(batch) >= size:
                yield batch
                batch = []
        if batch:
            yield batch

    return TrackSource(name, "arrays", length_unit, time_unit, velocity is not None, chunks)


def analyse_tracks(path_or_source, *, analysis_options=None, **options):
    """Statistics of the tracks (``options``: :func:`track_statistics`) analysed by
    :func:`eddyhop.analysis.analyse` (``analysis_options``); returns the Dataset."""
    from ..analysis import analyse

    source = path_or_source if isinstance(path_or_source, TrackSource) else \
        open_tracks(path_or_source)
    ds = track_statistics(source, **options)
    return analyse(ds, **(analysis_options or {}))


__all__ = [
    "ERROR_METHOD",
    "Track",
    "TrackFileError",
    "TrackOptionError",
    "TrackSource",
    "analyse_tracks",
    "open_tracks",
    "read_tracks",
    "track_statistics",
    "tracks_from_arrays",
    "trajectories_dataset",
    "write_trajectories",
]
