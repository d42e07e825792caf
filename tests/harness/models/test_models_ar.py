"""Autoregressions: OLS against statsmodels' AutoReg, BIC order against ar_select_order, predictive law."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.models.ar import AutoRegression, select_ar_order
from harness.models.base import InsufficientDataError
from harness.testing import make_infoset, make_targets


def _ar_series(phi, n: int, seed: int, c: float = 0.5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    p = len(phi)
    y = np.zeros(n + 100)
    e = rng.standard_normal(n + 100)
    for t in range(p, n + 100):
        y[t] = c + np.dot(phi, y[t - p:t][::-1]) + e[t]
    return y[100:]


def _inflation() -> np.ndarray:
    from statsmodels.datasets import macrodata

    return macrodata.load_pandas().data["infl"].to_numpy()


@pytest.mark.parametrize("p", [0, 1, 3])
def test_coefficients_match_statsmodels_autoreg(p):
    """OLS coefficients of AR(p) with intercept equal statsmodels' AutoReg(trend='c')."""
    from statsmodels.tsa.ar_model import AutoReg

    y = _inflation()
    fit = AutoRegression(max_lags=p, ic=None).fit_series(y)
    ref = AutoReg(y, lags=p, trend="c").fit()
    np.testing.assert_allclose(fit["coef"], ref.params, rtol=1e-9, atol=1e-12)
    # statsmodels' sigma2 is the ML estimate SSR/n; ours divides by the residual d.o.f.
    np.testing.assert_allclose(fit["sigma2"] * fit["dof"] / ref.nobs, ref.sigma2, rtol=1e-9)


@pytest.mark.parametrize("seed", range(8))
@pytest.mark.parametrize("ic", ["bic", "aic"])
def test_order_choice_matches_statsmodels_ar_select_order(seed, ic):
    """The chosen lag order equals statsmodels' ar_select_order(maxlag, ic, trend='c')."""
    from statsmodels.tsa.ar_model import ar_select_order

    phis = [(0.5,), (0.4, 0.3), (0.3, -0.2, 0.25), (0.0,)]
    y = _ar_series(phis[seed % 4], 60 + 10 * seed, seed)
    ref = ar_select_order(y, maxlag=6, ic=ic, trend="c").ar_lags
    ref_order = 0 if ref is None or len(ref) == 0 else max(ref)
    assert select_ar_order(y, 6, ic)[0] == ref_order


def test_order_choice_matches_statsmodels_on_macrodata_inflation():
    """BIC order on statsmodels' macrodata inflation equals ar_select_order's (open reference data)."""
    from statsmodels.tsa.ar_model import ar_select_order

    y = _inflation()
    ref = ar_select_order(y, maxlag=8, ic="bic", trend="c").ar_lags
    assert select_ar_order(y, 8, "bic")[0] == max(ref)


def test_one_step_predictive_is_the_student_t_of_the_diffuse_prior():
    """1-step draws follow t_{T-k}(x'b, s^2 (1 + x'(X'X)^{-1} x)) (Zellner 1971, ch. 3)."""
    y = _ar_series((0.6,), 50, 3)
    info = make_infoset(y[:, None], ["y"])
    model = AutoRegression(max_lags=1, ic=None)
    draws = model.forecast(info, make_targets(info, horizons=(0,)), 50_000,
                           np.random.default_rng(0)).values.ravel()
    x = np.column_stack([np.ones(len(y) - 1), y[:-1]])
    b = np.linalg.lstsq(x, y[1:], rcond=None)[0]
    dof = len(y) - 1 - 2
    s2 = np.sum((y[1:] - x @ b) ** 2) / dof
    xt = np.array([1.0, y[-1]])
    scale = np.sqrt(s2 * (1 + xt @ np.linalg.solve(x.T @ x, xt)))
    assert stats.kstest(draws, stats.t(df=dof, loc=xt @ b, scale=scale).cdf).pvalue > 1e-3


def test_without_parameter_uncertainty_draws_are_gaussian_around_the_ols_path():
    """With fixed parameters the 2-step draws are N(mu_2, s^2 (1 + phi^2)) (iterated AR(1))."""
    y = _ar_series((0.6,), 80, 4)
    info = make_infoset(y[:, None], ["y"])
    model = AutoRegression(max_lags=1, ic=None, param_uncertainty=False)
    draws = model.forecast(info, make_targets(info, horizons=(1,)), 50_000,
                           np.random.default_rng(0)).values.ravel()
    c, phi = model.fits_["y"]["coef"]
    s2 = model.fits_["y"]["sigma2"]
    mu = c + phi * (c + phi * y[-1])
    assert stats.kstest(draws, stats.norm(mu, np.sqrt(s2 * (1 + phi**2))).cdf).pvalue > 1e-3


def test_each_variable_is_anchored_at_its_own_last_observation():
    """On a ragged edge a variable's steps count from its own last value, not the panel end."""
    rng = np.random.default_rng(1)
    y = np.column_stack([_ar_series((0.5,), 60, 1), _ar_series((0.5,), 60, 2)])
    y[-2:, 1] = np.nan
    info = make_infoset(y, ["a", "b"])
    model = AutoRegression(max_lags=2)
    out = model.forecast(info, make_targets(info, horizons=(-2, -1, 0)), 100, rng)
    assert np.all(out.sel(variable="a", horizon=-1).values == y[-1, 0])
    assert out.sel(variable="b", horizon=-2).std() > 0  # forecast, one step after b's last value


def test_short_series_raise_insufficient_data():
    """A series shorter than 2 * max_lags + 3 raises InsufficientDataError with the counts."""
    info = make_infoset(np.arange(10.0)[:, None], ["y"])
    with pytest.raises(InsufficientDataError, match="at least 11 .* got 10"):
        AutoRegression(max_lags=4).forecast(info, make_targets(info), 10, np.random.default_rng(0))
