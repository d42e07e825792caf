"""Conditional VAR paths on a ragged edge (Waggoner & Zha 1999) against analytic Gaussian conditionals."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models.bvar import BayesianVAR
from harness.models.conditional import conditional_moments, ma_matrices, var_paths

# A known 2-variable VAR(1): y_t = c + A y_{t-1} + e_t, e_t ~ N(0, S).
C = np.array([0.3, -0.2])
A = np.array([[0.6, 0.2], [-0.1, 0.5]])
S = np.array([[1.0, 0.6], [0.6, 2.0]])
Y_T = np.array([1.0, 0.5])
COEF = np.vstack([A.T, C[None, :]])  # rows [lag 1 (2), intercept]


def _draws(n_draws: int, tail, horizon: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    coefs = np.broadcast_to(COEF, (n_draws, 3, 2))
    factors = np.broadcast_to(np.linalg.cholesky(S), (n_draws, 2, 2))
    z = rng.standard_normal((n_draws, horizon, 2))
    return var_paths(coefs, Y_T[None, :], factors, z, tail)


def _analytic_one_observed(v: float):
    """Hand-derived law of (y_{T+1,2}, y_{T+2}) given y_{T+1,1} = v (Anderson 2003, sec. 2.5)."""
    mu1 = C + A @ Y_T
    m12 = mu1[1] + S[1, 0] / S[0, 0] * (v - mu1[0])
    v12 = S[1, 1] - S[1, 0] ** 2 / S[0, 0]
    m1 = np.array([v, m12])
    v1 = np.array([[0.0, 0.0], [0.0, v12]])
    return m12, v12, C + A @ m1, A @ v1 @ A.T + S


def test_observed_tail_values_are_reproduced_exactly():
    """Every draw carries the observed ragged-edge values bit for bit."""
    tail = np.array([[1.7, np.nan], [np.nan, -0.4], [0.2, np.nan]])
    paths = _draws(2000, tail, 5)
    assert np.all(paths[:, 0, 0] == 1.7)
    assert np.all(paths[:, 1, 1] == -0.4)
    assert np.all(paths[:, 2, 0] == 0.2)
    assert np.isfinite(paths).all()


def test_conditional_mean_and_variance_match_the_analytic_gaussian_conditional():
    """Draws given y_{T+1,1} match the hand-derived conditional mean/variance of a VAR(1)."""
    v = 2.0
    paths = _draws(400_000, np.array([[v, np.nan]]), 2, seed=1)
    m12, v12, m2, v2 = _analytic_one_observed(v)
    d = len(paths)
    x = paths[:, 0, 1]
    assert abs(x.mean() - m12) < 5 * np.sqrt(v12 / d)
    assert abs(x.var() - v12) < 5 * v12 * np.sqrt(2 / d)
    y2 = paths[:, 1, :]
    se = np.sqrt(np.diag(v2) / d)
    assert np.all(np.abs(y2.mean(axis=0) - m2) < 5 * se)
    np.testing.assert_allclose(np.cov(y2.T), v2, rtol=0.02, atol=0.02)


def test_reference_moments_match_the_analytic_conditional():
    """The dense reference conditioner agrees with the hand-derived formulas exactly."""
    v = -0.8
    mean, cov = conditional_moments(COEF, S, Y_T[None, :], 2, np.array([[v, np.nan]]))
    m12, v12, m2, v2 = _analytic_one_observed(v)
    np.testing.assert_allclose(mean[0], [v, m12], rtol=1e-12)
    np.testing.assert_allclose(cov[1, 1], v12, rtol=1e-12)
    np.testing.assert_allclose(mean[1], m2, rtol=1e-12)
    np.testing.assert_allclose(cov[2:, 2:], v2, rtol=1e-12)
    assert np.all(cov[0] == 0) and np.all(cov[:, 0] == 0)


def test_fast_conditioning_matches_reference_on_a_var2_with_time_varying_covariances():
    """Vectorised draws match the dense reference for a VAR(2), two tail steps, per-step covariances."""
    rng = np.random.default_rng(3)
    n, h = 3, 4  # a VAR(2)
    a1 = np.array([[0.5, 0.1, 0.0], [0.2, 0.3, 0.1], [0.0, -0.2, 0.4]])
    a2 = 0.1 * np.eye(n)
    coef = np.vstack([a1.T, a2.T, np.array([[0.1, 0.0, -0.1]])])
    base = np.array([[1.0, 0.3, 0.2], [0.3, 1.5, -0.4], [0.2, -0.4, 0.8]])
    covs = np.stack([base * s for s in (1.0, 1.5, 0.7, 1.2)])
    init = np.array([[0.2, 0.1, -0.3], [0.5, -0.2, 0.4]])
    tail = np.array([[0.9, np.nan, np.nan], [np.nan, 0.1, 1.1]])
    d = 200_000
    factors = np.broadcast_to(np.linalg.cholesky(covs), (d, h, n, n))
    paths = var_paths(np.broadcast_to(coef, (d, coef.shape[0], n)), init, factors,
                      rng.standard_normal((d, h, n)), tail)
    mean, cov = conditional_moments(coef, covs, init, h, tail)
    flat = paths.reshape(d, h * n)
    sd = np.sqrt(np.diag(cov))
    free = sd > 0
    assert np.all(np.abs(flat.mean(axis=0)[free] - mean.ravel()[free]) < 5 * sd[free] / np.sqrt(d))
    np.testing.assert_allclose(np.cov(flat[:, free].T), cov[np.ix_(free, free)], atol=0.03)
    np.testing.assert_array_equal(flat[:, ~free], np.broadcast_to(mean.ravel()[~free], (d, (~free).sum())))


def test_ma_matrices_match_statsmodels_impulse_responses():
    """MA matrices equal statsmodels' ``ma_rep`` for a VAR(2) (Lütkepohl 2005, sec. 2.1)."""
    from statsmodels.tsa.vector_ar.var_model import ma_rep

    a1 = np.array([[0.5, 0.1], [0.2, 0.3]])
    a2 = np.array([[0.1, -0.05], [0.0, 0.2]])
    coef = np.vstack([a1.T, a2.T, np.zeros((1, 2))])
    np.testing.assert_allclose(ma_matrices(coef, 6), ma_rep(np.stack([a1, a2]), maxn=5), rtol=1e-12)


def test_unconditional_paths_without_tail_match_the_forecast_error_covariance():
    """With no tail the h-step variance equals sum_j Psi_j S Psi_j' (Lütkepohl 2005, sec. 2.2)."""
    d = 300_000
    paths = _draws(d, None, 3, seed=7)
    psi = ma_matrices(COEF, 3)
    mse = sum(psi[j] @ S @ psi[j].T for j in range(3))
    np.testing.assert_allclose(np.cov(paths[:, 2, :].T), mse, rtol=0.02)


def test_bvar_simulate_pins_the_observed_tail():
    """A BVAR's predictive paths reproduce the observed ragged edge in every posterior draw."""
    rng = np.random.default_rng(5)
    y = rng.standard_normal((60, 2)).cumsum(axis=0) * 0.1
    model = BayesianVAR(lags=2)
    post = model.fit_sample(y, ["a", "b"])
    tail = np.array([[0.25, np.nan], [0.5, np.nan]])
    paths = model.simulate(post, y[-2:], tail, 4, 500, np.random.default_rng(0))
    assert np.all(paths[:, 0, 0] == 0.25) and np.all(paths[:, 1, 0] == 0.5)
    assert paths[:, 0, 1].std() > 0


@pytest.mark.parametrize("shocks", ["gaussian", "student"])
def test_tail_conditioning_is_exact_for_both_shock_laws(shocks):
    """Observed cells stay exact with Student-t scale-mixture shocks as well as Gaussian ones."""
    rng = np.random.default_rng(9)
    y = rng.standard_normal((50, 3))
    model = BayesianVAR(lags=1, shocks=shocks, df=4.0)
    post = model.fit_sample(y, ["a", "b", "c"])
    tail = np.array([[np.nan, 1.0, np.nan]])
    paths = model.simulate(post, y[-1:], tail, 2, 300, np.random.default_rng(1))
    assert np.all(paths[:, 0, 1] == 1.0)
