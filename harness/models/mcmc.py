"""MCMC diagnostics of kept draws: effective sample size (and split R-hat, below)."""

from __future__ import annotations

import numpy as np


def effective_sample_size(x: np.ndarray) -> np.ndarray:
    """Effective sample size of MCMC draws by Geyer's initial positive sequence estimator.

    Parameters
    ----------
    x : ndarray (M,) or (M, m)
        Draws in iteration order (columns are separate chains of scalars).

    Returns
    -------
    ndarray () or (m,)
        ``M / tau`` with ``tau = -1 + 2 sum_k (rho_{2k} + rho_{2k+1})`` summed while the pair sums
        stay positive; NaN for a constant chain.

    References
    ----------
    Geyer, C. J. (1992). Practical Markov chain Monte Carlo. *Statistical Science* 7(4), 473-483.
    """
    x = np.asarray(x, dtype=float)
    one = x.ndim == 1
    x = x[:, None] if one else x
    m = x.shape[0]
    xc = x - x.mean(axis=0)
    f = np.fft.rfft(xc, n=2 * m, axis=0)
    acov = np.fft.irfft(f * np.conj(f), n=2 * m, axis=0)[:m] / m
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = acov / acov[0]
        half = m // 2
        pairs = rho[0: 2 * half: 2] + rho[1: 2 * half: 2]
        keep = np.cumprod(pairs > 0, axis=0).astype(bool)
        tau = -1.0 + 2.0 * np.where(keep, pairs, 0.0).sum(axis=0)
        ess = np.where(acov[0] > 0, m / np.maximum(tau, 1e-12), np.nan)
    return ess[0] if one else ess
