"""MCMC diagnostics (harness.models.mcmc) against chains with known answers.

Sources: the integrated autocorrelation time of a stationary AR(1) chain with coefficient rho is
tau = (1 + rho)/(1 - rho) = 1 + 2 rho/(1 - rho) (Geyer 1992, Statistical Science 7(4), sec. 3),
so ESS = N / tau; the split R-hat of Gelman et al. (2013), Bayesian Data Analysis 3rd ed.,
eq. 11.3-11.4, whose large-N value for chains with equal variance s^2 and split-chain means mu_j
is sqrt(1 + var(mu_j)/s^2), var with divisor (chains - 1); the rank normalisation of Vehtari et
al. (2021), Bayesian Analysis 16(2), eq. 14, against scipy.stats.rankdata (reference library).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal, special, stats

from harness.models import mcmc


def _ar1_chains(rho: float, n: int, chains: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((n + 500, chains)) * math.sqrt(1 - rho**2)
    return signal.lfilter([1.0], [1.0, -rho], e, axis=0)[500:]


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9])
def test_ess_of_ar1_chains_is_n_over_the_integrated_autocorrelation_time(rho):
    """Geyer's ESS of AR(1) chains is within 10 % of N (1 - rho)/(1 + rho) (mean over 8 chains of 20 000)."""
    x = _ar1_chains(rho, 20_000, 8, seed=int(rho * 10))
    ess = mcmc.effective_sample_size(x)
    assert np.mean(ess) == pytest.approx(20_000 * (1 - rho) / (1 + rho), rel=0.10)


def test_split_rhat_of_chains_with_shifted_means_matches_the_formula():
    """Classic split R-hat of 4 i.i.d. N(mu_j, 1) chains, mu = (0, 0, 0, 1), is
    sqrt((N-1)/N + var(split means)) with var of (0,0,0,0,0,0,1,1) = 3/14 (N = 5000 per half):
    1.1018, within 0.01; rank-normalised > 1.05; without the shift both < 1.01."""
    rng = np.random.default_rng(1)
    x = rng.standard_normal((10_000, 4))
    assert mcmc.split_rhat(x, rank=False) < 1.01 and mcmc.split_rhat(x) < 1.01
    x[:, 3] += 1.0
    want = math.sqrt((4999 / 5000) + 3 / 14)
    assert mcmc.split_rhat(x, rank=False) == pytest.approx(want, abs=0.01)
    assert mcmc.split_rhat(x) > 1.05


def test_split_rhat_catches_a_drifting_single_chain():
    """One chain whose second half sits 0.5 higher: splitting exposes it (R-hat > 1.01)."""
    x = np.random.default_rng(2).standard_normal(4000)
    x[2000:] += 0.5
    assert mcmc.split_rhat(x) > 1.01


def test_rank_normalisation_equals_scipy_ranks():
    """Normal scores of average ranks (ties included) equal those from scipy.stats.rankdata."""
    a = np.random.default_rng(3).integers(0, 6, size=(50, 3)).astype(float)
    want = special.ndtri((stats.rankdata(a).reshape(a.shape) - 0.375) / (a.size + 0.25))
    np.testing.assert_allclose(mcmc._rank_normal(a), want, rtol=1e-12)


def test_diagnostics_flag_what_fails_the_thresholds():
    """A well-mixed parameter passes; a sticky one (rho = 0.99, ESS ~ 20) and a drifting one are flagged."""
    rng = np.random.default_rng(4)
    good = rng.standard_normal(4000)
    sticky = _ar1_chains(0.99, 4000, 1, seed=5)[:, 0]
    drift = rng.standard_normal(4000) + np.linspace(0, 1, 4000)
    d = mcmc.mcmc_diagnostics({"good": good, "sticky": sticky, "drift": drift, "fixed": np.ones(4000)})
    assert d["flagged"] == ["drift", "sticky"] and not d["converged"]
    assert d["rhat_max"] == mcmc.RHAT_MAX and d["ess_min"] == mcmc.ESS_MIN
    assert d["ess"]["sticky"] < mcmc.ESS_MIN <= d["ess"]["good"] and math.isnan(d["rhat"]["fixed"])
    assert d["min_ess"] == min(v for v in d["ess"].values() if not math.isnan(v))
    ok = mcmc.mcmc_diagnostics({"good": good})
    assert ok["converged"] and ok["n_kept"] == 4000 and ok["n_chains"] == 1


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9])
def test_multichain_ess_of_agreeing_ar1_chains_is_the_total_over_tau(rho):
    """Four agreeing AR(1) chains of 20 000: multi-chain ESS within 10 % of 4 N (1 - rho)/(1 + rho)
    (Gelman et al. 2013, eq. 11.7-11.8; tau of an AR(1) chain, Geyer 1992), and the bulk ESS of
    rank-normalised split chains too (Vehtari et al. 2021: ranks do not change a Gaussian chain)."""
    x = _ar1_chains(rho, 20_000, 4, seed=20 + int(rho * 10))
    want = 4 * 20_000 * (1 - rho) / (1 + rho)
    assert mcmc.multichain_ess(x) == pytest.approx(want, rel=0.10)
    assert mcmc.bulk_ess(x) == pytest.approx(want, rel=0.10)


def test_multichain_ess_drops_when_chains_disagree():
    """Chains of i.i.d. draws whose means differ by 1 s.d.: summing per-chain ESS says ~ 4 N,
    the multi-chain ESS (between-chain variance in var+, Gelman et al. 2013 eq. 11.7) says far less."""
    x = np.random.default_rng(7).standard_normal((2_000, 4))
    x[:, 2:] += 1.0
    assert mcmc.effective_sample_size(x).sum() > 0.9 * 8_000
    assert mcmc.multichain_ess(x) < 0.25 * 8_000
    assert mcmc.bulk_ess(x) < 0.25 * 8_000


def test_bulk_ess_is_invariant_to_a_monotone_transform():
    """Rank normalisation (Vehtari et al. 2021, eq. 14) makes the bulk ESS of exp(x) equal that of x."""
    x = _ar1_chains(0.7, 3_000, 2, seed=9)
    assert mcmc.bulk_ess(np.exp(3 * x)) == pytest.approx(mcmc.bulk_ess(x), rel=1e-12)
