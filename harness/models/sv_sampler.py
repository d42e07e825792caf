"""The stochastic-volatility BVAR's posterior sampler: priors, the Gibbs chain (compiled or reference), kept draws."""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial

import numpy as np
import scipy.linalg as sla

from harness.models.base import ar1_scales, lag_design
from harness.models.sv_blocks import _gibbs_reference
from harness.models.sv_kernels import _fast_kernels
from harness.models.sv_tables import (
    _CONST_VAR,
    _H1_PRIOR_VAR,
    _LOGSQ_OFFSET,
    _MIX_LOGW,
    _MIX_MEANS,
    _PHI_STEP0,
    _PHI_STEPS,
    KSC_VARIANCES,
)


@dataclass(frozen=True)
class SVPosterior:
    """Kept Gibbs draws of the BVAR-SV.

    Attributes
    ----------
    coefs : ndarray (M, k, n)
    a : ndarray (M, n, n)
        Unit lower-triangular ``A`` draws.
    log_vol : ndarray (M, T, n)
        Log-volatility paths over the estimation sample.
    phi : ndarray (M, n)
        Variances of the log-volatility innovations.
    chains : int
        Number of chains: the draws are chain after chain, ``M / chains`` each.
    phi_accept : ndarray (chains, n) or None
        Acceptance rate of the ``phi`` Metropolis-Hastings proposals after burn-in.
    """

    coefs: np.ndarray
    a: np.ndarray
    log_vol: np.ndarray
    phi: np.ndarray
    chains: int = 1
    phi_accept: np.ndarray | None = None

    def by_chain(self, draws: np.ndarray) -> np.ndarray:
        """Kept draws ``(M, ...)`` of one field as ``(M / chains, chains, ...)`` (diagnostics' layout)."""
        m = draws.shape[0] // self.chains
        return np.moveaxis(draws.reshape(self.chains, m, *draws.shape[1:]), 0, 1)


def _minnesota_independent(n: int, lags: int, tightness: float, cross: float, lag_decay: float,
                           prior_mean: np.ndarray, scales: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Prior means and variances ``(k, n)`` of the non-conjugate Minnesota-type prior."""
    k = n * lags + 1
    mean = np.zeros((k, n))
    mean[np.arange(n), np.arange(n)] = prior_mean
    var = np.empty((k, n))
    for lag in range(1, lags + 1):
        sd = tightness / lag ** lag_decay
        # row j (regressor: variable j at this lag), column i (equation i)
        block = (sd * cross) ** 2 * (scales[None, :] / scales[:, None]) ** 2
        block[np.arange(n), np.arange(n)] = sd ** 2
        var[(lag - 1) * n: lag * n] = block
    var[-1] = _CONST_VAR * scales ** 2
    return mean, var


_CHUNK_DOUBLES = 1 << 20  # pre-drawn random numbers held at once by the compiled sampler (8 MB)


def _gibbs_compiled(kernel, yt: np.ndarray, x: np.ndarray, b0: np.ndarray, inv_v0: np.ndarray,
                    a_prior_var: float, vol_var_df: float, vol_var_scale: float,
                    h1_mean: np.ndarray, coefs: np.ndarray, u: np.ndarray, a: np.ndarray,
                    h: np.ndarray, phi: np.ndarray, log_step: np.ndarray, accepted: np.ndarray,
                    slot: np.ndarray, burn: int, n_steps: int, keep: tuple,
                    rng: np.random.Generator) -> None:
    """The same iterations by the compiled kernel, fed chunk by chunk with pre-drawn random numbers."""
    t, n = yt.shape
    k = x.shape[1]
    n_iter = slot.shape[0]
    n_lin = n * k + n * (n - 1) // 2
    chunk = max(1, min(n_iter, _CHUNK_DOUBLES // (n_lin + 2 * t * n + 2 * n_steps * n)))
    z_lin = np.empty((chunk, n_lin))
    unif = np.empty((chunk, t * n))  # row-major over (T, n), as the reference's (T, n) draw
    z_phi = np.empty((chunk, n_steps * n))  # step major, as the reference's (S, n) draws
    u_phi = np.empty((chunk, n_steps * n))
    z_vol = np.empty((chunk, n * t))
    lo, hi = np.tril_indices(k)
    # C order throughout: one compiled specialisation
    xx = np.ascontiguousarray(x[:, lo] * x[:, hi])  # x_tq x_td for d <= q, packed by rows
    xt = np.ascontiguousarray(x.T)
    for start in range(0, n_iter, chunk):
        m = min(chunk, n_iter - start)
        # One iteration's draws in the reference's order (its normals for B and for A are one
        # contiguous run of the stream), so a seed gives the same random numbers in both paths.
        # The Python loop is over iterations, not cells: five generator calls each.
        for j in range(m):
            rng.standard_normal(out=z_lin[j])
            rng.random(out=unif[j])
            rng.standard_normal(out=z_phi[j])
            rng.random(out=u_phi[j])
            rng.standard_normal(out=z_vol[j])
        block, at = kernel(yt, x, xt, xx, b0, inv_v0, a_prior_var, vol_var_df, vol_var_scale,
                           h1_mean, _H1_PRIOR_VAR, coefs, u, a, h, phi, log_step, accepted,
                           z_lin[:m], unif[:m], z_phi[:m], u_phi[:m], z_vol[:m],
                           slot[start:start + m], start, burn, _MIX_MEANS, _MIX_LOGW,
                           KSC_VARIANCES, _LOGSQ_OFFSET, *keep)
        if block:
            what = "coefficient" if block == 1 else "impact (A)"
            raise np.linalg.LinAlgError(f"{what} posterior precision is not positive definite "
                                        f"at Gibbs iteration {start + at}")


def sv_gibbs(y: np.ndarray, lags: int, prior_mean_coef: np.ndarray, prior_var_coef: np.ndarray,
             a_prior_var: float, vol_var_df: float, vol_var_scale: float, n_iter: int, burn: int,
             thin: int, rng: np.random.Generator, *, chains: int = 1,
             reference: bool = False) -> SVPosterior:
    """Gibbs sampler of the BVAR-SV on a balanced sample ``(T + p, n)``; see the module docstring.

    Parameters
    ----------
    y : ndarray (T + p, n)
    lags : int
    prior_mean_coef, prior_var_coef : ndarray (k, n)
        Independent normal prior on the coefficients (``k = n p + 1``, intercept last).
    a_prior_var, vol_var_df, vol_var_scale : float
        See :class:`BayesianVARSV`.
    n_iter, burn, thin : int
        Per chain.
    rng : numpy.random.Generator
    chains : int, default 1
        Chains run one after the other from the same generator, each from its own starting
        point (``phi`` drawn from its prior, the log-volatility level shifted by a standard
        normal), and kept chain after chain.
    reference : bool, default False
        Run the blocks with NumPy/SciPy (:func:`draw_coefficients`, :func:`draw_impacts`, the
        NumPy indicator draw, :func:`draw_vol_var`, SciPy's banded Cholesky) instead of the
        compiled kernel. Both consume the generator identically, so a seed gives the same draws
        up to rounding.

    Returns
    -------
    SVPosterior

    Raises
    ------
    numpy.linalg.LinAlgError
        If a conditional posterior precision is not positive definite.

    References
    ----------
    See the module docstring (Cogley & Sargent 2005; Carriero, Clark & Marcellino 2019;
    Carriero, Chan, Clark & Marcellino 2022; Del Negro & Primiceri 2015; Chan & Jeliazkov 2009).
    """
    yt, x = lag_design(y, lags)
    yt, x = np.ascontiguousarray(yt, dtype=float), np.ascontiguousarray(x, dtype=float)
    t, n = yt.shape
    k = x.shape[1]
    b0 = np.ascontiguousarray(prior_mean_coef, dtype=float)
    inv_v0 = np.ascontiguousarray(1.0 / np.asarray(prior_var_coef, dtype=float))
    # start from the homoskedastic posterior mean of each equation (s_i^2 from AR(1) fits)
    s2 = ar1_scales(y) ** 2
    xtx, xty = x.T @ x, x.T @ yt
    coefs0 = np.empty((k, n))
    for i in range(n):
        coefs0[:, i] = np.linalg.solve(xtx / s2[i] + np.diag(inv_v0[:, i]),
                                       xty[:, i] / s2[i] + inv_v0[:, i] * b0[:, i])
    u0 = yt - x @ coefs0
    cov = u0.T @ u0 / t + 1e-10 * np.eye(n)
    lchol = np.linalg.cholesky(cov)
    d = np.diag(lchol)
    # unit lower triangular with exact zeros and ones (the compiled kernel skips the upper part)
    a0 = np.ascontiguousarray(sla.solve_triangular(lchol / d, np.eye(n), lower=True,
                                                   unit_diagonal=True, check_finite=False))
    h1_mean = np.log(d ** 2)
    n_keep = (n_iter - burn) // thin
    keep = (np.empty((chains * n_keep, k, n)), np.empty((chains * n_keep, n, n)),
            np.empty((chains * n_keep, t, n)), np.empty((chains * n_keep, n)))
    # slot[it]: where iteration it is stored (burn, burn + thin, ...), -1 if it is not kept
    slot = np.full(n_iter, -1, dtype=np.int64)
    slot[burn + thin * np.arange(n_keep)] = np.arange(n_keep)
    kernel = None if reference else _fast_kernels()["gibbs"]
    run = _gibbs_reference if kernel is None else partial(_gibbs_compiled, kernel)
    accepted = np.zeros((chains, n))
    for c in range(chains):
        # dispersed starts (for R-hat across chains): phi from its prior, shifted volatility levels
        phi = vol_var_df * vol_var_scale / rng.chisquare(vol_var_df, size=n)
        h = np.ascontiguousarray(np.broadcast_to(h1_mean + rng.standard_normal(n), (t, n)))
        coefs, u, a = coefs0.copy(), u0.copy(), a0.copy()
        log_step = np.full(n, np.log(_PHI_STEP0))
        part = tuple(arr[c * n_keep:(c + 1) * n_keep] for arr in keep)
        run(yt, x, b0, inv_v0, float(a_prior_var), float(vol_var_df), float(vol_var_scale),
            h1_mean, coefs, u, a, h, phi, log_step, accepted[c], slot, int(burn), _PHI_STEPS,
            part, rng)
    return SVPosterior(*keep, chains=int(chains),
                       phi_accept=accepted / max(1, (n_iter - burn) * _PHI_STEPS))
