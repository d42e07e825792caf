"""BVAR hyperparameters from the data: the closed-form marginal likelihood and its maximiser.

References: Giannone, Lenza & Primiceri (2015), Review of Economics and Statistics 97(2),
436-451 (the marginal likelihood of the conjugate BVAR and its maximisation); Kadiyala &
Karlsson (1997), Journal of Applied Econometrics 12(2), 99-132 (the NIW prior implied by the
dummies).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from harness.models.base import ModelParameterError, ar1_scales
from harness.models.bvar import (
    HYPERPARAMETERS,
    BayesianVAR,
    gamma_log_density,
    log_marginal_likelihood,
    minnesota_dummies,
    niw_posterior,
)
from harness.testing import check_model, make_infoset, make_targets


def _macro(levels: bool) -> np.ndarray:
    """Real GDP, consumption, investment (statsmodels macrodata): 100 log levels or annualised growth."""
    from statsmodels.datasets import macrodata

    d = macrodata.load_pandas().data
    x = np.column_stack([np.log(d[c].to_numpy()) for c in ("realgdp", "realcons", "realinv")])
    return 100 * x if levels else 400 * np.diff(x, axis=0)


def _prior_from_dummies(y_d, x_d):
    """The NIW prior the dummies imply (Kadiyala & Karlsson 1997): B_0, Omega_0, S_0, nu_0."""
    omega0 = np.linalg.inv(x_d.T @ x_d)
    b0 = omega0 @ x_d.T @ y_d
    e0 = y_d - x_d @ b0
    return b0, omega0, e0.T @ e0, len(y_d) + 2 - x_d.shape[1]


def test_closed_form_equals_numerical_integration_for_one_variable():
    """n = 1, p = 1 with the model's own dummies: log ML equals a 3-D Simpson integral (scipy).

    The integral is of the Gaussian likelihood times the NIW prior density (scipy.stats
    invgamma for sigma^2 = IW(S_0, nu_0) with n = 1, a bivariate normal for (b, c) | sigma^2)
    over (b, c, log sigma^2); the integration box is set from the posterior, wide enough that
    missing mass would show as a lower value.
    """
    rng = np.random.default_rng(12)
    y = np.zeros((31, 1))
    for t in range(1, 31):  # an invented Veldmark indicator, AR(1)
        y[t] = 0.5 + 0.6 * y[t - 1] + 0.8 * rng.standard_normal()
    y_d, x_d = minnesota_dummies(y, 1, 0.4, 1.0, np.array([0.5]), ar1_scales(y))
    closed = log_marginal_likelihood(y, 1, y_d, x_d)

    b0, omega0, s0, nu0 = _prior_from_dummies(y_d, x_d)
    post = niw_posterior(y, 1, y_d, x_d)
    yt, xl = y[1:, 0], y[:-1, 0]
    t = len(yt)
    sd = np.sqrt(np.diag(post.mean_sigma()[0, 0] * post.omega))
    bs = np.linspace(post.coef_mean[0, 0] - 12 * sd[0], post.coef_mean[0, 0] + 12 * sd[0], 161)
    cs = np.linspace(post.coef_mean[1, 0] - 12 * sd[1], post.coef_mean[1, 0] + 12 * sd[1], 161)
    q = stats.invgamma(0.5 * post.dof, scale=0.5 * post.scale[0, 0]).ppf([1e-12, 1 - 1e-12])
    us = np.linspace(np.log(q[0]), np.log(q[1]), 161)
    b, c, u = np.meshgrid(bs, cs, us, indexing="ij")
    s2 = np.exp(u)
    ssr = ((yt[None, None, :] - b[..., :1] * xl - c[..., :1]) ** 2).sum(axis=-1)[..., None]
    log_lik = -0.5 * t * np.log(2 * np.pi * s2) - 0.5 * ssr / s2
    prec = np.linalg.inv(omega0)
    dev = np.stack([b - b0[0, 0], c - b0[1, 0]])
    quad = np.einsum("i...,ij,j...->...", dev, prec, dev)
    log_prior_bc = -np.log(2 * np.pi * s2) - 0.5 * np.log(np.linalg.det(omega0)) - 0.5 * quad / s2
    log_prior_s2 = stats.invgamma(0.5 * nu0, scale=0.5 * s0[0, 0]).logpdf(s2)
    log_f = log_lik + log_prior_bc + log_prior_s2 + u  # + u: the Jacobian of sigma^2 = e^u
    top = log_f.max()
    inner = integrate.simpson(integrate.simpson(np.exp(log_f - top), x=us, axis=2), x=cs, axis=1)
    numeric = top + np.log(integrate.simpson(inner, x=bs))
    # the likelihood written out once more with scipy.stats.norm at one point
    np.testing.assert_allclose(log_lik[80, 80, 80], stats.norm.logpdf(
        yt, cs[80] + bs[80] * xl, np.sqrt(s2[0, 0, 80])).sum(), rtol=1e-12)
    assert closed == pytest.approx(numeric, abs=1e-6)


@pytest.mark.slow
def test_closed_form_equals_monte_carlo_over_the_niw_prior():
    """n = 2, p = 1, a proper prior: log ML equals the prior mean of the likelihood (Monte Carlo).

    300,000 draws of Sigma ~ IW(S_0, nu_0) (scipy.stats.invwishart) and B | Sigma from the
    matrix normal; the estimate is the log of the mean likelihood, its standard error by the
    delta method. The closed form must lie within 4 standard errors. The sample is short (4
    transitions) so that prior draws cover the likelihood: a check of the formula's n-variate
    parts at a precision of a few hundredths, not a study of the estimator.
    """
    rng = np.random.default_rng(3)
    t_obs, n = 5, 2
    y = np.zeros((t_obs, n))
    for t in range(1, t_obs):
        y[t] = [0.2, -0.1] + np.array([[0.5, 0.1], [0.0, 0.3]]) @ y[t - 1] + rng.normal(0, 0.5, n)
    scales = np.array([0.5, 0.5])
    y_d, x_d = minnesota_dummies(y, 1, 0.3, 1.0, np.array([0.3, 0.0]), scales)
    x_d[-1, -1] = 2.0  # intercept prior s.d. = sigma_i / 2: proper and not too diffuse for MC
    extra = np.diag(scales)  # six more Sigma rows: nu_0 = 16, a concentrated IW prior
    y_d = np.concatenate([y_d] + [extra] * 6)
    x_d = np.concatenate([x_d] + [np.zeros((n, x_d.shape[1]))] * 6)
    closed = log_marginal_likelihood(y, 1, y_d, x_d)

    b0, omega0, s0, nu0 = _prior_from_dummies(y_d, x_d)
    d = 300_000
    sig = stats.invwishart(df=nu0, scale=s0).rvs(d, random_state=np.random.default_rng(4))
    ls = np.linalg.cholesky(sig)
    z = np.random.default_rng(5).standard_normal((d, 3, n))
    b = b0 + np.linalg.cholesky(omega0) @ z @ np.swapaxes(ls, 1, 2)  # B = B_0 + P Z L'
    yt = y[1:]
    x = np.column_stack([y[:-1], np.ones(t_obs - 1)])
    e = yt[None] - x[None] @ b
    sinv = np.linalg.inv(sig)
    quad = np.einsum("dti,dij,dtj->d", e, sinv, e)
    log_l = -0.5 * (t_obs - 1) * (n * np.log(2 * np.pi) + np.linalg.slogdet(sig)[1]) - 0.5 * quad
    top = log_l.max()
    w = np.exp(log_l - top)
    estimate = top + np.log(w.mean())
    se = w.std(ddof=1) / np.sqrt(d) / w.mean()
    assert se < 0.04  # the check has power
    assert abs(closed - estimate) < 4 * se


def test_ml_tightness_matches_a_fine_grid_search():
    """The chosen tightness maximises the log ML: no point of a fine log grid does better."""
    y = _macro(levels=False)
    model = BayesianVAR(lags=4, tightness="ml")
    model.fit_sample(y, ["gdp", "cons", "inv"])
    lam = model.diagnostics_["tightness"]
    scales = ar1_scales(y)
    grid = np.geomspace(0.01, 5.0, 1500)
    vals = np.array([log_marginal_likelihood(y, 4, *minnesota_dummies(y, 4, g, 1.0, np.zeros(3), scales))
                     for g in grid])
    i = int(vals.argmax())
    assert model.diagnostics_["log_ml"] >= vals[i] - 1e-9
    assert grid[max(i - 1, 0)] <= lam <= grid[min(i + 1, len(grid) - 1)]
    assert model.diagnostics_["at_bound"] == 0.0


def test_ml_three_hyperparameters_beat_every_point_of_a_grid():
    """Tightness, sum-of-coefficients and co-persistence chosen jointly beat a 3-D grid (levels, RW prior)."""
    y = _macro(levels=True)
    model = BayesianVAR(lags=2, tightness="ml", sum_of_coefficients="ml", co_persistence="ml",
                        prior_mean=1.0)
    model.fit_sample(y, ["gdp", "cons", "inv"])
    got = model.diagnostics_
    scales = ar1_scales(y)
    axes = [np.geomspace(HYPERPARAMETERS[k]["low"], HYPERPARAMETERS[k]["high"], 14)
            for k in ("tightness", "sum_of_coefficients", "co_persistence")]
    best = max(log_marginal_likelihood(y, 2, *minnesota_dummies(y, 2, a, 1.0, np.ones(3), scales, b, c))
               for a in axes[0] for b in axes[1] for c in axes[2])
    assert got["log_ml"] >= best - 1e-9
    # and locally: no small move of any coordinate improves it (a maximum, not just a good point)
    for k in ("tightness", "sum_of_coefficients", "co_persistence"):
        for f in (0.98, 1.02):
            v = {**{j: got[j] for j in ("tightness", "sum_of_coefficients", "co_persistence")},
                 k: got[k] * f}
            alt = log_marginal_likelihood(y, 2, *minnesota_dummies(
                y, 2, v["tightness"], 1.0, np.ones(3), scales, v["sum_of_coefficients"],
                v["co_persistence"]))
            assert alt <= got["log_ml"] + 1e-7


def test_glp_gamma_hyperprior_matches_scipy_and_shifts_the_choice():
    """The Gamma hyperprior has the stated mode and s.d. (scipy.stats.gamma); 'glp' maximises ML + log prior."""
    for k, spec in HYPERPARAMETERS.items():
        scale = 0.5 * (np.sqrt(spec["mode"] ** 2 + 4 * spec["sd"] ** 2) - spec["mode"])
        shape = 1 + spec["mode"] / scale
        g = stats.gamma(shape, scale=scale)
        assert g.std() == pytest.approx(spec["sd"]) and (shape - 1) * scale == pytest.approx(spec["mode"])
        for x in (0.05, 0.2, 1.0, 3.0):
            assert gamma_log_density(x, spec["mode"], spec["sd"]) == pytest.approx(g.logpdf(x)), k
    y = _macro(levels=False)[:60]  # a short sample, where the hyperprior matters
    flat = BayesianVAR(lags=4, tightness="ml")
    glp = BayesianVAR(lags=4, tightness="ml", hyperprior="glp")
    flat.fit_sample(y, ["a", "b", "c"])
    glp.fit_sample(y, ["a", "b", "c"])
    scales = ar1_scales(y)
    grid = np.geomspace(0.01, 5.0, 1500)
    post = [log_marginal_likelihood(y, 4, *minnesota_dummies(y, 4, g, 1.0, np.zeros(3), scales))
            + gamma_log_density(g, 0.2, 0.4) for g in grid]
    i = int(np.argmax(post))
    assert grid[i - 1] <= glp.diagnostics_["tightness"] <= grid[i + 1]
    assert glp.diagnostics_["tightness"] != flat.diagnostics_["tightness"]
    assert glp.diagnostics_["log_ml"] <= flat.diagnostics_["log_ml"]


def test_forecast_with_ml_records_float_diagnostics_and_equals_the_fixed_model():
    """forecast() records the chosen values and log ML as floats; fixing them reproduces the draws."""
    y = _macro(levels=False)[-100:]
    info = make_infoset(y, ["gdp", "cons", "inv"])
    tg = make_targets(info, ["gdp"], (0, 1))
    ml = BayesianVAR(lags=2, tightness="ml")
    a = ml.forecast(info, tg, 500, np.random.default_rng(1))
    diag = ml.diagnostics_
    assert {"tightness", "log_ml", "ml_evaluations", "at_bound", "log_hyperprior"} <= set(diag)
    assert all(type(v) is float and np.isfinite(v) for v in diag.values())
    fixed = BayesianVAR(lags=2, tightness=diag["tightness"])
    b = fixed.forecast(info, tg, 500, np.random.default_rng(1))
    np.testing.assert_array_equal(a.values, b.values)
    assert fixed.diagnostics_["log_ml"] == pytest.approx(diag["log_ml"], abs=1e-9)
    assert set(fixed.diagnostics_) == {"tightness", "log_ml"}


def test_ml_model_passes_the_model_contract():
    """BayesianVAR with every hyperparameter 'ml' passes harness.testing.check_model."""
    check_model(BayesianVAR(lags=2, tightness="ml", sum_of_coefficients="ml", co_persistence="ml",
                            prior_mean=1.0, hyperprior="glp"))


def test_ml_options_are_declared_and_validated():
    """'ml' is an accepted value; misspellings raise naming the parameter and the allowed values."""
    info = make_infoset(np.random.default_rng(0).standard_normal((40, 2)), ["a", "b"])
    with pytest.raises(ModelParameterError, match=r"'tightness' must be .*one of \['ml'\]"):
        BayesianVAR(tightness="mle").forecast(info, make_targets(info), 10, np.random.default_rng(0))
    with pytest.raises(ModelParameterError, match=r"'hyperprior' must be one of \['flat', 'glp'\]"):
        BayesianVAR(tightness="ml", hyperprior="gamma").forecast(info, make_targets(info), 10,
                                                                  np.random.default_rng(0))


def test_zero_mean_sum_of_coefficients_rows_are_dropped():
    """With prior mean 0 the sum-of-coefficients block is inactive: the posterior equals the one without it.

    Before the fix its all-zero dummy rows raised Sigma's prior degrees of freedom by one per
    variable (E[Sigma] x (nu - n - 1)/(nu + n - n - 1)); now dof, scale and coefficients agree.
    """
    y = _macro(levels=False)
    names = ["gdp", "cons", "inv"]
    off = BayesianVAR(lags=2).fit_sample(y, names)
    on = BayesianVAR(lags=2, sum_of_coefficients=1.0).fit_sample(y, names)
    assert on.dof == off.dof
    np.testing.assert_array_equal(on.coef_mean, off.coef_mean)
    np.testing.assert_array_equal(on.scale, off.scale)
    np.testing.assert_array_equal(on.mean_sigma(), off.mean_sigma())
    # mixed prior means: only the rows of the zero-mean variable go
    m = {"gdp": 1.0, "cons": 0.0, "inv": 0.5}
    mixed = BayesianVAR(lags=2, sum_of_coefficients=0.5, prior_mean=m).fit_sample(y, names)
    scales = ar1_scales(y)
    y_d, x_d = minnesota_dummies(y, 2, 0.2, 1.0, np.array([1.0, 0.0, 0.5]), scales)
    ybar = y[:2].mean(axis=0)
    soc = np.diag(np.array([1.0, 0.0, 0.5]) * ybar)[[0, 2]] / 0.5
    ref = niw_posterior(y, 2, np.concatenate([y_d, soc]),
                        np.concatenate([x_d, np.concatenate([soc, soc, np.zeros((2, 1))], axis=1)]))
    assert mixed.dof == ref.dof == off.dof + 2
    np.testing.assert_allclose(mixed.coef_mean, ref.coef_mean, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(mixed.scale, ref.scale, rtol=1e-10)
