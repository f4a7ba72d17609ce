"""Same study + seed → identical numbers, whatever the chunking, workers or backend."""

from __future__ import annotations

import numpy as np

import eddyhop
from tests.conftest import make_study


def _float_vars(ds):
    return {name: ds[name].values for name in ds.data_vars if ds[name].dtype.kind == "f"}


def test_one_chunk_seven_chunks_and_two_workers_are_bit_identical():
    study = make_study(
        flow={"family": "cats_eye", "U": 1.0, "k": 1.0, "epsilon": 0.3, "_replace": True},
        start=[{"kind": "uniform"}, {"kind": "box", "label": "corner", "x_min": 0.0,
                                     "x_max": 0.3, "y_min": 0.0, "y_max": 0.3}],
        run={"particles": 1000, "tracked": 5},
        aging={"times": [0.5], "lags": 5},
        hopping={"enabled": True},
        velocity_correlation={"reference_times": [0.0, 0.5], "lag_max": 1.0, "lag_step": 0.1},
    )
    from eddyhop.engine.runner import _chunks, block_size_for

    block = block_size_for(study.run.particles, study.run.batches)
    seven_chunks = -(-study.run.particles // 7 // block) * block  # a whole number of blocks
    assert len(_chunks(study.run.particles, seven_chunks, block)) == 7
    one = eddyhop.simulate(study, chunk=10**6, workers=1, progress=False)
    seven = eddyhop.simulate(study, chunk=seven_chunks, workers=1, progress=False)
    two = eddyhop.simulate(study, chunk=300, workers=2, progress=False)
    reference = _float_vars(one)
    assert reference
    for other in (seven, two):
        for name, values in _float_vars(other).items():
            np.testing.assert_array_equal(values, reference[name], err_msg=name)


def test_seed_changes_the_numbers():
    a = eddyhop.simulate(make_study(run={"seed": 1}), progress=False)
    b = eddyhop.simulate(make_study(run={"seed": 2}), progress=False)
    assert not np.array_equal(a["msd"].values, b["msd"].values)


def test_provenance_is_attached():
    study = make_study()
    ds = eddyhop.simulate(study, progress=False)
    for key in ("eddyhop_version", "study_resolved", "seed", "integrator", "dt", "peclet",
                "peclet_convention", "Conventions", "history", "source", "title"):
        assert key in ds.attrs, key
    assert ds.attrs["peclet"] == 10.0
    assert ds.attrs["peclet_convention"] == "wavenumber"
    assert ds["msd"].attrs["units"] == "1" and "mean-squared" in ds["msd"].attrs["long_name"]


def test_fold_of_block_runs_adds_in_block_order():
    """The runner's fold of a chunk (one view per run of blocks of the same batch) makes the
    same additions in the same order as adding block by block: bit-identical sums, also for
    values of very different magnitude where any reassociation would show."""
    from eddyhop.engine.runner import _add_in_order, _runs

    rng = np.random.default_rng(18)
    for _ in range(50):
        n_blocks, n_batches = int(rng.integers(1, 60)), int(rng.integers(1, 10))
        batch_of_block = (np.arange(n_blocks) * n_batches) // n_blocks
        shape = (int(rng.integers(1, 5)), int(rng.integers(1, 12)))
        scale = 10.0 ** rng.integers(-8, 9, (n_blocks, *shape))
        blocks = rng.standard_normal((n_blocks, *shape)) * scale
        lo = int(rng.integers(0, n_blocks))
        hi = int(rng.integers(lo + 1, n_blocks + 1))
        by_block = rng.standard_normal((n_batches, *shape))
        by_run = by_block.copy()
        for b in range(lo, hi):
            by_block[batch_of_block[b]] += blocks[b]
        for first, end, batch in _runs(batch_of_block[lo:hi]):
            _add_in_order(by_run, batch, blocks[lo:hi][first:end])
        assert np.array_equal(by_block.view(np.int64), by_run.view(np.int64))
