"""Streamed statistics of many measured tracks: time and peak memory.

Tracks are generated chunk by chunk (2-D random walks, unequal lengths, 2 % missing samples)
and handed to ``eddyhop.tracks.track_statistics`` as a TrackSource, so the whole set never
exists in memory: the peak resident memory measures the analysis itself, which keeps
O(tracks × (TAMSD lags + PDF times) + groups × lags) numbers, not O(tracks × samples).

    python benchmarks/bench_tracks.py                 # 10^5 tracks x 10^3 samples
    python benchmarks/bench_tracks.py 10000 1000 0 32 # smaller; velocity_lags 0 and 32
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from eddyhop.tracks import Track, TrackSource, track_statistics


def random_walks(tracks: int, samples: int, seed: int = 0) -> TrackSource:
    def chunks(size):
        for start in range(0, tracks, size):
            rng = np.random.default_rng([seed, start])
            out = []
            for i in range(start, min(start + size, tracks)):
                n = int(rng.integers(samples // 2, samples + 1))
                keep = rng.random(n) > 0.02
                keep[0] = True
                t = (int(rng.integers(0, samples // 10)) + np.arange(n))[keep] * 0.1
                steps = rng.standard_normal((2, n))
                out.append(Track(str(i), t, np.cumsum(steps[0])[keep],
                                 np.cumsum(steps[1])[keep], np.flatnonzero(keep)))
            yield out

    return TrackSource("<generated>", "arrays", None, None, False, chunks)


def main(tracks: int = 100_000, samples: int = 1000, *velocity: int) -> None:
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    for velocity_lags in velocity or (32,):
        start, cpu = time.perf_counter(), time.process_time()
        ds = track_statistics(random_walks(tracks, samples), velocity_lags=velocity_lags)
        elapsed, cpu = time.perf_counter() - start, time.process_time() - cpu
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"{tracks} tracks x up to {samples} samples, velocity_lags = {velocity_lags}: "
              f"{elapsed:.1f} s wall, {cpu:.1f} s CPU ({cpu / tracks * 1e6:.0f} us CPU per "
              f"track, generating the tracks twice included); peak RSS "
              f"{peak:.0f} MB (before: {before:.0f} MB); dense tracks would be "
              f"{tracks * samples * 2 * 8 / 2**20:.0f} MB; {ds.sizes['time']} lags")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
