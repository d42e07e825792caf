"""Coverage and PIT tests: published formulas, reference libraries, and sizes under dependence.

Sources used below:
- Kupiec (1995), J. Derivatives 3(2); Christoffersen (1998), IER 39(4) (hand-computed LRs).
- Berkowitz (2001), JBES 19(4); statsmodels OLS and ARIMA (reference libraries).
- Rossi & Sekhposyan (2019), J. Econometrics 208(2); scipy.stats.kstest, cramervonmises and
  kstwobign (reference library); Anderson & Darling (1952), Ann. Math. Stat. 23(2), Table 1.
- Knüppel (2015), JBES 33(2): raw moments of the standardised PIT sqrt(12)(u - 1/2), whose
  moments under uniformity are 0, 1, 0, 9/5 (the uniform law on [-sqrt 3, sqrt 3]).
- Size checks: a correctly specified Gaussian AR(1), y_t = 0.5 y_{t-1} + e_t, forecast h steps
  ahead with its true predictive law N(0.5^h y_t, sum_{i<h} 0.25^i): PITs are exactly uniform
  and MA(h - 1)-dependent, hits of central intervals exactly Bernoulli(c).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import signal, stats

from harness import compare as cp

PHI = 0.5


def ar1_pits(t: int, h: int, n_rep: int, seed: int) -> np.ndarray:
    """PITs (n_rep, t) of the true h-step predictive laws of a Gaussian AR(1) (see the module docstring)."""
    rng = np.random.default_rng(seed)
    burn = 50
    y = signal.lfilter([1.0], [1.0, -PHI], rng.standard_normal((n_rep, burn + t + h)), axis=1)
    o = np.arange(burn, burn + t)
    sd = math.sqrt(sum(PHI ** (2 * i) for i in range(h)))
    return stats.norm.cdf((y[:, o + h] - PHI**h * y[:, o]) / sd)


def hits_of(u: np.ndarray, c: float) -> np.ndarray:
    return ((u >= (1 - c) / 2) & (u <= (1 + c) / 2)).astype(float)


def _reject(pvalues) -> float:
    p = np.asarray(pvalues, dtype=float)
    return float(np.mean(p[np.isfinite(p)] < 0.05))


# --------------------------------------------------------------------------- Kupiec, Christoffersen


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


# --------------------------------------------------------------------------- hit-rate t-test


def test_coverage_t_is_the_dm_statistic_of_hits_minus_c():
    """coverage_t is sqrt(T)(pi - c)/sqrt(Omega) with the Daniell estimate of the hits (numpy FFT)."""
    hits = hits_of(ar1_pits(40, 2, 1, seed=1)[0], 0.7)
    res = cp.coverage_t(hits, 0.7, h=2)
    x = hits - hits.mean()
    omega = np.mean(np.abs(np.fft.fft(x)[1:4]) ** 2) / 40  # m = floor(40^(1/3)) = 3
    stat = math.sqrt(40) * (hits.mean() - 0.7) / math.sqrt(omega)
    assert res.stat == pytest.approx(stat, rel=1e-12)
    assert res.pvalue == pytest.approx(2 * stats.t.sf(abs(stat), df=6), rel=1e-10)


def test_coverage_t_says_why_when_every_forecast_hits():
    """All hits: no variation, NaN with the reason (not a spurious rejection)."""
    res = cp.coverage_t(np.ones(30), 0.9, h=3)
    assert np.isnan(res.pvalue) and "every forecast hit" in res.note


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


# --------------------------------------------------------------------------- Knüppel


def test_knuppel_moments_and_statistic_by_hand():
    """D_r = mean(s^r) - E s^r with s = sqrt(12)(u - 1/2) (E s^2 = 1, E s^4 = 9/5); t_r uses the
    Daniell variance of s^r (numpy FFT); Bonferroni p = min(1, R min p_r) with t(2m) p-values."""
    u = ar1_pits(45, 3, 1, seed=2)[0]
    s = math.sqrt(12) * (u - 0.5)
    res = cp.knuppel(u, 3, moments=(1, 2, 4))
    dev = np.array([s.mean(), (s**2).mean() - 1, (s**4).mean() - 9 / 5])
    np.testing.assert_allclose(res.deviations, dev, rtol=1e-12, atol=1e-14)
    m = 3  # floor(45^(1/3))
    omega = [np.mean(np.abs(np.fft.fft(g - g.mean())[1:m + 1]) ** 2) / 45 for g in (s, s**2, s**4)]
    t = math.sqrt(45) * dev / np.sqrt(omega)
    p = 2 * stats.t.sf(np.abs(t), df=2 * m)
    assert res.stat == pytest.approx(np.max(np.abs(t)), rel=1e-10)
    assert res.pvalue == pytest.approx(min(1.0, 3 * p.min()), rel=1e-10)


def test_knuppel_wald_form_is_sun_2013_f():
    """joint='wald': (K - R + 1)/(K R) T D' Omega^-1 D against F(R, K - R + 1), K = 2m (Sun 2013)."""
    u = ar1_pits(64, 1, 1, seed=3)[0]
    res = cp.knuppel(u, 1, joint="wald")
    s = math.sqrt(12) * (u - 0.5)
    g = np.column_stack([s, s**2 - 1])
    omega = cp.daniell_covariance(g, 4)
    w = 64 * g.mean(axis=0) @ np.linalg.solve(omega, g.mean(axis=0))
    assert res.stat == pytest.approx(w, rel=1e-10) and res.law == "F(2, 7)"
    assert res.pvalue == pytest.approx(stats.f.sf(7 / 16 * w, 2, 7), rel=1e-10)


def test_knuppel_rejects_a_too_narrow_density():
    """PITs of a forecast whose spread is half the truth's (piled at 0 and 1) are rejected."""
    z = np.random.default_rng(7).standard_normal(80)
    assert cp.knuppel(stats.norm.cdf(2 * z)).pvalue < 0.01


# --------------------------------------------------------------------------- sizes under dependence


@pytest.mark.parametrize("t,h", [(20, 1), (20, 2), (38, 4)])
def test_knuppel_size_at_the_registered_minimum(t, h):
    """Size at 5 % of the registered Knüppel test on AR(1) h-step PITs within 0.03 of nominal
    (1500 replications, about 5 standard errors) at the registry's minimum n."""
    assert max(20, cp.dm_min_n(h)) == t
    u = ar1_pits(t, h, 1500, seed=10 + h)
    assert abs(_reject([cp.knuppel(row, h).pvalue for row in u]) - 0.05) <= 0.03


@pytest.mark.parametrize("c,h,t", [(0.5, 4, 40), (0.7, 2, 34), (0.9, 1, 50)])
def test_coverage_t_size_at_the_registered_minimum(c, h, t):
    """Size at 5 % of the hit-rate t-test on AR(1) h-step central intervals within 0.035 of
    nominal (1500 replications) at the registry's minimum n = max(DM rule, 5 h / min(c, 1 - c))."""
    from harness.compare.registry import get_test

    assert get_test("coverage_t").min_n(h, {"method": "fixed_m", "level": c}) == t
    u = ar1_pits(t, h, 1500, seed=int(100 * c) + h)
    assert abs(_reject([cp.coverage_t(hits_of(row, c), c, h).pvalue for row in u]) - 0.05) <= 0.035


def test_independence_tests_over_reject_at_h4_but_not_at_h1():
    """Berkowitz and Kupiec assume independent forecasts: on 4-step AR(1) PITs (T = 60) Berkowitz
    rejects a correct density far more than 5 % of the time (> 0.3), at h = 1 it does not (< 0.09):
    the registry declares both h = 1 only (300 replications each)."""
    u4, u1 = ar1_pits(60, 4, 300, seed=21), ar1_pits(60, 1, 300, seed=22)
    assert _reject([cp.berkowitz(r).pvalue for r in u4]) > 0.3
    assert _reject([cp.berkowitz(r).pvalue for r in u1]) < 0.09
    assert _reject([cp.kupiec(hits_of(r, 0.5), 0.5).p_uc for r in u1]) < 0.09


def test_rs_bootstrap_size_at_the_registered_minimum():
    """Rossi-Sekhposyan KS with the block bootstrap at n = 40 h (h = 2, n = 80): size at 5 % at most
    0.11 (600 replications; the suite's Monte Carlo found 0.08, and 0.10-0.13 at n = 40)."""
    u = ar1_pits(80, 2, 600, seed=31)
    assert _reject([cp.rossi_sekhposyan(r, h=2, n_boot=199, seed=i).ks_pvalue
                    for i, r in enumerate(u)]) <= 0.11
def test_exact_ar1_gradient_matches_finite_differences():
    """The hand-derived gradient of the exact AR(1) likelihood equals central differences (common practice)."""
    from harness.compare.pit import _ar1_exact_loglik, _ar1_exact_nll_and_grad

    rng = np.random.default_rng(7)
    z = rng.standard_normal(40)
    theta = np.array([0.2, -0.1, 0.3])
    f, g = _ar1_exact_nll_and_grad(theta, z)
    assert f == pytest.approx(-_ar1_exact_loglik(z, 0.2, np.exp(-0.1), np.tanh(0.3)), rel=1e-12)
    eps = 1e-6
    num = [(_ar1_exact_nll_and_grad(theta + eps * np.eye(3)[i], z)[0]
            - _ar1_exact_nll_and_grad(theta - eps * np.eye(3)[i], z)[0]) / (2 * eps) for i in range(3)]
    np.testing.assert_allclose(g, num, rtol=1e-6, atol=1e-8)
