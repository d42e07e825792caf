"""The Diebold-Mariano test: textbook formulas, reference libraries, fixed-smoothing laws, size.

Sources used below:
- Diebold & Mariano (1995), JBES 13(3); Harvey, Leybourne & Newbold (1997), IJF 13(2).
- Coroneo & Iacone (2020), J. Applied Econometrics 35(4), 391-409: the weighted periodogram
  estimate with the Daniell kernel over m = floor(T^(1/3)) frequencies and Student-t(2m); the
  Bartlett estimate with M = floor(T^(1/2)) and fixed-b critical values.
- Kiefer & Vogelsang (2005), Econometric Theory 21(6): the fixed-b critical-value polynomial
  (typed from memory in harness.compare.dm.KV2005_BARTLETT, checked here by simulation).
- statsmodels OLS with HAC covariance, numpy.fft and scipy.signal.periodogram (reference
  libraries for the long-run variances).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import signal, stats

from harness import compare as cp
from harness.compare import dm as dm_mod


def _losses(t=120, seed=0, shift=0.0):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(t + 3)
    ma = e[3:] + 0.6 * e[2:-1] + 0.3 * e[1:-2]  # MA(2) errors, as for 3-step forecasts
    a = ma**2
    b = (0.9 * ma + 0.5 * rng.standard_normal(t)) ** 2 + shift
    return a, b


# --------------------------------------------------------------------------- kernel methods


@pytest.mark.parametrize("h", [1, 2, 3, 5])
def test_dm_statistic_matches_statsmodels_hac_uniform_kernel(h):
    """method='dm' equals the t-value of OLS of d on a constant, HAC uniform kernel, h-1 lags."""
    a, b = _losses(seed=h)
    res = cp.diebold_mariano(a, b, h, method="dm")
    assert res.kernel == "rectangular"
    ols = sm.OLS(a - b, np.ones_like(a)).fit(
        cov_type="HAC", cov_kwds={"maxlags": h - 1, "kernel": "uniform", "use_correction": False})
    assert res.stat == pytest.approx(float(ols.tvalues[0]), rel=1e-10)
    assert res.pvalue == pytest.approx(2 * stats.norm.sf(abs(ols.tvalues[0])), rel=1e-10)
    assert cp.diebold_mariano(a, b, h, hln=False).stat == res.stat  # the former keyword


def test_dm_bartlett_kernel_matches_statsmodels_default():
    """With kernel='bartlett' the statistic equals statsmodels' default (Bartlett) HAC t-value."""
    a, b = _losses(seed=7)
    res = cp.diebold_mariano(a, b, 4, method="dm", kernel="bartlett")
    ols = sm.OLS(a - b, np.ones_like(a)).fit(cov_type="HAC", cov_kwds={"maxlags": 3})
    assert res.stat == pytest.approx(float(ols.tvalues[0]), rel=1e-10)


def test_hln_factor_worked_case():
    """HLN (1997): T = 20, h = 4 gives sqrt((20 + 1 - 8 + 12/20)/20) = sqrt(0.68) = 0.824621."""
    assert cp.hln_factor(20, 4) == pytest.approx(0.824621, abs=1e-6)
    assert cp.hln_factor(50, 1) == pytest.approx(math.sqrt(49 / 50))  # h = 1: sqrt((T-1)/T)
    # (T - h)(T - h + 1) / T^2 is 0 at h = T and positive again from h = T + 2: NaN from h = T on
    assert all(np.isnan(cp.hln_factor(5, h)) for h in (5, 6, 7, 9))


def test_dm_hln_uses_factor_and_student_t():
    """The HLN statistic is DM times the factor, with p-values from Student t(T-1)."""
    a, b = _losses(t=40, seed=3)
    raw = cp.diebold_mariano(a, b, 3, method="dm")
    hln = cp.diebold_mariano(a, b, 3, method="hln")
    assert hln.stat == pytest.approx(raw.stat * math.sqrt((40 + 1 - 6 + 6 / 40) / 40), rel=1e-12)
    assert hln.pvalue == pytest.approx(2 * stats.t.sf(abs(hln.stat), df=39), rel=1e-12)
    less = cp.diebold_mariano(a, b, 3, method="hln", alternative="less")
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
    for method in cp.DM_METHODS:
        flat = cp.diebold_mariano(np.ones(10) * 2, np.ones(10), 2, method=method)
        assert np.isnan(flat.stat) and "constant" in flat.note and flat.mean_diff == 1.0


def test_dm_falls_back_to_bartlett_when_rectangular_is_negative():
    """A strongly negative lag-1 autocovariance makes the rectangular variance negative: Bartlett is used."""
    d = np.tile([1.0, -1.0], 20) + 0.01 * np.arange(40) / 40
    res = cp.diebold_mariano(d, np.zeros(40), 2, method="dm")
    assert res.kernel.startswith("bartlett")
    v = cp.long_run_variance(d, 1, "bartlett")
    assert res.stat == pytest.approx(d.mean() / math.sqrt(v / 40))


def test_dm_rejects_bad_options():
    """Bad options raise ValueError listing the valid ones, sorted."""
    with pytest.raises(ValueError, match=r"\['bartlett', 'rectangular'\]"):
        cp.diebold_mariano([1, 2], [2, 1], kernel="parzen")
    with pytest.raises(ValueError, match="h must be an integer >= 1"):
        cp.diebold_mariano([1, 2], [2, 1], h=0)
    with pytest.raises(ValueError, match=r"\['dm', 'fixed_b', 'fixed_m', 'hln'\]"):
        cp.diebold_mariano([1, 2], [2, 1], method="nw")


# --------------------------------------------------------------------------- degenerate variances


@pytest.mark.parametrize("method", ["fixed_m", "fixed_b", "hln", "dm"])
def test_review_reproducers_give_nan_with_a_note(method):
    """The reviewed cases (h = 9 and h = 5 on T = 5) are NaN with a note, whatever the method."""
    d = [1.0, 0.2, 0.7, 0.4, 0.9]
    for h in (5, 9):
        res = cp.diebold_mariano(d, [0] * 5, h=h, method=method)
        assert np.isnan(res.stat) and np.isnan(res.pvalue)
        assert f"h = {h} >= T = 5" in res.note


def test_rectangular_variance_with_t_minus_1_lags_is_rounding_noise():
    """With T - 1 lags the rectangular long-run variance of demeaned data is (sum x)^2 / T = 0 up to
    rounding (an algebraic identity): the tolerance rule catches what ``v > 0`` would not."""
    d = np.array([1.0, 0.2, 0.7, 0.4, 0.9, 0.3])
    v = cp.long_run_variance(d, 5, "rectangular")
    assert abs(v) < 1e-15 * np.mean(d * d)
    assert v <= cp.RELATIVE_TOLERANCE * np.mean(d * d)


def test_near_constant_differential_is_nan_relative_to_scale():
    """A differential constant up to relative noise 1e-9 is NaN; one with noise 1e-3 is tested."""
    rng = np.random.default_rng(0)
    for scale in (1e-6, 1.0, 1e6):
        tiny = scale * (1.0 + 1e-9 * rng.standard_normal(30))
        assert np.isnan(cp.diebold_mariano(tiny, np.zeros(30), 1).pvalue)
        real = scale * (1.0 + 1e-3 * rng.standard_normal(30))
        assert 0 <= cp.diebold_mariano(real, np.zeros(30), 1).pvalue <= 1


# --------------------------------------------------------------------------- fixed-m (Daniell)


def test_fixed_m_worked_example_by_hand():
    """T = 8, m = floor(8^(1/3)) = 2: the statistic from the Fourier sums computed by hand.

    d = [2, 0, 1, 3, 0, 2, 1, 3], mean 1.5, x = d - 1.5. At lambda_2 = pi/2 the phases are
    1, -i, -1, i, ...: w_2 = 4i, |w_2|^2 = 16. At lambda_1 = pi/4 (c = sqrt(2)/2):
    Re w_1 = 2 - 2c, Im w_1 = 2c, |w_1|^2 = 8 - 4 sqrt 2. Omega = (1/2)(24 - 4 sqrt 2)/8 =
    1.5 - sqrt(2)/4; stat = sqrt(8) 1.5 / sqrt(Omega); reference Student-t(4) (Coroneo and
    Iacone 2020, eq. for the WPE with the Daniell kernel).
    """
    d = np.array([2.0, 0.0, 1.0, 3.0, 0.0, 2.0, 1.0, 3.0])
    res = cp.diebold_mariano(d, np.zeros(8), 1)
    omega = 1.5 - math.sqrt(2) / 4
    stat = math.sqrt(8) * 1.5 / math.sqrt(omega)
    assert (res.method, res.bandwidth, res.df, res.kernel) == ("fixed_m", 2, 4.0, "daniell")
    assert res.variance == pytest.approx(omega, rel=1e-12)
    assert res.stat == pytest.approx(stat, rel=1e-12)
    assert res.pvalue == pytest.approx(2 * stats.t.sf(stat, df=4), rel=1e-10)
    assert res.critical[1] == pytest.approx(stats.t.ppf(0.975, 4), rel=1e-10)


def test_daniell_variance_matches_numpy_fft_and_scipy_periodogram():
    """The Daniell estimate is the mean of |fft(x)|^2 / T at j = 1..m, and half the mean of
    scipy.signal.periodogram's one-sided density there (fs = 1)."""
    x = np.random.default_rng(1).standard_normal(57)
    m = 3
    ours = cp.daniell_variance(x, m)
    fft = np.abs(np.fft.fft(x - x.mean())) ** 2 / x.size
    assert ours == pytest.approx(fft[1:m + 1].mean(), rel=1e-12)
    _, pxx = signal.periodogram(x, fs=1.0, detrend="constant", scaling="density")
    assert ours == pytest.approx(pxx[1:m + 1].mean() / 2, rel=1e-12)
    assert cp.daniell_variance(x, m, demean=False) == pytest.approx(ours, rel=1e-10)


def test_default_bandwidths_are_exact_integer_roots():
    """m = floor(T^(1/3)) and M = floor(T^(1/2)) are exact at perfect powers (64 -> 4, 49 -> 7)."""
    assert [cp.dm.default_bandwidth("fixed_m", t) for t in (7, 8, 26, 27, 63, 64, 125)] == [1, 2, 2, 3, 3, 4, 5]
    assert [cp.dm.default_bandwidth("fixed_b", t) for t in (15, 16, 48, 49)] == [3, 4, 6, 7]


def test_fixed_m_is_exactly_student_t_under_gaussian_white_noise():
    """For i.i.d. Gaussian d the Fourier ordinates are exactly independent normals, so the
    fixed-m statistic is exactly t(2m) at any T (Hualde & Iacone 2017): a KS test on 3000 draws."""
    rng = np.random.default_rng(11)
    t = 15  # m = 2, t(4)
    stat = [cp.diebold_mariano(rng.standard_normal(t), np.zeros(t)).stat for _ in range(3000)]
    assert stats.kstest(stat, stats.t(4).cdf).pvalue > 0.01


# --------------------------------------------------------------------------- fixed-b (Bartlett)


def test_fixed_b_statistic_matches_statsmodels_bartlett_with_m_minus_1_lags():
    """The fixed-b statistic is the Bartlett HAC t-value with M - 1 lags (weights 1 - j/M), M = floor(sqrt T)."""
    a, b = _losses(t=50, seed=8)
    res = cp.diebold_mariano(a, b, 3, method="fixed_b")
    assert res.bandwidth == 7
    ols = sm.OLS(a - b, np.ones_like(a)).fit(
        cov_type="HAC", cov_kwds={"maxlags": 6, "use_correction": False})
    assert res.stat == pytest.approx(float(ols.tvalues[0]), rel=1e-10)


def test_partial_sum_identity_equals_the_bartlett_estimate():
    """The O(T) partial-sum form of the Bartlett estimate equals the autocovariance form."""
    e = np.random.default_rng(2).standard_normal((5, 40))
    num, omega = dm_mod._bartlett_from_partial_sums(e, 6)
    for i in range(5):
        assert omega[i] == pytest.approx(cp.long_run_variance(e[i], 5, "bartlett"), rel=1e-10)
        assert num[i] == pytest.approx(math.sqrt(40) * e[i].mean())


@pytest.mark.parametrize("b", [0.1, 0.3, 0.5])
def test_kv2005_polynomial_matches_the_simulated_fixed_b_law(b):
    """Kiefer & Vogelsang's (2005) 95 % and 97.5 % fixed-b critical values (polynomial from memory)
    agree with the simulated law (T = 400, 60 000 draws) within 3 Monte Carlo standard errors of
    the quantile (from its order-statistic interval) plus 0.03 for the finite T and the fit."""
    rng = np.random.default_rng(int(b * 10))
    chunks = []
    for _ in range(6):
        num, omega = dm_mod._bartlett_from_partial_sums(rng.standard_normal((10_000, 400)), int(b * 400))
        chunks.append(num / np.sqrt(omega))
    t = np.concatenate(chunks)
    for level in (0.95, 0.975):
        delta = 1.96 * math.sqrt(level * (1 - level) / t.size)
        q, lo, hi = np.quantile(t, [level, level - delta, level + delta])
        se = (hi - lo) / (2 * 1.96)
        assert abs(q - cp.dm.kv_critical_value(b, level)) < 3 * se + 0.03, (b, level, q, se)


def test_fixed_b_pvalue_comes_from_the_cached_simulated_law():
    """The fixed-b p-value is the (count + 1)/(N + 1) tail share of the simulated law at (T, M)."""
    a, b = _losses(t=30, seed=9, shift=0.4)
    res = cp.diebold_mariano(a, b, 1, method="fixed_b", alternative="less")
    null = dm_mod.fixed_b_null(30, 5)
    assert null.size == dm_mod.FIXED_B_DRAWS and not null.flags.writeable
    want = (np.searchsorted(null, res.stat, side="right") + 1) / (null.size + 1)
    assert res.pvalue == pytest.approx(want)


# --------------------------------------------------------------------------- size by Monte Carlo


def _ma_differentials(t, h, n_rep, seed, theta=0.5):
    """Loss differentials following an MA(h - 1) with weights theta^i (the h-step error of an AR(1))."""
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((n_rep, t + h - 1))
    w = theta ** np.arange(h)
    return np.stack([np.convolve(row, w, mode="valid") for row in e])


def _size(d, h, method):
    p = np.array([cp.diebold_mariano(row, np.zeros(row.size), h, method=method).pvalue for row in d])
    return float(np.mean(p < 0.05))


@pytest.mark.parametrize("t,h", [(20, 1), (40, 1), (40, 4)])
def test_fixed_m_size_is_nominal_where_the_registry_runs_it(t, h):
    """Size at 5 % of the fixed-m DM test on MA(h - 1) differentials within 0.025 of nominal
    (2000 seeded replications: about 5 standard errors) at cells that meet the registry's rule."""
    assert cp.dm.fixed_m_min_n(h) <= t
    assert abs(_size(_ma_differentials(t, h, 2000, seed=t + h), h, "fixed_m") - 0.05) <= 0.025


def test_fixed_m_size_below_the_rule_is_distorted_but_far_less_than_hln():
    """At T = 20, h = 4 (below the rule, T >= 38) fixed-m over-rejects a little (<= 0.10) and far less
    than HLN (Harvey et al. 1997), whose size there exceeds 0.11: why the rule excludes the cell."""
    d = _ma_differentials(20, 4, 2000, seed=5)
    fixed, hln = _size(d, 4, "fixed_m"), _size(d, 4, "hln")
    assert cp.dm.fixed_m_min_n(4) > 20
    assert fixed <= 0.10 and hln > 0.11 and hln - fixed > 0.03


def test_fixed_b_size_at_h1():
    """The fixed-b test with simulated critical values has size within 0.025 of 5 % at T = 40, h = 1."""
    assert abs(_size(_ma_differentials(40, 1, 1500, seed=3), 1, "fixed_b") - 0.05) <= 0.025


# --------------------------------------------------------------------------- gaps


def test_positions_make_the_autocovariances_skip_the_gap():
    """A gapped sample (two runs of quarters) pairs only observations truly j apart: the variance
    with positions equals the brute-force sum over such pairs, not the joined series' variance."""
    rng = np.random.default_rng(3)
    d = rng.standard_normal(14)
    pos = np.r_[np.arange(8), 30 + np.arange(6)]  # 2009-10 and 2017: 22 quarters apart
    x = d - d.mean()
    # reference: lag-j products only inside each run (divisor T), by brute force
    ref = x @ x
    for j in (1, 2):
        ref += 2 * sum(x[s] * x[t] for s in range(14) for t in range(14) if pos[t] - pos[s] == j)
    ref /= 14
    assert cp.long_run_variance(d, 2, "rectangular", positions=pos) == pytest.approx(ref, rel=1e-12)
    joined = cp.long_run_variance(d, 2, "rectangular")
    assert joined != pytest.approx(ref, rel=1e-6)
    res = cp.diebold_mariano(d, np.zeros(14), 3, method="dm", positions=pos)
    assert res.variance == pytest.approx(ref, rel=1e-12)


def test_positions_follow_dropped_nan_pairs():
    """Positions are given per pair before NaN pairs are dropped and are dropped with them."""
    rng = np.random.default_rng(4)
    a, b = rng.standard_normal(20), rng.standard_normal(20)
    pos = np.r_[np.arange(10), 40 + np.arange(10)]
    a2 = a.copy()
    a2[3] = np.nan
    keep = np.ones(20, dtype=bool)
    keep[3] = False
    got = cp.diebold_mariano(a2, b, 2, positions=pos)
    want = cp.diebold_mariano(a[keep], b[keep], 2, positions=pos[keep])
    assert got.stat == want.stat and got.n == 19
