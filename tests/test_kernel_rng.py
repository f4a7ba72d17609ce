"""The normal generator behind the kernels: ziggurat tables, exact N(0, 1) in bulk and tails,
the tile path against the one-at-a-time path, and independence of slots and steps."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from eddyhop.engine import rng
from eddyhop.engine.rng import (
    fill_normals,
    normal_draws,
    philox_block,
    split_seed,
    ziggurat_tables,
)

SEED = 97531


@pytest.fixture(scope="module")
def draws():
    """2×10⁶ draws: 2000 particles × 250 steps × 4 slots."""
    return normal_draws(SEED, np.arange(2000), np.arange(250))


def _density(x):
    return np.exp(-0.5 * x * x)


def test_the_stored_r_is_the_bisection_s_and_gives_the_same_tables():
    """The kernels' tables are built from rng.R_256 at import (no bisection per process):
    it must be exactly what the bisection finds, and the tables bit for bit the same."""
    solved = ziggurat_tables()
    assert solved[0] == rng.R_256
    for stored, fresh in zip((rng._R, rng._AREA, rng._ZX, rng._ZF, rng._ZK, rng._ZW), solved):
        assert np.array_equal(stored, fresh)


def test_ziggurat_layers_have_equal_area():
    """Marsaglia & Tsang (2000), J. Stat. Softw. 5(8), §2: layer i ≥ 1 is the rectangle
    [0, x_i] × [f(x_i), f(x_{i+1})] of area v; the base layer r·f(r) + ∫_r^∞ f = v; the top
    layer closes at f(0) = 1.  Checked to 1e-12 relative (double-precision solution of r)."""
    r, v, x, f, k, w = ziggurat_tables()
    n = k.size
    assert n == 256 and 3.6 < r < 3.7
    tail = math.sqrt(math.pi / 2) * math.erfc(r / math.sqrt(2))
    assert r * _density(r) + tail == pytest.approx(v, rel=1e-14)
    areas = x[1:n] * (f[2:n + 1] - f[1:n])
    np.testing.assert_allclose(areas, v, rtol=1e-12)
    assert x[0] * f[1] == pytest.approx(v, rel=1e-14)  # base layer's virtual width v/f(r)
    # integer thresholds floor(2^53 x_{i+1}/x_i); the top layer is never accepted outright
    assert k[-1] == 0
    np.testing.assert_allclose(k.astype(float), np.floor(x[1:] / x[:n] * 2.0**53), atol=1.0)
    np.testing.assert_allclose(w, x[:n] * 2.0**-53, rtol=0)


def test_bulk_distribution_is_standard_normal(draws):
    """KS and a 400-bin χ² test against scipy.stats.norm (p > 1e-3: a correct generator fails
    with probability 1e-3 at a random seed; the seed is fixed, so the test is deterministic);
    mean, variance, skewness and excess kurtosis within 5 standard errors (1/√n, √(2/n),
    √(6/n), √(24/n) for normal samples)."""
    z = draws.ravel()
    n = z.size
    assert stats.kstest(z, "norm").pvalue > 1e-3
    edges = stats.norm.ppf(np.linspace(0.0, 1.0, 401))
    observed = np.histogram(z, bins=edges)[0]
    assert stats.chisquare(observed).pvalue > 1e-3
    assert abs(z.mean()) < 5 / math.sqrt(n)
    assert abs(z.var() - 1.0) < 5 * math.sqrt(2 / n)
    assert abs(stats.skew(z)) < 5 * math.sqrt(6 / n)
    assert abs(stats.kurtosis(z)) < 5 * math.sqrt(24 / n)


def test_tail_beyond_the_base_layer_is_exact():
    """Draws with |z| > r come from Marsaglia's (1964) tail method.  On 4.8×10⁷ draws (about
    12 000 beyond r): their share is 2Φ(−r) within 5 binomial standard errors; given |z| > r,
    the excess s = |z| − r has the normal-tail law P(s > u) = Φ(−r−u)/Φ(−r) (KS p > 1e-3) and
    the mean φ(r)/Φ(−r) − r (inverse Mills ratio) within 5 standard errors — an exponential
    tail without the rejection step would sit about 7 standard errors off."""
    r = rng._R
    k0, k1 = split_seed(SEED + 7)
    count = 10**6
    words = np.empty((4, count), dtype=np.uint64)
    z = np.empty((4, count))
    tails = []
    n = 0
    for step in range(12):
        fill_normals(k0, k1, 0, count, step, 2, words, z)
        a = np.abs(z)
        tails.append(a[a > r] - r)
        n += z.size
    excess = np.concatenate(tails)
    p_tail = 2 * stats.norm.sf(r)
    assert abs(excess.size - n * p_tail) < 5 * math.sqrt(n * p_tail * (1 - p_tail))
    assert stats.kstest(excess, lambda u: 1.0 - stats.norm.sf(r + u) / stats.norm.sf(r)
                        ).pvalue > 1e-3
    mean = stats.norm.pdf(r) / stats.norm.sf(r) - r
    assert abs(excess.mean() - mean) < 5 * excess.std() / math.sqrt(excess.size)


def test_share_of_draws_needing_the_rejection_step():
    """A word is accepted at once with probability mean_i K_i / 2^53 (the layers are equally
    likely); the observed share needing the wedge or tail test matches within 5 binomial SE."""
    _, _, _, _, k, _ = ziggurat_tables()
    expected = 1.0 - np.mean(k.astype(float) / 2.0**53)
    assert 0.005 < expected < 0.03
    k0, k1 = split_seed(SEED)
    count, tiles = 128, 400
    words = np.empty((4, count), dtype=np.uint64)
    z = np.empty((4, count))
    rejected = 0
    for step in range(tiles):
        fill_normals(k0, k1, 0, count, step, 2, words, z)
        layer = (words & np.uint64(0xFF)).astype(np.int64)
        rejected += np.count_nonzero((words >> np.uint64(11)) >= k[layer])
    n = 4 * count * tiles
    assert abs(rejected - n * expected) < 5 * math.sqrt(n * expected * (1 - expected))


@pytest.mark.parametrize("n_pairs", [1, 2])
def test_tile_path_equals_one_at_a_time(n_pairs):
    """fill_normals (vectorised tile) = normals4 (scalar) bit for bit, including particle and
    step indices beyond 2^32 (both counter words in use) and ragged tile widths."""
    seed = 2**62 + 12345
    k0, k1 = split_seed(seed)
    for first, count, step in [(0, 1, 0), (5, 37, 3), (2**33 + 7, 128, 2**34 + 5),
                               (2**40 * 3 + 1, 64, 999)]:
        words = np.empty((4, count), dtype=np.uint64)
        z = np.full((4, count), np.nan)
        fill_normals(k0, k1, first, count, step, n_pairs, words, z)
        expected = normal_draws(seed, np.arange(first, first + count), [step])[:, 0, :]
        np.testing.assert_array_equal(z[:2 * n_pairs], expected.T[:2 * n_pairs])


def test_slots_steps_and_seeds_are_uncorrelated(draws):
    """Correlations between the four slots of a step, between consecutive steps of a particle
    and between two seeds: |r| < 5/√n each (5 standard errors of a correlation at r = 0)."""
    z = draws
    bound = 5 / math.sqrt(z[:, :, 0].size)
    for a, b in [(0, 1), (0, 2), (1, 3), (2, 3)]:
        assert abs(np.corrcoef(z[:, :, a].ravel(), z[:, :, b].ravel())[0, 1]) < bound
    lagged = np.corrcoef(z[:, :-1, 0].ravel(), z[:, 1:, 0].ravel())[0, 1]
    assert abs(lagged) < 5 / math.sqrt(z[:, :-1, 0].size)
    other = normal_draws(SEED + 1, np.arange(2000), np.arange(250))
    assert abs(np.corrcoef(z.ravel(), other.ravel())[0, 1]) < 5 / math.sqrt(z.size)


def test_every_rejection_path_of_the_tile_equals_one_at_a_time():
    """The tile path finishes the refused words after its vectorised passes, in its own
    order; bit for bit it must give ``normals4``'s values on every path of the rejection
    step: wedge accepted, wedge refused with the next word accepted at once, wedge refused
    twice, and the base layer's tail (the tile's branch-free first retry settles the first
    two and hands the last two to ``rng._rejection_normal``).  1.3×10⁵ draws (4037
    particles, a ragged last group, 8 steps, 4 slots); the paths are counted from the words
    themselves and must each occur (a fixed seed: the counts are deterministic)."""
    seed = 424242
    k0, k1 = split_seed(seed)
    count = 4037
    steps = [0, 1, 2, 3, 17, 2**32 + 1, 2**34 + 5, 99]
    _, _, _, f, k, w = ziggurat_tables()
    paths = {"wedge accepted": 0, "next word accepted": 0, "refused twice": 0, "tail": 0}
    for step in steps:
        words = np.empty((4, count), dtype=np.uint64)
        z = np.full((4, count), np.nan)
        fill_normals(k0, k1, 0, count, step, 2, words, z)
        expected = normal_draws(seed, np.arange(count), [step])[:, 0, :]
        np.testing.assert_array_equal(z, expected.T)
        for slot, g in zip(*np.nonzero((words >> np.uint64(11)) >= k[words & np.uint64(0xFF)])):
            word = int(words[slot, g])
            layer = word & 0xFF
            if layer == 0:
                paths["tail"] += 1
                continue
            # the extra block of the first attempt: tag 4 + slot (rng._rejection_normal)
            r0, r1, r2, r3 = philox_block(
                [step & 0xFFFFFFFF, (step >> 32) | ((4 + int(slot)) << 16), int(g), 0],
                [int(k0), int(k1)])
            value = (word >> 11) * w[layer]
            height = f[layer] + ((((r2 << 32) | r3) >> 11) + 0.5) * 2.0**-53 * (
                f[layer + 1] - f[layer])
            extra_a = (r0 << 32) | r1
            if height < math.exp(-0.5 * value * value):
                paths["wedge accepted"] += 1
            elif (extra_a >> 11) < int(k[extra_a & 0xFF]):
                paths["next word accepted"] += 1
            else:
                paths["refused twice"] += 1
    assert min(paths.values()) > 0, paths


def test_split_seed_gives_the_key_words_of_the_stream_definition():
    """Key = the 64-bit seed split into its low and high 32-bit words (rng module docstring);
    plain Python now (no compile on a cold start), it keeps the values the compiled one gave."""
    assert split_seed(0) == (0, 0)
    assert split_seed(0x0123456789ABCDEF) == (0x89ABCDEF, 0x01234567)
    assert split_seed(2**63 - 1) == (0xFFFFFFFF, 0x7FFFFFFF)
    assert split_seed(-1) == (0xFFFFFFFF, 0xFFFFFFFF)  # as np.uint64(-1) wrapped
