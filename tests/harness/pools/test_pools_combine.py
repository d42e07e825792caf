"""combine(): the pools' contract (simplex, fallback, failed members, bad input) and their value."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import integrate, stats

from harness.pools import (
    PoolError,
    PoolWarning,
    combine,
    mean_log_pool,
    member_density,
    member_scores,
)
from harness.scores import DEFAULT_DENSITY_FLOOR, crps_sorted, log_score, silverman_bandwidth

NAT = np.datetime64("NaT")


def _case(o=30, v=2, h=2, m=3, d=200, seed=0, lag=1):
    """Members N(bias_m, scale_m^2) for N(0, 1) truths released ``lag`` days after each weekly origin."""
    rng = np.random.default_rng(seed)
    origins = np.datetime64("2015-01-05") + 7 * np.arange(o)
    bias = np.linspace(0.0, 1.0, m)[:, None, None, None, None]
    scale = np.linspace(1.0, 1.5, m)[:, None, None, None, None]
    draws = (bias + scale * rng.standard_normal((m, o, v, h, d))).astype(np.float32)
    truth = rng.standard_normal((o, v, h))
    release = np.broadcast_to((origins + lag)[:, None, None], (o, v, h)).copy()
    return draws, origins, truth, release


@pytest.mark.parametrize("scheme", ["equal", "inverse_score", "optimal"])
def test_weights_lie_on_the_simplex_and_fallback_is_equal_weights(scheme):
    """Weights are >= 0 and sum to 1 in every cell; flagged cells have equal weights and n < K."""
    draws, origins, truth, release = _case()
    res = combine(draws, origins, truth, release, scheme=scheme, window=10, min_scored=4, seed=1)
    assert res.draws.shape == (30, 2, 2, 200) and res.draws.dtype == np.float32
    assert res.weights.shape == (30, 2, 2, 3)
    assert (res.weights >= 0).all()
    np.testing.assert_allclose(res.weights.sum(axis=-1), 1.0, atol=1e-12)
    assert res.n_scored.max() == 10 and res.n_scored[0].max() == 0
    if scheme == "equal":
        assert not res.fallback.any()
    else:
        np.testing.assert_array_equal(res.fallback, res.n_scored < 4)
        np.testing.assert_allclose(res.weights[res.fallback], 1 / 3)
        assert not np.allclose(res.weights[~res.fallback], 1 / 3)
    assert np.isfinite(res.draws).all()


def test_inverse_crps_weights_use_the_last_w_scored_forecasts():
    """At each origin the weights equal 1/mean CRPS over the W latest scored forecasts (by hand)."""
    draws, origins, truth, release = _case(o=12, v=1, h=1, m=2, d=300)
    release[3] = NAT  # the forecast of origin 3 is never scored
    res = combine(draws, origins, truth, release, scheme="inverse_score", window=4, min_scored=2)
    crps = np.stack([crps_sorted(truth[:, 0, 0].astype(np.float32), draws[i, :, 0, 0])
                     for i in range(2)])
    for o in range(12):
        known = [p for p in range(o) if p != 3][-4:]
        if len(known) < 2:
            assert res.fallback[o, 0, 0]
            continue
        inv = 1 / crps[:, known].mean(axis=1)
        np.testing.assert_allclose(res.weights[o, 0, 0], inv / inv.sum(), rtol=1e-10)


def test_member_density_is_the_kde_of_the_log_score_as_in_scipy():
    """member_density equals scipy's gaussian_kde at the truth with Silverman's bandwidth (Silverman 1986)."""
    draws, origins, truth, release = _case(o=3, v=1, h=1, m=2, d=500)
    dens = member_density(draws, truth)
    for i in range(2):
        for o in range(3):
            x = draws[i, o, 0, 0].astype(np.float64)
            h = silverman_bandwidth(x[None])[0]
            kde = stats.gaussian_kde(x, bw_method=h / x.std(ddof=1))
            ref = max(kde(truth[o, 0, 0].astype(np.float32).astype(np.float64))[0],
                      DEFAULT_DENSITY_FLOOR)
            np.testing.assert_allclose(dens[i, o, 0, 0], ref, rtol=1e-6)


def test_a_vertex_of_the_objective_is_minus_the_members_mean_log_score():
    """At w = e_m the pool's average log density is minus member m's mean log score, floor included."""
    draws, origins, truth, release = _case(o=20, v=1, h=1, m=2, d=300)
    truth[5] = 40.0  # far outside every member: both scores are capped by the density floor
    truth = truth.astype(np.float32).astype(np.float64)
    f = member_density(draws, truth)[:, :, 0, 0][None]  # (1, M, W)
    for i in range(2):
        w = np.eye(2)[i][None]
        ls = log_score(truth[:, 0, 0], draws[i, :, 0, 0])
        assert ls[5] == pytest.approx(-np.log(DEFAULT_DENSITY_FLOOR))
        np.testing.assert_allclose(mean_log_pool(f, np.ones((1, 20), bool), w), -ls.mean(),
                                   rtol=1e-12)


def _expected_log_score(w_a):
    """E[log p_w(Y)], Y ~ N(0, 1), pool w N(0, 0.6^2) + (1 - w) N(1.2, 0.6^2), by quadrature (scipy)."""
    def integrand(y):
        return stats.norm.pdf(y) * np.log(w_a * stats.norm.pdf(y, 0.0, 0.6)
                                          + (1 - w_a) * stats.norm.pdf(y, 1.2, 0.6))
    return integrate.quad(integrand, -12, 12)[0]


def test_optimal_pool_beats_the_best_member_and_equal_weights_out_of_sample():
    """Two members, one biased: the real-time optimal pool has the lowest mean log score.

    Setting (after Hall & Mitchell 2007 and Geweke & Amisano 2011, who show that an optimal
    pool can beat every member when all are misspecified): truths N(0, 1); member A N(0, 0.6^2)
    (unbiased, too sharp), member B N(1.2, 0.6^2) (biased). By quadrature the expected log score
    is maximised near w_A = 0.83, above both members and equal weights. One seeded simulation
    of 800 weekly origins (first 50 a burn-in): each claim must hold by more than 3 paired
    standard errors of the mean score difference - a single sample, not a significance study.
    """
    from scipy import optimize

    best = optimize.minimize_scalar(lambda w: -_expected_log_score(w), bounds=(0, 1),
                                    method="bounded", options={"xatol": 1e-4})
    assert 0.75 < best.x < 0.9
    assert -best.fun > max(_expected_log_score(1.0), _expected_log_score(0.5)) + 0.05
    rng = np.random.default_rng(2024)
    o, d = 800, 1000
    origins = np.datetime64("1990-01-01") + 7 * np.arange(o)
    draws = np.empty((2, o, 1, 1, d), dtype=np.float32)
    draws[0] = rng.normal(0.0, 0.6, (o, 1, 1, d))
    draws[1] = rng.normal(1.2, 0.6, (o, 1, 1, d))
    truth = rng.standard_normal((o, 1, 1))
    release = (origins + 1)[:, None, None]
    burn = 50
    y = truth[burn:, 0, 0].astype(np.float32)

    def scores(x):
        return log_score(y, x[burn:, 0, 0])

    opt = combine(draws, origins, truth, release, scheme="optimal", min_scored=burn, seed=3)
    eq = combine(draws, origins, truth, release, scheme="equal", seed=3)
    s_opt, s_eq = scores(opt.draws), scores(eq.draws)
    s_a, s_b = scores(draws[0]), scores(draws[1])
    assert s_a.mean() < s_b.mean()  # A is the better single member
    for other in (s_a, s_eq):
        diff = other - s_opt
        assert diff.mean() > 3 * diff.std(ddof=1) / np.sqrt(diff.size)
    # after 750 scored forecasts the weight is near the quadrature optimum
    assert abs(opt.weights[-1, 0, 0, 0] - best.x) < 0.08


def test_no_scored_forecast_at_all_falls_back_with_a_warning_record():
    """With every truth unpublished, learnt schemes use equal weights everywhere and say so."""
    draws, origins, truth, release = _case(o=8)
    release[:] = NAT
    with pytest.warns(PoolWarning, match="equal weights throughout"):
        res = combine(draws, origins, truth, release, scheme="optimal", min_scored=2)
    assert res.fallback.all() and not np.isnan(res.weights).any()
    assert len(res.warnings) == 4 and {r["variable"] for r in res.warnings} == {"0", "1"}


def test_a_failed_member_gets_weight_zero_and_no_member_gives_a_recorded_hole():
    """NaN draws (failed task): weight 0, others renormalised; no member at all: NaN draws, recorded."""
    draws, origins, truth, release = _case(o=10, v=1, h=1)
    draws[1, 6] = np.nan
    draws[:, 8] = np.nan
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(PoolWarning):
            combine(draws, origins, truth, release, scheme="inverse_score", min_scored=2,
                    models=["a", "b", "c"])
    res = combine(draws, origins, truth, release, scheme="inverse_score", min_scored=2,
                  models=["a", "b", "c"], warn=False)
    assert res.weights[6, 0, 0, 1] == 0 and res.weights[6, 0, 0].sum() == pytest.approx(1)
    assert np.isnan(res.weights[8]).all() and np.isnan(res.draws[8]).all()
    assert np.isfinite(res.draws[np.arange(10) != 8]).all()
    msgs = " ".join(r["message"] for r in res.warnings)
    assert "model 'b' has no forecast in 2 cell" in msgs and "no member has a forecast" in msgs
    # the common sample: the forecasts of origins 6 and 8 are never scored
    assert res.n_scored[9, 0, 0] == 7


def test_same_seed_same_pool_and_a_callable_score():
    """The pool is deterministic given its seed; a user's loss function works as a score."""
    draws, origins, truth, release = _case(o=10)

    def abs_err_of_mean(obs, x):
        return np.abs(x.mean(axis=1) - obs)

    a = combine(draws, origins, truth, release, scheme="inverse_score", score=abs_err_of_mean,
                min_scored=3, seed=9)
    b = combine(draws, origins, truth, release, scheme="inverse_score", score=abs_err_of_mean,
                min_scored=3, seed=9)
    np.testing.assert_array_equal(a.draws, b.draws)
    assert a.params["score"] == "abs_err_of_mean"
    sc = member_scores(draws, truth.astype(np.float32), abs_err_of_mean)
    inv = 1 / sc[:, :9, 0, 0].mean(axis=1)
    np.testing.assert_allclose(a.weights[9, 0, 0], inv / inv.sum(), rtol=1e-6)


@pytest.mark.parametrize(("change", "match"), [
    (lambda a: {**a, "draws": a["draws"][:1]}, "at least two member models"),
    (lambda a: {**a, "draws": a["draws"][:, :, :, :, :, None]}, "must have dims"),
    (lambda a: {**a, "truth": a["truth"][:, :1]}, "truth must have shape"),
    (lambda a: {**a, "truth_release": a["truth_release"].astype("int64")}, "truth_release must be datetime64"),
    (lambda a: {**a, "origins": a["origins"][::-1]}, "strictly increasing"),
    (lambda a: {**a, "scheme": "median"}, r"unknown scheme 'median'; expected one of \['equal'"),
    (lambda a: {**a, "scheme": "optimal", "score": "crps"}, "applies to scheme 'inverse_score' only"),
    (lambda a: {**a, "scheme": "inverse_score", "score": "pinball"}, "pool score must be one of"),
    (lambda a: {**a, "window": 0}, "'window' must be an integer >= 1 or None"),
    (lambda a: {**a, "window": 3, "min_scored": 5}, r"min_scored \(5\) exceeds window \(3\)"),
])
def test_bad_input_raises_a_pool_error_naming_the_argument(change, match):
    """Each malformed argument raises PoolError (a ValueError) whose message names it."""
    draws, origins, truth, release = _case(o=6)
    args = change({"draws": draws, "origins": origins, "truth": truth, "truth_release": release})
    with pytest.raises(PoolError, match=match):
        combine(**args)
    assert issubclass(PoolError, ValueError)
