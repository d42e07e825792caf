"""Mixed-frequency dynamic factor model: engine against references, statsmodels, the contract."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from harness.models import DynamicFactorModel, InsufficientDataError
from harness.models.dfm_em import em_fit, estep, mstep, start_params
from harness.models.dfm_fast import filter_fast, observation_weights, smooth_fast
from harness.models.dfm_native import (
    make_native_infoset,
    native_targets,
    simulated_native_panel,
)
from harness.models.dfm_ssm import (
    DFMParams,
    StateLayout,
    from_statsmodels_vector,
    kalman_reference,
    simulation_smoother,
    stationary_factor_cov,
    system,
    to_statsmodels_vector,
)
from harness.testing import check_model, make_infoset, make_targets

sm = pytest.importorskip("statsmodels.api")

NAMES = [f"ind{i:02d}" for i in range(20)]


def _panel(n_months=180, n_monthly=20, seed=0):
    mon, q = simulated_native_panel(n_months, n_monthly, seed)
    return mon, q


def _standardised(mon, q):
    y = np.c_[mon, q]
    return (y - np.nanmean(y, axis=0)) / np.nanstd(y, axis=0, ddof=1)


def _layout(n_monthly=20, r=1, p=2, ar1=True):
    return StateLayout(np.array([False] * n_monthly + [True]), r, p, ar1)


def _to_sm(p: DFMParams) -> np.ndarray:
    return to_statsmodels_vector(p, True)


def _to_sm_wn(p: DFMParams) -> np.ndarray:
    return to_statsmodels_vector(p, False)


def _from_sm(v: np.ndarray, n: int, r: int, p: int) -> DFMParams:
    return from_statsmodels_vector(v, n, r, p, True)


def _sm_model(x, n_monthly=20, r=1, p=2, ar1=True):
    """statsmodels' model on already standardised data (its own standardisation switched off)."""
    idx = pd.period_range("1995-01", periods=x.shape[0], freq="M")
    endog = pd.DataFrame(x, index=idx)
    return sm.tsa.DynamicFactorMQ(endog, k_endog_monthly=n_monthly, factors=r, factor_orders=p,
                                  idiosyncratic_ar1=ar1, standardize=False)


# ---------------------------------------------------------------------------- engine vs references
@pytest.mark.parametrize("ar1", [True, False])
def test_loglike_equals_statsmodels_at_the_same_parameters(ar1):
    """Our log-likelihood equals statsmodels' DynamicFactorMQ.loglike at identical parameters."""
    mon, q = _panel(120)
    x = _standardised(mon, q)
    lay = _layout(ar1=ar1)
    p0 = start_params(x, lay)
    ours = filter_fast(x, system(p0, lay)).llf
    mod = _sm_model(x, ar1=ar1)
    theirs = mod.loglike(_to_sm(p0) if ar1 else _to_sm_wn(p0))
    # same model, same stationary initialisation (statsmodels' default): agreement to rounding
    assert ours == pytest.approx(theirs, rel=1e-10)
    assert kalman_reference(x, system(p0, lay)).llf == pytest.approx(theirs, rel=1e-10)


def test_compiled_engine_matches_the_dense_reference():
    """Univariate compiled filter/smoother equal the dense NumPy reference (Durbin & Koopman 2012)."""
    mon, q = _panel(90)
    x = _standardised(mon, q)
    x[10:14, 3] = np.nan  # an interior gap
    lay = _layout()
    p0 = start_params(x, lay)
    l_ref, m_ref, _ = estep(x, p0, lay, reference=True)
    for tol, atol in ((0.0, 1e-12), (1e-11, 1e-8)):
        l_f, m_f, fo = estep(x, p0, lay, tol)
        assert l_f == pytest.approx(l_ref, rel=1e-12 if tol == 0 else 1e-10)
        for k in ("mean", "v_b", "v_ef", "v_ee", "c_ee", "c_fe"):
            np.testing.assert_allclose(getattr(m_f, k)[1:], getattr(m_ref, k)[1:], atol=atol,
                                       err_msg=k)
    # the steady state really was used: most periods are copies
    assert fo.heavy < x.shape[0] / 2


def test_one_em_iteration_equals_statsmodels():
    """With loadings held (statsmodels' M-step), one EM step gives statsmodels' fit_em step."""
    mon, q = _panel(120)
    x = _standardised(mon, q)
    lay = _layout()
    p0 = start_params(x, lay)
    _, mom, _ = estep(x, p0, lay)
    ours = mstep(x, mom, p0, lay, update_loadings=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        theirs = _sm_model(x).fit_em(start_params=_to_sm(p0), maxiter=1, em_initialization=False,
                                     return_params=True)
    np.testing.assert_allclose(_to_sm(ours), theirs, atol=1e-10)


def test_ecm_step_raises_the_likelihood_and_moves_the_loadings():
    """The ECM step raises the log-likelihood more than statsmodels' step, which keeps loadings."""
    mon, q = _panel(120)
    x = _standardised(mon, q)
    x[30:34, 5] = np.nan  # interior gaps: the latent idiosyncratic terms of the gap enter
    x[50:53, -1] = np.nan
    lay = _layout()
    p0 = start_params(x, lay)
    l0, mom, _ = estep(x, p0, lay)
    # the same step from the dense reference E-step
    ref = mstep(x, estep(x, p0, lay, reference=True)[1], p0, lay)
    np.testing.assert_allclose(ref.flat(), mstep(x, mom, p0, lay).flat(), atol=1e-9)
    held = mstep(x, mom, p0, lay, update_loadings=False)
    moved = mstep(x, mom, p0, lay)
    # EM theory (Dempster, Laird & Rubin 1977; Meng & Rubin 1993 for ECM): no decrease
    assert estep(x, moved, lay)[0] > estep(x, held, lay)[0] > l0
    np.testing.assert_array_equal(held.loadings, p0.loadings)
    assert np.abs(moved.loadings - p0.loadings).max() > 1e-3


def test_em_path_is_monotone_and_converges():
    """Plain and accelerated EM never lower the log-likelihood (beyond 1e-4) and meet."""
    mon, q = _panel(150)
    x = _standardised(mon, q)
    res = em_fit(x, _layout(), tol=1e-8)
    plain = em_fit(x, _layout(), tol=1e-8, accelerate=False, max_iter=1000)
    for r in (res, plain):
        assert r.converged
        # EM ascent (Dempster, Laird & Rubin 1977); the stationary initial state's dependence on
        # the parameters is left out of the M-step (as in statsmodels), hence the 1e-4 slack
        assert np.all(np.diff(r.llf_path) > -1e-4)
    assert res.llf == pytest.approx(plain.llf, abs=0.05)


def test_stationary_factor_covariance_solves_the_lyapunov_equation():
    """The stationary covariance of the stacked factor lags satisfies S = C S C' + Q_c."""
    a = np.array([[[0.5, 0.1], [0.0, 0.3]], [[0.2, 0.0], [0.1, 0.1]]])
    q = np.array([[1.0, 0.3], [0.3, 0.5]])
    s = stationary_factor_cov(a, q, 5)
    c = np.zeros((10, 10))
    c[:2, :4] = np.concatenate(list(a), axis=1)
    c[2:, :-2] = np.eye(8)
    qc = np.zeros((10, 10))
    qc[:2, :2] = q
    np.testing.assert_allclose(s, c @ s @ c.T + qc, atol=1e-12)  # Lütkepohl (2005), eq. 2.1.39


def test_simulation_smoother_draws_have_the_smoothed_moments():
    """DK (2002) window draws match the reference smoother's mean and covariance (Monte Carlo)."""
    mon, q = _panel(90)
    x = _standardised(mon, q)
    lay = _layout()
    p0 = start_params(x, lay)
    ss = system(p0, lay)
    xe = np.concatenate([x, np.full((4, x.shape[1]), np.nan)])
    ref = kalman_reference(xe, ss)
    tau = 80
    draws, mean = simulation_smoother(xe[tau:], ss, ref.a_pred[tau], ref.P_pred[tau], 4000,
                                      np.random.default_rng(3))
    # the window smoother's means are the full-sample smoothed means (Markov property)
    np.testing.assert_allclose(mean, ref.mean[tau:], atol=1e-10)
    sig = ss.Z[-1] @ draws[-2]  # quarterly signal at the second-to-last month
    exact_m = ss.Z[-1] @ ref.mean[-2]
    exact_v = ss.Z[-1] @ ref.cov[-2] @ ss.Z[-1]
    se = np.sqrt(exact_v / 4000)
    assert abs(sig.mean() - exact_m) < 4 * se
    assert abs(sig.var() / exact_v - 1) < 0.1  # sd of the variance ratio ~ sqrt(2/4000) = 0.022


def test_observation_weights_reproduce_the_smoothed_signal():
    """Weights w satisfy sum(w x) = smoothed signal and equal brute-force derivatives (linearity)."""
    mon, q = _panel(72)
    x = _standardised(mon, q)
    lay = _layout()
    ss = system(start_params(x, lay), lay)
    xe = np.concatenate([x, np.full((3, x.shape[1]), np.nan)])
    fo = filter_fast(xe, ss, tol=0)
    tstar = xe.shape[0] - 1
    w = observation_weights(fo, tstar, ss.Z[-1])
    signal = ss.Z[-1] @ kalman_reference(xe, ss).mean[tstar]
    assert np.nansum(w * xe) == pytest.approx(signal, abs=1e-10)
    for (t, i) in ((70, 5), (60, 20), (71, 0)):
        bumped = xe.copy()
        bumped[t, i] += 1.0
        d = ss.Z[-1] @ kalman_reference(bumped, ss).mean[tstar] - signal
        assert d == pytest.approx(w[t, i], abs=1e-10)


# ---------------------------------------------------------------------------- estimates vs statsmodels
@pytest.mark.parametrize("n_months", [180, 360])
def test_estimates_against_statsmodels_dynamic_factor_mq(n_months):
    """Own EM estimate: likelihood >= statsmodels', factors correlate > 0.99, nowcasts close."""
    mon, q = _panel(n_months, seed=1)
    info = make_native_infoset(mon, q, NAMES, ["gdp"], start="1995-01")
    tg = native_targets(info, ["gdp"], (-1, 0, 1))
    model = DynamicFactorModel()
    fit = model.fit(info, tg)
    x = fit.x
    mod = _sm_model(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = mod.fit(disp=False, em_initialization=False)
    theirs = _from_sm(np.asarray(res.params), 21, 1, 2)
    # statsmodels' EM keeps the loadings at its start values (x - e = Lambda f holds exactly);
    # ours updates them (ECM), so its maximum is at least as high
    assert fit.em.llf >= mod.loglike(res.params) - 1e-6
    assert estep(x, theirs, fit.layout)[0] == pytest.approx(mod.loglike(res.params), rel=1e-10)
    f_ours = smooth_fast(fit.em.filter, fit.system()).mean[:, 0]
    f_sm = np.asarray(res.factors.smoothed)[:, 0]
    assert abs(np.corrcoef(f_ours, f_sm)[0, 1]) > 0.99  # factors identified up to sign and scale
    sd = float(np.nanstd(q))
    for h in (-1, 0, 1):
        quarter = tg.current + h
        ours = model.nowcast_mean(fit, "gdp", quarter)
        ext = _extend(x, quarter, fit)
        r2 = _sm_model(ext).smooth(res.params)
        sm_now = r2.smoother_results.smoothed_forecasts[-1, -1] * fit.scale[-1] + fit.mean[-1]
        # different estimates (ours moves the loadings): agreement to a tenth of the target's sd
        assert abs(ours - sm_now) < 0.1 * sd
        # at statsmodels' parameters the nowcast means agree to rounding
        same = _with_params(fit, theirs)
        assert model.nowcast_mean(same, "gdp", quarter) == pytest.approx(sm_now, abs=1e-8)


def _extend(x, quarter, fit):
    end = fit.row_of(quarter.asfreq("M", how="end"))
    return np.concatenate([x, np.full((max(end + 1 - x.shape[0], 0), x.shape[1]), np.nan)])


def _with_params(fit, params):
    from dataclasses import replace

    em = em_fit(fit.x, fit.layout, start=params, max_iter=1)
    return replace(fit, params=params, em=em)


# ---------------------------------------------------------------------------- the model contract
def _native_case(n_months=96, seed=2):
    mon, q = simulated_native_panel(n_months, 6, seed)
    info = make_native_infoset(mon, q, NAMES[:6], ["gdp"], start="2000-01")
    return info, native_targets(info, ["gdp"], (-2, -1, 0, 1))


def test_dfm_passes_the_conformance_checks_on_a_native_information_set():
    """check_model passes on a native set (the trend law does not apply to a standardised factor model)."""
    info, tg = _native_case()
    model = DynamicFactorModel(tol=1e-5)
    check_model(model, info, tg, exact_path=None).raise_if_failed()


def test_published_targets_are_returned_as_published():
    """A target quarter already in the panel comes back as its published value in every draw."""
    info, tg = _native_case()
    out = DynamicFactorModel(tol=1e-5).forecast(info, tg, 50, np.random.default_rng(0))
    row = (tg.current - 2).asfreq("M", how="end").ordinal - info.periods[0].ordinal
    published = info.values()[row, -1]
    assert np.isfinite(published)
    assert np.all(out.sel(variable="gdp", horizon=-2).values == published)
    assert out.sel(horizon=0).std().item() > 0


def test_refuses_quarterly_panels_monthly_targets_and_short_indicators():
    """Bad input raises one-line errors naming the model, the variable and the origin."""
    model = DynamicFactorModel()
    qinfo = make_infoset(np.random.default_rng(0).standard_normal((60, 2)), ["gdp", "ip"])
    with pytest.raises(ValueError, match=r"model 'dfm' needs a native-frequency .*'gdp'.*origin"):
        model.forecast(qinfo, make_targets(qinfo, ["gdp"], (0,)), 10, np.random.default_rng(0))
    info, tg = _native_case()
    bad = native_targets(info, [NAMES[0]], (0,))
    with pytest.raises(ValueError, match=r"target variable 'ind00' is monthly at origin"):
        model.forecast(info, bad, 10, np.random.default_rng(0))
    mon, q = simulated_native_panel(96, 6, 2)
    mon[:80, 3] = np.nan
    short = make_native_infoset(mon, q, NAMES[:6], ["gdp"], start="2000-01")
    with pytest.raises(InsufficientDataError, match=r"'ind03' has 16 observation\(s\) at origin "
                                                    r"2008-02-01; at least 24"):
        model.forecast(short, tg, 10, np.random.default_rng(0))
    mon, q = simulated_native_panel(96, 6, 2)
    mon[:, 2] = 1.5
    flat = make_native_infoset(mon, q, NAMES[:6], ["gdp"], start="2000-01")
    with pytest.raises(InsufficientDataError, match=r"'ind02' is constant at origin"):
        model.forecast(flat, tg, 10, np.random.default_rng(0))
    with pytest.raises(ValueError, match="n_factors"):
        DynamicFactorModel(n_factors=0).forecast(info, tg, 10, np.random.default_rng(0))


def test_draws_are_in_target_units_and_track_the_truth():
    """Nowcast draws are centred near the realised value of the simulated target (in its units)."""
    mon, q = simulated_native_panel(240, 20, 5, ragged=False)
    truth = q[-1, 0]
    q2 = q.copy()
    q2[-3:] = np.nan  # the last quarter unpublished: a nowcast with all its months of indicators
    info = make_native_infoset(mon, q2, NAMES, ["gdp"], start="1995-01")
    tg = native_targets(info, ["gdp"], (-1,))
    out = DynamicFactorModel().forecast(info, tg, 1000, np.random.default_rng(1)).values[:, 0, 0]
    # a single simulated quarter: a coverage-style check, not a test of accuracy
    assert abs(out.mean() - truth) < 3 * out.std()
    assert 0.2 < out.std() < np.nanstd(q)
