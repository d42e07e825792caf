"""Geweke (2004) "getting it right" test of the stochastic-volatility sampler's (s, phi, h) block.

Geweke, J. (2004). Getting it right: joint distribution tests of posterior simulators. *Journal
of the American Statistical Association* 99(467), 799-804. Within the auxiliary mixture model of
Kim, Shephard & Chib (1998) — ``phi ~`` scaled inverse chi-square, ``h`` a random walk,
indicators ``s_t ~ q``, ``ystar_t = h_t + m_{s_t} + N(0, v_{s_t})`` — the *marginal-conditional*
simulator draws ``(phi, h, s, ystar)`` from the prior directly; the *successive-conditional*
simulator alternates the sampler's own updates (indicators given ``h``; ``phi`` by
Metropolis-Hastings from its marginal given the indicators; ``h`` given ``phi``) with a fresh
``ystar`` given ``(h, s)``. If the updates are right, both leave the same joint law, so the means
of functions of ``(phi, h)`` agree within numerical standard errors (Geweke 2004, section 2).
The same test with a sampler whose ``phi`` step uses a wrong prior must fail: the check has power.
"""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import sv_kernels
from harness.models.mcmc import effective_sample_size
from harness.models.sv_kernels import _fast_kernels
from harness.models.sv_tables import _MIX_MEANS, KSC_PROBS, KSC_VARIANCES

T, N = 8, 4  # periods, independent equations (replicas)
DF, SCALE, H1_MEAN, H1_VAR = 5.0, 0.1, 0.0, 1.0


def _prior(rng, m):
    """m draws of (phi, h, s) from the prior: arrays (m, N), (m, T, N), (m, T, N)."""
    phi = DF * SCALE / rng.chisquare(DF, size=(m, N))
    steps = rng.standard_normal((m, T, N)) * np.sqrt(phi)[:, None, :]
    steps[:, 0] = H1_MEAN + np.sqrt(H1_VAR) * rng.standard_normal((m, N))
    s = rng.choice(len(KSC_PROBS), size=(m, T, N), p=KSC_PROBS / KSC_PROBS.sum())
    return phi, np.cumsum(steps, axis=1), s


def _ystar(rng, h, s):
    """ystar given h and the indicators (the mixture observation equation)."""
    return h + _MIX_MEANS[s] + np.sqrt(KSC_VARIANCES[s]) * rng.standard_normal(h.shape)


def _stats(phi, h):
    """Functions of the draws whose means the two simulators must agree on, (m, 4 N).

    All have finite fourth moments under the prior (``phi`` itself has none with 5 degrees of
    freedom), so the numerical standard errors are reliable.
    """
    return np.concatenate([np.log(phi), np.sqrt(phi), h[:, -1], np.abs(h[:, -1] - h[:, 0])],
                          axis=-1)


def _successive(rng, m, sampler_df):
    """m iterations of the successive-conditional simulator with the compiled block kernels."""
    _fast_kernels()
    ind = _fast_kernels()["indicators"]
    phi, h, s = (a[0] for a in _prior(rng, 1))
    phi, h = phi.copy(), np.ascontiguousarray(h)
    log_step, acc = np.zeros(N), np.zeros(N)
    work = [np.empty((T, N)) for _ in range(3)]
    out = np.empty((m, 4 * N))
    for it in range(m):
        ystar = np.ascontiguousarray(_ystar(rng, h, s))
        s = ind(ystar - h, rng.random((T, N)))
        mm, prec = _MIX_MEANS[s], 1.0 / KSC_VARIANCES[s]
        z, u = rng.standard_normal(3 * N), rng.random(3 * N)
        sv_kernels._vol_var_loop(ystar, mm, prec, phi, np.full(N, H1_MEAN), H1_VAR, sampler_df,
                                 SCALE, log_step, z, u, 0.0, acc)
        sv_kernels._volatility_loop(ystar, mm, prec, phi, np.full(N, H1_MEAN), H1_VAR,
                                    rng.standard_normal(N * T), h, *work)
        out[it] = _stats(phi[None], h[None])[0]
    return out, acc / (3 * m)


def _max_z(sampler_df, seed, m=60_000):
    """Largest |z| of the differences in means between the two simulators (Geweke 2004, eq. 5)."""
    rng = np.random.default_rng(seed)
    direct = _stats(*_prior(rng, m)[:2])
    chain, acc = _successive(rng, m, sampler_df)
    se = np.sqrt(direct.var(axis=0) / m + chain.var(axis=0) / effective_sample_size(chain))
    return float(np.max(np.abs(chain.mean(axis=0) - direct.mean(axis=0)) / se)), acc


@pytest.mark.parametrize("seed", [0, 1])
def test_phi_and_volatility_block_gets_it_right(seed):
    """Successive-conditional and prior draws agree on 16 means within 4 numerical s.e. (Geweke 2004)."""
    z, acc = _max_z(DF, seed)
    assert z < 4.0, z
    assert np.all((acc > 0.2) & (acc < 0.95)), acc


def test_getting_it_right_catches_a_wrong_prior_in_the_phi_step():
    """The same check fails (some |z| > 4) when the phi step assumes 7 prior degrees of freedom instead of 5."""
    z, _ = _max_z(7.0, 2)
    assert z > 4.0, z
