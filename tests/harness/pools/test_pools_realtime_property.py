"""The real-time law of the pools, as a property (hypothesis).

Law: the pool's draws, weights, fallback flags, counts and gaps at origin ``o`` do not change
when any truth published after ``o`` (or not published at all) is perturbed - its value, its
release date (to another date after ``o`` or NaT) - nor when any forecast made after ``o`` is.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.pools import combine

NAT = np.datetime64("NaT")


@st.composite
def cases(draw):
    """Small random pools: members, origins, truths, release dates (some NaT), a scheme."""
    o = draw(st.integers(2, 8))
    v, h, m = draw(st.integers(1, 2)), draw(st.integers(1, 2)), draw(st.integers(2, 3))
    d = draw(st.sampled_from([5, 16]))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    gaps = rng.integers(1, 60, o)
    origins = np.datetime64("2012-01-01") + np.cumsum(gaps)
    draws = rng.normal(rng.normal(0, 1, (m, 1, 1, 1, 1)), rng.uniform(0.5, 2, (m, 1, 1, 1, 1)),
                       (m, o, v, h, d)).astype(np.float32)
    if draw(st.booleans()):  # a failed task somewhere
        draws[rng.integers(m), rng.integers(o)] = np.nan
    truth = rng.standard_normal((o, v, h))
    truth[rng.random((o, v, h)) < 0.1] = np.nan
    release = origins[:, None, None] + rng.integers(0, 200, (o, v, h))
    release = np.where(rng.random((o, v, h)) < 0.2, NAT, release).astype("datetime64[D]")
    scheme = draw(st.sampled_from(["equal", "inverse_score", "optimal"]))
    window = draw(st.sampled_from([None, 2, 4]))
    k = draw(st.integers(1, 2 if window == 2 else 3))
    at = draw(st.integers(0, o - 1))
    return dict(draws=draws, origins=origins, truth=truth, truth_release=release, scheme=scheme,
                window=window, min_scored=k), at, int(rng.integers(2**31))


def _perturb(args, at, seed):
    """New values for everything unknown at origin ``at``: later truths and later forecasts."""
    rng = np.random.default_rng(seed)
    new = dict(args)
    o = args["origins"][at]
    rel = args["truth_release"]
    later = np.isnat(rel) | (rel > o)
    truth = args["truth"].copy()
    truth[later] = np.where(rng.random(later.sum()) < 0.2, np.nan, rng.normal(0, 5, later.sum()))
    moved = rel.copy()
    moved[later] = np.where(rng.random(later.sum()) < 0.3, NAT,
                            o + rng.integers(1, 400, later.sum())).astype("datetime64[D]")
    draws = args["draws"].copy()
    draws[:, at + 1:] = rng.normal(3, 3, draws[:, at + 1:].shape)
    new.update(truth=truth, truth_release=moved, draws=draws)
    return new


@settings(max_examples=60, deadline=None)
@given(cases())
def test_nothing_published_after_an_origin_moves_the_pool_at_that_origin(case):
    """Perturbing later truths and later forecasts leaves the pool at the origin bit-for-bit equal."""
    args, at, seed = case
    a = combine(**args, seed=5, warn=False)
    b = combine(**_perturb(args, at, seed), seed=5, warn=False)
    for name in ("draws", "weights", "fallback", "n_scored", "gap"):
        np.testing.assert_array_equal(getattr(a, name)[at], getattr(b, name)[at], err_msg=name)


def test_the_property_is_not_vacuous_a_truth_known_at_the_origin_moves_the_weights():
    """Perturbing a truth published by the origin does change the weights there (the test can fail)."""
    rng = np.random.default_rng(0)
    o = 6
    origins = np.datetime64("2012-01-01") + 30 * np.arange(o)
    draws = (np.array([0.0, 1.0])[:, None, None, None, None]
             + rng.standard_normal((2, o, 1, 1, 50))).astype(np.float32)
    truth = rng.standard_normal((o, 1, 1))
    release = (origins + 1)[:, None, None]
    args = dict(draws=draws, origins=origins, truth=truth, truth_release=release,
                scheme="optimal", min_scored=1)
    a = combine(**args, warn=False)
    truth2 = truth.copy()
    truth2[2] += 3.0  # published on day 61, known at the last origin (day 150)
    b = combine(**{**args, "truth": truth2}, warn=False)
    assert not np.array_equal(a.weights[-1], b.weights[-1])
    np.testing.assert_array_equal(a.weights[:3], b.weights[:3])  # not yet known at origins 0-2
