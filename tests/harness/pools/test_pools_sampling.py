"""Stratified mixture sampling: counts per member, determinism, no zero-weight member, right law."""

from __future__ import annotations

import numpy as np
from scipy import stats

from harness.pools import mixture_draws, origin_seed

ORIGINS = np.array(["2021-03-31", "2021-06-30"], dtype="datetime64[D]")


def _members(d=1000, seed=0):
    rng = np.random.default_rng(seed)
    # member m's draws are m * 10 + noise: the member of each pooled draw is readable
    base = np.arange(3)[:, None, None, None, None] * 10.0
    return base + rng.standard_normal((3, 2, 2, 2, d))


def test_each_member_supplies_floor_or_ceil_of_its_share():
    """Systematic resampling gives floor(D w) or ceil(D w) draws per member (Kitagawa 1996)."""
    x = _members()
    rng = np.random.default_rng(1)
    w = rng.dirichlet(np.ones(3), size=(2, 2, 2))
    out = mixture_draws(x, w, ORIGINS, seed=4)
    member = np.rint(out / 10).astype(int)
    for idx in np.ndindex(2, 2, 2):
        counts = np.bincount(member[idx], minlength=3)
        target = 1000 * w[idx]
        assert np.all(counts >= np.floor(target) - 1e-9) and np.all(counts <= np.ceil(target) + 1e-9)


def test_pooled_draw_d_is_member_draw_d_and_zero_weight_is_never_used():
    """Each pooled draw is its member's draw at the same position; weight-0 members never appear."""
    x = _members()
    w = np.broadcast_to([0.0, 0.3, 0.7], (2, 2, 2, 3)).copy()
    out = mixture_draws(x, w, ORIGINS, seed=2)
    member = np.rint(out / 10).astype(int)
    assert not (member == 0).any()
    picked = np.take_along_axis(x, member[None], axis=0)[0]
    np.testing.assert_array_equal(out, picked)


def test_equal_weights_keep_whole_paths_and_seed_determinism():
    """With weights equal across cells, draw d comes from one member in every cell; same seed, same draws."""
    x = _members()
    w = np.full((2, 2, 2, 3), 1 / 3)
    out = mixture_draws(x, w, ORIGINS, seed=7)
    member = np.rint(out / 10).astype(int)
    assert (member == member[:, :1, :1]).all()
    np.testing.assert_array_equal(out, mixture_draws(x, w, ORIGINS, seed=7))
    assert not np.array_equal(out, mixture_draws(x, w, ORIGINS, seed=8))


def test_an_origin_stream_does_not_depend_on_the_other_origins():
    """The draws at an origin are the same when it is pooled alone (seed from (seed, date) only)."""
    x = _members()
    w = np.random.default_rng(0).dirichlet(np.ones(3), size=(2, 2, 2))
    both = mixture_draws(x, w, ORIGINS, seed=3)
    alone = mixture_draws(x[:, 1:], w[1:], ORIGINS[1:], seed=3)
    np.testing.assert_array_equal(both[1:], alone)
    ss = origin_seed(np.random.SeedSequence(3), ORIGINS[1])
    assert ss.spawn_key[-1] == 737971  # 2021-06-30 as a proleptic Gregorian ordinal


def test_pooled_draws_follow_the_mixture_law():
    """A KS test against the mixture CDF sum_m w_m Phi((x - mu_m)/s_m) does not reject (scipy)."""
    rng = np.random.default_rng(11)
    d = 20_000
    mus, sds, w = np.array([-1.0, 2.0]), np.array([0.5, 1.5]), np.array([0.3, 0.7])
    x = (mus[:, None] + sds[:, None] * rng.standard_normal((2, d)))[:, None, None, None, :]
    out = mixture_draws(x, w[None, None, None, :], ORIGINS[:1], seed=5).ravel()

    def cdf(v):
        return (w[:, None] * stats.norm.cdf((v[None] - mus[:, None]) / sds[:, None])).sum(axis=0)

    assert stats.kstest(out, cdf).pvalue > 1e-3
