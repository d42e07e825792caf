"""The fluctuation test and the model confidence set against published tables and arch.

Sources used below:
- Giacomini & Rossi (2010), J. Applied Econometrics 25(4), Table I (typed from memory in
  harness.compare.FLUCTUATION_CV; checked here against simulation of the limit).
- Hansen, Lunde & Nason (2011), Econometrica 79(2); arch.bootstrap.MCS (reference library).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from harness import compare as cp


def _losses(t=120, seed=0, shift=0.0):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(t + 3)
    ma = e[3:] + 0.6 * e[2:-1] + 0.3 * e[1:-2]  # MA(2) errors, as for 3-step forecasts
    a = ma**2
    b = (0.9 * ma + 0.5 * rng.standard_normal(t)) ** 2 + shift
    return a, b


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
    assert full.path[0] == pytest.approx(cp.diebold_mariano(a, b, 3, method="dm").stat, rel=1e-12)


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


def test_fluctuation_positions_skip_the_gap():
    """With positions, the full-sample long-run variance pairs only forecasts truly h - 1 or fewer apart."""
    a, b = _losses(t=60, seed=6, shift=0.1)
    pos = np.r_[np.arange(30), 100 + np.arange(30)]
    res = cp.fluctuation_test(a, b, 0.3, 0.05, h=3, positions=pos)
    sigma = math.sqrt(cp.long_run_variance(a - b, 2, positions=pos))
    assert res.sigma == pytest.approx(sigma, rel=1e-12)
    assert res.sigma != pytest.approx(cp.fluctuation_test(a, b, 0.3, 0.05, h=3).sigma, rel=1e-9)

