"""Tests of harness.compare against published formulas, tables and reference libraries.

Sources used below:
- Diebold & Mariano (1995), JBES 13(3); Harvey, Leybourne & Newbold (1997), IJF 13(2).
- statsmodels OLS with HAC covariance (reference library for the long-run variance).
- Giacomini & Rossi (2010), J. Applied Econometrics 25(4), Table I (typed from memory in
  harness.compare.FLUCTUATION_CV; checked here against simulation of the limit).
- Hansen, Lunde & Nason (2011), Econometrica 79(2); arch.bootstrap.MCS (reference library).
- Kupiec (1995), J. Derivatives 3(2); Christoffersen (1998), IER 39(4).
- Berkowitz (2001), JBES 19(4); statsmodels OLS and ARIMA (reference libraries).
- Rossi & Sekhposyan (2019), J. Econometrics 208(2); scipy.stats.kstest, cramervonmises and
  kstwobign (reference library); Anderson & Darling (1952), Ann. Math. Stat. 23(2), Table 1.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from harness import compare as cp


def _losses(t=120, seed=0, shift=0.0):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(t + 3)
    ma = e[3:] + 0.6 * e[2:-1] + 0.3 * e[1:-2]  # MA(2) errors, as for 3-step forecasts
    a = ma**2
    b = (0.9 * ma + 0.5 * rng.standard_normal(t)) ** 2 + shift
    return a, b


# --------------------------------------------------------------------------- Diebold-Mariano


@pytest.mark.parametrize("h", [1, 2, 3, 5])
def test_dm_statistic_matches_statsmodels_hac_uniform_kernel(h):
    """DM without HLN equals the t-value of OLS of d on a constant, HAC uniform kernel, h-1 lags."""
    a, b = _losses(seed=h)
    res = cp.diebold_mariano(a, b, h, hln=False)
    assert res.kernel == "rectangular"
    ols = sm.OLS(a - b, np.ones_like(a)).fit(
        cov_type="HAC", cov_kwds={"maxlags": h - 1, "kernel": "uniform", "use_correction": False})
    assert res.stat == pytest.approx(float(ols.tvalues[0]), rel=1e-10)
    assert res.pvalue == pytest.approx(2 * stats.norm.sf(abs(ols.tvalues[0])), rel=1e-10)


def test_dm_bartlett_kernel_matches_statsmodels_default():
    """With kernel='bartlett' the statistic equals statsmodels' default (Bartlett) HAC t-value."""
    a, b = _losses(seed=7)
    res = cp.diebold_mariano(a, b, 4, hln=False, kernel="bartlett")
    ols = sm.OLS(a - b, np.ones_like(a)).fit(cov_type="HAC", cov_kwds={"maxlags": 3})
    assert res.stat == pytest.approx(float(ols.tvalues[0]), rel=1e-10)


def test_hln_factor_worked_case():
    """HLN (1997): T = 20, h = 4 gives sqrt((20 + 1 - 8 + 12/20)/20) = sqrt(0.68) = 0.824621."""
    assert cp.hln_factor(20, 4) == pytest.approx(0.824621, abs=1e-6)
    assert cp.hln_factor(50, 1) == pytest.approx(math.sqrt(49 / 50))  # h = 1: sqrt((T-1)/T)


def test_dm_hln_uses_factor_and_student_t():
    """The HLN statistic is DM times the factor, with p-values from Student t(T-1)."""
    a, b = _losses(t=40, seed=3)
    raw = cp.diebold_mariano(a, b, 3, hln=False)
    hln = cp.diebold_mariano(a, b, 3, hln=True)
    assert hln.stat == pytest.approx(raw.stat * math.sqrt((40 + 1 - 6 + 6 / 40) / 40), rel=1e-12)
    assert hln.pvalue == pytest.approx(2 * stats.t.sf(abs(hln.stat), df=39), rel=1e-12)
    less = cp.diebold_mariano(a, b, 3, alternative="less")
    assert less.pvalue == pytest.approx(stats.t.cdf(hln.stat, df=39), rel=1e-12)


def test_dm_drops_nan_pairs_and_reports_zero_variance():
    """NaN pairs are dropped and counted; a constant differential gives NaN with a note."""
    a, b = _losses(t=30, seed=4)
    a2, b2 = a.copy(), b.copy()
    a2[[3, 9]] = np.nan
    b2[12] = np.nan
    res = cp.diebold_mariano(a2, b2, 1)
    assert (res.n, res.n_dropped) == (27, 3)
    keep = ~(np.isnan(a2) | np.isnan(b2))
    assert res.stat == pytest.approx(cp.diebold_mariano(a[keep], b[keep], 1).stat)
    flat = cp.diebold_mariano(np.ones(10) * 2, np.ones(10), 2)
    assert np.isnan(flat.stat) and "zero variance" in flat.note and flat.mean_diff == 1.0


def test_dm_falls_back_to_bartlett_when_rectangular_is_negative():
    """A strongly negative lag-1 autocovariance makes the rectangular variance negative: Bartlett is used."""
    d = np.tile([1.0, -1.0], 20) + 0.01 * np.arange(40) / 40
    res = cp.diebold_mariano(d, np.zeros(40), 2, hln=False)
    assert res.kernel.startswith("bartlett")
    v = cp.long_run_variance(d, 1, "bartlett")
    assert res.stat == pytest.approx(d.mean() / math.sqrt(v / 40))


def test_dm_rejects_bad_options():
    """Bad options raise ValueError listing the valid ones, sorted."""
    with pytest.raises(ValueError, match=r"\['bartlett', 'rectangular'\]"):
        cp.diebold_mariano([1, 2], [2, 1], kernel="parzen")
    with pytest.raises(ValueError, match="h must be an integer >= 1"):
        cp.diebold_mariano([1, 2], [2, 1], h=0)


# --------------------------------------------------------------------------- fluctuation


def test_fluctuation_table_reproduced_by_simulating_the_limit():
    """Giacomini & Rossi (2010) Table I two-sided values are reproduced by simulating the BM functional.

    Tolerance: 3 combined standard errors (ours from the order-statistic interval of the
    simulated quantile; the table's own Monte Carlo error assumed of the same size, its
    replication count not being recorded here) plus 0.02 for the time grid (500 steps).
    """
    mus = np.arange(1, 10) / 10
    n_sim = 20_000
    for alpha in (0.05, 0.10):
        delta = 1.96 * math.sqrt(alpha * (1 - alpha) / n_sim)
        cv = cp.simulate_fluctuation_cv(mus, [alpha, alpha - delta, alpha + delta], n_sim, 500, seed=1)
        se = (cv[:, 1] - cv[:, 2]) / (2 * 1.96)
        table = np.array([cp.FLUCTUATION_CV[alpha][round(m, 1)] for m in mus])
        tol = 3 * math.sqrt(2) * se + 0.02
        assert np.all(np.abs(cv[:, 0] - table) < tol), (alpha, cv[:, 0] - table, tol)


def test_fluctuation_limit_at_full_window_is_normal():
    """At mu = 1 the functional is |B(1)|, whose 95 % quantile is 1.95996 (standard normal)."""
    n_sim = 40_000
    cv = cp.simulate_fluctuation_cv(1.0, 0.05, n_sim, 50, seed=2)
    se = math.sqrt(0.05 * 0.95 / n_sim) / (2 * stats.norm.pdf(1.959964))
    assert abs(cv - 1.959964) < 4 * se


def test_fluctuation_path_matches_direct_loop_and_dm_at_full_window():
    """The path equals a direct rolling-sum loop, and at mu = 1 it equals the DM statistic."""
    a, b = _losses(t=100, seed=5, shift=0.2)
    res = cp.fluctuation_test(a, b, 0.3, 0.05, h=3)
    d = a - b
    m = 30
    sigma = math.sqrt(cp.long_run_variance(d, 2))
    direct = [d[t - m + 1: t + 1].sum() / (math.sqrt(m) * sigma) for t in range(m - 1, 100)]
    np.testing.assert_allclose(res.path, direct, rtol=1e-12)
    assert res.stat == pytest.approx(np.max(np.abs(direct)))
    assert res.critical_value == cp.FLUCTUATION_CV[0.05][0.3]
    full = cp.fluctuation_test(a, b, 1.0, 0.05, h=3, critical="simulate", n_sim=2000, n_grid=50)
    assert full.path[0] == pytest.approx(cp.diebold_mariano(a, b, 3, hln=False).stat, rel=1e-12)


def test_fluctuation_rejects_untabulated_mu():
    """A window share outside the table lists the tabulated ones."""
    with pytest.raises(ValueError, match=r"\[0.1, 0.2"):
        cp.fluctuation_test(np.ones(20), np.zeros(20), 0.25)


# --------------------------------------------------------------------------- MCS


def _mcs_case(seed, t=250, gaps=(0.0, 0.05, 0.1, 0.3, 0.5, 0.8)):
    rng = np.random.default_rng(seed)
    common = rng.standard_normal((t, 1))
    return 1.0 + 0.5 * common + rng.standard_normal((t, len(gaps))) + np.asarray(gaps)


@pytest.mark.parametrize("statistic,method", [("TR", "R"), ("Tmax", "max")])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mcs_pvalues_equal_arch_given_the_same_resamples(statistic, method, seed):
    """With arch's own bootstrap resamples, our MCS p-values equal arch.bootstrap.MCS's exactly."""
    from arch.bootstrap import MCS

    losses = _mcs_case(seed)
    ref = MCS(losses, size=0.1, reps=400, block_size=5, method=method, bootstrap="stationary",
              seed=seed)
    ref.compute()
    idx = np.asarray(ref._bootstrap_indices)  # arch keeps them "for testing"
    ours, _ = cp.mcs._mcs_pvalues(losses, idx, statistic)
    np.testing.assert_allclose(ours, ref.pvalues.sort_index()["Pvalue"].to_numpy(), atol=1e-12)


@pytest.mark.parametrize("statistic,method", [("TR", "R"), ("Tmax", "max")])
@pytest.mark.parametrize("seed", [3, 4, 5, 6])
def test_mcs_included_set_matches_arch_with_own_bootstrap(statistic, method, seed):
    """With our own random stream, the included and excluded sets match arch's on clear-cut cases."""
    from arch.bootstrap import MCS

    losses = _mcs_case(seed, t=400, gaps=(0.0, 0.02, 0.05, 0.6, 0.8, 1.0))
    ref = MCS(losses, size=0.1, reps=1000, block_size=5, method=method, bootstrap="stationary",
              seed=seed)
    ref.compute()
    ours = cp.model_confidence_set(losses, 0.1, 5, 1000, seed, statistic)
    assert ours.included == sorted(ref.included)
    assert ours.excluded == sorted(ref.excluded)
    # p-values of the clearly bad models are 0 in both; the others agree within bootstrap error
    np.testing.assert_allclose(ours.pvalues, ref.pvalues.sort_index()["Pvalue"].to_numpy(), atol=0.08)


def test_mcs_labels_and_elimination_order():
    """DataFrame columns label the result; the worst model is eliminated first, the survivor has p = 1."""
    import pandas as pd

    losses = pd.DataFrame(_mcs_case(8, gaps=(0.0, 1.5, 0.8)), columns=["ar", "rw", "bvar"])
    res = cp.model_confidence_set(losses, 0.1, 4, 500, 0, "Tmax")
    assert res.eliminated[0] == "rw"
    assert res.pvalues[res.eliminated.index(res.eliminated[-1])] <= 1.0
    assert res.pvalues[list(losses.columns).index(res.eliminated[-1])] == 1.0
    assert "rw" in res.excluded


@pytest.mark.parametrize("statistic", ["TR", "Tmax"])
def test_mcs_identical_models_stay_together(statistic):
    """Two models with identical losses are never separated and get no NaN p-values."""
    rng = np.random.default_rng(9)
    losses = rng.normal(size=(150, 4))
    losses[:, 1] = losses[:, 0]
    losses[:, 3] += 2.0
    res = cp.model_confidence_set(losses, 0.1, 3, 300, 0, statistic)
    assert not np.isnan(res.pvalues).any()
    assert res.pvalues[0] == res.pvalues[1] == 1.0 and res.excluded == [3]


def test_bootstrap_indices_block_structure():
    """Stationary blocks continue with probability 1 - 1/b; moving blocks start in [0, n - b]."""
    idx = cp.bootstrap_indices(200, 300, 8.0, "stationary", seed=1)
    cont = (np.diff(idx, axis=1) % 200 == 1).mean()
    assert abs(cont - (1 - 1 / 8)) < 0.01  # 59,700 steps: sd of the share ~0.0014
    mbb = cp.bootstrap_indices(50, 100, 5, "moving_block", seed=2)
    starts = mbb[:, ::5]
    assert mbb.shape == (100, 50) and starts.max() <= 45
    np.testing.assert_array_equal(mbb[:, 1:5] - mbb[:, :4], 1)


# --------------------------------------------------------------------------- coverage tests


def test_kupiec_hand_computed():
    """Kupiec (1995) LR on 15 hits in 20 at coverage 0.9, computed by hand below."""
    hits = np.array([1] * 15 + [0] * 5)
    # ll0 = 15 ln 0.9 + 5 ln 0.1 = -1.5804077 - 11.5129255 = -13.0933332
    # ll1 = 15 ln 0.75 + 5 ln 0.25 = -4.3152313 - 6.9314718 = -11.2467031
    # LR = -2 (ll0 - ll1) = 3.6932606
    res = cp.kupiec(hits, 0.9)
    assert res.lr_uc == pytest.approx(3.6932606, abs=1e-6)
    assert res.p_uc == pytest.approx(stats.chi2.sf(3.6932606, df=1), rel=1e-6)  # chi2(1)
    assert res.hit_rate == 0.75 and res.n == 20


def test_kupiec_all_hits_uses_zero_log_zero():
    """With every observation a hit, LR = -2 * 10 ln 0.9 = 2.1072103 (0 ln 0 = 0)."""
    assert cp.kupiec(np.ones(10), 0.9).lr_uc == pytest.approx(2.1072103, abs=1e-6)


def test_christoffersen_hand_computed():
    """Christoffersen (1998) LR_ind and LR_cc on a 12-step sequence, transitions counted by hand."""
    hits = np.array([1, 1, 0, 0, 1, 1, 1, 0, 1, 1, 1, 1])
    # transitions: n00 = 1, n01 = 2, n10 = 2, n11 = 6 (11 pairs)
    # pi01 = 2/3, pi11 = 6/8, pi = 8/11
    # ll_alt = 1 ln(1/3) + 2 ln(2/3) + 2 ln(1/4) + 6 ln(3/4)
    #        = -1.0986123 - 0.8109302 - 2.7725887 - 1.7260924 = -6.4082236
    # ll_null = 3 ln(3/11) + 8 ln(8/11) = -3.8978490 - 2.5476298 = -6.4454788
    # LR_ind = -2 (ll_null - ll_alt) = 0.0745103
    # LR_uc (9 hits in 12 at 0.8): -2 [9 ln .8 + 3 ln .2 - 9 ln .75 - 3 ln .25]
    #        = -2 [-2.0082920 - 4.8283137 + 2.5891387 + 4.1588831] = 0.1771679
    res = cp.christoffersen(hits, 0.8)
    assert res.counts == {"n0": 3, "n1": 9, "n00": 1, "n01": 2, "n10": 2, "n11": 6}
    assert res.lr_ind == pytest.approx(0.0745103, abs=1e-6)
    assert res.lr_uc == pytest.approx(0.1771679, abs=1e-6)
    assert res.lr_cc == pytest.approx(0.0745103 + 0.1771679, abs=1e-6)
    assert res.p_ind == pytest.approx(stats.chi2.sf(0.0745103, df=1), rel=1e-5)  # chi2(1)
    assert res.p_cc == pytest.approx(stats.chi2.sf(0.2516782, df=2), rel=1e-5)  # chi2(2)


def test_christoffersen_skips_transitions_across_missing():
    """A NaN hit removes the two transitions touching it."""
    res = cp.christoffersen([1, 0, np.nan, 1, 1], 0.5)
    assert res.counts["n00"] + res.counts["n01"] + res.counts["n10"] + res.counts["n11"] == 2
    with pytest.raises(ValueError, match="hits must be 0, 1 or NaN"):
        cp.kupiec([0, 2], 0.5)


# --------------------------------------------------------------------------- Berkowitz


def _ar_pits(n=300, rho=0.4, mu=0.2, sigma=1.2, seed=0):
    rng = np.random.default_rng(seed)
    z = np.empty(n)
    z[0] = mu + sigma / math.sqrt(1 - rho**2) * rng.standard_normal()
    for t in range(1, n):
        z[t] = mu + rho * (z[t - 1] - mu) + sigma * rng.standard_normal()
    return stats.norm.cdf(z), z


def test_berkowitz_conditional_matches_statsmodels_ols():
    """Conditional AR(1) fit equals OLS of z_t on (1, z_{t-1}); LR uses the conditional likelihoods."""
    u, z = _ar_pits()
    res = cp.berkowitz(u, likelihood="conditional")
    ols = sm.OLS(z[1:], sm.add_constant(z[:-1])).fit()
    assert res.rho == pytest.approx(ols.params[1], rel=1e-8)
    assert res.mu == pytest.approx(ols.params[0] / (1 - ols.params[1]), rel=1e-8)
    # ML variance RSS/(T-1) makes the log-likelihood statsmodels' llf
    assert res.loglik == pytest.approx(ols.llf, rel=1e-8)
    ll0 = stats.norm.logpdf(z[1:]).sum()
    assert res.lr == pytest.approx(2 * (ols.llf - ll0), rel=1e-8)
    assert res.pvalue == pytest.approx(stats.chi2.sf(res.lr, df=3))  # chi2(3)


def test_berkowitz_exact_matches_statsmodels_arima():
    """The exact AR(1) likelihood maximum equals statsmodels ARIMA(1,0,0) with a constant."""
    from statsmodels.tsa.arima.model import ARIMA

    u, z = _ar_pits(seed=1)
    res = cp.berkowitz(u)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = ARIMA(z, order=(1, 0, 0), trend="c").fit()
    assert res.loglik == pytest.approx(fit.llf, abs=1e-4)
    assert res.mu == pytest.approx(fit.params[0], abs=1e-3)
    assert res.rho == pytest.approx(fit.params[1], abs=1e-3)
    assert res.sigma**2 == pytest.approx(fit.params[2], rel=1e-3)
    ll0 = stats.norm.logpdf(z).sum()
    assert res.lr == pytest.approx(2 * (fit.llf - ll0), abs=1e-3)
    llr = stats.norm.logpdf(z, z.mean(), z.std()).sum()
    assert res.lr_ind == pytest.approx(2 * (fit.llf - llr), abs=1e-3)
    assert res.p_ind == pytest.approx(stats.chi2.sf(res.lr_ind, df=1))  # chi2(1)
    assert res.pvalue < 0.01  # a biased, over-dispersed, autocorrelated PIT is rejected


def test_berkowitz_clips_extreme_pits():
    """PITs of exactly 0 and 1 are clipped to eps so the statistic stays finite."""
    u = np.random.default_rng(2).random(100)
    u[[5, 50]] = [0.0, 1.0]
    res = cp.berkowitz(u, eps=1e-6)
    assert np.isfinite(res.lr)


# --------------------------------------------------------------------------- Rossi-Sekhposyan


def test_rs_statistics_match_scipy_ks_and_cvm():
    """kappa = sqrt(P) * KS D and C = Cramer-von Mises W^2 (scipy.stats reference)."""
    u = np.random.default_rng(3).beta(1.2, 1.0, 250)
    res = cp.rossi_sekhposyan(u)
    assert res.ks == pytest.approx(math.sqrt(250) * stats.kstest(u, "uniform").statistic, rel=1e-12)
    assert res.cvm == pytest.approx(stats.cramervonmises(u, "uniform").statistic, rel=1e-12)
    assert res.ks_pvalue == pytest.approx(stats.kstwobign.sf(res.ks), rel=1e-12)


def test_rs_critical_values_are_the_brownian_bridge_limits():
    """KS values equal scipy's Kolmogorov quantiles; CvM values hit 0.90/0.95/0.99 of the limit CDF."""
    for a, v in cp.KS_CV.items():
        assert v == pytest.approx(stats.kstwobign.ppf(1 - a), abs=1e-4)
    # Anderson & Darling (1952) Table 1 (from memory): 0.34730, 0.46136, 0.74346
    np.testing.assert_allclose(cp.cvm_limit_cdf([0.34730, 0.46136, 0.74346]), [0.90, 0.95, 0.99],
                               atol=2e-5)
    for a, v in cp.CVM_CV.items():
        assert cp.cvm_limit_cdf(v)[0] == pytest.approx(1 - a, abs=2e-4)


def test_cvm_limit_cdf_matches_scipy_large_sample_pvalue():
    """Our asymptotic CvM p-value is close to scipy's finite-sample one at n = 2000."""
    u = np.random.default_rng(4).random(2000) ** 1.03
    res = cp.rossi_sekhposyan(u)
    assert res.cvm_pvalue == pytest.approx(stats.cramervonmises(u, "uniform").pvalue, abs=2e-3)


def test_rs_bootstrap_for_multi_step_pits():
    """For h > 1 a moving-block bootstrap gives critical values near the limits on i.i.d. PITs,
    and larger ones under positive serial dependence."""
    rng = np.random.default_rng(5)
    iid = rng.random(400)
    res = cp.rossi_sekhposyan(iid, h=2, n_boot=999, seed=1)
    assert res.method == "moving-block bootstrap" and res.block_len == 8
    assert res.ks_critical[0.05] == pytest.approx(cp.KS_CV[0.05], rel=0.12)
    assert res.cvm_critical[0.05] == pytest.approx(cp.CVM_CV[0.05], rel=0.3)
    e = rng.standard_normal(403)
    dep = stats.norm.cdf((e[3:] + e[2:-1] + e[1:-2] + e[:-3]) / 2.0)  # MA(3): 4-step PITs
    res_dep = cp.rossi_sekhposyan(dep, h=4, n_boot=999, seed=1)
    assert res_dep.ks_critical[0.05] > 1.2 * cp.KS_CV[0.05]


def test_pit_histogram_counts():
    """Counts per tenth, 1.0 in the last bin, NaN dropped; equal to numpy.histogram."""
    u = np.array([0.0, 0.05, 0.1, 0.55, 0.99, 1.0, np.nan])
    np.testing.assert_array_equal(cp.pit_histogram(u, 10), [2, 1, 0, 0, 0, 1, 0, 0, 0, 2])
    v = np.random.default_rng(6).random(500)
    np.testing.assert_array_equal(cp.pit_histogram(v, 7), np.histogram(v, bins=7, range=(0, 1))[0])
