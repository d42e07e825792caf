"""Bridge equations: aggregation, the OLS bridge against statsmodels, draws, contract, bad input."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import BridgeEquations, InsufficientDataError
from harness.models.ar import select_ar_order
from harness.models.bridge import aggregate_months
from harness.models.dfm_native import make_native_infoset, native_targets, simulated_native_panel
from harness.testing import check_model, make_infoset, make_targets

sm = pytest.importorskip("statsmodels.api")

NAMES = [f"ind{i}" for i in range(6)]


def _case(n_months=120, seed=2, ragged=True):
    mon, q = simulated_native_panel(n_months, 6, seed, ragged=ragged)
    info = make_native_infoset(mon, q, NAMES, ["gdp"], start="2000-01")
    return info, native_targets(info, ["gdp"], (-2, -1, 0, 1)), mon, q


def test_aggregation_follows_the_quarterly_average_and_mariano_murasawa_weights():
    """'mean' averages a quarter's months; 'mm' is (x_t + 2x_{t-1} + 3x_{t-2} + 2x_{t-3} + x_{t-4})/3."""
    x = np.arange(12, dtype=float)[:, None] ** 2
    rows = np.array([5, 8])
    np.testing.assert_allclose(aggregate_months(x, rows, "mean")[:, 0], [(9 + 16 + 25) / 3,
                                                                          (36 + 49 + 64) / 3])
    # Mariano & Murasawa (2003), eq. 2: quarterly growth of a 3-month average in monthly growth
    level = np.exp(np.cumsum(np.r_[0.0, np.random.default_rng(0).normal(0, 0.01, 23)]))
    g = np.r_[np.nan, np.diff(np.log(level))]
    q_geo = np.log(level).reshape(8, 3).mean(axis=1)  # log of the quarter's geometric mean
    mm = aggregate_months(g[:, None], np.array([5, 8, 11]), "mm")[:, 0]
    np.testing.assert_allclose(mm, np.diff(q_geo)[:3], atol=1e-14)  # an identity for log levels
    assert np.isnan(aggregate_months(g[:, None], np.array([2]), "mm")[0, 0])


def test_bridge_coefficients_equal_statsmodels_ols_on_the_quarterly_aggregates():
    """The bridge regression equals statsmodels OLS of the target on constant + aggregates."""
    info, tg, mon, q = _case()
    model = BridgeEquations(param_uncertainty=False)
    model.forecast(info, tg, 10, np.random.default_rng(0))
    eq = model.equations_["gdp"]
    rows = np.arange(2, mon.shape[0], 3)
    agg = aggregate_months(mon, rows, "mean")
    y = q[rows, 0]
    ok = np.isfinite(y) & np.isfinite(agg).all(axis=1)
    res = sm.OLS(y[ok], sm.add_constant(agg[ok])).fit()
    np.testing.assert_allclose(eq["coef"], res.params, rtol=1e-10)
    assert eq["sigma2"] == pytest.approx(res.scale, rel=1e-10)
    assert len(eq["quarters"]) == ok.sum()


def test_nowcast_mean_and_spread_follow_ar_completion_and_the_regression():
    """Draw mean = OLS prediction at AR-completed aggregates; variance ~ residual + AR parts."""
    info, tg, mon, q = _case()
    model = BridgeEquations(param_uncertainty=False)
    out = model.forecast(info, tg, 20000, np.random.default_rng(4))
    eq = model.equations_["gdp"]
    # expected aggregates of the nowcast quarter (h=0): each indicator's AR point forecasts
    t0 = (tg.current.asfreq("M", how="end").ordinal - info.periods[0].ordinal)
    means = np.zeros(6)
    for i in range(6):
        run = mon[:, i][np.isfinite(mon[:, i])]
        p, _ = select_ar_order(run, 6, "bic")
        ar = sm.tsa.AutoReg(run, lags=p, trend="c").fit()  # statsmodels AutoReg, OLS
        steps = t0 + 1 - len(run)
        fc = ar.forecast(steps) if steps > 0 else np.array([])
        path = np.r_[run, fc]
        means[i] = path[t0 - 2:t0 + 1].mean()
    expected = eq["coef"] @ np.r_[1.0, means]
    draws = out.sel(variable="gdp", horizon=0).values
    assert abs(draws.mean() - expected) < 4 * draws.std() / np.sqrt(len(draws))
    assert draws.var() > eq["sigma2"]  # indicator-forecast uncertainty adds to the residual's


def test_parameter_uncertainty_widens_the_draws():
    """Posterior draws of the coefficients (Zellner 1971) widen the predictive spread."""
    info, tg, *_ = _case(72)
    a = BridgeEquations(param_uncertainty=False).forecast(info, tg, 4000, np.random.default_rng(0))
    b = BridgeEquations(param_uncertainty=True).forecast(info, tg, 4000, np.random.default_rng(0))
    assert b.sel(horizon=1).std().item() > a.sel(horizon=1).std().item()


def test_bridge_passes_the_conformance_checks_on_a_native_information_set():
    """check_model passes on a native set (the trend law does not apply to a standardised factor model)."""
    info, tg, *_ = _case(96)
    for model in (BridgeEquations(), BridgeEquations(aggregate="mm", target_lags=2)):
        check_model(model, info, tg, exact_path=None).raise_if_failed()
        out = model.forecast(info, tg, 20, np.random.default_rng(0))
        row = (tg.current - 2).asfreq("M", how="end").ordinal - info.periods[0].ordinal
        assert np.all(out.sel(horizon=-2).values == info.values()[row, -1])


def test_bad_input_names_model_variable_and_origin():
    """Short or collinear indicators and a quarterly panel raise one-line errors."""
    model = BridgeEquations()
    qinfo = make_infoset(np.random.default_rng(0).standard_normal((60, 2)), ["gdp", "ip"])
    with pytest.raises(ValueError, match=r"model 'bridge' needs a native-frequency"):
        model.forecast(qinfo, make_targets(qinfo, ["gdp"], (0,)), 10, np.random.default_rng(0))
    info, tg, mon, q = _case(96)
    short = mon.copy()
    short[:85, 4] = np.nan
    bad = make_native_infoset(short, q, NAMES, ["gdp"], start="2000-01")
    with pytest.raises(InsufficientDataError, match=r"indicator 'ind4' has 10 consecutive "
                                                    r"observation\(s\) at origin 2008-02-01"):
        model.forecast(bad, tg, 10, np.random.default_rng(0))
    twin = mon.copy()
    twin[:, 5] = 2 * twin[:, 1]
    bad = make_native_infoset(twin, q, NAMES, ["gdp"], start="2000-01")
    with pytest.raises(InsufficientDataError, match=r"collinear for target 'gdp' at origin"):
        model.forecast(bad, tg, 10, np.random.default_rng(0))
