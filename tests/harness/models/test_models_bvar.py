"""The conjugate Minnesota BVAR: dummy observations, NIW posterior, sampler and forecasts."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.models.base import InsufficientDataError, ModelParameterError
from harness.models.bvar import (
    BayesianVAR,
    minnesota_dummies,
    niw_posterior,
    sample_inverse_wishart,
)
from harness.testing import make_infoset, make_targets


def _macro_growth() -> np.ndarray:
    """Annualised quarterly growth of real GDP, consumption, investment (statsmodels macrodata)."""
    from statsmodels.datasets import macrodata

    d = macrodata.load_pandas().data
    return np.column_stack([400 * np.diff(np.log(d[c].to_numpy())) for c in
                            ("realgdp", "realcons", "realinv")])


@pytest.mark.parametrize("lags", [1, 2, 4])
def test_loose_prior_posterior_mean_equals_statsmodels_ols(lags):
    """As tightness grows the posterior mean tends to OLS, as estimated by statsmodels' VAR."""
    from statsmodels.tsa.api import VAR

    y = _macro_growth()
    ref = VAR(y).fit(lags).params  # rows [const, L1.*, ..., Lp.*]
    post = BayesianVAR(lags=lags, tightness=1e6).fit_sample(y, ["gdp", "cons", "inv"])
    ours = np.vstack([post.coef_mean[-1:], post.coef_mean[:-1]])
    np.testing.assert_allclose(ours, ref, rtol=1e-6, atol=1e-6)
    # and a tight prior moves the estimate away from OLS, toward the prior mean of zero
    tight = BayesianVAR(lags=lags, tightness=0.01).fit_sample(y, ["gdp", "cons", "inv"])
    assert np.abs(tight.coef_mean[:-1]).max() < 0.2 * np.abs(ref[1:]).max()


def _small_case():
    rng = np.random.default_rng(2)
    t, n, p = 40, 2, 1
    y = np.zeros((t, n))
    for s in range(1, t):
        y[s] = 0.3 + np.array([[0.5, 0.1], [0.2, 0.4]]) @ y[s - 1] + rng.standard_normal(n) * [1.0, 0.5]
    scales = np.array([1.0, 0.5])
    y_d, x_d = minnesota_dummies(y, p, 0.3, 1.0, np.array([0.2, 0.0]), scales, 2.0, 3.0)
    return y, p, y_d, x_d


def test_dummy_posterior_equals_kadiyala_karlsson_closed_form():
    """Stacked dummy regression equals the KK (1997) NIW update from the implied prior."""
    y, p, y_d, x_d = _small_case()
    post = niw_posterior(y, p, y_d, x_d)
    # prior implied by the dummies (Kadiyala & Karlsson 1997; BGR 2010)
    omega0 = np.linalg.inv(x_d.T @ x_d)
    b0 = omega0 @ x_d.T @ y_d
    s0 = (y_d - x_d @ b0).T @ (y_d - x_d @ b0)
    k = x_d.shape[1]
    alpha0 = len(y_d) - k + 2
    yt, x = y[p:], np.column_stack([y[:-1], np.ones(len(y) - 1)])
    bhat = np.linalg.solve(x.T @ x, x.T @ yt)
    shat = (yt - x @ bhat).T @ (yt - x @ bhat)
    omega_bar = np.linalg.inv(np.linalg.inv(omega0) + x.T @ x)
    b_bar = omega_bar @ (np.linalg.inv(omega0) @ b0 + x.T @ x @ bhat)
    s_bar = (s0 + shat + bhat.T @ x.T @ x @ bhat + b0.T @ np.linalg.inv(omega0) @ b0
             - b_bar.T @ np.linalg.inv(omega_bar) @ b_bar)
    np.testing.assert_allclose(post.coef_mean, b_bar, rtol=1e-9)
    np.testing.assert_allclose(post.omega, omega_bar, rtol=1e-9)
    np.testing.assert_allclose(post.scale, s_bar, rtol=1e-8)
    assert post.dof == alpha0 + len(yt)


def test_sampler_moments_match_the_niw_closed_form():
    """Mean of Sigma draws is S/(nu-n-1), mean of B is B~, Cov(vec B) = E[Sigma] (x) Omega (KK 1997)."""
    y, p, y_d, x_d = _small_case()
    post = niw_posterior(y, p, y_d, x_d)
    d = 200_000
    coefs, f = post.sample(d, np.random.default_rng(0))
    sigma = f @ np.swapaxes(f, 1, 2)
    e_sigma = post.mean_sigma()
    se_sigma = sigma.std(axis=0) / np.sqrt(d)
    assert np.all(np.abs(sigma.mean(axis=0) - e_sigma) < 5 * se_sigma)
    se_b = coefs.std(axis=0) / np.sqrt(d)
    assert np.all(np.abs(coefs.mean(axis=0) - post.coef_mean) < 5 * se_b)
    vec = coefs.transpose(0, 2, 1).reshape(d, -1)  # vec() stacks columns (equations)
    ref = np.kron(e_sigma, post.omega)
    # Monte Carlo s.e. of a sample covariance, sqrt((s_ii s_jj + s_ij^2) / d) (Anderson 2003,
    # ch. 3, normal case; the t-like marginals add a little, hence 6 s.e.)
    se_cov = np.sqrt((np.outer(np.diag(ref), np.diag(ref)) + ref**2) / d)
    assert np.all(np.abs(np.cov(vec.T) - ref) < 6 * se_cov)


def test_inverse_wishart_draws_match_scipy():
    """Bartlett draws of Sigma agree in law with scipy.stats.invwishart (KS test per element)."""
    scale = np.array([[2.0, 0.5, 0.1], [0.5, 1.0, -0.3], [0.1, -0.3, 1.5]])
    dof = 9.0
    f = sample_inverse_wishart(scale, dof, 20_000, np.random.default_rng(4))
    ours = f @ np.swapaxes(f, 1, 2)
    ref = stats.invwishart(df=dof, scale=scale).rvs(20_000, random_state=5)
    for i, j in [(0, 0), (1, 1), (2, 2), (0, 1), (1, 2)]:
        assert stats.ks_2samp(ours[:, i, j], ref[:, i, j]).pvalue > 1e-3


def test_sum_of_coefficients_prior_pulls_lag_sums_to_one():
    """A tight sum-of-coefficients prior (Doan, Litterman & Sims 1984) makes own lag sums ~ 1."""
    rng = np.random.default_rng(8)
    y = rng.standard_normal((120, 2)).cumsum(axis=0)
    loose = BayesianVAR(lags=2, tightness=0.5, prior_mean=1.0).fit_sample(y, ["a", "b"])
    tight = BayesianVAR(lags=2, tightness=0.5, prior_mean=1.0, sum_of_coefficients=1e-4
                        ).fit_sample(y, ["a", "b"])
    lagsum = lambda c: c[0:2] + c[2:4]  # noqa: E731
    np.testing.assert_allclose(lagsum(tight.coef_mean), np.eye(2), atol=1e-3)
    assert np.abs(lagsum(loose.coef_mean) - np.eye(2)).max() > np.abs(
        lagsum(tight.coef_mean) - np.eye(2)).max()


def test_forecast_mean_tracks_the_posterior_mean_path():
    """The 1-step predictive mean equals x_T' B~ (posterior mean), within Monte Carlo error."""
    y = _macro_growth()[-120:]
    info = make_infoset(y, ["gdp", "cons", "inv"], start="1980Q1")
    model = BayesianVAR(lags=2)
    out = model.forecast(info, make_targets(info, horizons=(0,)), 40_000, np.random.default_rng(1))
    x_t = np.concatenate([y[-1], y[-2], [1.0]])
    mean = x_t @ model.posterior_.coef_mean
    sd = out.values[:, :, 0].std(axis=0)
    assert np.all(np.abs(out.values[:, :, 0].mean(axis=0) - mean) < 5 * sd / np.sqrt(40_000))


def test_student_shocks_have_fatter_tails_at_equal_variance():
    """Student-t shocks keep the covariance but raise the kurtosis of the 1-step draws."""
    y = _macro_growth()[-100:]
    info = make_infoset(y, ["gdp", "cons", "inv"])
    tg = make_targets(info, ["gdp"], (0,))
    g = BayesianVAR(lags=1).forecast(info, tg, 100_000, np.random.default_rng(0)).values.ravel()
    t = BayesianVAR(lags=1, shocks="student", df=5.0).forecast(
        info, tg, 100_000, np.random.default_rng(0)).values.ravel()
    assert abs(t.var() / g.var() - 1) < 0.05
    assert stats.kurtosis(t) > stats.kurtosis(g) + 1.0


def test_cross_other_than_one_is_rejected_with_a_clear_message():
    """The conjugate form cannot shrink cross lags separately, so cross != 1 raises."""
    info = make_infoset(np.random.default_rng(0).standard_normal((40, 2)), ["a", "b"])
    with pytest.raises(ModelParameterError, match="cross"):
        BayesianVAR(cross=0.5).forecast(info, make_targets(info), 10, np.random.default_rng(0))


def test_too_short_balanced_sample_raises_insufficient_data():
    """A balanced block shorter than lags + 3 raises InsufficientDataError naming the need."""
    y = np.random.default_rng(0).standard_normal((12, 2))
    y[:6, 1] = np.nan  # the second variable starts late: balanced block of 6 rows
    info = make_infoset(y, ["a", "b"])
    with pytest.raises(InsufficientDataError, match="at least lags \\+ 3 = 7"):
        BayesianVAR(lags=4).forecast(info, make_targets(info), 10, np.random.default_rng(0))
